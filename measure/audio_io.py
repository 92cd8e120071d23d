"""Audio files and JSON sidecars: the only importer of soundfile.

Signals are float64 arrays shaped (channels, samples) inside the package; soundfile's
(frames, channels) layout is transposed here, once. Every write is atomic: the data goes to a
temporary file in the target folder, is flushed and fsynced, then renamed over the target, so a
crash or Ctrl-C never leaves a half-written file behind.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import numpy as np

from measure._files import FileSet, file_set
from measure._validate import check_fs
from measure.errors import AudioFileError

__all__ = [
    "Audio",
    "read_audio",
    "write_audio",
    "read_json",
    "write_json",
    "write_text",
    "write_pair",
    "write_pairs",
    "stage_audio",
    "check_pair",
    "read_sidecar",
    "read_text",
    "dumps",
    "sidecar_path",
    "replaced_path",
    "refuse_replacing_take",
    "names_its_wav",
    "file_sha256",
    "atomic_writer",
    "read_sweep",
    "write_ir",
]

Subtype = Literal["FLOAT", "PCM_16", "PCM_24", "PCM_32", "DOUBLE"]


@dataclass(frozen=True, slots=True, eq=False)
class Audio:
    """Samples read from a file.

    Attributes
    ----------
    x : ndarray, shape (channels, samples), float64
        The samples, full scale = 1.0.
    fs : int
        Sample rate in Hz.
    path : str
        Where the samples came from.
    subtype : str
        The file's sample format (e.g. ``"PCM_24"``, ``"FLOAT"``).
    """

    x: np.ndarray
    fs: int
    path: str
    subtype: str

    def __post_init__(self) -> None:
        self.x.setflags(write=False)

    @property
    def n_channels(self) -> int:
        return int(self.x.shape[0])

    @property
    def duration_s(self) -> float:
        return self.x.shape[1] / self.fs


def sidecar_path(path: str | os.PathLike[str]) -> Path:
    """The JSON sidecar that belongs to an audio file: same folder, same stem, ``.json``."""
    return Path(path).with_suffix(".json")


def replaced_path(path: str | os.PathLike[str], sha256: str) -> Path:
    """Where a file replaced with ``--force`` is kept: ``STEM.replaced-XXXXXXXX.SUFFIX`` beside
    it, with the first 8 hex digits of its old content's SHA-256."""
    p = Path(path)
    return p.with_name(f"{p.stem}.replaced-{sha256[:8]}{p.suffix}")


def read_audio(path: str | os.PathLike[str]) -> Audio:
    """Read a WAV/FLAC file into a float64 (channels, samples) array.

    Raises
    ------
    AudioFileError
        If the file is missing, unreadable, empty, or holds NaN or Inf samples.
    """
    import soundfile as sf

    p = Path(path)
    if not p.exists():
        raise AudioFileError(f"{p} does not exist; check the path")
    if p.is_dir():
        raise AudioFileError(f"{p} is a folder, not an audio file; give a WAV or FLAC file")
    # libsndfile's decoders (mpg123 for a garbage .mp3) print notes straight to file
    # descriptor 2, around the one error line (issue 12): point fd 2 at /dev/null while the
    # file is opened and read, and restore it whatever happens
    import sys

    with contextlib.suppress(AttributeError, ValueError, OSError):
        sys.stderr.flush()
    try:
        saved_fd2: int | None = os.dup(2)
    except OSError:  # no file descriptor 2: nothing to quiet
        saved_fd2 = None
    try:
        if saved_fd2 is not None:
            null_fd = os.open(os.devnull, os.O_WRONLY)
            os.dup2(null_fd, 2)
            os.close(null_fd)
        with sf.SoundFile(str(p)) as f:  # opened once: format, rate and samples
            subtype, fs = f.subtype, f.samplerate
            too_big = _too_big(f.frames, f.channels, fs)
            data = None if too_big else f.read(dtype="float64", always_2d=True)
    except (RuntimeError, sf.LibsndfileError, OSError, ValueError) as err:
        raise AudioFileError(
            f"cannot read {p} as audio ({err}); give a WAV or FLAC file") from err
    finally:
        if saved_fd2 is not None:
            os.dup2(saved_fd2, 2)
            os.close(saved_fd2)
    if too_big:
        raise AudioFileError(f"{p} is too long for this machine: {too_big}")
    assert data is not None
    if data.shape[0] == 0:
        raise AudioFileError(f"{p} holds no samples; re-record or re-export it")
    short = _wav_cut_short(p)
    if short is not None:
        promised, present = short
        raise AudioFileError(
            f"{p} is cut short: its header promises {promised:,} bytes of samples but the file "
            f"holds {present:,} ({100 * present / promised:.0f} %), as a copy made while the "
            "recorder was still writing or a failed copy leaves it; copy it again from the "
            "recorder (or re-save it in an audio editor to use what is there)")
    x = np.ascontiguousarray(data.T)
    if not np.all(np.isfinite(x)):
        n_bad = int(np.count_nonzero(~np.isfinite(x)))
        raise AudioFileError(
            f"{p} holds {n_bad} NaN or Inf samples; re-export it from the recorder as PCM or "
            "clean float")
    return Audio(x=x, fs=int(fs), path=str(p), subtype=str(subtype))


#: The working memory of a recovery, in multiples of the recording as float64 (bench_ir measures
#: about 6; 10 leaves room for the analysis that follows).
WORKING_MEMORY_FACTOR = 10


def available_memory_bytes(*, meminfo: str = "/proc/meminfo",
                           cgroup_root: str = "/sys/fs/cgroup",
                           proc_cgroup: str = "/proc/self/cgroup") -> int | None:
    """Memory the system can give this process now: Linux ``MemAvailable``, or less where the
    process's control group or one above it (a container, a batch job's slice) has a memory
    limit; else the physical memory; None if unknown."""
    free = None
    with contextlib.suppress(OSError, ValueError):
        with open(meminfo, encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    free = int(line.split()[1]) * 1024
                    break
    if free is None:
        with contextlib.suppress(AttributeError, ValueError, OSError):
            free = int(os.sysconf("SC_PHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    in_group = _cgroup_free_bytes(Path(cgroup_root), Path(proc_cgroup))
    if in_group is not None:
        free = in_group if free is None else min(free, in_group)
    return free


#: (limit, usage, the memory.stat line of reclaimable page cache) per cgroup version
_CGROUP_FILES = {2: ("memory.max", "memory.current", "inactive_file"),
                 1: ("memory.limit_in_bytes", "memory.usage_in_bytes", "total_inactive_file")}


def _cgroup_free_bytes(root: Path, proc_cgroup: Path) -> int | None:
    """The least room left under any memory limit from this process's control group up to the
    root (limit − usage + inactive page cache, which the kernel reclaims before it fails an
    allocation; Linux kernel documentation, admin-guide/cgroup-v2 "memory.max", "memory.stat",
    and cgroup-v1/memory "limit_in_bytes"); None without a limit or without cgroups."""
    try:
        lines = proc_cgroup.read_text(encoding="utf-8", errors="surrogateescape").splitlines()
    except OSError:
        lines = []
    groups = []  # (cgroup version, its hierarchy's root, the group's path in it)
    for line in lines:
        parts = line.split(":", 2)
        if len(parts) != 3:
            continue
        if parts[0] == "0" and parts[1] == "":
            groups.append((2, root, parts[2]))
        elif "memory" in parts[1].split(","):
            groups.append((1, root / "memory", parts[2]))
    if not groups:  # no /proc/self/cgroup: the namespace's own root, either version
        groups = [(2, root, "/"), (1, root / "memory", "/")]
    best = None
    for version, base, rel in groups:
        limit_name, usage_name, cache_key = _CGROUP_FILES[version]
        folder = Path(os.path.normpath(base / rel.lstrip("/")))
        try:
            inside = (folder == base or base in folder.parents) and folder.is_dir()
        except (OSError, ValueError):
            inside = False
        if not inside:  # a path outside this namespace's view ("/../.."): its root
            folder = base
        while True:
            room = _room_in_group(folder, limit_name, usage_name, cache_key)
            if room is not None:
                best = room if best is None else min(best, room)
            if folder == base or base not in folder.parents:
                break
            folder = folder.parent
    return best


def _room_in_group(folder: Path, limit_name: str, usage_name: str, cache_key: str) -> int | None:
    try:
        limit = (folder / limit_name).read_text(encoding="ascii").strip()
        usage = int((folder / usage_name).read_text(encoding="ascii").strip())
    except (OSError, ValueError):  # UnicodeDecodeError is a ValueError
        return None
    if not limit.isdigit() or int(limit) >= 1 << 60:  # "max", or v1's "no limit"
        return None
    cache = 0
    with contextlib.suppress(OSError, ValueError):
        for line in (folder / "memory.stat").read_text(encoding="ascii").splitlines():
            key, _, value = line.partition(" ")
            if key == cache_key:
                cache = int(value)
                break
    return max(int(limit) - usage + cache, 0)


def _too_big(frames: int, channels: int, fs: int) -> str | None:
    """Why a file of this size cannot be worked on in this machine's memory, or None."""
    avail = available_memory_bytes()
    if avail is None or frames <= 0 or channels <= 0 or fs <= 0:
        return None
    need = frames * channels * 8 * WORKING_MEMORY_FACTOR
    if need <= avail:
        return None
    max_s = avail / (channels * 8 * WORKING_MEMORY_FACTOR * fs)
    bound = f"{max_s:,.0f}" if max_s >= 10 else f"{max_s:.2g}"
    return (f"{frames / fs:,.0f} s of {channels} channel(s) at {fs} Hz needs about "
            f"{need / 2**30:.1f} GiB to work on, and {avail / 2**30:.1f} GiB is free, enough "
            f"for at most {bound} s; cut it into shorter files, or free memory")


def _wav_cut_short(p: Path) -> tuple[int, int] | None:
    """(bytes the ``data`` chunk's header promises, bytes present) of a RIFF/WAVE file that
    ends before its data does; None for a whole file, another format, or a recorder's "size
    unknown" header (0 or 0xFFFFFFFF, written while recording; RF64 keeps its sizes
    elsewhere)."""
    import struct

    try:
        size = p.stat().st_size
        with open(p, "rb") as fh:
            head = fh.read(12)
            if len(head) < 12 or head[:4] != b"RIFF" or head[8:12] != b"WAVE":
                return None
            pos = 12
            while pos + 8 <= size:
                fh.seek(pos)
                cid, n = struct.unpack("<4sI", fh.read(8))
                if cid == b"data":
                    present = size - pos - 8
                    if n in (0, 0xFFFFFFFF) or n <= present:
                        return None
                    return n, present
                pos += 8 + n + (n & 1)  # chunks are padded to an even size
    except (OSError, struct.error):
        return None
    return None


@contextlib.contextmanager
def atomic_writer(path: str | os.PathLike[str], mode: str = "wb"):
    """Open a temporary file beside ``path``; on success fsync and rename it over ``path``.

    On any exception (including KeyboardInterrupt and SIGTERM) the temporary file is removed and
    ``path`` is left as it was; temporaries that a killed run left in the folder are removed
    first (:mod:`measure._files`). An operating-system error (no such folder, no permission,
    disk full) becomes an :class:`AudioFileError` that names the folder and what to check.
    """
    if "b" not in mode:
        raise ValueError("atomic_writer writes bytes; open it with mode 'wb'")
    target = Path(path)
    with file_set() as files:
        _guard_take(files, target)
        yield files.open(target)


def _guard_take(files: FileSet, target: Path) -> None:
    """Refuse to write over a take: now (before any work) and again under the folder lock at
    the commit (a take recorded meanwhile)."""
    refuse_replacing_take(target)
    files.guard(lambda: refuse_replacing_take(target))


def refuse_replacing_take(target: Path) -> None:
    """Takes are never overwritten: refuse to write a take's WAV or its sidecar."""
    side = target if target.suffix.lower() == ".json" else sidecar_path(target)
    if not target.exists():
        return
    fmt = (_our_sidecar(side) or {}).get("format")
    if isinstance(fmt, str) and fmt.startswith("measure.take/"):
        raise AudioFileError(
            f"{target} is a take, and takes are never overwritten; write somewhere else")


def _our_sidecar(side: Path) -> dict[str, Any] | None:
    """The JSON object in ``side``, or None when it is not a file holding one (at most 16 MiB
    is read: sidecars are small)."""
    try:
        with open(side, "rb") as fh:
            doc = json.loads(fh.read(1 << 24))
    except (OSError, ValueError, RecursionError):  # RecursionError: absurdly nested JSON
        return None
    return doc if isinstance(doc, dict) else None


def names_its_wav(side: Path) -> bool:
    """True if ``side`` is a sidecar that names its WAV by SHA-256 (``audio_sha256``)."""
    sha = (_our_sidecar(side) or {}).get("audio_sha256")
    return isinstance(sha, str) and re.fullmatch(r"[0-9a-f]{64}", sha) is not None


def write_audio(path: str | os.PathLike[str], x: np.ndarray, fs: int, *,
                subtype: Subtype = "FLOAT") -> Path:
    """Write (channels, samples) or (samples,) samples to a WAV file atomically.

    A sidecar beside ``path`` that names the old file by hash (:func:`names_its_wav`) would
    describe samples no longer there: it is removed in the same commit.

    Parameters
    ----------
    path : path-like
        Target ``.wav`` file (``.flac`` writes FLAC); its folder is created if needed.
    x : ndarray
        Samples, full scale = 1.0, time on the last axis.
    fs : int, > 0, Hz
        Sample rate.
    subtype : {"FLOAT", "PCM_16", "PCM_24", "PCM_32", "DOUBLE"}
        Sample format; impulse responses are 32-bit float.

    Raises
    ------
    AudioFileError
        If the name ends in neither ``.wav`` nor ``.flac``, the samples hold NaN or Inf, or the
        folder cannot be written.
    """
    target = Path(path)
    a, fmt = _audio_for_writing(target, x, fs)
    with file_set() as files:
        _guard_take(files, target)
        _write_samples(files.open(target), a, fs, subtype, fmt)
        # The sidecar of the file this one replaces describes the old samples (a rendered
        # model written over a measured response's name): it goes in the same commit, decided
        # on what is there at the commit.
        files.remove(sidecar_path(target), when=names_its_wav)
    return target


def _audio_for_writing(target: Path, x: np.ndarray, fs: int) -> tuple[np.ndarray, str]:
    check_fs(fs)
    a = np.asarray(x, dtype=np.float64)
    if a.ndim == 1:
        a = a[np.newaxis, :]
    if not np.all(np.isfinite(a)):
        raise AudioFileError(f"refusing to write NaN or Inf samples to {target}; this is a bug")
    fmt = {".wav": "WAV", "": "WAV", ".flac": "FLAC"}.get(target.suffix.lower())
    if fmt is None:  # any other name used to get FLAC content whatever it said
        raise AudioFileError(
            f"cannot tell the audio format of {target} from its name; end it in .wav (or .flac)")
    return a, fmt


def _write_samples(fh, a: np.ndarray, fs: int, subtype: str, fmt: str) -> None:
    import soundfile as sf

    sf.write(fh, a.T, int(fs), subtype=subtype, format=fmt)


def stage_audio(files, path: str | os.PathLike[str], x: np.ndarray, fs: int, *,
                subtype: Subtype = "FLOAT") -> str:
    """Write samples into ``path``'s temporary in the :class:`measure._files.FileSet`
    ``files`` and return the SHA-256 of the encoded file (for its sidecar)."""
    target = Path(path)
    a, fmt = _audio_for_writing(target, x, fs)
    fh = files.open(target)
    _write_samples(fh, a, fs, subtype, fmt)
    return files.sha256(target)


def write_pair(path: str | os.PathLike[str], x: np.ndarray, fs: int, sidecar: dict[str, Any], *,
               subtype: Subtype = "FLOAT") -> tuple[Path, Path]:
    """Write a WAV and its JSON sidecar as one set: both appear, or neither changes.

    The sidecar gets ``audio_sha256``, the SHA-256 of the WAV's bytes, so that a WAV and a
    sidecar that do not belong together are found and refused on reading
    (:func:`check_pair`). The two are written to temporaries and renamed WAV first, sidecar
    second, under the folder's lock (:mod:`measure._files`).

    Returns
    -------
    (wav, json) : tuple of Path
    """
    return write_pairs([(path, x, fs, sidecar)], subtype=subtype)[0]


def write_pairs(pairs, *, subtype: Subtype = "FLOAT") -> list[tuple[Path, Path]]:
    """Write several (path, samples, fs, sidecar) pairs of one folder as one set
    (:func:`write_pair` for each, all appearing together)."""
    out = []
    with file_set() as files:
        for path, x, fs, sidecar in pairs:
            target = Path(path)
            _guard_take(files, target)
            sha = stage_audio(files, target, x, fs, subtype=subtype)
            side = sidecar_path(target)
            files.open(side).write((dumps({**sidecar, "audio_sha256": sha}) + "\n")
                                   .encode("utf-8"))
            out.append((target, side))
    return out


def check_pair(path: str | os.PathLike[str], sidecar: dict[str, Any], *,
               side: str | os.PathLike[str] | None = None, sha256: str | None = None) -> None:
    """Refuse a WAV whose sidecar names another WAV's SHA-256 (``audio_sha256``).

    Sidecars written before the hash was kept have no ``audio_sha256`` and pass. ``sha256``
    is the WAV's hash when the caller has it already.

    Raises
    ------
    AudioFileError
        If the hash in the sidecar is not the WAV's.
    """
    want = sidecar.get("audio_sha256") if isinstance(sidecar, dict) else None
    if not isinstance(want, str):
        return
    if (sha256 or file_sha256(path)) != want:
        side = sidecar_path(path) if side is None else side
        raise AudioFileError(
            f"{path} and its sidecar {side} do not belong together (the sidecar names another "
            "WAV by its SHA-256: the pair was torn or the WAV edited); restore both from the "
            "same run, or write them again")


def read_sidecar(path: str | os.PathLike[str], *, what: str = "sidecar") -> dict[str, Any] | None:
    """The sidecar of the audio file ``path`` (None if it has none), checked to belong to it."""
    side = sidecar_path(path)
    if not side.exists():
        return None
    doc = read_json(side, what=what)
    check_pair(path, doc, side=side)
    return doc


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.floating):
        return None if not math.isfinite(float(obj)) else float(obj)
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"cannot write {type(obj).__name__} to JSON")


def _clean(obj: Any) -> Any:
    """Replace non-finite floats by None so the JSON stays standard (no NaN tokens)."""
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    return obj


def dumps(obj: Any) -> str:
    """Serialise to standard JSON (NaN and Inf become null), indented for reading by eye."""
    return json.dumps(_clean(obj), indent=2, default=_json_default, allow_nan=False)


def write_json(path: str | os.PathLike[str], obj: Any) -> Path:
    """Write ``obj`` as indented JSON, atomically."""
    return write_text(path, dumps(obj) + "\n")


def write_text(path: str | os.PathLike[str], text: str) -> Path:
    """Write ``text`` as UTF-8, atomically."""
    target = Path(path)
    with atomic_writer(target) as fh:
        fh.write(text.encode("utf-8"))
    return target


def read_text(path: str | os.PathLike[str], *, what: str, kind: str) -> str:
    """The UTF-8 text of a ``kind`` ("JSON", "TOML") file, or one AudioFileError line saying
    why it cannot be had."""
    p = Path(path)
    try:
        return p.read_text(encoding="utf-8")
    except OSError as err:
        raise AudioFileError(f"the {what} {p} cannot be read ({err.strerror or err}); check "
                             "that it is a file you may read") from err
    except UnicodeDecodeError as err:
        raise AudioFileError(f"the {what} {p} is not {kind} (not even UTF-8 text: "
                             f"{err.reason}); give the {kind} file, or restore it") from err


def read_json(path: str | os.PathLike[str], *, what: str = "sidecar") -> dict[str, Any]:
    """Read a JSON object from ``path``.

    Raises
    ------
    AudioFileError
        If the file is missing, not valid JSON, or not a JSON object.
    """
    p = Path(path)
    if not p.exists():
        raise AudioFileError(f"the {what} {p} does not exist; keep it beside its audio file")
    text = read_text(p, what=what, kind="JSON")
    try:
        obj = json.loads(text)
    except json.JSONDecodeError as err:
        raise AudioFileError(f"the {what} {p} is not valid JSON ({err}); restore it") from err
    if not isinstance(obj, dict):
        raise AudioFileError(f"the {what} {p} is not a JSON object; restore it")
    return obj


def file_sha256(path: str | os.PathLike[str]) -> str:
    """Hex SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def read_sweep(path: str | os.PathLike[str]):
    """Read a sweep file and its sidecar, rebuild the sweep and check that the two agree.

    Returns
    -------
    measure.sweep.Sweep
        Rebuilt from the sidecar (float64), so deconvolution uses the exact signal.

    Raises
    ------
    AudioFileError
        If the file or sidecar is missing or malformed, or the samples differ from what the
        sidecar describes.
    """
    from measure.sweep import make_sweep, spec_from_dict

    audio = read_audio(path)
    side = sidecar_path(path)
    if not side.exists():
        raise AudioFileError(
            f"the sweep sidecar {side} is missing; keep the .json that `measure sweep` wrote "
            "beside the .wav, or make the sweep again")
    doc = read_json(side)
    check_pair(path, doc, side=side)
    spec = spec_from_dict(doc, source=str(side))
    sweep = make_sweep(spec)
    if audio.fs != spec.fs:
        raise AudioFileError(
            f"{path} is at {audio.fs} Hz but its sidecar says {spec.fs} Hz; make the sweep again")
    played = audio.x[0]
    if played.size != sweep.program.size or not np.array_equal(
            played.astype(np.float32), sweep.program.astype(np.float32)):
        raise AudioFileError(
            f"the samples of {path} do not match its sidecar {side}; the file was edited or the "
            "sidecar belongs to another sweep: make the sweep again with `measure sweep`")
    return sweep


def write_ir(path: str | os.PathLike[str], ir, *, sweep, sources: dict[str, Any]) -> tuple[Path, Path]:
    """Write IR.wav (32-bit float, one channel per recovered channel) and IR.json beside it."""
    from measure._version import __version__
    from measure.deconvolve import IR_FORMAT

    doc = {"format": IR_FORMAT, "tool_version": __version__, **ir.to_dict(),
           "sweep": sweep.sidecar()["sweep"], "sources": sources}
    return write_pair(path, ir.h, ir.fs, doc, subtype="FLOAT")
