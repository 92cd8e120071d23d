"""``measure devices``: the sound devices PortAudio sees, with host API, channels and rates."""

from __future__ import annotations

import argparse

NAME = "devices"
HELP = "list the input and output sound devices (host API, channels, default sample rate)"
DESCRIPTION = """\
List every sound device PortAudio sees: its index and name (either can be given to
`measure capture --device`), its host API, its input and output channel counts and its
default sample rate. The system's default input and output are marked. A sweep is played at
its own sample rate, so the device must be able to run at that rate."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--json", action="store_true", help="print the list as JSON")


def run(args: argparse.Namespace) -> int:
    from measure.capture import list_devices
    from measure.cli._common import print_json

    devices = list_devices(allow_empty=args.json)  # a script reads an empty list, not an error
    if args.json:
        print_json({"devices": [d.to_dict() for d in devices]})
        return 0
    width = max(len(d.name) for d in devices)
    api_w = max(len(d.hostapi) for d in devices)
    print(f"{'':2}{'#':>3}  {'name':<{width}}  {'host API':<{api_w}}  {'in':>3} {'out':>3}  rate")
    for d in devices:
        mark = ("<" if d.is_default_input else " ") + (">" if d.is_default_output else " ")
        print(f"{mark}{d.index:>3}  {d.name:<{width}}  {d.hostapi:<{api_w}}  "
              f"{d.n_inputs:>3} {d.n_outputs:>3}  {d.default_fs}")
    print("< default input, > default output")
    return 0
