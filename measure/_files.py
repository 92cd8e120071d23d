"""All-or-nothing files: temporaries beside their targets, renamed into place together.

A command that writes a set of files (a WAV and its sidecar, say) writes every one of them to a
hidden temporary in the target's folder, ``.NAME.XXXXXXXX.part``, flushes and fsyncs it, and only
then renames the temporaries over their targets, in the order they were opened. A rename within
one folder is atomic, so each file is either its old self or its new self, never torn; for a set
of more than one file, three more things make the *set* all-or-nothing:

- **Intent.** Before the first rename, a small ``.NAME.XXXXXXXX.commit`` file lists every
  (temporary, target, identity) and every file the set removes, fsynced. A run killed between
  two renames (SIGKILL, power loss) leaves that intent behind with complete temporaries, and
  the next run in the folder finishes the renames (rolls forward) before it does anything else.
  An intent that is not complete JSON was never acted on: it is removed with its temporaries,
  and the old set stands. The identities (inode, size, mtime: a rename keeps them) tell a set
  that can still be finished from one whose temporaries were discarded or whose targets a newer
  run has written since: that one is left alone, and no removal is replayed over a newer file.
- **Folder lock.** The renames and the roll-forward happen under an exclusive ``flock`` of the
  folder itself, so two runs writing the same set commit one after the other: the files left are
  one run's set, never a mix.
- **Live temporaries are locked.** Each temporary is ``flock``-ed by its writer for as long as it
  exists, and the lock dies with the process. The clean-up of a folder removes a temporary only
  when it can take that lock (its writer is gone), so it never removes another run's work in
  progress, yet removes every temporary a killed run left.

On a system without ``fcntl`` (Windows), or a file system that refuses ``flock`` (some network
mounts), there are no locks: the renames still happen in a fixed order, and the clean-up removes
only temporaries and intents older than an hour.

Every :class:`FileSet` cleans its folders once per process, before writing into them.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import re
import secrets
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import IO

try:  # POSIX
    import fcntl
except ImportError:  # pragma: no cover - Windows
    fcntl = None  # type: ignore[assignment]

from measure.errors import AudioFileError

__all__ = ["FileSet", "file_set", "clean_folder", "TEMP_SUFFIX", "INTENT_SUFFIX"]

TEMP_SUFFIX = ".part"
INTENT_SUFFIX = ".commit"
#: Hidden names this module makes: ``.NAME.<16 hex>.part`` and ``.NAME.<16 hex>.commit``.
_OURS = re.compile(r"\..+\.[0-9a-f]{16}(" + re.escape(TEMP_SUFFIX) + "|"
                   + re.escape(INTENT_SUFFIX) + ")")
#: Without locks a temporary this old is taken as left by a dead run.
_STALE_WITHOUT_LOCKS_S = 3600.0
_cleaned: set[str] = set()


#: What :func:`_lock` found: the lock is ours, another process holds it, or there are no locks.
LOCKED, BUSY, UNSUPPORTED = "locked", "busy", "unsupported"


def _lock(fd: int, *, block: bool = True) -> str:
    """An exclusive flock on ``fd``: LOCKED; BUSY if ``block`` is off and another process has
    it; UNSUPPORTED without fcntl or on a file system that refuses flock (go on unlocked)."""
    if fcntl is None:
        return UNSUPPORTED
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | (0 if block else fcntl.LOCK_NB))
    except BlockingIOError:
        return BUSY
    except OSError:  # some network mounts
        return UNSUPPORTED
    return LOCKED


@contextlib.contextmanager
def _folder_locked(folder: Path) -> Iterator[bool]:
    """Hold an exclusive lock of ``folder`` itself (no lock file is left behind); the value is
    whether there is a lock at all (False without flock, where the age rule applies)."""
    if fcntl is None:
        yield False
        return
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        yield False
        return
    try:
        yield _lock(fd) == LOCKED
    finally:
        os.close(fd)  # closing the descriptor releases the lock


def _old(path: Path) -> bool:
    try:
        return time.time() - path.stat().st_mtime > _STALE_WITHOUT_LOCKS_S
    except OSError:
        return False


def _fsync_dir(folder: Path) -> None:
    # Make renames durable where the platform allows it (not on Windows).
    with contextlib.suppress(OSError, AttributeError):
        dfd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)


@contextlib.contextmanager
def _os_errors(target: Path) -> Iterator[None]:
    """Turn an OSError while writing ``target`` into an AudioFileError saying what to check."""
    try:
        yield
    except OSError as err:
        if isinstance(err, AudioFileError):
            raise
        raise AudioFileError(
            f"cannot write into {target.parent} ({err.strerror or err}); check that it is a "
            "folder you may write to and that the disk has free space") from err


def clean_folder(folder: str | os.PathLike[str], *, force: bool = False) -> tuple[int, int]:
    """Finish the commits and remove the temporaries that killed runs left in ``folder``.

    Returns (sets rolled forward, temporaries removed). Runs once per folder per process
    unless ``force``; a folder that does not exist is left alone.
    """
    p = Path(folder)
    key = str(p.resolve()) if p.exists() else str(p)
    if (key in _cleaned and not force) or not p.is_dir():
        return 0, 0
    _cleaned.add(key)
    with _folder_locked(p) as locked:
        try:
            rolled = _finish_dead_commits(p, locked)
            removed = sum(_remove_if_stale(p / name) for name in sorted(os.listdir(p))
                          if _OURS.fullmatch(name) and name.endswith(TEMP_SUFFIX))
        except OSError:
            return 0, 0
    return rolled, removed


def _finish_dead_commits(folder: Path, locked: bool) -> int:
    """Roll forward the intents in ``folder``; the caller holds the folder lock, so with locks
    every intent belongs to a run that died mid-commit. Without locks only an intent older
    than an hour is taken as dead (a young one may be another run's commit in progress)."""
    names = sorted(n for n in os.listdir(folder)
                   if _OURS.fullmatch(n) and n.endswith(INTENT_SUFFIX))
    return sum(_roll_forward(folder, n) for n in names if locked or _old(folder / n))


def _identity(path: Path) -> list[int] | None:
    """(inode, size, mtime in ns) of ``path``: what a rename keeps, and what a newer file at a
    reused inode is very unlikely to share."""
    try:
        st = os.stat(path)
    except OSError:
        return None
    return [st.st_ino, st.st_size, st.st_mtime_ns]


def _names(entries: object) -> list[tuple[str, str, list[int] | None]]:
    # [[from, to, identity], ...] of plain names in the folder ([from, to] from an earlier
    # version: no identity); anything else is not an intent
    out = []
    for entry in entries:  # type: ignore[attr-defined]
        a, b, ident = (*entry, None) if len(entry) == 2 else entry
        a, b = str(a), str(b)
        if os.sep in a + b or "/" in a + b or not (
                ident is None or (isinstance(ident, list) and len(ident) == 3
                                  and all(isinstance(v, int) for v in ident))):
            raise ValueError("names and identities only")
        out.append((a, b, ident))
    return out


def _roll_forward(folder: Path, name: str) -> int:
    """Finish the commit an intent describes, or void it; 1 if it was finished.

    The intent lists each new file as (temporary, target, identity of the temporary) and each
    file to remove as (name, grave, its identity), an identity being (inode, size, mtime). A
    rename keeps all three, so each new file is either still staged or already in place as
    itself; if one is neither (its temporary was discarded, or a newer run has written the
    target since), the set cannot be finished and nothing is done: what was renamed stays, and
    a removal is never replayed over a newer file.
    """
    intent = folder / name
    try:
        doc = json.loads(intent.read_text(encoding="utf-8"))
        renames, removes = _names(doc["rename"]), _names(doc.get("remove", []))
    except (OSError, ValueError, KeyError, TypeError):
        # Never completed, so nothing was renamed: the temporaries go as stale ones.
        with contextlib.suppress(OSError):
            os.unlink(intent)
        return 0
    whole = all((folder / tmp).exists() or ident is None or _identity(folder / target) == ident
                for tmp, target, ident in renames)
    done = int(whole)
    if whole:
        for tmp, target, _ in renames:
            try:
                if (folder / tmp).exists():
                    os.replace(folder / tmp, folder / target)
            except OSError:
                # Cannot be finished: stop in order, so a sidecar (renamed last) is never
                # newer than its WAV; a mismatched pair is refused on reading by its hash.
                done = 0
                break
    if done:
        for gone, grave, ident in removes:
            if ident is not None and _identity(folder / gone) == ident:  # not a newer file
                with contextlib.suppress(OSError):
                    os.replace(folder / gone, folder / grave)
                    os.unlink(folder / grave)
    _fsync_dir(folder)
    with contextlib.suppress(OSError):
        os.unlink(intent)
    _fsync_dir(folder)
    return done


def _remove_if_stale(path: Path) -> int:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return 0
    removed = 0
    try:
        state = _lock(fd, block=False)
        if state == UNSUPPORTED:
            stale = time.time() - os.fstat(fd).st_mtime > _STALE_WITHOUT_LOCKS_S
        else:
            stale = state == LOCKED
        if stale and fcntl is not None:
            # Unlinked while the lock is held: a writer that opened this name an instant ago
            # waits for the lock, then finds its inode gone and takes another name.
            with contextlib.suppress(OSError):
                os.unlink(path)
                removed = 1
    finally:
        os.close(fd)
    if stale and fcntl is None:  # Windows removes no open file: closed first
        with contextlib.suppress(OSError):
            os.unlink(path)
            removed = 1
    return removed


class FileSet:
    """Files staged as locked temporaries beside their targets and committed together.

    Use through :func:`file_set`; :meth:`open` gives a binary file to write each target into,
    :meth:`remove` names a file that goes in the same commit (a stale sidecar, say). All targets
    must be in one folder (the unit that a rename and a lock make atomic).
    """

    def __init__(self) -> None:
        self._staged: list[tuple[Path, Path, int, IO[bytes]]] = []  # (tmp, target, fd, fh)
        self._removed: list[tuple[Path, Callable[[Path], bool] | None]] = []
        self._guards: list[Callable[[], None]] = []
        self._folder: Path | None = None

    def _in_folder(self, target: Path) -> None:
        if self._folder is None:
            self._folder = target.parent
        elif os.path.abspath(target.parent) != os.path.abspath(self._folder):
            raise ValueError(f"a file set lives in one folder: {target} is not in {self._folder}")

    def _taken(self, target: Path) -> bool:
        return any(r == target for r, _ in self._removed) or any(
            t == target for _, t, _, _ in self._staged)

    def remove(self, path: str | os.PathLike[str], *,
               when: Callable[[Path], bool] | None = None) -> None:
        """Remove ``path`` in the commit, after the renames, if it is a file then (and
        ``when(path)`` is true: decided under the folder lock, so on what is there at the
        moment of the commit, not before another run's)."""
        target = Path(path)
        self._in_folder(target)
        if self._taken(target):
            raise ValueError(f"{target} is twice in one file set")
        self._removed.append((target, when))

    def guard(self, check: Callable[[], None]) -> None:
        """Run ``check`` under the folder lock just before the renames; an exception from it
        (a take found where this set would go, say) leaves the targets as they are."""
        self._guards.append(check)

    def open(self, path: str | os.PathLike[str]) -> IO[bytes]:
        """A binary file to write ``path``'s new content into (a locked temporary beside it)."""
        target = Path(path)
        folder = target.parent
        self._in_folder(target)
        if self._taken(target):
            raise ValueError(f"{target} is twice in one file set")
        with _os_errors(target):
            folder.mkdir(parents=True, exist_ok=True)
            clean_folder(folder)
            tmp, fd = self._new_temporary(target)
        try:
            # mkstemp-like files are owner-only; give it the permissions of any new file
            umask = os.umask(0)
            os.umask(umask)
            with contextlib.suppress(OSError, AttributeError):  # no fchmod on Windows
                os.fchmod(fd, 0o666 & ~umask)
            fh = os.fdopen(os.dup(fd), "w+b")
            self._staged.append((tmp, target, fd, fh))
        except BaseException:  # interrupted before it was tracked: it goes now
            os.close(fd)
            with contextlib.suppress(OSError):
                os.unlink(tmp)
            raise
        return fh

    @staticmethod
    def _new_temporary(target: Path) -> tuple[Path, int]:
        # The clean-up of another run may remove a new temporary before its lock is taken; the
        # inode check catches that and a fresh name is tried.
        for _ in range(100):
            tmp = target.parent / f".{target.name}.{secrets.token_hex(8)}{TEMP_SUFFIX}"
            fd = os.open(tmp, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o600)
            _lock(fd)
            try:
                if os.stat(tmp).st_ino == os.fstat(fd).st_ino:
                    return tmp, fd
            except FileNotFoundError:
                pass
            os.close(fd)
        raise AudioFileError(f"cannot make a temporary file in {target.parent}; check the folder")

    def staged_path(self, path: str | os.PathLike[str]) -> Path:
        """The temporary that holds ``path``'s new content."""
        target = Path(path)
        for tmp, t, _, _ in self._staged:
            if t == target:
                return tmp
        raise ValueError(f"{target} is not in this file set")

    def sync(self, path: str | os.PathLike[str]) -> None:
        """Flush and fsync ``path``'s temporary (before it is linked elsewhere)."""
        tmp = self.staged_path(path)
        for t, _, _, fh in self._staged:
            if t == tmp:
                fh.flush()
                os.fsync(fh.fileno())

    def sha256(self, path: str | os.PathLike[str]) -> str:
        """Hex SHA-256 of what has been written so far for ``path``."""
        target = Path(path)
        for _, t, _, fh in self._staged:
            if t == target:
                fh.flush()
                end = fh.tell()
                fh.seek(0)
                h = hashlib.sha256()
                while block := fh.read(1 << 20):
                    h.update(block)
                fh.seek(end)
                return h.hexdigest()
        raise ValueError(f"{target} is not in this file set")

    def commit(self) -> list[Path]:
        """fsync every temporary, then rename them over their targets in order."""
        if not self._staged:
            return []
        folder = self._folder
        assert folder is not None
        first = self._staged[0][1]
        for _, target, _, _ in self._staged:
            if target.is_dir():  # the one rename that fails for sure: found before any is done
                raise AudioFileError(f"{target} is a folder; give a file name to write, or move "
                                     "the folder away")
        with _os_errors(first):
            for _, _, _, fh in self._staged:
                fh.flush()
                os.fsync(fh.fileno())
                fh.close()
            if fcntl is None:  # Windows renames no open file (and there is no lock to keep)
                self._close_descriptors()
            with _folder_locked(folder) as locked:
                # A run that died mid-commit after this one began would, rolled forward later,
                # put its files over part of this set: its commit is finished first.
                _finish_dead_commits(folder, locked)
                for check in self._guards:
                    check()
                renames = [(t, g) for t, g, _, _ in self._staged]
                going = [r for r, when in self._removed
                         if r.is_file() and (when is None or when(r))]
                graves = [r.with_name(f".{r.name}.{secrets.token_hex(8)}{TEMP_SUFFIX}")
                          for r in going]
                if len(renames) == 1 and not going:
                    os.replace(*renames[0])
                else:
                    self._commit_with_intent(folder, renames, list(zip(going, graves,
                                                                       strict=True)))
            _fsync_dir(folder)
        targets = [g for _, g, _, _ in self._staged]
        self._release(unlink=False)
        return targets

    @staticmethod
    def _commit_with_intent(folder: Path, renames: list[tuple[Path, Path]],
                            removes: list[tuple[Path, Path]]) -> None:
        # The intent first (fsynced), then the renames, then the removals. Interrupted at any
        # point (SIGTERM, Ctrl-C) or failed half-way, the intent is acted on at once: finished
        # if it was written whole, void if not, before the temporaries are discarded.
        first = renames[0][1]
        intent = folder / f".{first.name}.{secrets.token_hex(8)}{INTENT_SUFFIX}"
        doc = {"rename": [[a.name, b.name, _identity(a)] for a, b in renames],
               "remove": [[a.name, b.name, _identity(a)] for a, b in removes]}
        try:
            fd = os.open(intent, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
            try:
                os.write(fd, json.dumps(doc).encode("utf-8"))
                os.fsync(fd)
            finally:
                os.close(fd)
            _fsync_dir(folder)
            for a, b in renames:
                os.replace(a, b)
            for a, b in removes:
                os.replace(a, b)
                with contextlib.suppress(OSError):  # else it goes as a stale temporary
                    os.unlink(b)
        except BaseException:
            if intent.exists():
                _roll_forward(folder, intent.name)
            raise
        _fsync_dir(folder)
        os.unlink(intent)

    def discard(self) -> None:
        """Remove every temporary still staged (the targets are left as they were)."""
        self._release(unlink=True)

    def _close_descriptors(self) -> None:
        # Closing a temporary's first descriptor releases its lock; -1 marks it closed.
        for i, (tmp, target, fd, fh) in enumerate(self._staged):
            with contextlib.suppress(OSError):
                fh.close()
            if fd >= 0:
                with contextlib.suppress(OSError):
                    os.close(fd)
                self._staged[i] = (tmp, target, -1, fh)

    def _release(self, *, unlink: bool) -> None:
        # Closed before unlinked (Windows removes no open file); names are random, so no other
        # run can have taken a temporary's name in between.
        self._close_descriptors()
        if unlink:
            for tmp, _, _, _ in self._staged:
                with contextlib.suppress(OSError):
                    os.unlink(tmp)
        self._staged = []
        self._removed = []
        self._guards = []


@contextlib.contextmanager
def file_set() -> Iterator[FileSet]:
    """Stage files with :meth:`FileSet.open`; on leaving the block without an exception they are
    committed together, on any exception (KeyboardInterrupt, SIGTERM included) discarded."""
    fs = FileSet()
    try:
        yield fs
        fs.commit()
    finally:
        fs.discard()

