"""``measure capture``: play the sweep, record the room, keep the take, then judge it."""

from __future__ import annotations

import argparse
import contextlib
import signal
import sys
import time
from typing import Any

from measure.cli._common import add_condition_arguments

NAME = "capture"
HELP = "play a sweep and record the room: one take, saved before anything else, then judged"
DESCRIPTION = """\
Play SWEEP.wav through the output device and record the input in one full-duplex stream at
the sweep's sample rate (never resampled). The raw take, with the lead-in, every sweep and the
tail, is written to CAPTURES/ROOM/POSITION-takeN.wav the moment it is complete (a new number
every time, never an overwrite), with a JSON sidecar beside it. Only then is the impulse
response recovered and the take judged: good, or redo with the reason.

A level check runs first (skip it with --no-level-check): background noise, then short sweeps
rising slowly from 30 dB below the take's level, stopping at once if the input clips.

Channels are numbered from 1 as on the interface. With --loopback-channel N, input N carries
a cable from an output straight back to the interface: the latency is taken from it exactly,
and the sweep is also played on output N unless --output-channels says otherwise.

Exit status: 0 good take, 1 take saved but marked for redo, 2 error (nothing played or saved,
unless the message says otherwise), 130/143 interrupted (the message says what was kept).

SAFETY: wear hearing protection near loud loudspeakers; start at low volume and raise it step
by step; sweeps at high level can destroy tweeters; keep people and animals out of the room."""

#: Harmonic distortion above this, in percent of the linear response, earns a note (common
#: practice: a loudspeaker within its rated range stays below a few percent).
DISTORTION_NOTE_PERCENT = 3.0

SAFETY_TEXT = """\
Before anything plays:
  - wear hearing protection when you are near a loudspeaker playing loud;
  - start with the amplifier or monitor volume low and raise it step by step;
  - sweeps at high level can destroy tweeters: never start at full volume;
  - keep people and animals out of the room while it plays."""


class Terminated(BaseException):
    """Raised in the main thread when SIGTERM arrives, so that cleanup runs as for Ctrl-C."""


def add_device_arguments(p: argparse.ArgumentParser) -> None:
    """Device and channel options shared by ``capture`` and ``level``."""
    p.add_argument("--device", metavar="NAME|INDEX",
                   help="device for both input and output (name, part of it, or index)")
    p.add_argument("--input-device", metavar="NAME|INDEX", help="input device (overrides --device)")
    p.add_argument("--output-device", metavar="NAME|INDEX",
                   help="output device (overrides --device)")
    p.add_argument("--input-channels", metavar="LIST", default="1",
                   help="input channels to record, from 1, comma-separated (default 1)")
    p.add_argument("--output-channels", metavar="LIST", default=None,
                   help="output channels to play the sweep on, from 1 (default 1, plus the "
                        "loopback channel's number)")
    p.add_argument("--loopback-channel", metavar="N", type=int, default=None,
                   help="input channel that carries a loopback cable from an output: exact "
                        "latency, and the IR is referenced to it")
    p.add_argument("--yes", action="store_true",
                   help="do not ask before playing (for scripts; the safety notes still print)")


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--sweep", required=True, metavar="SWEEP.wav",
                   help="sweep file made by `measure sweep` (its .json must be beside it)")
    p.add_argument("--room", required=True, metavar="NAME", help="room name (a folder)")
    p.add_argument("--position", required=True, metavar="LABEL",
                   help="source-microphone position label, e.g. S1-R2")
    add_device_arguments(p)
    p.add_argument("--captures", metavar="DIR", default="captures",
                   help="captures folder (default ./captures)")
    add_condition_arguments(p)
    p.add_argument("--no-level-check", action="store_true",
                   help="skip the level check before the take")
    p.add_argument("--json", action="store_true", help="print the summary as JSON on stdout")


# ---------------------------------------------------------------------------------------------
# Shared helpers (also used by cmd_level and cmd_import)
# ---------------------------------------------------------------------------------------------
def parse_channels(text: str | None, what: str) -> list[int]:
    """'1,2' -> [0, 1] (1-based on the command line, 0-based inside)."""
    from measure.errors import ParameterError

    if text is None:
        return []
    out: list[int] = []
    for part in str(text).split(","):
        part = part.strip()
        if not part.isdigit() or int(part) < 1:
            raise ParameterError(
                f"{what}={text!r}: channels are whole numbers from 1, comma-separated, e.g. 1,2")
        if int(part) - 1 in out:
            raise ParameterError(f"{what}={text!r} names channel {part} twice; name it once")
        out.append(int(part) - 1)
    return out


def setup_devices(args: argparse.Namespace) -> dict[str, Any]:
    """Resolve devices and channel maps from the shared options (raises before anything plays)."""
    from measure.capture import list_devices, resolve_device
    from measure.errors import ParameterError

    in_ch = parse_channels(args.input_channels, "--input-channels")
    loop = None
    if args.loopback_channel is not None:
        if args.loopback_channel < 1:
            raise ParameterError(
                f"--loopback-channel {args.loopback_channel}: channels are numbered from 1")
        loop = args.loopback_channel - 1
        if loop not in in_ch:
            in_ch.append(loop)
        if len(in_ch) < 2:
            raise ParameterError(
                f"--loopback-channel {loop + 1} is the only input channel: a channel referenced "
                "to itself gives a unit impulse at latency 0, not the room; the "
                "--loopback-channel needs a microphone channel too, give it in "
                "--input-channels, e.g. --input-channels 1,2 --loopback-channel 2")
    if args.output_channels is not None:
        out_ch = parse_channels(args.output_channels, "--output-channels")
    else:
        out_ch = [0] + ([loop] if loop is not None and loop != 0 else [])
    # the channel options are checked first: a mistake there needs no sound device to report
    devices = list_devices()
    in_spec = args.input_device if args.input_device is not None else args.device
    out_spec = args.output_device if args.output_device is not None else args.device
    in_dev = resolve_device(in_spec, "input", devices)
    out_dev = resolve_device(out_spec, "output", devices)
    return {"input_device": in_dev, "output_device": out_dev, "input_channels": in_ch,
            "output_channels": out_ch, "loopback": loop}


def channel_labels(input_channels: list[int], loopback: int | None) -> list[str]:
    return [f"input {c + 1} ({'loopback reference' if c == loopback else 'microphone'})"
            for c in input_channels]


def confirm_safety(args: argparse.Namespace, level_dbfs: float) -> None:
    """Print the cautions; ask before playing unless --yes."""
    from measure.cli._common import info
    from measure.errors import ParameterError

    info(SAFETY_TEXT)
    info(f"  The sweep plays at {level_dbfs:g} dBFS peak"
         + (" (that is loud: lower it unless you have raised it step by step)."
            if level_dbfs > -6 else "."))
    if args.yes:
        return
    if not sys.stdin or not sys.stdin.isatty():
        raise ParameterError(
            "refusing to play without confirmation and there is no terminal to ask; read the "
            "safety notes above and pass --yes")
    answer = input("Turn the volume down, then type y to play: ").strip().lower()
    if answer not in ("y", "yes"):
        raise ParameterError("not confirmed; nothing was played")


class Progress:
    """Elapsed and remaining time on stderr: in place on a terminal, a line a second otherwise."""

    def __init__(self, what: str) -> None:
        self.what = what
        self.tty = sys.stderr.isatty()
        self.last = -1e9
        self.finished = False

    def __call__(self, elapsed_s: float, total_s: float) -> None:
        now = time.monotonic()
        done = elapsed_s >= total_s
        if self.finished or (not done and now - self.last < (0.1 if self.tty else 1.0)):
            return
        self.finished = done
        self.last = now
        text = f"{self.what}: {elapsed_s:5.1f} s of {total_s:.1f} s ({max(total_s - elapsed_s, 0):.1f} s left)"
        if self.tty:
            sys.stderr.write("\r" + text + ("\n" if done else ""))
        else:
            sys.stderr.write(text + "\n")
        sys.stderr.flush()


@contextlib.contextmanager
def interrupts_as_exceptions():
    """SIGTERM raises :class:`Terminated` (SIGINT already raises KeyboardInterrupt)."""
    def on_term(signum: int, frame: Any) -> None:
        raise Terminated()
    try:
        old = signal.signal(signal.SIGTERM, on_term)
    except (ValueError, OSError, AttributeError):  # not the main thread / no SIGTERM
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


@contextlib.contextmanager
def deferred_interrupts():
    """Hold SIGINT and SIGTERM while the take and its sidecar are written; deliver them after."""
    got: list[int] = []

    def hold(signum: int, frame: Any) -> None:
        got.append(signum)
    old = {}
    try:
        for s in (signal.SIGINT, signal.SIGTERM):
            old[s] = signal.signal(s, hold)
    except (ValueError, OSError, AttributeError):
        pass
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        if got:
            if got[0] == signal.SIGTERM:
                raise Terminated()
            raise KeyboardInterrupt()


def run_level_check(args: argparse.Namespace, sweep: Any, setup: dict[str, Any]) -> Any:
    """Play the level-check program and return its LevelReport."""
    from measure.capture import analyze_level, level_program, play_and_record

    program, _, _ = level_program(sweep.spec)
    rec = play_and_record(program, sweep.fs, input_device=setup["input_device"],
                          output_device=setup["output_device"],
                          input_channels=setup["input_channels"],
                          output_channels=setup["output_channels"], extra_s=0.3,
                          progress=Progress("level check"), stop_on_clip=True)
    return analyze_level(rec.y, rec.fs, sweep.spec, channels=rec.input_channels,
                         stopped_at_sample=rec.stopped_at_sample), rec


def format_level(report: Any, labels: list[str]) -> list[str]:
    def f(v: float | None, unit: str = "") -> str:
        return "digital silence" if v is None else f"{v:.1f}{unit}"

    lines = [f"level check (loudest step {report.step_reached_db:+.0f} dB re the sweep level):"]
    for i, lab in enumerate(labels):
        pn = report.pnr_db[i]
        lines.append(
            f"  {lab}: peak {f(report.peak_dbfs[i], ' dBFS')}, noise "
            f"{f(report.noise_rms_dbfs[i], ' dBFS rms')}, clipped {report.n_clipped[i]}, "
            f"predicted peak-to-noise {'> 150 dB (no noise)' if pn is None else f'{pn:.0f} dB'}")
        octs = report.octave_pnr_db[i]
        if octs and report.found[i]:
            lines.append("    per octave (Hz: dB) " + "  ".join(
                f"{fc:g}: {'>150' if v is None else f'{v:.0f}'}" for fc, v in octs.items()))
    lines += [f"  warning: {w}" for w in report.warnings]
    return lines


def check_level_report(report: Any, setup: dict[str, Any], args: argparse.Namespace) -> None:
    """Stop before the take when the level check found clipping or no signal; else maybe ask."""
    from measure.errors import DeviceError, ParameterError

    if any(report.n_clipped):
        raise DeviceError(
            "the level check clipped the input (" + "; ".join(report.warnings) + "); nothing was "
            "recorded")
    if not all(report.found):
        raise DeviceError("the level check found no test signal: " + "; ".join(
            w for w in report.warnings if "not found" in w) + "; nothing was recorded")
    if report.warnings and not args.yes and sys.stdin and sys.stdin.isatty():
        answer = input("Record the take anyway? [y/N] ").strip().lower()
        if answer not in ("y", "yes"):
            raise ParameterError("stopped after the level check; adjust the levels and try again")


def kept_message(captures: str, room: str, position: str) -> str:
    from measure.session import take_numbers

    try:
        nums = take_numbers(captures, room, position)
    except Exception:  # noqa: BLE001 - a message, not a result
        nums = []
    if not nums:
        return f"no takes exist for {room}/{position}"
    return f"takes kept for {room}/{position}: " + ", ".join(f"take{n}" for n in nums)


# ---------------------------------------------------------------------------------------------
# The command
# ---------------------------------------------------------------------------------------------
def run(args: argparse.Namespace) -> int:
    from measure.cli._common import info

    stage = {"name": "setup", "take": None}
    try:
        with interrupts_as_exceptions():
            return _run(args, stage)
    except (KeyboardInterrupt, Terminated) as sig:
        how = "terminated" if isinstance(sig, Terminated) else "interrupted"
        if stage["take"] is not None:
            t = stage["take"]
            info(f"{how} during {stage['name']}; the take is complete and kept: {t.wav} and "
                 f"{t.json.name} (analyse it later with `measure analyze {t.wav} --sweep {args.sweep}`)")
        else:
            info(f"{how} during {stage['name']}; this take was not saved and no partial file was "
                 f"left; {kept_message(args.captures, args.room, args.position)}")
        return 143 if isinstance(sig, Terminated) else 130


def _run(args: argparse.Namespace, stage: dict[str, Any]) -> int:
    from pathlib import Path

    from measure import session
    from measure.audio_io import file_sha256, read_sweep
    from measure.capture import input_stats, play_and_record
    from measure.cli._common import check_air, info, print_json, warn

    room = session.check_label(args.room, "room")
    position = session.check_label(args.position, "position")
    for w in check_air(args.temperature, args.humidity):
        warn(w)
    sweep = read_sweep(args.sweep)
    setup = setup_devices(args)
    labels = channel_labels(setup["input_channels"], setup["loopback"])
    from measure.capture import check_rate
    check_rate(setup["input_device"], setup["output_device"], sweep.fs,
               n_inputs=max(setup["input_channels"]) + 1,
               n_outputs=max(setup["output_channels"]) + 1)
    confirm_safety(args, sweep.spec.level_dbfs)

    level = None
    if not args.no_level_check:
        stage["name"] = "the level check"
        level, _ = run_level_check(args, sweep, setup)
        for line in format_level(level, labels):
            info(line)
        check_level_report(level, setup, args)

    stage["name"] = "recording"
    n_next = session.next_take_number(args.captures, room, position)
    info(f"recording {room}/{position} take {n_next}: {sweep.spec.n_total / sweep.fs:.1f} s of "
         f"sweep program at {sweep.fs} Hz")
    rec = play_and_record(sweep.program, sweep.fs, input_device=setup["input_device"],
                          output_device=setup["output_device"],
                          input_channels=setup["input_channels"],
                          output_channels=setup["output_channels"],
                          progress=Progress("recording"))
    n_lead = sweep.spec.n_lead
    stats = input_stats(rec.y, slice(n_lead // 6, n_lead))
    sidecar: dict[str, Any] = {
        "kind": "capture",
        "start_utc": rec.start_utc,
        "sweep_file": str(Path(args.sweep)),
        "sweep_sha256": file_sha256(args.sweep),
        "sweep": sweep.spec.to_dict(),
        "devices": {"input": rec.input_device.to_dict(), "output": rec.output_device.to_dict(),
                    "same_device": rec.input_device.index == rec.output_device.index},
        "channel_map": [{"file_channel": i + 1, "device_input": c + 1,
                         "role": "loopback reference" if c == setup["loopback"] else "microphone"}
                        for i, c in enumerate(rec.input_channels)],
        "output_channels": [c + 1 for c in rec.output_channels],
        "loopback_channel": None if setup["loopback"] is None else setup["loopback"] + 1,
        "stream_latency_s": list(rec.stream_latency_s),
        "n_input_overflows": rec.n_input_overflows,
        "n_output_underflows": rec.n_output_underflows,
        "n_xruns": rec.n_xruns,
        "input": [dict(s.to_dict(), file_channel=i + 1) for i, s in enumerate(stats)],
        "distance_m": args.distance, "angle_deg": args.angle,
        "temperature_c": args.temperature, "humidity_percent": args.humidity,
        "notes": args.notes, "labels": list(args.label),
        "level_check": None if level is None else level.to_dict(),
    }
    stage["name"] = "saving the take"
    with deferred_interrupts():
        take = session.save_take(args.captures, room, position, rec.y, rec.fs, sidecar)
        stage["take"] = take
    info(f"saved {take.wav} and {take.json.name}")

    stage["name"] = "the analysis"
    summary = analyse_take(rec.y, rec.fs, sweep, stats=stats, labels=labels,
                           input_channels=rec.input_channels, loopback=setup["loopback"],
                           n_xruns=rec.n_xruns,
                           same_device=rec.input_device.index == rec.output_device.index)
    session.update_sidecar(take, analysis=summary["analysis"], verdict=summary["verdict"])
    for w in summary["verdict"]["warnings"]:
        warn(w)
    summary["take"] = take.to_dict()
    summary["recording"] = rec.to_dict()
    if args.json:
        print_json(summary)
    else:
        print("\n".join(format_summary(summary, take, rec.fs, rec)))
    return 0 if summary["verdict"]["verdict"] == "good" else 1


def analyse_take(y: Any, fs: int, sweep: Any, *, stats: Any, labels: list[str],
                 input_channels: Any, loopback: int | None, n_xruns: int,
                 same_device: bool, ir: Any = None, figures: Any = None) -> dict[str, Any]:
    """Recover the IR, measure figures and judge the take; returns a JSON-ready summary.

    ``ir`` and ``figures`` (as :func:`room_figures` returns them) may be given when the caller
    has them already (the demo), so that the take is judged exactly as ``capture`` would.
    """
    import math

    from measure.capture import FOUND_PNR_DB, figure_reasons, judge_take
    from measure.deconvolve import recover_ir
    from measure.errors import MeasureError

    ref_row = None if loopback is None else list(input_channels).index(loopback)
    extra: list[str] = []
    extra_notes: list[str] = []
    # Digital silence holds no sweep: say so instead of deconvolving nothing.
    if ref_row is not None and stats[ref_row].peak_dbfs is None:
        extra.append(
            f"{labels[ref_row]} is silent: check the loopback cable and that the sweep plays on "
            f"output {loopback + 1} (--output-channels)")
        ref_row = None
    mic_rows = [i for i, c in enumerate(input_channels)
                if c != loopback and stats[i].peak_dbfs is not None]
    if ir is None and mic_rows:
        try:
            ir = recover_ir(y, sweep, channels=mic_rows, reference_channel=ref_row)
        except MeasureError as err:
            extra.append(f"no impulse response could be recovered: {err}")
    found = [True] * len(labels)
    pnr: list[float | None] = [None] * len(labels)
    analysis: dict[str, Any] = {"ir": None, "channels": [], "figures": None}
    if ir is not None:
        analysis["ir"] = ir.to_dict()
        for k, row in enumerate(ir.channels):
            p = ir.peak_to_noise_db[k]
            pnr[row] = None if p is None or not math.isfinite(p) else float(p)
            if pnr[row] is not None and pnr[row] < FOUND_PNR_DB:
                found[row] = False
            analysis["channels"].append({
                "label": labels[row], "file_channel": row + 1,
                "latency_s": ir.latency_s[k], "latency_samples": ir.latency_s[k] * fs,
                "peak_to_noise_db": pnr[row],
                "distortion_percent": {f"H{hd.order}": hd.percent for hd in ir.harmonics[k]},
                "distortion": [hd.describe() for hd in ir.harmonics[k]]})
            # a harmonic below the noise in its own window is no reading: no level advice
            loud = [f"H{hd.order} {hd.percent:.1f} %" for hd in ir.harmonics[k]
                    if hd.above_noise and hd.percent is not None
                    and hd.percent > DISTORTION_NOTE_PERCENT]
            if loud:
                extra_notes.append(
                    f"{labels[row]}: harmonic distortion {', '.join(loud)}: the loudspeaker or "
                    "amplifier may be driven too hard; lower the level and compare")
        analysis["drift_ppm"] = ir.drift_ppm
        analysis["n_averaged"] = ir.n_averaged
        analysis["referenced_to_loopback"] = ir.reference_channel is not None
        analysis["figures"] = room_figures(ir, sweep) if figures is None else figures
        for k, (row, fig) in enumerate(zip(ir.channels, analysis["figures"], strict=True)):
            if "error" not in fig:
                extra += figure_reasons(fig, labels[row], cut=not ir.noise_reached[k],
                                        gap_needed_s=ir.gap_needed_s)
    for i, st in enumerate(stats):
        if st.peak_dbfs is None:
            found[i] = False
    verdict = judge_take(stats, n_xruns=n_xruns, channel_labels=labels, pnr_db=pnr, found=found,
                         same_device=same_device, has_loopback=loopback is not None,
                         drift_ppm=None if ir is None else ir.drift_ppm, extra=extra)
    notes = list(verdict.notes) + extra_notes + (
        [] if ir is None else [f"IR: {w}" for w in ir.warnings])
    v = verdict.to_dict()  # its warnings (a DC offset) are printed by the command
    v["notes"] = notes
    return {"analysis": analysis, "verdict": v,
            "input": [dict(s.to_dict(), label=lab) for s, lab in zip(stats, labels, strict=True)]}


def room_figures(ir: Any, sweep: Any) -> list[dict[str, Any]]:
    """ISO 3382-1 figures of each recovered IR (measure.parameters.analyze_ir), octave bands
    inside the sweep's range; a channel whose figures cannot be computed gets its reason."""
    from measure.capture import octaves_inside
    from measure.errors import MeasureError
    from measure.parameters import analyze_ir

    inside = octaves_inside(sweep.spec.f1_hz, sweep.spec.f2_hz)
    out: list[dict[str, Any]] = []
    for k, row in enumerate(ir.channels):
        entry: dict[str, Any] = {"file_channel": row + 1}
        if not inside:
            entry["error"] = "the sweep covers no whole octave band"
        else:
            try:
                fig = analyze_ir(ir.h[k], ir.fs, bands="octave", f_lo_hz=max(63.0, inside[0]),
                                 f_hi_hz=min(8000.0, inside[-1]), context=ir.context(k))
                entry.update(fig.to_dict())
            except MeasureError as err:
                entry["error"] = str(err)
        out.append(entry)
    return out


def format_summary(summary: dict[str, Any], take: Any, fs: int, rec: Any = None) -> list[str]:
    """The one-screen summary of a take (``rec`` is None for an imported file)."""
    lines = [f"take      {take.wav}  (+ {take.json.name})"]
    if rec is not None:
        lines.append(
            f"devices   in: {rec.input_device.name} ({rec.input_device.hostapi}) "
            f"ch {','.join(str(c + 1) for c in rec.input_channels)}; out: "
            f"{rec.output_device.name} ch {','.join(str(c + 1) for c in rec.output_channels)}; "
            f"{rec.fs} Hz; xruns {rec.n_xruns}")
    for s in summary["input"]:
        pk = "silent" if s["peak_dbfs"] is None else f"{s['peak_dbfs']:.1f} dBFS"
        nz = ("not measured (no lead-in)" if not s.get("n_noise_samples")
              else "digital silence" if s["noise_rms_dbfs"] is None
              else f"{s['noise_rms_dbfs']:.1f} dBFS rms")
        lines.append(f"{s['label']:<32} peak {pk}, noise {nz}, clipped {s['n_clipped']}")
    an = summary["analysis"]
    for c in an["channels"]:
        lat, pnr = c["latency_s"], c["peak_to_noise_db"]
        lines.append(
            f"IR {c['label']}: latency {lat * 1e3:.3f} ms ({c['latency_samples']:.1f} samples"
            f"{' after the loopback' if an['referenced_to_loopback'] else ''}), peak-to-noise "
            f"{'> 150 dB (no noise)' if pnr is None else f'{pnr:.1f} dB'}")
        if c.get("distortion"):
            lines.append(f"   distortion {', '.join(c['distortion'])}")
    if an["ir"] is not None:
        lines.append(f"clock drift {an['drift_ppm']:+.2f} ppm, {an['n_averaged']} sweep(s) "
                     "averaged")
    for fig in summary["analysis"].get("figures") or []:
        lines += _figure_lines(fig)
    v = summary["verdict"]
    if v["verdict"] == "good":
        lines.append("verdict   GOOD")
    else:
        lines.append("verdict   REDO")
        lines += [f"  - {r}" for r in v["reasons"]]
    lines += [f"  note: {n}" for n in v["notes"]]
    return lines


def _figure_lines(fig: dict[str, Any]) -> list[str]:
    """A compact table of one channel's figures: T20, T30, EDT, C50, C80 per octave."""
    if "error" in fig:
        return [f"figures of file channel {fig['file_channel']}: not computed ({fig['error']})"]

    def cell(v: Any, scale: float = 1.0, nd: int = 2) -> str:
        return "-" if v is None else f"{v * scale:.{nd}f}"

    bands = fig.get("bands", [])
    lines = [f"figures of file channel {fig['file_channel']} (octaves; '-' = not measurable, "
             "see the sidecar's flags):",
             "  band   " + " ".join(f"{b['label']:>6}" for b in bands)]
    for key, name, nd in (("t20_s", "T20 s", 2), ("t30_s", "T30 s", 2), ("edt_s", "EDT s", 2),
                          ("c50_db", "C50 dB", 1), ("c80_db", "C80 dB", 1)):
        lines.append(f"  {name:<7}" + " ".join(f"{cell(b.get(key), nd=nd):>6}" for b in bands))
    sn = fig.get("single_numbers") or {}
    if sn.get("t_mid_s") is not None:
        lines.append(f"  T_mid {sn['t_mid_s']:.2f} s ({sn.get('t_mid_from')}, 500 Hz-1 kHz)")
    if fig.get("sti") is not None:
        lines.append(f"  STI {fig['sti']:.2f}")
    return lines
