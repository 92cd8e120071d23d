"""``measure fit IR.wav --out MODEL.json``: fit the compact room model and print the fit report."""

from __future__ import annotations

import argparse

NAME = "fit"
HELP = "fit a compact room model (coloration, echoes, late decay per band) to an impulse response"
DESCRIPTION = """\
Fit the compact room model to an impulse response and write it as a versioned JSON file:
a low-order coloration filter for the direct sound, the discrete early echoes (delays and
gains), and a late reverberation (a feedback delay network from the mixing time on, an early
diffuse part before it) whose decay and level follow the measurement octave by octave. The file also holds the room as I3DL2 listener reverb
parameters. Render it with `measure render`, hear it with `measure auralize`.

The fit report compares, per octave band, EDT, T20, T30, C50, C80, D50 and Ts of the
measurement with those of the rendered model, and gives the difference in ISO 3382-1
just-noticeable differences (5 % for EDT and T, 1 dB for C50/C80, 0.05 for D50, 10 ms for Ts).

--json prints {"model": <the model file's object>, "report": {...}, "i3dl2": {...}} on
stdout; the report has bands, parameters, jnd, cells (band, parameter, measured, modelled,
difference_jnd), max_abs_jnd, coloration_lsd_db and fit_seconds."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("ir", metavar="IR.wav", help="the measured impulse response")
    p.add_argument("--out", required=True, metavar="MODEL.json", help="model file to write")
    p.add_argument("--order", type=int, default=None, metavar="N",
                   help="order of the coloration filter (default: the smallest even order that "
                        "reaches the coloration stage's error target)")
    p.add_argument("--echoes", type=int, default=None, metavar="K",
                   help="number of discrete echoes (default: those that stand out of the diffuse "
                        "background)")
    p.add_argument("--late-from", choices=("mixing", "direct"), default="mixing",
                   help="start the delay network at the mixing time, an early diffuse part "
                        "carrying the diffuse energy before it (default), or 2.5 ms after the "
                        "direct sound")
    p.add_argument("--channel", type=int, default=1, metavar="N",
                   help="channel of IR.wav to fit, 1-based (default 1)")
    p.add_argument("--json", action="store_true",
                   help="print the model, the fit report and the I3DL2 set as one JSON object")
    p.add_argument("--plot", metavar="FILE.png", default=None,
                   help="also draw measured against model (EDT, T30, C80 per band, the "
                        "differences in JNDs, the decay curves) into a PNG (needs matplotlib; "
                        "stdout is unchanged)")


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from measure import audio_io
    from measure.cli._common import (
        channel_index,
        info,
        plural,
        print_json,
        refuse_overwriting_inputs,
    )
    from measure.errors import ParameterError
    from measure.model.modelfile import MAX_ECHOES, ORDER_RANGE

    out = Path(args.out)
    if out.suffix.lower() != ".json":
        raise ParameterError(f"--out {args.out!r} must end in .json; name the model e.g. room.json")
    refuse_overwriting_inputs(args.out, args.ir)
    if args.order is not None and not ORDER_RANGE[0] <= args.order <= ORDER_RANGE[1]:
        raise ParameterError(f"--order {args.order} must be from {ORDER_RANGE[0]} to "
                             f"{ORDER_RANGE[1]} (e.g. 4 or 8)")
    if args.echoes is not None and not 0 <= args.echoes <= MAX_ECHOES:
        raise ParameterError(f"--echoes {args.echoes} must be from 0 to {MAX_ECHOES} (the most "
                             "a model file holds); give fewer, or leave it out for those that "
                             "stand out")
    if args.plot is not None:  # before any work, so nothing is written when it cannot be drawn
        from measure.report import check_png_path, require_matplotlib

        check_png_path(args.plot, option="--plot")
        require_matplotlib()
    audio = audio_io.read_audio(args.ir)
    from measure.model.fit import fit_with_i3dl2
    h = audio.x[channel_index(args.channel, audio.n_channels, option="--channel",
                              source=args.ir)]
    source = {"file": Path(args.ir).name, "sha256": audio_io.file_sha256(args.ir),
              "channel": args.channel, "order": args.order, "echoes": args.echoes,
              "late_from": args.late_from}
    result, i3 = fit_with_i3dl2(h, audio.fs, order=args.order, n_echoes=args.echoes,
                                late_from=args.late_from, source=source)
    m = result.model
    audio_io.write_json(out, m.to_dict())
    if args.plot is not None:
        from measure.report import write_model_plot

        # the analyses the report was made from
        path = write_model_plot(args.plot, result.measured, result.modelled, result.report,
                                f"{Path(args.ir).name}: measured against the fitted model")
        info(f"plot written to {path}")
    if args.json:
        print_json({"model": m.to_dict(), "report": result.report.to_dict(),
                    "i3dl2": i3.to_dict()})
    else:
        print(f"{args.ir}: {audio.fs} Hz, {h.size / audio.fs:.2f} s; model written to {out}")
        print(f"  coloration order {m.coloration.order if m.coloration else 0}, "
              f"{plural(len(m.echoes), 'echo', 'echoes')}, late part in "
              f"{plural(len(m.late.band_centers_hz), 'band')}, "
              f"mixing time "
              + (f"{m.mixing_time_s * 1000:.1f} ms" if m.mixing_time_s is not None else "not reached"))
        print("")
        print("Measured against rendered model (Δ in ISO 3382-1 JNDs):")
        print(result.report.to_text())
        print("")
        print(i3.to_text())
        info(f"fit took {result.report.fit_seconds:.2f} s")
    return 0
