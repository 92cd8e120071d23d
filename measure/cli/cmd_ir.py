"""``measure ir CAPTURE.wav --sweep SWEEP.wav --out IR.wav``: recover impulse responses."""

from __future__ import annotations

import argparse

from measure.cli._common import finite_float

NAME = "ir"
HELP = "recover impulse responses from a recording of a sweep"
DESCRIPTION = """\
Find every sweep in CAPTURE.wav (any latency, noise or silence before it), remove the clock
drift between the playing and the recording device, deconvolve, average the sweeps coherently,
and write IR.wav (32-bit float, one channel per recorded channel) and IR.json with the latency,
drift, peak-to-noise ratio and harmonic distortion."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("capture", metavar="CAPTURE.wav", help="the recording")
    p.add_argument("--sweep", required=True, metavar="SWEEP.wav",
                   help="the sweep file that was played (its .json must be beside it)")
    p.add_argument("--out", required=True, metavar="IR.wav", help="impulse response to write")
    p.add_argument("--channel", type=int, action="append", metavar="N",
                   help="recording channel to use, 1-based (repeat for several; default: all "
                        "but the loopback channel)")
    p.add_argument("--loopback-channel", type=int, metavar="N",
                   help="recording channel, 1-based, that carries the played signal back "
                        "(a loopback cable): timing comes from it exactly")
    p.add_argument("--harmonics", type=int, default=4, metavar="K",
                   help="harmonic-distortion responses to analyse (orders 2..K+1, default 4)")
    p.add_argument("--save-harmonics", action="store_true",
                   help="also write IR.harmonics.wav: the harmonic-distortion responses of the "
                        "first channel, one channel per order (2, 3, ...)")
    p.add_argument("--pre", type=finite_float, default=None, metavar="S",
                   help="seconds kept before the direct sound (default: two periods of the "
                        "sweep's start frequency, at least 0.005)")
    p.add_argument("--json", action="store_true", help="print the IR figures as JSON on stdout")


def run(args: argparse.Namespace) -> int:
    from measure import audio_io
    from measure.cli._common import channel_index, info, print_json, refuse_overwriting_inputs, warn
    from measure.deconvolve import recover_ir
    from measure.errors import ParameterError

    if not str(args.out).lower().endswith(".wav"):
        raise ParameterError(f"--out {args.out!r} must end in .wav; name the IR e.g. ir.wav")
    refuse_overwriting_inputs(args.out, args.capture, args.sweep, writes_sidecar=True)
    sweep = audio_io.read_sweep(args.sweep)
    cap = audio_io.read_audio(args.capture)
    if cap.fs != sweep.fs:
        raise ParameterError(
            f"the capture is at {cap.fs} Hz but the sweep at {sweep.fs} Hz; record at the "
            "sweep's rate, or make a sweep at the capture's rate")
    channels = None if not args.channel else [
        channel_index(c, cap.n_channels, option="--channel", source="the capture")
        for c in args.channel]
    ref = (None if args.loopback_channel is None
           else channel_index(args.loopback_channel, cap.n_channels,
                              option="--loopback-channel", source="the capture"))
    if ref is not None and channels is not None and ref in channels:
        raise ParameterError(
            f"--channel {ref + 1} is the --loopback-channel: a channel referenced to itself "
            "gives a unit impulse at latency 0, not the room; give the microphone's channel "
            "with --channel (or leave it out for all but the loopback)")
    ir = recover_ir(cap.x, sweep, channels=channels, reference_channel=ref,
                    n_harmonics=args.harmonics, pre_s=args.pre)
    for w in ir.warnings:
        warn(w)
    from measure.capture import dc_offset_warning, dc_offsets_dbfs

    dc = dc_offsets_dbfs(cap.x)
    for c in ir.channels:
        if (w := dc_offset_warning(dc[c], f"channel {c + 1}")) is not None:
            warn(w)
    sources = {"capture": str(args.capture), "capture_sha256": audio_io.file_sha256(args.capture),
               "sweep": str(args.sweep), "sweep_sha256": audio_io.file_sha256(args.sweep)}
    from pathlib import Path

    out = Path(args.out)
    if args.save_harmonics and ir.harmonic_h.shape[1]:
        harm = out.with_name(out.stem + ".harmonics.wav")
        audio_io.write_audio(harm, ir.harmonic_h[0], ir.fs, subtype="FLOAT")
        sources = {**sources, "harmonics_file": harm.name}
    wav, side = audio_io.write_ir(out, ir, sweep=sweep, sources=sources)
    if args.json:
        print_json(ir.to_dict())
    else:
        print(format_ir_summary(ir))
    info(f"wrote {wav} and {side}")
    return 0


def format_ir_summary(ir) -> str:
    """A few lines on the recovered responses: latency, drift, peak-to-noise, distortion."""
    from measure.cli._common import signed

    lines = [f"sample rate {ir.fs} Hz, {ir.n_averaged} sweep(s) averaged, "
             f"clock drift {signed(ir.drift_ppm)} ppm"]
    for c, lat, pnr, hds in zip(ir.channels, ir.latency_s, ir.peak_to_noise_db, ir.harmonics,
                                strict=True):
        dist = ", ".join(hd.describe() for hd in hds) or "not analysed"
        lines.append(f"channel {c + 1}: latency {lat * 1000:.2f} ms, peak-to-noise {pnr:.1f} dB, "
                     f"distortion {dist}")
    return "\n".join(lines)
