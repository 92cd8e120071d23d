"""Rooms, positions and takes on disk: ``CAPTURES/ROOM/POSITION-takeN.wav`` + ``.json``.

A take is claimed, never overwritten: the audio is first written completely to a locked hidden
temporary in the room's folder (:mod:`measure._files`), fsynced, then hard-linked to the first
free ``POSITION-takeN.wav``. The link fails if that name exists, so two captures running at
once, or a stale listing, can never overwrite a take; the next number is tried instead. On file
systems without hard links (FAT, exFAT on memory cards) the name is checked and the file renamed
into place. The sidecar, which names the WAV's SHA-256, is renamed into place right after. A run
killed between the two leaves the recording without its sidecar: it is kept (a recording is
never thrown away) and its number is never reused; ``measure import`` files it again.
"""

from __future__ import annotations

import errno
import os
import re
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from measure import _files
from measure._version import __version__
from measure.audio_io import (
    check_pair,
    dumps,
    file_sha256,
    read_json,
    replaced_path,
    sidecar_path,
    stage_audio,
)
from measure.errors import AudioFileError, ParameterError

__all__ = [
    "TAKE_FORMAT",
    "Take",
    "check_label",
    "room_dir",
    "take_numbers",
    "next_take_number",
    "save_take",
    "update_sidecar",
    "list_takes",
    "latest_takes",
    "resolve_sweep",
    "recover_take",
]

TAKE_FORMAT = "measure.take/1"
#: Characters refused in room and position names: path separators and those Windows forbids.
_BAD_CHARS = set('<>:"/\\|?*') | {chr(c) for c in range(32)}
_MAX_TRIES = 10000


@dataclass(frozen=True, slots=True)
class Take:
    """Where a take lives: its number and its two files."""

    room: str
    position: str
    number: int
    wav: Path
    json: Path

    def to_dict(self) -> dict[str, Any]:
        return {"room": self.room, "position": self.position, "take": self.number,
                "wav": str(self.wav), "json": str(self.json)}


def check_label(value: str, what: str) -> str:
    """Return ``value`` stripped if it can name a folder or a file on every system, else raise."""
    text = str(value).strip()
    bad = sorted({c for c in text if c in _BAD_CHARS})
    if not text or text in (".", "..") or text.startswith(".") or bad or text.endswith(" "):
        shown = "".join(bad) if bad else text
        raise ParameterError(
            f"{what}={value!r} cannot be used as a file name ({shown!r}); use letters, digits, "
            "spaces, '-' and '_', e.g. 'hall' or 'S1-R2'")
    if re.search(r"-take\d+$", text):
        raise ParameterError(
            f"{what}={value!r} ends like a take number; drop the '-takeN', it is added for you")
    return text


def room_dir(captures: str | os.PathLike[str], room: str) -> Path:
    return Path(captures) / check_label(room, "room")


def _take_pattern(position: str) -> re.Pattern[str]:
    return re.compile(re.escape(position) + r"-take(\d+)\.(wav|json)", re.IGNORECASE)


def take_numbers(captures: str | os.PathLike[str], room: str, position: str) -> list[int]:
    """Take numbers present for a position (from either the audio or the sidecar), ascending."""
    folder = room_dir(captures, room)
    position = check_label(position, "position")
    if not folder.is_dir():
        return []
    pat = _take_pattern(position)
    found = {int(m.group(1)) for p in folder.iterdir() if (m := pat.fullmatch(p.name))}
    return sorted(found)


def next_take_number(captures: str | os.PathLike[str], room: str, position: str) -> int:
    """One more than the highest take number present (1 for a new position)."""
    nums = take_numbers(captures, room, position)
    return (nums[-1] + 1) if nums else 1


def _paths(folder: Path, position: str, n: int) -> tuple[Path, Path]:
    wav = folder / f"{position}-take{n}.wav"
    return wav, sidecar_path(wav)


def _claim(tmp: Path, folder: Path, position: str, start: int) -> tuple[int, Path, Path]:
    """Give ``tmp`` the first free take name from ``start`` on, never replacing a file; ``tmp``
    keeps its own name too (the file set removes it)."""
    n = start
    for _ in range(_MAX_TRIES):
        wav, js = _paths(folder, position, n)
        if js.exists() or wav.exists():
            n += 1
            continue
        try:
            os.link(tmp, wav)
        except FileExistsError:
            n += 1
            continue
        except OSError as err:
            if err.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV,
                                 errno.EMLINK, errno.ENOSYS, errno.EACCES):
                raise
            # No hard links here: rename into the free name (checked just above).
            os.replace(tmp, wav)
        return n, wav, js
    raise AudioFileError(f"no free take number for {position!r} in {folder}; tidy the folder")


def save_take(captures: str | os.PathLike[str], room: str, position: str, y: np.ndarray, fs: int,
              sidecar: dict[str, Any], *, subtype: str = "FLOAT") -> Take:
    """Write a recording as the next take of ``room``/``position`` with its sidecar.

    Parameters
    ----------
    captures : path-like
        The captures folder; ``ROOM/`` is created inside it if needed.
    room, position : str
        Names checked by :func:`check_label`.
    y : ndarray, (channels, samples)
        The raw recording, written as is (never normalised or clipped).
    fs : int, Hz
    sidecar : dict
        Everything known about the take; ``format``, ``tool_version``, ``room``, ``position``,
        ``take``, ``audio_file`` and ``fs`` are added here.
    subtype : str
        Sample format of the WAV (32-bit float by default: it keeps whatever the device gave).

    Returns
    -------
    Take

    Raises
    ------
    ParameterError
        If a name cannot be used as a file name.
    AudioFileError
        If the folder cannot be written.
    """
    room = check_label(room, "room")
    position = check_label(position, "position")
    folder = room_dir(captures, room)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise AudioFileError(f"cannot create the folder {folder} ({err}); check the path and "
                             "permissions of --captures") from err
    a = np.atleast_2d(np.asarray(y))
    files = _files.FileSet()
    try:
        staged = folder / f"{position}.wav"  # a temporary is staged for it, never renamed to it
        sha = stage_audio(files, staged, a, fs, subtype=subtype)  # type: ignore[arg-type]
        files.sync(staged)
        tmp = files.staged_path(staged)
        try:
            n, wav, js = _claim(tmp, folder, position, next_take_number(captures, room, position))
        except OSError as err:
            raise AudioFileError(f"cannot write the take into {folder} ({err}); check free "
                                 "space and permissions") from err
    finally:
        files.discard()
    side = {"format": TAKE_FORMAT, "tool_version": __version__, "room": room,
            "position": position, "take": n, "audio_file": wav.name, "fs": int(fs),
            "n_channels": int(a.shape[0]), "n_samples": int(a.shape[1])}
    side.update({k: v for k, v in sidecar.items() if k not in side})
    side["audio_sha256"] = sha
    try:
        _write_sidecar(js, side)
    except OSError as err:
        raise AudioFileError(
            f"the take {wav} is complete but its sidecar {js} could not be written ({err}); "
            "free some space and keep the WAV") from err
    return Take(room=room, position=position, number=n, wav=wav, json=js)


def update_sidecar(take: Take, **fields: Any) -> dict[str, Any]:
    """Add fields to a take's sidecar (atomically); the audio is never touched."""
    side = read_json(take.json)
    side.update(fields)
    _write_sidecar(take.json, side)
    return side


def _write_sidecar(path: Path, doc: dict[str, Any]) -> None:
    # A take's own sidecar: the one file the take guard of audio_io lets through.
    with _files.file_set() as files:
        files.open(path).write((dumps(doc) + "\n").encode("utf-8"))


def list_takes(captures: str | os.PathLike[str]) -> list[Take]:
    """Every take under ``captures`` (those whose audio and sidecar both exist)."""
    root = Path(captures)
    out: list[Take] = []
    if not root.is_dir():
        return out
    pat = re.compile(r"(.+)-take(\d+)\.wav", re.IGNORECASE)
    for folder in sorted(p for p in root.iterdir() if p.is_dir()):
        for p in sorted(folder.iterdir()):
            m = pat.fullmatch(p.name)
            if m and not p.name.startswith(".") and sidecar_path(p).exists():
                out.append(Take(room=folder.name, position=m.group(1), number=int(m.group(2)),
                                wav=p, json=sidecar_path(p)))
    return out


def latest_takes(room_folder: str | os.PathLike[str]) -> list[tuple[Take, dict[str, Any]]]:
    """The newest take of every position in one room's folder, with its sidecar; takes whose
    sidecar says REDO are passed over for an older good one when there is one.

    Raises
    ------
    AudioFileError
        If a chosen take's sidecar names another WAV (:func:`measure.audio_io.check_pair`).
    """
    folder = Path(room_folder)
    pat = re.compile(r"(.+)-take(\d+)\.wav", re.IGNORECASE)
    by_position: dict[str, list[Take]] = {}
    for p in sorted(folder.iterdir()) if folder.is_dir() else []:
        m = pat.fullmatch(p.name)
        if m and not p.name.startswith(".") and sidecar_path(p).exists():
            by_position.setdefault(m.group(1), []).append(
                Take(room=folder.name, position=m.group(1), number=int(m.group(2)), wav=p,
                     json=sidecar_path(p)))
    out = []
    for takes in by_position.values():
        takes.sort(key=lambda t: t.number, reverse=True)
        docs = [(t, read_json(t.json)) for t in takes]
        good = [(t, d) for t, d in docs
                if (d.get("verdict") or {}).get("verdict", "good") == "good"]
        chosen = (good or docs)[0]
        check_pair(chosen[0].wav, chosen[1], side=chosen[0].json)
        out.append(chosen)
    return sorted(out, key=lambda td: td[0].position)


def resolve_sweep(named: str | None, room_folder: str | os.PathLike[str], *,
                  sha256: str | None = None,
                  hash_of: Callable[[Path], str] = file_sha256,
                  take: str = "the take") -> Path | None:
    """The sweep file a take's sidecar names (``sweep_file``): as given, or beside the
    captures tree (``CAPTURES/../NAME``, ``CAPTURES/../sweeps/NAME``, ``CAPTURES/sweeps/NAME``);
    None when none exists.

    With the take's ``sweep_sha256``: where the file of that name now holds another sweep
    (replaced with ``measure sweep --force``), the one kept beside it,
    ``STEM.replaced-XXXXXXXX.wav`` with the hash's first 8 digits, when it is there.
    ``hash_of`` gives a file's SHA-256 (a caller that resolves many takes passes a memo);
    ``take`` names the take in messages.

    Raises
    ------
    AudioFileError
        With a ``sha256`` that is not one, when files of that name exist but none (nor a
        kept copy) is that sweep (a take is never recovered with another sweep), or when one
        cannot be read.
    """
    if not named:
        return None
    if not isinstance(named, str) or "\0" in named:
        raise AudioFileError(f"{take}: its sweep_file {named!r} is not a file name; restore "
                             "the take's sidecar from a backup")
    p, folder = Path(named), Path(room_folder)
    places = (p, folder.parent.parent / p, folder.parent.parent / "sweeps" / p.name,
              folder.parent / "sweeps" / p.name)
    found = next((cand for cand in places if cand.exists()), None)
    if sha256 is None:
        return found
    if not (isinstance(sha256, str) and re.fullmatch(r"[0-9a-f]{64}", sha256)):
        raise AudioFileError(f"{take}: its sweep_sha256 {sha256!r} is not a SHA-256 (64 hex "
                             "digits); restore the take's sidecar from a backup")
    # The very sweep, under its own name or kept aside (also when a replacement was
    # interrupted before the new file was in place); never another sweep of that name.
    for cand in places:
        for path in (cand, replaced_path(cand, sha256)):
            try:
                if path.is_file() and hash_of(path) == sha256:
                    return path
            except OSError as err:
                raise AudioFileError(f"cannot read {path} ({err.strerror or err}), a candidate "
                                     f"for {take}'s sweep; check its permissions") from err
    if found is None:
        return None
    raise AudioFileError(
        f"{found} is not the sweep {take} was recorded with (its SHA-256 differs from the "
        f"take's sweep_sha256 {sha256[:8]}...) and no kept copy "
        f"{replaced_path(found, sha256).name} is beside it; restore that sweep file (or, where "
        "the command has it, name the right one with --sweep)")


def recover_take(audio: Any, sidecar: dict[str, Any], sweep: Any, *, name: str = "the take"):
    """The impulse response of a take (``audio`` from :func:`measure.audio_io.read_audio`)
    recovered with ``sweep``, its loopback channel (1-based ``loopback_channel`` in the
    sidecar) as the timing reference.

    Raises
    ------
    ParameterError
        If the take and the sweep are at different rates.
    """
    from measure.deconvolve import recover_ir

    if audio.fs != sweep.fs:
        raise ParameterError(f"{name} is at {audio.fs} Hz but its sweep at {sweep.fs} Hz; "
                             "record at the sweep's rate")
    loop = sidecar.get("loopback_channel") if isinstance(sidecar, dict) else None
    return recover_ir(audio.x, sweep, reference_channel=loop - 1 if isinstance(loop, int)
                      else None)
