"""``measure level``: check input and output levels before a take."""

from __future__ import annotations

import argparse

NAME = "level"
HELP = "check levels: background noise, input peak and the peak-to-noise a sweep will reach"
DESCRIPTION = """\
Record the background noise, then play short sweeps that start 30 dB below the sweep's level
and rise in 6 dB steps (never a jump to full scale), stopping at once if the input clips.
Reports per input channel the peak, the background noise and the peak-to-noise the real sweep
will reach, broadband and per octave, with what to change. Nothing is saved.

Exit status: 0 levels fine, 1 a warning (too low, too little headroom, too noisy), 2 clipped,
no signal found, or another error.

SAFETY: wear hearing protection near loud loudspeakers; start at low volume and raise it step
by step; sweeps at high level can destroy tweeters; keep people and animals out of the room."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    from measure.cli.cmd_capture import add_device_arguments

    p.add_argument("--sweep", required=True, metavar="SWEEP.wav",
                   help="the sweep the take will use (sets rate, band, level and length)")
    add_device_arguments(p)
    p.add_argument("--json", action="store_true", help="print the report as JSON")


def run(args: argparse.Namespace) -> int:
    from measure.audio_io import read_sweep
    from measure.capture import check_rate
    from measure.cli import cmd_capture as cc
    from measure.cli._common import print_json, warn
    from measure.errors import DeviceError

    sweep = read_sweep(args.sweep)
    setup = cc.setup_devices(args)
    labels = cc.channel_labels(setup["input_channels"], setup["loopback"])
    check_rate(setup["input_device"], setup["output_device"], sweep.fs,
               n_inputs=max(setup["input_channels"]) + 1,
               n_outputs=max(setup["output_channels"]) + 1)
    cc.confirm_safety(args, sweep.spec.level_dbfs)
    report, rec = cc.run_level_check(args, sweep, setup)
    if args.json:
        print_json(dict(report.to_dict(), n_xruns=rec.n_xruns))
    else:
        print("\n".join(cc.format_level(report, labels)))
    if rec.n_xruns:
        warn(f"the stream lost {rec.n_xruns} audio block(s); close other programs or use a "
             "larger buffer")
    if any(report.n_clipped):
        raise DeviceError("the input clipped; lower the loudspeaker volume or the input gain and "
                          "run the level check again")
    if not all(report.found):
        raise DeviceError("no test signal found on " + ", ".join(
            lab for lab, f in zip(labels, report.found, strict=True) if not f)
            + "; check the cable, the microphone's power and the channel numbers")
    return 1 if (report.warnings or rec.n_xruns) else 0
