"""``measure attenuation``: gain, low-pass, high-pass and wet/dry curves against distance and angle."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from measure.cli._common import finite_float, positive_float

NAME = "attenuation"
HELP = "distance and direction curves: gain, low-pass, high-pass, wet/dry, directivity"
DESCRIPTION = """\
Measure what a game applies to a source that moves away or turns: a gain and first-order
low-pass and high-pass filters, a reverb send that follows the direct-to-reverberant ratio.

Give impulse responses with their distances (--distances) or angles (--angles), one per file,
or one room folder of captures (as `measure capture` and `measure import` file them) whose
sidecars carry each position's distance and angle; each take's response is recovered with the
sweep its sidecar names (or --sweep).

Per position, relative to the reference (the nearest position, the on-axis one, or
--reference): the ratio of smoothed spectra of the direct sound (--window, or "whole" for the
room as well) fitted by a gain and first-order corners; a corner outside the band is "not
identified". Over a distance series: the rolloff factor of the clamped inverse-distance law
(and the power law when its slope fits better), the reverberant level and its own rolloff (the
I3DL2 RoomRolloffFactor), the critical distance and wet fraction, and the low-pass corner air
absorption alone would give (ISO 9613-1). Over an angle series at one distance: gain, low-pass
or high shelf per angle, and the directivity index per octave.

--json prints one object: positions (distance_m, gain_db, lowpass_hz, highpass_hz, drr_db,
...), rolloff_factor, reference_distance_m, critical_distance_m, curves (at the measured and at
regular distances), filters (digital coefficients at --rate), and direction for an angle
series."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("inputs", nargs="+", metavar="IR.wav|ROOM_FOLDER",
                   help="impulse responses (one per position), or one room folder of captures")
    p.add_argument("--distances", metavar="D1,D2,...", default=None,
                   help="source-microphone distance of each IR file, metres")
    p.add_argument("--angles", metavar="A1,A2,...", default=None,
                   help="angle off the source's axis of each IR file, degrees")
    p.add_argument("--reference", type=positive_float, default=None, metavar="D",
                   help="reference distance (one of the series, m; default the nearest)")
    p.add_argument("--reference-angle", type=finite_float, default=None, metavar="A",
                   help="reference angle (one of the series, degrees; default the one nearest 0)")
    p.add_argument("--sweep", metavar="SWEEP.wav", default=None,
                   help="for a room folder: the sweep that was played, instead of the one each "
                        "sidecar names")
    p.add_argument("--window", default="4", metavar="MS|whole",
                   help="length of the direct-sound window after its peak, ms (default 4; the "
                        "lowest frequency analysed is 2/window), or 'whole' for the whole "
                        "response, the room included")
    p.add_argument("--fraction", type=int, default=6, metavar="N",
                   help="1/N-octave smoothing of the spectra before they are divided (default 6)")
    p.add_argument("--band", metavar="LO,HI", default=None,
                   help="frequency band of the fits, Hz (default: what the window resolves, to "
                        "20 kHz)")
    p.add_argument("--temperature", type=finite_float, default=20.0, metavar="C",
                   help="air temperature for the ISO 9613-1 expectation, °C (default 20; a "
                        "room folder's sidecars take precedence)")
    p.add_argument("--humidity", type=finite_float, default=50.0, metavar="PERCENT",
                   help="relative humidity, %% (default 50; 0..100)")
    p.add_argument("--pressure", type=positive_float, default=101.325, metavar="KPA",
                   help="air pressure, kPa (default 101.325)")
    p.add_argument("--rate", type=int, default=None, metavar="HZ",
                   help="sample rate of the digital filter coefficients (default the IRs')")
    p.add_argument("--model", metavar="MODEL.json", default=None,
                   help="a fitted room model whose I3DL2 RoomRolloffFactor the distance series "
                        "sets; written to --model-out")
    p.add_argument("--model-out", metavar="OUT.json", default=None,
                   help="where the model with the measured RoomRolloffFactor goes")
    p.add_argument("--plot", metavar="FILE.png", default=None,
                   help="draw the curves into a PNG (needs matplotlib)")
    p.add_argument("--json", action="store_true", help="print the curves as one JSON object")


def _numbers(text: str | None, option: str) -> list[float] | None:
    import math

    from measure.errors import ParameterError

    if text is None:
        return None
    try:
        vals = [float(v) for v in text.split(",")]
    except ValueError:
        vals = []
    if not vals or not all(math.isfinite(v) for v in vals):
        raise ParameterError(f"{option} {text!r} is not a comma-separated list of numbers; give "
                             "e.g. 1,2,4,8")
    return vals


def _window(text: str) -> float | None:
    from measure.errors import ParameterError

    if text.strip().lower() == "whole":
        return None
    try:
        ms = float(text)
    except ValueError:
        ms = float("nan")
    if not (0.5 <= ms <= 1000.0):
        raise ParameterError(f"--window {text!r} must be a length in ms from 0.5 to 1000, or "
                             "'whole'")
    return ms / 1000.0


def _from_room_folder(folder: Path, sweep_opt: str | None) -> dict[str, Any]:
    """Recover each position's response from the room folder's newest good takes."""
    from measure import audio_io, session
    from measure.errors import AudioFileError, ParameterError

    takes = session.latest_takes(folder)
    if not takes:
        raise AudioFileError(f"{folder} holds no takes (NAME-takeN.wav with its .json); give a "
                             "room folder of captures, or IR files with --distances/--angles")
    sweeps: dict[Path, Any] = {}
    out = {"h": [], "labels": [], "distances": [], "angles": [], "fs": None, "air": {}}
    for take, side in takes:
        path = Path(sweep_opt) if sweep_opt else session.resolve_sweep(
            side.get("sweep_file"), folder, sha256=side.get("sweep_sha256"),
            take=take.wav.name)
        if path is None:
            raise AudioFileError(
                f"{take.wav.name}: its sidecar names no sweep file that exists "
                f"({side.get('sweep_file')!r}); give --sweep SWEEP.wav")
        if path not in sweeps:
            sweeps[path] = audio_io.read_sweep(path)
        ir = session.recover_take(audio_io.read_audio(take.wav), side, sweeps[path],
                                  name=take.wav.name)
        if out["fs"] not in (None, ir.fs):
            raise ParameterError("the takes are at different sample rates; measure a series at "
                                 "one rate")
        out["fs"] = ir.fs
        out["h"].append(ir.h[0])
        out["labels"].append(take.position)
        out["distances"].append(_num(side.get("distance_m")))
        out["angles"].append(_num(side.get("angle_deg")))
        for key, name in (("temperature_c", "temperature_c"),
                          ("humidity_percent", "humidity_percent")):
            if _num(side.get(key)) is not None:
                out["air"][name] = float(side[key])
    return out


def _num(v: Any) -> float | None:
    import math

    return float(v) if isinstance(v, (int, float)) and math.isfinite(v) else None


def run(args: argparse.Namespace) -> int:
    from measure import audio_io
    from measure.attenuation import analyze_series
    from measure.cli._common import check_air, info, print_json, refuse_overwriting_inputs, warn
    from measure.errors import ParameterError

    for w in check_air(args.temperature, args.humidity):
        warn(w)
    distances = _numbers(args.distances, "--distances")
    angles = _numbers(args.angles, "--angles")
    window_s = _window(args.window)
    band = _numbers(args.band, "--band")
    if band is not None and (len(band) != 2 or not 0 < band[0] < band[1]):
        raise ParameterError(f"--band {args.band!r} must be two frequencies LO,HI in Hz, "
                             "0 < LO < HI")
    if args.rate is not None and not 8000 <= args.rate <= 384000:
        raise ParameterError(f"--rate {args.rate} must be a sample rate from 8000 to 384000 Hz")
    if args.fraction < 1:
        raise ParameterError(f"--fraction {args.fraction} must be a whole number >= 1")
    if (args.model is None) != (args.model_out is None):
        raise ParameterError("--model and --model-out go together: the model is read from one "
                             "file and written to the other")
    if args.model_out is not None:
        refuse_overwriting_inputs(args.model_out, args.model, *args.inputs,
                                  option="--model-out")
    if args.plot is not None:
        from measure.report import check_png_path, require_matplotlib

        check_png_path(args.plot, option="--plot")
        require_matplotlib()
    air = {"temperature_c": args.temperature, "humidity_percent": args.humidity,
           "pressure_kpa": args.pressure}
    folder = Path(args.inputs[0])
    if len(args.inputs) == 1 and folder.is_dir():
        if distances is not None or angles is not None:
            raise ParameterError("a room folder's sidecars carry the distances and angles; leave "
                                 "out --distances and --angles")
        got = _from_room_folder(folder, args.sweep)
        air.update(got["air"])
        h, fs, labels = got["h"], got["fs"], got["labels"]
        distances, angles = got["distances"], got["angles"]
    else:
        n = len(args.inputs)
        for opt, vals in (("--distances", distances), ("--angles", angles)):
            if vals is not None and len(vals) != n:
                raise ParameterError(f"{opt} gives {len(vals)} values for {n} files; give one "
                                     "per file")
        if distances is None and angles is None:
            raise ParameterError("give --distances or --angles: one value per IR file (or one "
                                 "room folder of captures whose sidecars carry them)")
        audios = [audio_io.read_audio(p) for p in args.inputs]
        fs = audios[0].fs
        if any(a.fs != fs for a in audios):
            raise ParameterError("the IR files are at different sample rates; give one rate")
        h = [a.x[0] for a in audios]
        labels = [Path(p).stem for p in args.inputs]
        distances = distances if distances is not None else [None] * n
        angles = angles if angles is not None else [None] * n
    result = analyze_series(h, fs, distances_m=distances, angles_deg=angles, labels=labels,
                            reference_m=args.reference, reference_deg=args.reference_angle,
                            window_s=window_s, fraction=args.fraction,
                            band_hz=None if band is None else (band[0], band[1]), **air)
    rate = fs if args.rate is None else args.rate
    doc = result.to_dict(rate=rate)
    if args.model is not None:
        if result.distance is None or result.distance.room_law is None:
            raise ParameterError("--model needs a distance series whose reverberant level was "
                                 "measured; these positions give no RoomRolloffFactor")
        from measure.model.modelfile import model_from_dict

        model = model_from_dict(audio_io.read_json(args.model, what="model file"))
        model = model.with_room_rolloff(result.distance.room_law.rolloff_factor)
        audio_io.write_json(args.model_out, model.to_dict())
        info(f"wrote {args.model_out} (RoomRolloffFactor "
             f"{result.distance.room_law.rolloff_factor:.3f})")
    if args.plot is not None:
        from measure.report import write_attenuation_plot

        info(f"plot written to {write_attenuation_plot(args.plot, doc)}")
    if args.json:
        print_json(doc)
    else:
        print(format_report(doc))
    return 0


def _hz(v: Any) -> str:
    return "—" if v is None else (f"{v / 1000:.2f} k" if v >= 1000 else f"{v:.0f}")


def format_report(doc: dict[str, Any]) -> str:
    """The text report: a table per series and the fitted laws (no numerics here)."""
    lines = []
    if doc.get("rolloff_factor") is not None:
        law = doc["direct_law"]
        exp_lp = {c["distance_m"]: c["expected_lowpass_hz"]
                  for c in doc["curves"]["at_measured"]}
        lines.append(f"Distance series (reference {doc['reference_distance_m']:g} m):")
        lines.append(f"  {'position':<14} {'distance':>8} {'gain':>7} {'low-pass':>9} "
                     f"{'high-pass':>9} {'DRR':>6}  {'air alone':>9}")
        lines.append(f"  {'':<14} {'(m)':>8} {'(dB)':>7} {'(Hz)':>9} {'(Hz)':>9} {'(dB)':>6}  "
                     f"{'(Hz)':>9}")
        for p in doc["positions"]:
            drr = "—" if p["drr_db"] is None else f"{p['drr_db']:+.1f}"
            lines.append(f"  {p['label']:<14} {p['distance_m']:>8g} {p['gain_db']:>+7.2f} "
                         f"{_hz(p['lowpass_hz']):>9} {_hz(p['highpass_hz']):>9} {drr:>6}  "
                         f"{_hz(exp_lp.get(p['distance_m'])):>9}")
        lines.append(f"  direct sound: rolloff factor {law['rolloff_factor']:.3f} of the clamped "
                     f"inverse-distance law (1 = free field); power law "
                     f"{law['db_per_doubling']:+.2f} dB per doubling; the {law['better']} law "
                     f"fits better")
        if doc.get("room_law"):
            lines.append(f"  reverberant level: {doc['reverberant_db_per_doubling']:+.2f} dB per "
                         f"doubling, RoomRolloffFactor {doc['room_rolloff_factor']:.3f}")
        rc = doc.get("critical_distance_m")
        lines.append("  critical distance: " + ("—" if rc is None else f"{rc:.2f} m "
                                                "(direct and reverberant sound equal)"))
        lines.append("  wet fraction (reverb send) at regular distances: " + ", ".join(
            f"{c['distance_m']:.2g} m {c['wet_fraction']:.2f}" for c in doc["curves"]["regular"]
            if c["wet_fraction"] is not None))
    d = doc.get("direction")
    if d is not None:
        if lines:
            lines.append("")
        lines.append("Angle series (reference on the axis):")
        lines.append(f"  {'angle':>6} {'gain':>7} {'low-pass':>9} {'shelf':>7} {'at':>8}  better")
        for r in d["angles"]:
            shelf = "—" if r["shelf_db"] is None else f"{r['shelf_db']:+.1f}"
            lines.append(f"  {r['angle_deg']:>6g} {r['gain_db']:>+7.2f} {_hz(r['lowpass_hz']):>9} "
                         f"{shelf:>7} {_hz(r['shelf_hz']):>8}  {r['better']}")
        lines.append("  directivity index per octave (dB): " + ", ".join(
            f"{k} {'—' if v is None else f'{v:.1f}'}" for k, v in
            d["directivity_index_db"].items()))
    notes = doc.get("notes", []) + ([] if d is None else d.get("notes", []))
    if notes:
        lines.append("")
        lines += [f"note: {n}" for n in notes]
    return "\n".join(lines)
