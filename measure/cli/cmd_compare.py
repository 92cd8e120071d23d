"""``measure compare``: two rooms, band by band, in ISO 3382-1 just-noticeable differences."""

from __future__ import annotations

import argparse
import dataclasses
import math
from pathlib import Path
from typing import Any

from measure.cli._common import finite_float

NAME = "compare"
HELP = "compare two rooms (measured, modelled, a reverb preset, predicted) in JNDs"
DESCRIPTION = """\
Does the game room sound like the real one? Compare A with B per octave band: EDT, T20, T30,
C50, C80, D50, Ts, DRR and STI, each side's value, the difference in its unit and in ISO 3382-1
just-noticeable differences (EDT and T 5 %, C 1 dB, D50 0.05, Ts 10 ms), and a verdict; then a
spectral distance per octave, an energy-decay-relief difference and a one-line verdict.

A and B can each be: an impulse response (WAV); a take recorded by `measure capture` or
`measure import` (its sidecar names the sweep, or give --sweep); a model file of `measure fit`
(rendered first); a reverb parameter set in I3DL2 form (a JSON object of the twelve
properties, or a model file's "i3dl2" block; rendered first); a room description (TOML,
predicted first: its format is in the README); or a room folder of captures
(position-averaged per ISO 3382-2: mean, spread, count and grade; a difference smaller than the
spread over positions is not called audible).

--fail-above N: the verdicts are taken at N JNDs; exit 1 when any compared figure differs by
more than N JNDs (and not within the spread over positions), or when nothing could be
compared; 0 when all are within; 2 on bad input."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("a", metavar="A", help="IR.wav, TAKE.wav, MODEL.json, I3DL2.json, ROOM.toml "
                                          "or a room folder")
    p.add_argument("b", metavar="B", help="the same kinds as A")
    p.add_argument("--sweep", metavar="SWEEP.wav", default=None,
                   help="the sweep played for a take whose sidecar names none that exists")
    p.add_argument("--rate", type=int, default=None, metavar="HZ",
                   help="sample rate at which models, presets and descriptions are rendered "
                        "(default: the measured side's, else 48000)")
    p.add_argument("--fail-above", type=finite_float, default=None, metavar="JNDS",
                   help="exit 1 when any compared figure differs by more than this many JNDs")
    p.add_argument("--json", action="store_true", help="print the comparison as one JSON object")


_RENDERED = ("model", "reverb parameters", "room description")


def _kind(path: Path) -> str:
    from measure.errors import ParameterError

    if path.is_dir():
        return "room folder"
    suffix = path.suffix.lower()
    if suffix in (".wav", ".flac", ".aif", ".aiff"):
        return "audio"
    if suffix == ".json":
        return "json"
    if suffix == ".toml":
        return "room description"
    raise ParameterError(f"{path}: not a kind compare knows (WAV, model or I3DL2 JSON, room TOML, "
                         "or a room folder); give one of those")


def _i3dl2_values(doc: Any) -> dict[str, float] | None:
    """The twelve properties of an I3DL2 set in any of the forms the model file holds."""
    from measure.model.i3dl2 import I3DL2_RANGES

    nested = doc.get("i3dl2") if isinstance(doc, dict) else None
    for cand in (doc, doc.get("values") if isinstance(doc, dict) else None,
                 nested.get("values") if isinstance(nested, dict) else None):
        if isinstance(cand, dict) and set(I3DL2_RANGES) <= set(cand):
            return {k: cand[k] for k in I3DL2_RANGES}
    return None


def _check_i3dl2(values: dict[str, Any], path: Path) -> dict[str, float]:
    from measure.errors import ParameterError
    from measure.model.i3dl2 import I3DL2_RANGES

    out = {}
    for k, (lo, hi, unit) in I3DL2_RANGES.items():
        v = values[k]
        if not isinstance(v, (int, float)) or isinstance(v, bool) or not math.isfinite(v) \
                or not lo <= v <= hi:
            raise ParameterError(f"{path}: I3DL2 {k} = {v!r} is outside the guideline's range "
                                 f"{lo:g} to {hi:g}{' ' + unit if unit else ''}; correct it")
        out[k] = float(v)
    return out


def _measured(path: Path, sweep_opt: str | None) -> tuple[Any, int, str]:
    """(h, fs, kind) of an IR file or of a take recovered with its sweep."""
    from measure import audio_io
    from measure.cli.cmd_analyze import response_context
    from measure.errors import ParameterError
    from measure.session import TAKE_FORMAT

    doc = audio_io.read_sidecar(path) or {}
    audio = audio_io.read_audio(path)
    is_take = isinstance(doc, dict) and doc.get("format") == TAKE_FORMAT
    if not is_take and sweep_opt is not None and doc == {}:
        from measure.deconvolve import sweep_recording_evidence

        is_take = sweep_recording_evidence(audio.x[0], audio.fs) is not None
    if is_take:
        from measure.session import recover_take, resolve_sweep

        named = doc.get("sweep_file") if isinstance(doc, dict) else None
        sweep_path = Path(sweep_opt) if sweep_opt else resolve_sweep(
            named, path.parent, sha256=doc.get("sweep_sha256") if isinstance(doc, dict) else None,
            take=path.name)
        if sweep_path is None:
            raise ParameterError(f"{path}: a take, but its sidecar names no sweep file that "
                                 f"exists ({named!r}); give --sweep SWEEP.wav")
        ir = recover_take(audio, doc, audio_io.read_sweep(sweep_path), name=str(path))
        return ir.h[0], ir.fs, "capture"
    response_context(str(path), audio.x[0], audio.fs, 0)  # refuses takes and sweeps
    return audio.x[0], audio.fs, "impulse response"


def _side(path: Path, sweep_opt: str | None, rate: int | None) -> Any:
    """A :class:`measure.compare.RoomSide` of ``path``; rendered kinds need ``rate``."""
    from measure import audio_io
    from measure.compare import average_sides, side_from_figures
    from measure.errors import ParameterError
    from measure.parameters import analyze_ir

    kind = _kind(path)
    if kind == "room folder":
        from measure.cli.cmd_attenuation import _from_room_folder

        got = _from_room_folder(path, sweep_opt)
        sides = [side_from_figures(analyze_ir(h, got["fs"]), label=lab, kind="capture", h=h)
                 for h, lab in zip(got["h"], got["labels"], strict=True)]
        if len(sides) == 1:
            return dataclasses.replace(sides[0], label=f"{path.name}/{got['labels'][0]}")
        return average_sides(sides, label=f"{path.name} ({len(sides)} positions)")
    if kind == "audio":
        h, fs, what = _measured(path, sweep_opt)
        return side_from_figures(analyze_ir(h, fs), label=path.name, kind=what, h=h)
    if rate is None:
        return None  # rendered after the other side sets the rate
    if kind == "room description":
        from measure.predict import load_room, predict

        pred = predict(load_room(path), rate)
        side = side_from_figures(analyze_ir(pred.h, rate), label=path.name,
                                 kind="room description", h=pred.h)
        return dataclasses.replace(side, notes=tuple(pred.notes))
    doc = audio_io.read_json(path, what="model or I3DL2 file")
    from measure.model.modelfile import MODEL_FORMAT

    if isinstance(doc, dict) and doc.get("format") == MODEL_FORMAT:
        from measure.model.modelfile import model_from_dict
        from measure.model.render import default_seconds, render_model

        model = model_from_dict(doc)
        h = render_model(model, rate, default_seconds(model))
        return side_from_figures(analyze_ir(h, rate), label=path.name, kind="model", h=h)
    values = _i3dl2_values(doc)
    if values is None:
        raise ParameterError(f"{path}: neither a model file of `measure fit` nor an I3DL2 set "
                             "(the twelve properties Room ... HFReference); give one of those")
    from measure.model.i3dl2 import render_i3dl2

    values = _check_i3dl2(values, path)
    seconds = 1.2 * values["DecayTime"] * max(1.0, values["DecayHFRatio"]) + 0.5
    h = render_i3dl2(values, rate, seconds)
    return side_from_figures(analyze_ir(h, rate), label=path.name, kind="reverb parameters",
                             h=h)


def run(args: argparse.Namespace) -> int:
    from measure.cli._common import print_json, warn
    from measure.compare import compare_sides
    from measure.errors import ParameterError

    if args.fail_above is not None and not (args.fail_above >= 0 and
                                            math.isfinite(args.fail_above)):
        raise ParameterError(f"--fail-above {args.fail_above} must be a number of JNDs >= 0")
    if args.rate is not None and not 8000 <= args.rate <= 384000:
        raise ParameterError(f"--rate {args.rate} must be a sample rate from 8000 to 384000 Hz")
    pa, pb = Path(args.a), Path(args.b)
    for p in (pa, pb):
        if not p.exists():
            raise ParameterError(f"{p} does not exist; give an existing file or folder")
        _kind(p)
    a = _side(pa, args.sweep, args.rate)
    b = _side(pb, args.sweep, args.rate)
    rate = args.rate or (a.fs if a is not None else b.fs if b is not None else 48000)
    a = a if a is not None else _side(pa, args.sweep, rate)
    b = b if b is not None else _side(pb, args.sweep, rate)
    if a.fs != b.fs:
        raise ParameterError(f"A is at {a.fs} Hz and B at {b.fs} Hz; compare responses at one "
                             "rate (models, presets and descriptions render at --rate)")
    cmp = compare_sides(a, b, threshold_jnd=1.0 if args.fail_above is None else args.fail_above)
    if args.json:
        print_json(cmp.to_dict())
    else:
        print(format_report(cmp.to_dict()))
    if args.fail_above is not None:
        if cmp.summary()["n_compared"] == 0:
            warn("nothing could be compared (no figure exists on both sides): --fail-above "
                 "fails")
            return 1
        if cmp.exceeds(args.fail_above):
            return 1
    return 0


def _v(v: Any, param: str) -> str:
    if v is None:
        return "—"
    if param in ("EDT", "T20", "T30"):
        return f"{v:.2f} s"
    if param == "Ts":
        return f"{v * 1000:.0f} ms"
    if param in ("D50", "STI"):
        return f"{v:.2f}"
    return f"{v:+.1f} dB"


def format_report(doc: dict[str, Any]) -> str:
    """The text report of a comparison document (no numerics here)."""
    a, b = doc["a"], doc["b"]
    lines = [f"A: {a['label']} ({a['kind']}" + (f", {a['grade']} grade" if a.get("grade") else "")
             + ")",
             f"B: {b['label']} ({b['kind']}" + (f", {b['grade']} grade" if b.get("grade") else "")
             + ")", ""]
    head = f"{'band':>5} {'figure':<6} {'A':>9} {'B':>9} {'B − A':>9} {'JND':>6}  verdict"
    lines += [head, "-" * len(head)]
    for c in doc["cells"]:
        d = c["difference"]
        if d is None:
            diff = "—"
        elif c["parameter"] in ("EDT", "T20", "T30"):
            diff = f"{d:+.2f} s"
        elif c["parameter"] == "Ts":
            diff = f"{d * 1000:+.0f} ms"
        elif c["parameter"] in ("D50", "STI"):
            diff = f"{d:+.2f}"
        else:
            diff = f"{d:+.1f} dB"
        jnd = "—" if c["jnd"] is None else f"{c['jnd']:+.1f}"
        lines.append(f"{c['band_hz'] or 'all':>5} {c['parameter']:<6} {_v(c['a'], c['parameter']):>9} "
                     f"{_v(c['b'], c['parameter']):>9} {diff:>9} {jnd:>6}  {c['verdict']}")
    spec = doc.get("spectral_distance_db") or {}
    if any(v is not None for v in spec.values()):
        lines += ["", "spectral distance per octave (dB, level-normalised): " + ", ".join(
            f"{k} {v:.1f}" for k, v in spec.items() if v is not None)]
    edr = doc.get("edr_difference_db") or {}
    if any(v is not None for v in edr.values()):
        lines.append("decay relief difference per octave (dB, mean/max): " + ", ".join(
            f"{k} {v['mean']:.1f}/{v['max']:.1f}" for k, v in edr.items() if v is not None))
    notes = a.get("notes", []) + b.get("notes", [])
    if notes:
        lines += [""] + [f"note: {n}" for n in notes]
    lines += ["", doc["summary"]["verdict"]]
    return "\n".join(lines)
