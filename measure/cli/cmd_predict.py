"""``measure predict``: a room from its plan (dimensions, materials), and the inverse use."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

NAME = "predict"
HELP = "predict a room from its description (Sabine, Eyring, image sources); fit its absorption"
DESCRIPTION = """\
Predict a rectangular room from a description (TOML: dimensions, a material per surface,
furnishing, source and microphone positions, air; the format is in the README and examples
ship with the package): per octave band the Sabine and Eyring reverberation times with the air
absorption term 4mV (ISO 9613-1), and an impulse response from image sources (Allen & Berkley
1979) with a statistical diffuse tail that decays as Eyring predicts. The output states the
known limits of these predictions.

--out IR.wav writes the predicted impulse response (32-bit float, at --rate).

--match MEASURED (an IR, or a take with its sweep): the inverse use. Per octave, the mean
absorption coefficient that makes the prediction's Eyring time equal the measured T30 (T20
where T30 is missing), or, with --material KEY, the area of that material; "what must this
room's walls be for the game room to match"."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("room", metavar="ROOM.toml", help="the room description")
    p.add_argument("--rate", type=int, default=48000, metavar="HZ",
                   help="sample rate of the predicted response (default 48000)")
    p.add_argument("--order", type=int, default=None, metavar="N",
                   help="highest image-source reflection order (default the module's)")
    p.add_argument("--out", metavar="IR.wav", default=None,
                   help="write the predicted impulse response here")
    p.add_argument("--match", metavar="MEASURED.wav", default=None,
                   help="fit the absorption that makes the prediction match this measurement")
    p.add_argument("--material", metavar="KEY", default=None,
                   help="with --match: fit the area of this material instead of the mean "
                        "absorption")
    p.add_argument("--sweep", metavar="SWEEP.wav", default=None,
                   help="with --match: the sweep played, for a take whose sidecar names none")
    p.add_argument("--json", action="store_true", help="print the prediction as one JSON object")


def run(args: argparse.Namespace) -> int:
    from measure import audio_io
    from measure.cli._common import info, print_json, refuse_overwriting_inputs
    from measure.errors import ParameterError
    from measure.predict import fit_absorption, load_room, predict

    if not 8000 <= args.rate <= 384000:
        raise ParameterError(f"--rate {args.rate} must be a sample rate from 8000 to 384000 Hz")
    if args.material is not None and args.match is None:
        raise ParameterError("--material goes with --match: it names the material whose area "
                             "is fitted to a measurement")
    if args.order is not None and not 0 <= args.order <= 30:
        raise ParameterError(f"--order {args.order} must be a reflection order from 0 to 30")
    if args.out is not None:
        refuse_overwriting_inputs(args.out, args.room, args.match, args.sweep)
    room = load_room(args.room)
    fit = None
    if args.match is not None:
        from measure.cli.cmd_compare import _measured
        from measure.parameters import analyze_ir

        h, fs, _ = _measured(Path(args.match), args.sweep)
        figs = analyze_ir(h, fs)
        measured = {b.label: (b.t30_s if b.t30_s is not None else b.t20_s) for b in figs.bands}
        fit = fit_absorption(room, measured, material=args.material)
    kw = {} if args.order is None else {"max_order": args.order}
    pred = predict(room, args.rate, **kw)
    if args.out is not None:
        path = audio_io.write_audio(args.out, pred.h, args.rate, subtype="FLOAT")
        info(f"wrote {path} ({pred.h.size / args.rate:.2f} s at {args.rate} Hz)")
    from measure.parameters import analyze_ir

    doc = pred.to_dict()
    doc["figures"] = analyze_ir(pred.h, args.rate).to_dict()  # ISO 3382-1, of the response
    if fit is not None:
        doc["absorption_fit"] = fit.to_dict()
    if args.json:
        print_json(doc)
    else:
        print(format_report(doc))
    return 0


def _f(v: Any, spec: str) -> str:
    return "—" if v is None else f"{v:{spec}}"


def format_report(doc: dict[str, Any]) -> str:
    """The text report of a prediction document (no numerics here)."""
    room = doc.get("room", {})
    lines = [f"{room.get('name', 'room')}: predicted from its description (the last four "
             "columns: ISO 3382-1 figures of the predicted response)"]
    lines.append(f"  {'band':>5} {'mean α':>7} {'Sabine':>7} {'Eyring':>7} {'T30':>6} "
                 f"{'EDT':>6} {'C80':>6} {'D50':>5}")
    lines.append(f"  {'(Hz)':>5} {'':>7} {'(s)':>7} {'(s)':>7} {'(s)':>6} {'(s)':>6} "
                 f"{'(dB)':>6} {'':>5}")
    figs = {b["label"]: b for b in (doc.get("figures") or {}).get("bands", [])}
    for b in doc.get("bands", []):
        f = figs.get(b["label"], {})
        lines.append(f"  {b['label']:>5} {_f(b.get('mean_alpha'), '7.3f')} "
                     f"{_f(b.get('sabine_s'), '7.2f')} {_f(b.get('eyring_s'), '7.2f')} "
                     f"{_f(f.get('t30_s'), '6.2f')} {_f(f.get('edt_s'), '6.2f')} "
                     f"{_f(f.get('c80_db'), '6.1f')} {_f(f.get('d50'), '5.2f')}")
    fit = doc.get("absorption_fit")
    if fit is not None:
        what = ("mean absorption" if fit.get("material") is None
                else f"area of {fit['material']} (m²)")
        lines += ["", f"  fitted to the measurement: {what} per octave"]
        for b in fit.get("bands", []):
            value = (b.get("mean_alpha") if fit.get("material") is None
                     else b.get("material_area_m2"))
            note = f"  ({b['note']})" if b.get("note") else ""
            lines.append(f"  {b['label']:>5} measured {_f(b.get('measured_t_s'), '5.2f')} s  "
                         f"→ {_f(value, '7.3f')}{note}")
    notes = doc.get("notes", [])
    if notes:
        lines += [""] + [f"limit: {n}" for n in notes]
    return "\n".join(lines)
