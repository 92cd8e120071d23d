"""``measure sweep OUT.wav``: write an exponential sine sweep and its sidecar."""

from __future__ import annotations

import argparse
import os
import shutil
from pathlib import Path

NAME = "sweep"
HELP = "write an exponential sine sweep file (WAV + JSON sidecar) to play in the room"
DESCRIPTION = """\
Write OUT.wav, exactly what will be played (lead-in silence, the sweeps, the silence after
each), and OUT.json beside it with every number needed to rebuild the signal and its inverse.

The default level is low (-20 dBFS peak). Before playing anything loud: wear hearing
protection near loudspeakers, start at low volume and raise it step by step, remember that
sweeps at high level can destroy tweeters, keep people and animals out of the room, and follow
local rules on noise.

Takes name their sweep by file name and SHA-256, so an existing sweep is never replaced
silently: writing the same sweep again leaves it as it is; another one needs --force, and the
old pair is then kept beside the new one as OUT.replaced-XXXXXXXX.wav/.json (its hash's first
8 hex digits), where the takes that used it still find it."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    from measure.cli._common import finite_float, positive_float

    p.add_argument("out", metavar="OUT.wav", help="sweep file to write (its .json goes beside it)")
    p.add_argument("--rate", type=int, default=48000, metavar="HZ",
                   help="sample rate in Hz (default 48000)")
    p.add_argument("--f1", type=positive_float, default=20.0, metavar="HZ",
                   help="start frequency in Hz (default 20)")
    p.add_argument("--f2", type=positive_float, default=None, metavar="HZ",
                   help="stop frequency in Hz (default: Nyquist, rate/2)")
    p.add_argument("--duration", type=finite_float, default=5.0, metavar="S",
                   help="seconds of one sweep (default 5)")
    p.add_argument("--repeats", type=int, default=1, metavar="N",
                   help="number of sweeps, averaged coherently when the IR is recovered (default 1)")
    p.add_argument("--gap", type=finite_float, default=2.0, metavar="S",
                   help="seconds of silence after each sweep, for the room's tail; at least the "
                        "reverberation time (default 2)")
    p.add_argument("--lead-in", type=finite_float, default=0.5, metavar="S",
                   help="seconds of silence before the first sweep (default 0.5)")
    p.add_argument("--level", type=finite_float, default=None, metavar="DBFS",
                   help="peak level in dBFS (default -20, deliberately low)")
    p.add_argument("--fade-in", type=finite_float, default=None, metavar="S",
                   help="half-Hann fade-in in seconds (default: a tenth of the first octave)")
    p.add_argument("--fade-out", type=finite_float, default=0.002, metavar="S",
                   help="half-Hann fade-out in seconds (default 0.002)")
    p.add_argument("--force", action="store_true",
                   help="replace an existing OUT.wav that holds another sweep (the old pair is "
                        "kept beside it as OUT.replaced-XXXXXXXX.wav)")


def run(args: argparse.Namespace) -> int:
    from measure import audio_io
    from measure.cli._common import info
    from measure.errors import ParameterError
    from measure.sweep import DEFAULT_LEVEL_DBFS, SweepSpec, make_sweep

    if not str(args.out).lower().endswith(".wav"):
        raise ParameterError(f"OUT={args.out!r} must end in .wav; name the sweep file e.g. sweep.wav")
    if args.rate is None or args.rate <= 0:
        raise ParameterError(f"--rate {args.rate} must be a positive sample rate in Hz, e.g. 48000")
    f2 = args.f2 if args.f2 is not None else args.rate / 2
    fade_in = args.fade_in
    if fade_in is None:
        fade_in = default_fade_in_s(args.f1, f2, args.duration)
    spec = SweepSpec(
        fs=args.rate, f1_hz=args.f1, f2_hz=f2, duration_s=args.duration, repeats=args.repeats,
        gap_s=args.gap, lead_in_s=args.lead_in,
        level_dbfs=DEFAULT_LEVEL_DBFS if args.level is None else args.level,
        fade_in_s=fade_in, fade_out_s=args.fade_out)
    sweep = make_sweep(spec)
    if _holds_this_sweep(args.out, sweep):
        info(f"{args.out} already holds this very sweep; left as it is")
        return 0
    kept = _keep_the_old_one(args.out, force=args.force)
    wav, side = audio_io.write_pair(args.out, sweep.program, spec.fs, sweep.sidecar(),
                                    subtype="FLOAT")
    if kept is not None:
        info(f"kept the sweep it replaces as {kept}; takes that used it still find it there")
    total_s = spec.n_total / spec.fs
    info(f"wrote {wav} ({total_s:.2f} s: {spec.repeats} x {spec.duration_s:g} s sweep "
         f"{spec.f1_hz:g}-{spec.f2_hz:g} Hz at {spec.level_dbfs:g} dBFS peak) and {side}")
    if spec.gap_s < 1.0:
        info("note: a gap under 1 s cuts the tail of most rooms; use --gap of at least the "
             "reverberation time")
    return 0


def _holds_this_sweep(out: str, sweep) -> bool:
    """True if ``out`` and its sidecar are already exactly ``sweep``."""
    from measure import audio_io
    from measure.errors import MeasureError

    if not Path(out).is_file():
        return False
    try:
        old = audio_io.read_sweep(out)
    except MeasureError:
        return False
    return old.spec == sweep.spec


def _keep_the_old_one(out: str, *, force: bool) -> Path | None:
    """Keep an existing ``out`` pair as ``STEM.replaced-XXXXXXXX`` (``--force``), or refuse;
    None when there is nothing to keep.

    The old pair is hard-linked (copied where links are not possible) to its kept names, sidecar
    first, before the new pair replaces it: at every moment one whole old pair can be found.
    """
    from measure import audio_io
    from measure.errors import AudioFileError, MeasureError, ParameterError

    wav = Path(out)
    side = audio_io.sidecar_path(wav)
    if not wav.exists() and not side.exists():
        return None
    if wav.is_dir() or side.is_dir():
        raise ParameterError(f"{wav} or {side} is a folder; give the sweep another name")
    audio_io.refuse_replacing_take(wav)
    if not force:
        try:
            audio_io.read_sweep(wav)
            what = "holds another sweep, which earlier takes may name by its SHA-256"
        except MeasureError:
            what = "is not a sweep this tool wrote (or not a whole one)"
        raise ParameterError(f"{wav} already exists and {what}; give another name, or --force "
                             "to replace it (the old one is kept beside it)")
    kept = audio_io.replaced_path(wav, audio_io.file_sha256(wav if wav.exists() else side))
    try:
        for old, new in ((side, audio_io.sidecar_path(kept)), (wav, kept)):
            if old.exists():
                _keep_as(old, new)
    except OSError as err:
        if isinstance(err, AudioFileError):
            raise
        raise AudioFileError(f"cannot keep the old sweep as {kept} ({err.strerror or err}); "
                             "check the folder, or give the new sweep another name") from err
    return kept


def _keep_as(old: Path, new: Path) -> None:
    """Make ``new`` hold exactly ``old``'s bytes: a hard link, or where the file system has
    none a copy renamed into place whole. A ``new`` already there is trusted only when its
    bytes are ``old``'s (a copy cut short by a killed run is made again)."""
    from measure import audio_io
    from measure._files import file_set

    try:
        os.link(old, new)
        return
    except FileExistsError:
        if audio_io.file_sha256(new) == audio_io.file_sha256(old):
            return  # kept already (an earlier --force, or a run alongside this one)
    except OSError:
        pass  # no hard links on this file system
    with file_set() as files, open(old, "rb") as src:
        shutil.copyfileobj(src, files.open(new))


def default_fade_in_s(f1_hz: float, f2_hz: float, duration_s: float) -> float:
    """A tenth of the time the sweep spends in its first octave (common practice)."""
    import math

    if not (f1_hz > 0 and f2_hz > f1_hz and duration_s > 0):
        return 0.0  # SweepSpec reports the real problem
    return 0.1 * duration_s * math.log(2.0) / math.log(f2_hz / f1_hz)
