"""``measure render MODEL.json --out OUT.wav``: the model's impulse response at any rate."""

from __future__ import annotations

import argparse

from measure.cli._common import positive_float

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
    p.add_argument("--seconds", type=positive_float, default=None, metavar="S",
                   help="length in seconds (default: direct delay + late start + 1.2 × the "
                        "longest T60; at least direct delay + late start + the longest "
                        "T60 / 6)")


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from measure import audio_io
    from measure.cli._common import info, refuse_overwriting_inputs
    from measure.errors import ParameterError

    out = Path(args.out)
    if out.suffix.lower() != ".wav":
        raise ParameterError(f"--out {args.out!r} must end in .wav; name it e.g. model_ir.wav")
    refuse_overwriting_inputs(args.out, args.model)
    if args.rate is not None:  # the options first: no model to load to refuse them
        _check_rate(args.rate, f"--rate {args.rate}")
    if args.seconds is not None:
        _check_seconds(args.seconds)

    from measure.model.modelfile import model_from_dict
    from measure.model.render import default_seconds, render_model

    model = model_from_dict(audio_io.read_json(args.model, what="model file"))
    fs = model.fit_fs if args.rate is None else args.rate
    _check_rate(fs, f"the model's fitting rate {fs} Hz")
    seconds = default_seconds(model) if args.seconds is None else args.seconds
    if args.seconds is not None:
        need = minimum_seconds(model)
        if seconds < need:
            raise ParameterError(
                f"--seconds {seconds:g} is too short for this model: it needs at least "
                f"{need:.3f} s (the direct sound at {model.direct_delay_s:.3f} s, the late part "
                f"from {model.late.start_s:.3f} s after it, and the first 10 dB of its slowest "
                f"decay, T60/6 = {max(model.late.t60_s) / 6:.3f} s, that EDT needs, "
                "ISO 3382-1 A.2.2); give --seconds of at least that, or leave it out for the whole "
                "decay")
    _check_seconds(seconds)
    h = render_model(model, fs, seconds)
    audio_io.write_audio(out, h, fs, subtype="FLOAT")
    info(f"wrote {out}: {h.size / fs:.2f} s at {fs} Hz, mono 32-bit float")
    return 0


def minimum_seconds(model) -> float:
    """The shortest rendering worth writing, rounded up to the millisecond: the direct delay,
    the late part's start, and 10 dB of the slowest band's decay (T60/6: EDT is evaluated
    from 0 to -10 dB, ISO 3382-1:2009 A.2.2), so that every band shows a decay to evaluate."""
    import math

    s = model.direct_delay_s + model.late.start_s + max(model.late.t60_s) / 6.0
    return math.ceil(s * 1000.0 - 1e-9) / 1000.0


def _check_rate(fs: int, given: str) -> None:
    from measure.errors import ParameterError

    if not 8000 <= fs <= 384000:
        raise ParameterError(f"{given} is not a sample rate between 8000 and 384000 Hz; give "
                             "--rate in that range, e.g. --rate 48000")


def _check_seconds(seconds: float) -> None:
    from measure.errors import ParameterError
    from measure.model.modelfile import MAX_RENDER_S

    if not (seconds > 0) or seconds > MAX_RENDER_S:
        raise ParameterError(f"--seconds {seconds} must be > 0 and at most {MAX_RENDER_S:g}; "
                             "give a length in that range")
