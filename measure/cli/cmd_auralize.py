"""``measure auralize (MODEL.json | IR.wav) DRY.wav --out WET.wav``: hear a dry sound in a room."""

from __future__ import annotations

import argparse

from measure.cli._common import finite_float

NAME = "auralize"
HELP = "convolve a dry sound with a measured impulse response or a rendered room model"
DESCRIPTION = """\
Play DRY.wav "in the room": convolve it with IR.wav (the measured room) or with the impulse
response rendered from MODEL.json at the dry sound's rate (the modelled room). Each channel
of DRY.wav is convolved with the same (mono) response. The result is written as 32-bit float
at the room's own level; --peak scales it so its peak is at that many dBFS (e.g. -1) for
listening."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("room", metavar="MODEL.json|IR.wav",
                   help="a model file written by `measure fit`, or a measured impulse response")
    p.add_argument("dry", metavar="DRY.wav", help="the dry sound")
    p.add_argument("--out", required=True, metavar="WET.wav", help="result to write")
    p.add_argument("--peak", type=finite_float, default=None, metavar="DBFS",
                   help="scale the result to this peak level in dBFS (default: unscaled)")
    p.add_argument("--channel", type=int, default=1, metavar="N",
                   help="channel of IR.wav to use, 1-based (default 1)")


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    import numpy as np

    from measure import audio_io
    from measure.cli._common import channel_index, info, refuse_overwriting_inputs
    from measure.errors import ParameterError
    from measure.model.render import auralize, default_seconds, render_model

    out = Path(args.out)
    if out.suffix.lower() != ".wav":
        raise ParameterError(f"--out {args.out!r} must end in .wav; name it e.g. wet.wav")
    if args.peak is not None and not (args.peak <= 0):
        raise ParameterError(f"--peak {args.peak} dBFS must be at most 0")
    refuse_overwriting_inputs(args.out, args.room, args.dry)
    dry = audio_io.read_audio(args.dry)
    if not np.any(dry.x):  # the result would be silent
        raise ParameterError(f"{args.dry} is silent (every sample is zero): the result would be "
                             "silent too; give a dry sound with some signal")
    room = Path(args.room)
    if room.suffix.lower() == ".json":
        from measure.model.modelfile import model_from_dict

        model = model_from_dict(audio_io.read_json(room, what="model file"))
        ir = render_model(model, dry.fs, default_seconds(model))
        what = f"model {room.name} rendered at {dry.fs} Hz"
    else:
        a = audio_io.read_audio(room)
        if a.fs != dry.fs:
            raise ParameterError(
                f"{room} is at {a.fs} Hz but {args.dry} at {dry.fs} Hz; resample one of them "
                "(or fit a model, which renders at any rate)")
        ir = a.x[channel_index(args.channel, a.n_channels, option="--channel", source=str(room))]
        what = f"measured response {room.name}"
    if not np.any(ir):
        raise ParameterError(
            f"the {what} is all zeros (channel {args.channel}): the result would be silent; "
            "give a measured response (or a model) that holds the room")
    wet = auralize(dry.x, dry.fs, ir)
    peak = float(np.max(np.abs(wet)))
    if not (peak > 0):  # both inputs hold signal, yet nothing came out (e.g. underflow)
        raise ParameterError(f"{args.dry} in the {what} is silent; give a louder dry sound or "
                             "response")
    if args.peak is not None:
        wet = wet * (10.0 ** (args.peak / 20.0) / peak)
    elif peak > 1.0:
        info(f"note: the result peaks at {20 * np.log10(peak):+.1f} dBFS (the float WAV keeps it); "
             "use --peak -1 for playback")
    audio_io.write_audio(out, wet, dry.fs, subtype="FLOAT")
    info(f"wrote {out}: {args.dry} in the {what}, {wet.shape[-1] / dry.fs:.2f} s")
    return 0
