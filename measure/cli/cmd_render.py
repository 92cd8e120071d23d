"""``measure render MODEL.json --out OUT.wav``: the model's impulse response at any rate."""

from __future__ import annotations

import argparse

NAME = "render"
HELP = "render a room model as an impulse response (mono 32-bit float WAV) at any sample rate"
DESCRIPTION = """\
Render the model written by `measure fit` as an impulse response: a mono 32-bit float WAV at
--rate Hz (default: the rate of the measurement it was fitted to), --seconds long (default:
long enough for the longest band to decay by 60 dB). The direct sound sits where it was in
the measurement."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("model", metavar="MODEL.json", help="model file written by `measure fit`")
    p.add_argument("--out", required=True, metavar="OUT.wav", help="impulse response to write")
    p.add_argument("--rate", type=int, default=None, metavar="HZ",
                   help="sample rate in Hz (default: the fitting rate)")
    p.add_argument("--seconds", type=float, default=None, metavar="S",
                   help="length in seconds (default: direct delay + late start + 1.2 × the "
                        "longest T60)")


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from measure import audio_io
    from measure.cli._common import info, refuse_overwriting_inputs
    from measure.errors import ParameterError
    from measure.model.modelfile import model_from_dict
    from measure.model.render import default_seconds, render_model

    out = Path(args.out)
    if out.suffix.lower() != ".wav":
        raise ParameterError(f"--out {args.out!r} must end in .wav; name it e.g. model_ir.wav")
    refuse_overwriting_inputs(args.out, args.model)
    model = model_from_dict(audio_io.read_json(args.model, what="model file"))
    fs = model.fit_fs if args.rate is None else args.rate
    if not 8000 <= fs <= 384000:
        given = f"--rate {fs}" if args.rate is not None else f"the model's fitting rate {fs} Hz"
        raise ParameterError(f"{given} is not a sample rate between 8000 and 384000 Hz; give "
                             "--rate in that range, e.g. --rate 48000")
    seconds = default_seconds(model) if args.seconds is None else args.seconds
    if not (seconds > 0) or seconds > 120:
        raise ParameterError(f"--seconds {seconds} must be > 0 and at most 120; give a length "
                             "in that range")
    h = render_model(model, fs, seconds)
    audio_io.write_audio(out, h, fs, subtype="FLOAT")
    info(f"wrote {out}: {h.size / fs:.2f} s at {fs} Hz, mono 32-bit float")
    return 0
