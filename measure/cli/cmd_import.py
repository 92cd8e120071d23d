"""``measure import FILE``: file a recording made by another device as a take."""

from __future__ import annotations

import argparse

from measure.cli._common import add_condition_arguments

NAME = "import"
HELP = "file a recording made by another device (handheld recorder, phone) as a take"
DESCRIPTION = """\
Copy FILE (WAV or FLAC from a handheld recorder, a phone, a game build's capture...) into
CAPTURES/ROOM/POSITION-takeN.wav with a JSON sidecar, exactly as `measure capture` files its
takes: a new take number every time, never an overwrite, the samples unchanged (same sample
format when WAV can hold it). A sidecar already beside FILE is kept inside the new one.

With --sweep, the sweep that was played is recorded in the sidecar (file and SHA-256) and the
take is analysed and judged at once, as after a capture. Without it, analyse later with
`measure ir`/`measure analyze --sweep`.

Exit status: 0 filed (and good, with --sweep), 1 filed but marked for redo, 2 error."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", metavar="FILE", help="the recording (WAV or FLAC)")
    p.add_argument("--room", required=True, metavar="NAME", help="room name (a folder)")
    p.add_argument("--position", required=True, metavar="LABEL", help="position label")
    p.add_argument("--captures", metavar="DIR", default="captures",
                   help="captures folder (default ./captures)")
    p.add_argument("--sweep", metavar="SWEEP.wav",
                   help="the sweep file that was played; analyse and judge the take now")
    p.add_argument("--channels", metavar="LIST", default=None,
                   help="with --sweep: channels of FILE to analyse, from 1 (default all)")
    p.add_argument("--loopback-channel", metavar="N", type=int, default=None,
                   help="with --sweep: channel of FILE that carries the played signal")
    p.add_argument("--recorder", metavar="TEXT",
                   help="what recorded it, e.g. 'handheld recorder, internal mics'")
    p.add_argument("--player", metavar="TEXT",
                   help="what played the sweep, e.g. 'phone into a powered monitor'")
    add_condition_arguments(p)
    p.add_argument("--json", action="store_true", help="print the summary as JSON")


def run(args: argparse.Namespace) -> int:
    import os
    from pathlib import Path

    from measure import session
    from measure.audio_io import file_sha256, read_audio, read_json, read_sweep, sidecar_path
    from measure.capture import dc_offset_warning, input_stats
    from measure.cli import cmd_capture as cc
    from measure.cli._common import channel_index, check_air, info, print_json, warn
    from measure.errors import AudioFileError, ParameterError

    room = session.check_label(args.room, "room")
    position = session.check_label(args.position, "position")
    air_warnings = check_air(args.temperature, args.humidity)
    src = Path(args.file)
    audio = read_audio(src)
    sweep = None
    if args.sweep is not None:
        sweep = read_sweep(args.sweep)
        if sweep.fs != audio.fs:
            raise ParameterError(
                f"{src} is at {audio.fs} Hz but the sweep {args.sweep} is at {sweep.fs} Hz; "
                "record at the sweep's rate (or make the sweep at the recorder's rate), never "
                "resample a take")
    elif args.channels is not None or args.loopback_channel is not None:
        raise ParameterError("--channels and --loopback-channel need --sweep; add it")
    n_ch = audio.n_channels
    rows = (list(range(n_ch)) if args.channels is None
            else [channel_index(c + 1, n_ch, option="--channels", source=str(src))
                  for c in cc.parse_channels(args.channels, "--channels")])
    loop = None
    if args.loopback_channel is not None:
        loop = channel_index(args.loopback_channel, n_ch, option="--loopback-channel",
                             source=str(src))
        if loop not in rows:
            rows.append(loop)
        if rows == [loop]:
            raise ParameterError(
                f"the only channel to analyse is the --loopback-channel {loop + 1}: a channel "
                "referenced to itself gives a unit impulse at latency 0, not the room; give the "
                "microphone's channel too, e.g. --channels "
                f"{1 if loop else 2},{loop + 1}")
    old_side = None
    sp = sidecar_path(src)
    if sp.exists() and sp.resolve() != src.resolve():
        try:
            old_side = read_json(sp)
        except AudioFileError as err:
            info(f"note: the sidecar beside {src} is unreadable and was not kept ({err})")
    subtype = audio.subtype if audio.subtype in ("PCM_16", "PCM_24", "PCM_32", "FLOAT",
                                                 "DOUBLE") else "FLOAT"
    n_lead = sweep.spec.n_lead if sweep is not None else 0
    stats = input_stats(audio.x, slice(n_lead // 6, n_lead))
    stat = os.stat(src)
    sidecar = {
        "kind": "import",
        "source_file": str(src), "source_sha256": file_sha256(src),
        "source_subtype": audio.subtype,
        "source_mtime_utc": _utc(stat.st_mtime),
        "recorder": args.recorder, "player": args.player,
        "sweep_file": None if sweep is None else str(Path(args.sweep)),
        "sweep_sha256": None if sweep is None else file_sha256(args.sweep),
        "sweep": None if sweep is None else sweep.spec.to_dict(),
        "channel_map": [{"file_channel": i + 1,
                         "role": "loopback reference" if i == loop else "microphone"}
                        for i in range(n_ch)],
        "loopback_channel": None if loop is None else loop + 1,
        "n_xruns": None,
        "input": [dict(s.to_dict(), file_channel=i + 1) for i, s in enumerate(stats)],
        "distance_m": args.distance, "angle_deg": args.angle,
        "temperature_c": args.temperature, "humidity_percent": args.humidity,
        "notes": args.notes, "labels": list(args.label),
        "imported_sidecar": old_side,
    }
    with cc.deferred_interrupts():
        take = session.save_take(args.captures, room, position, audio.x, audio.fs, sidecar,
                                 subtype=subtype)
    info(f"filed {src} as {take.wav} and {take.json.name}")
    for w in air_warnings:
        warn(w)
    if sweep is None:
        for i, s in enumerate(stats):
            if (w := dc_offset_warning(s.dc_dbfs, f"channel {i + 1}")) is not None:
                warn(w)
        if args.json:
            print_json({"take": take.to_dict()})
        return 0
    labels = [f"channel {r + 1} ({'loopback reference' if r == loop else 'microphone'})"
              for r in rows]
    y = audio.x[rows]
    summary = cc.analyse_take(y, audio.fs, sweep, stats=[stats[r] for r in rows], labels=labels,
                              input_channels=rows, loopback=loop, n_xruns=0, same_device=True)
    # A separate recorder has its own clock: say so rather than assume one device.
    if loop is None:
        summary["verdict"]["notes"].append(
            "recorded by another device: the latency includes the player's and recorder's "
            "start times and is not a physical delay; the clock drift was corrected")
    session.update_sidecar(take, analysis=summary["analysis"], verdict=summary["verdict"])
    for w in summary["verdict"]["warnings"]:
        warn(w)
    summary["take"] = take.to_dict()
    if args.json:
        print_json(summary)
    else:
        print("\n".join(cc.format_summary(summary, take, audio.fs)))
    return 0 if summary["verdict"]["verdict"] == "good" else 1


def _utc(t: float) -> str:
    import time

    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t))
