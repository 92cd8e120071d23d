"""``measure batch``: a whole captures tree at once, into a results folder with level.json."""

from __future__ import annotations

import argparse
from pathlib import Path

NAME = "batch"
HELP = "process a whole captures tree: every take, each room's average, model and exports"
DESCRIPTION = """\
Process every take of every room of a captures tree (ROOM/POSITION-takeN.wav with sidecars, as
`measure capture` and `measure import` file them) into RESULTS_DIR: each take's response and
ISO 3382-1 figures; per room the ISO 3382-2 position average (mean, spread, count, grade), the
compact model and I3DL2 set, the distance/direction curves when the sidecars carry a series,
an impulse response for a convolution reverb (starting at the direct sound, no pre-delay), the
model rendered at 44.1 and 48 kHz, and a loudness-matched measured/modelled listening pair; and
RESULTS_DIR/level.json for the whole level.

Takes marked REDO, clipped, or unreadable are listed with the reason and left out; the rest
completes. A rerun redoes only what changed (content hashes of inputs and settings).

Exit status: 0 every take used, 1 some takes left out or failed (listed on stderr and in
level.json), 2 bad input."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("captures", metavar="CAPTURES_DIR", help="the captures tree")
    p.add_argument("--out", metavar="RESULTS_DIR", required=True,
                   help="the results folder (created; a rerun into it redoes only what changed)")
    p.add_argument("--jobs", type=int, default=1, metavar="N",
                   help="takes recovered in parallel (processes; default 1)")
    p.add_argument("--json", action="store_true", help="print level.json to stdout as well")


def run(args: argparse.Namespace) -> int:
    import os

    from measure.batch import run_batch
    from measure.cli._common import info, print_json, warn
    from measure.errors import ParameterError

    if args.jobs < 1 or args.jobs > max(os.cpu_count() or 1, 1) * 4:
        raise ParameterError(f"--jobs {args.jobs} must be from 1 to {(os.cpu_count() or 1) * 4} "
                             "(four per processor at most)")
    result = run_batch(args.captures, args.out, jobs=args.jobs)
    level = result.level
    for r in level["left_out"]:
        warn(f"{r['room']}/{r['position']} take {r['take']} left out: {r['reason']}")
    for room in level["rooms"]:
        for note in room["notes"] if room.get("failed") else []:
            warn(f"{room['name']}: {note}")
    work = level["work"]
    info(f"wrote {result.path}: {len(level['rooms'])} rooms, {work['recovered']} takes "
         f"recovered, {work['reused']} unchanged and reused, {work['failed']} failed, "
         f"{len(level['left_out'])} left out")
    if args.json:
        print_json(level)
    else:
        for room in level["rooms"]:
            avg = room["average"] or {}
            grade = avg.get("grade")
            n = avg.get("n_positions") or sum(1 for t in room["takes"] if t["used"])
            t = ((avg.get("bands") or {}).get("1k") or {}).get("t30_s")
            if not avg and n == 1:
                from measure import audio_io

                one = next(t for t in room["takes"] if t["used"])
                doc = audio_io.read_json(Path(args.out) / one["figures"], what="figures file")
                t = next((b["t30_s"] for b in doc["bands"] if b["label"] == "1k"), None)
            print(f"{room['name']:<16} {n} position{'s' if n != 1 else ''}"
                  f"{f' ({grade} grade)' if grade else ''}; T30 at 1 kHz "
                  f"{'—' if t is None else f'{t:.2f} s'}"
                  f"{'; attenuation curves' if room['attenuation'] else ''}")
    return 0 if result.complete else 1
