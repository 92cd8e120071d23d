"""All-or-nothing file sets (measure._files and audio_io.write_pair).

Issue "Never lose a take, never crash on a bad file", all-or-nothing outputs and kill tests:
a WAV and its sidecar appear together or not at all; two runs writing the same pair leave one
run's pair; temporaries go on any exit, and those of a killed run go with the next run in the
folder; a run killed between the renames of a set is finished (rolled forward) by the next one.
The oracle is the file system itself: bytes, SHA-256 (hashlib) and directory listings.
"""

from __future__ import annotations

import json
import multiprocessing as mp
import os
import random
import signal
import time
from pathlib import Path

import numpy as np
import pytest

from measure import _files, audio_io
from measure.errors import AudioFileError

FS = 8000
_fork = mp.get_context("fork")


def _debris(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


def _write_run(target: str, run: int, n: int = 4000) -> None:
    # One run's pair: every sample and the sidecar say which run wrote them.
    x = np.full(n, run / 1000.0)
    audio_io.write_pair(target, x, FS, {"format": "test/1", "run": run})


def _consistent_run(wav: Path) -> int:
    """The run that wrote the pair at ``wav``; fails if WAV and sidecar are from two runs."""
    doc = json.loads(audio_io.sidecar_path(wav).read_text())
    assert doc["audio_sha256"] == audio_io.file_sha256(wav)
    x = audio_io.read_audio(wav).x[0]
    assert np.all(x == np.float32(doc["run"] / 1000.0)), "WAV and sidecar from two runs"
    return int(doc["run"])


def test_a_pair_appears_together_and_its_sidecar_names_the_wav(tmp_path):
    wav, side = audio_io.write_pair(tmp_path / "a.wav", np.ones(100) * 0.5, FS, {"k": 1})
    assert side == tmp_path / "a.json"
    doc = json.loads(side.read_text())
    assert doc["k"] == 1 and doc["audio_sha256"] == audio_io.file_sha256(wav)
    assert _debris(tmp_path) == []
    audio_io.check_pair(wav, doc)  # passes


def test_a_failing_write_keeps_the_old_pair_and_leaves_no_temporary(tmp_path):
    _write_run(str(tmp_path / "a.wav"), 1)
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    with pytest.raises(RuntimeError), _files.file_set() as files:
        files.open(tmp_path / "a.wav").write(b"half a new file")
        files.open(tmp_path / "a.json").write(b"{")
        raise RuntimeError("killed by a bug half-way")
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before


def test_a_sidecar_that_cannot_be_written_leaves_no_wav(tmp_path):
    # Issue "Never lose a take", half-written pairs: the sidecar's name is a folder.
    (tmp_path / "a.json").mkdir()
    with pytest.raises(AudioFileError):
        audio_io.write_pair(tmp_path / "a.wav", np.zeros(10), FS, {"k": 1})
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.json"]


def test_a_torn_pair_is_refused_on_reading(tmp_path):
    _write_run(str(tmp_path / "a.wav"), 1)
    _write_run(str(tmp_path / "b.wav"), 2)
    os.replace(tmp_path / "b.wav", tmp_path / "a.wav")  # a's sidecar, b's samples
    with pytest.raises(AudioFileError, match="do not belong together"):
        audio_io.read_sidecar(tmp_path / "a.wav")


def test_takes_are_never_overwritten(tmp_path):
    from measure import session

    t = session.save_take(tmp_path, "hall", "S1", np.zeros((1, 100)), FS, {})
    before = (t.wav.read_bytes(), t.json.read_bytes())
    for write in (lambda: audio_io.write_audio(t.wav, np.ones(10) * 0.1, FS),
                  lambda: audio_io.write_pair(t.wav, np.ones(10) * 0.1, FS, {}),
                  lambda: audio_io.write_json(t.json, {"format": "an IR sidecar"})):
        with pytest.raises(AudioFileError, match="never overwritten"):
            write()
    assert (t.wav.read_bytes(), t.json.read_bytes()) == before
    # its own sidecar is still updated in place (the capture verdict)
    assert session.update_sidecar(t, verdict={"verdict": "good"})["verdict"]
    assert _debris(t.wav.parent) == []


def _hold_a_temporary(folder: str, ready, release) -> None:
    fs = _files.FileSet()
    fs.open(Path(folder) / "busy.wav").write(b"work in progress")
    ready.set()
    release.wait(30)
    fs.discard()


def test_the_clean_up_removes_dead_runs_temporaries_but_not_live_ones(tmp_path):
    # A live run's temporary is locked: left alone. A dead run's (an unlocked .part file, as a
    # SIGKILL leaves it) is removed.
    ready, release = _fork.Event(), _fork.Event()
    live = _fork.Process(target=_hold_a_temporary, args=(str(tmp_path), ready, release))
    live.start()
    try:
        assert ready.wait(30)
        (tmp_path / ".a.wav.0123456789abcdef.part").write_bytes(b"left by a killed run")
        assert _files.clean_folder(tmp_path, force=True) == (0, 1)
        names = _debris(tmp_path)
        assert len(names) == 1 and names[0].startswith(".busy.wav.")
    finally:
        release.set()
        live.join(30)
    assert _debris(tmp_path) == []  # the live run removed its own on the way out


def _intent(folder: Path, name: str, renames, removes=()) -> Path:
    """An intent as a commit writes it: each (from, to) with the identity (inode, size, mtime)
    of the new file (still staged under ``from``, or in place under ``to``) or of the file to
    remove."""
    def ident(a: str, b: str) -> list[int]:
        st = (folder / a if (folder / a).exists() else folder / b).stat()
        return [st.st_ino, st.st_size, st.st_mtime_ns]

    path = folder / name
    path.write_text(json.dumps({"rename": [[a, b, ident(a, b)] for a, b in renames],
                                "remove": [[a, b, ident(a, b)] for a, b in removes]}))
    return path


def test_an_intent_of_the_earlier_form_is_still_finished(tmp_path):
    # [[temporary, target], ...] without identities, as the first version of this wrote them.
    _write_run(str(tmp_path / "a.wav"), 1)
    _write_run(str(tmp_path / "new.wav"), 2)
    os.replace(tmp_path / "new.json", tmp_path / ".a.json.00000000000000aa.part")
    os.replace(tmp_path / "new.wav", tmp_path / "a.wav")
    (tmp_path / ".a.wav.00000000000000bb.commit").write_text(json.dumps(
        {"rename": [[".a.wav.00000000000000cc.part", "a.wav"],
                    [".a.json.00000000000000aa.part", "a.json"]]}))
    assert _files.clean_folder(tmp_path, force=True) == (1, 0)
    assert _consistent_run(tmp_path / "a.wav") == 2 and _debris(tmp_path) == []


def test_a_set_killed_between_its_renames_is_finished_by_the_next_run(tmp_path):
    # What a SIGKILL after the first rename leaves: the new WAV in place, the new sidecar still
    # a temporary, and the intent. The next run in the folder rolls the set forward.
    _write_run(str(tmp_path / "a.wav"), 1)
    _write_run(str(tmp_path / "new.wav"), 2)
    tmp_json = ".a.json.00000000000000aa.part"
    os.replace(tmp_path / "new.json", tmp_path / tmp_json)
    os.replace(tmp_path / "new.wav", tmp_path / "a.wav")  # the first rename happened
    _intent(tmp_path, ".a.wav.00000000000000bb.commit",
            [(".a.wav.00000000000000cc.part", "a.wav"), (tmp_json, "a.json")])
    with pytest.raises(AssertionError):
        _consistent_run(tmp_path / "a.wav")  # torn until the next run
    assert _files.clean_folder(tmp_path, force=True) == (1, 0)
    assert _consistent_run(tmp_path / "a.wav") == 2 and _debris(tmp_path) == []


def test_an_intent_cut_short_is_void_and_the_old_set_stands(tmp_path):
    _write_run(str(tmp_path / "a.wav"), 1)
    (tmp_path / ".a.wav.00000000000000bb.commit").write_text('{"rename": [[".a.wav.0')
    (tmp_path / ".a.wav.00000000000000cc.part").write_bytes(b"a complete new WAV, never named")
    assert _files.clean_folder(tmp_path, force=True) == (0, 1)
    assert _consistent_run(tmp_path / "a.wav") == 1 and _debris(tmp_path) == []


def test_two_concurrent_runs_writing_one_pair_leave_one_runs_pair_100_of_100(tmp_path):
    # Acceptance of the issue: 100 tries, each with two processes writing the same pair.
    target = tmp_path / "out.wav"
    winners = set()
    for attempt in range(100):
        runs = (2 * attempt + 1, 2 * attempt + 2)
        ps = [_fork.Process(target=_write_run, args=(str(target), r)) for r in runs]
        for p in ps:
            p.start()
        for p in ps:
            p.join(60)
            assert p.exitcode == 0
        winners.add(_consistent_run(target) - 2 * attempt)
    assert _debris(tmp_path) == []
    assert winners <= {1, 2}


def _write_forever(target: str, n: int) -> None:
    run = 0
    while True:
        run += 1
        _write_run(target, 1 + run % 2, n)


def test_a_writer_killed_at_random_points_leaves_a_whole_pair_after_the_next_run(tmp_path):
    # Kill test: SIGKILL a process that rewrites a 1.5 MB pair over and over, 40 times at
    # random moments; the next run in the folder finds the old pair or the new one, never a mix,
    # and no temporary.
    target = tmp_path / "out.wav"
    _write_run(str(target), 1)
    rng = random.Random(12)
    for _ in range(40):
        p = _fork.Process(target=_write_forever, args=(str(target), 400_000))
        p.start()
        time.sleep(rng.uniform(0.05, 0.4))
        os.kill(p.pid, signal.SIGKILL)
        p.join(10)
        _files.clean_folder(tmp_path, force=True)  # what the next run in the folder does first
        assert _consistent_run(target) in (1, 2)
        assert _debris(tmp_path) == []


def test_an_interrupt_between_the_renames_still_leaves_a_whole_pair(tmp_path, monkeypatch):
    # SIGTERM and Ctrl-C arrive as exceptions; one raised after the WAV's rename must not leave
    # the new WAV beside the old sidecar (the interrupted commit finishes the set first).
    _write_run(str(tmp_path / "a.wav"), 1)
    real_replace, calls = os.replace, []

    def interrupted_after_first(src, dst):
        real_replace(src, dst)
        calls.append(dst)
        if len(calls) == 1:
            raise KeyboardInterrupt

    monkeypatch.setattr(os, "replace", interrupted_after_first)
    with pytest.raises(KeyboardInterrupt):
        _write_run(str(tmp_path / "a.wav"), 2)
    monkeypatch.setattr(os, "replace", real_replace)
    assert _consistent_run(tmp_path / "a.wav") == 2 and _debris(tmp_path) == []


def _age(path: Path, seconds: float) -> None:
    t = time.time() - seconds
    os.utime(path, (t, t))


def test_without_flock_only_old_temporaries_and_intents_are_taken_as_dead(tmp_path, monkeypatch):
    # A file system that refuses flock (some network mounts) cannot tell a live temporary from
    # a dead one: the age rule decides (older than an hour), so another run's work in progress
    # is never removed, and a young intent (a commit in progress) is not rolled forward.
    def no_flock(fd, op):
        raise OSError(95, "Operation not supported")

    monkeypatch.setattr(_files.fcntl, "flock", no_flock)
    _write_run(str(tmp_path / "c.wav"), 1)
    young, old = tmp_path / ".a.wav.000000000000000a.part", tmp_path / ".b.wav.000000000000000b.part"
    young.write_bytes(b"another run, writing now")
    old.write_bytes(b"left by a run killed yesterday")
    _age(old, 2 * 3600)
    intent = _intent(tmp_path, ".c.wav.00000000000000cc.commit", [(young.name, "c.wav")])
    assert _files.clean_folder(tmp_path, force=True) == (0, 1)
    assert young.exists() and intent.exists() and not old.exists()
    assert _consistent_run(tmp_path / "c.wav") == 1
    _age(intent, 2 * 3600)
    _age(young, 2 * 3600)
    assert _files.clean_folder(tmp_path, force=True)[0] == 1  # dead now: finished
    assert not intent.exists()


def test_a_dead_runs_intent_is_finished_before_a_new_set_is_committed(tmp_path):
    # A run killed mid-commit after this run cleaned the folder leaves an intent whose later
    # roll-forward would put part of its set over this run's: the commit finishes it first, so
    # what stands is this run's whole pair.
    _write_run(str(tmp_path / "a.wav"), 1)
    _write_run(str(tmp_path / "dead.wav"), 3)
    tmp_json = ".a.json.00000000000000aa.part"
    os.replace(tmp_path / "dead.json", tmp_path / tmp_json)
    os.replace(tmp_path / "dead.wav", tmp_path / "a.wav")  # the dead run's first rename
    _intent(tmp_path, ".a.wav.00000000000000bb.commit",
            [(".a.wav.00000000000000cc.part", "a.wav"), (tmp_json, "a.json")])
    _files._cleaned.add(str(tmp_path.resolve()))  # this run cleaned before the intent appeared
    _write_run(str(tmp_path / "a.wav"), 2)
    assert _files.clean_folder(tmp_path, force=True) == (0, 0)  # nothing left to roll forward
    assert _consistent_run(tmp_path / "a.wav") == 2 and _debris(tmp_path) == []


def test_a_roll_forward_that_cannot_finish_stops_in_order(tmp_path):
    # The WAV's rename fails (its name became a folder): the sidecar, renamed after it, is not
    # put beside an old WAV it does not describe.
    _write_run(str(tmp_path / "new.wav"), 2)
    os.replace(tmp_path / "new.wav", tmp_path / ".a.wav.00000000000000cc.part")
    os.replace(tmp_path / "new.json", tmp_path / ".a.json.00000000000000aa.part")
    (tmp_path / "a.wav").mkdir()
    _intent(tmp_path, ".a.wav.00000000000000bb.commit",
            [(".a.wav.00000000000000cc.part", "a.wav"),
             (".a.json.00000000000000aa.part", "a.json")])
    assert _files.clean_folder(tmp_path, force=True) == (0, 2)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.wav"]


def test_an_interrupt_while_a_temporary_is_opened_leaves_none(tmp_path, monkeypatch):
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(_files.os, "fdopen", interrupted)
    with pytest.raises(KeyboardInterrupt):
        _files.FileSet().open(tmp_path / "a.wav")
    assert _debris(tmp_path) == []


def test_commands_refuse_a_response_whose_sidecar_names_another_wav(tmp_path, capsys):
    # The reading side of the pair: analyze and report read IR.json beside IR.wav; a WAV
    # swapped in from another run is one error line, never figures under the wrong conditions.
    from measure.cli import main
    from measure.virtual import DEMO_ROOMS, room_ir

    h = room_ir(DEMO_ROOMS[0], 48000, seed=1)
    audio_io.write_pair(tmp_path / "a.wav", 0.5 * h / np.max(np.abs(h)), 48000,
                        {"format": "measure.ir/1"})
    audio_io.write_audio(tmp_path / "b.wav", 0.25 * h / np.max(np.abs(h)), 48000)
    os.replace(tmp_path / "b.wav", tmp_path / "a.wav")
    for argv in (["analyze", str(tmp_path / "a.wav")],
                 ["report", str(tmp_path / "a.wav"), "--out", str(tmp_path / "r.html")]):
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "do not belong together" in err, err
    assert not (tmp_path / "r.html").exists()


def test_a_wav_written_over_a_response_takes_its_stale_sidecar_with_it(tmp_path, capsys):
    # A rendered model written over a measured response's name (render/auralize/predict --out):
    # the old sidecar names the old WAV by hash and would make the new file unreadable as a
    # pair; it goes in the same commit, and the new WAV reads as a response of its own.
    from measure.cli import main
    from measure.virtual import DEMO_ROOMS, room_ir

    h = room_ir(DEMO_ROOMS[0], 48000, seed=1)
    audio_io.write_pair(tmp_path / "ir.wav", 0.5 * h / np.max(np.abs(h)), 48000,
                        {"format": "measure.ir/1"})
    (tmp_path / "notes.json").write_text('{"mine": true}')  # a user's own JSON: left alone
    audio_io.write_audio(tmp_path / "ir.wav", 0.25 * h / np.max(np.abs(h)), 48000)
    audio_io.write_audio(tmp_path / "notes.wav", np.full(4000, 0.25), FS)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ir.wav", "notes.json", "notes.wav"]
    assert main(["analyze", str(tmp_path / "ir.wav")]) == 0, capsys.readouterr().err


def test_a_removal_killed_half_way_is_finished_by_the_next_run(tmp_path):
    # The new WAV renamed, the stale sidecar not yet: the roll-forward removes it.
    _write_run(str(tmp_path / "ir.wav"), 1)
    (tmp_path / "new.wav").write_bytes(b"new samples")
    os.replace(tmp_path / "new.wav", tmp_path / "ir.wav")
    grave = ".ir.json.00000000000000dd.part"
    _intent(tmp_path, ".ir.wav.00000000000000bb.commit",
            [(".ir.wav.00000000000000cc.part", "ir.wav")], [("ir.json", grave)])
    assert _files.clean_folder(tmp_path, force=True) == (1, 0)  # removed by the roll-forward
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ir.wav"]


def test_an_interrupt_before_the_first_rename_keeps_the_old_pair_whole(tmp_path, monkeypatch):
    # Ctrl-C or SIGTERM after the intent is written and before any rename: the temporaries are
    # discarded, and the intent left must not remove the old sidecar later (the new WAV whose
    # set it belonged to never arrived).
    _write_run(str(tmp_path / "ir.wav"), 1)
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    real_replace = os.replace

    def interrupted(src, dst):
        raise KeyboardInterrupt

    monkeypatch.setattr(os, "replace", interrupted)
    with pytest.raises(KeyboardInterrupt):
        audio_io.write_audio(tmp_path / "ir.wav", np.full(4000, 0.25), FS)
    monkeypatch.setattr(os, "replace", real_replace)
    _files.clean_folder(tmp_path, force=True)
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before


def test_a_dead_runs_removal_is_never_replayed_over_a_newer_pair(tmp_path, monkeypatch):
    # Without locks an hour-old intent is finished by whichever run comes next; a run killed
    # after renaming its WAV and before removing the stale sidecar, then a newer whole pair
    # written over both: the replay finds the WAV is no longer the dead run's and does nothing.
    monkeypatch.setattr(_files.fcntl, "flock", lambda fd, op: (_ for _ in ()).throw(
        OSError(95, "Operation not supported")))
    _write_run(str(tmp_path / "x.wav"), 1)
    (tmp_path / "dead.wav").write_bytes(b"the dead run's WAV")
    os.replace(tmp_path / "dead.wav", tmp_path / "x.wav")
    intent = _intent(tmp_path, ".x.wav.00000000000000bb.commit",
                     [(".x.wav.00000000000000cc.part", "x.wav")],
                     [("x.json", ".x.json.00000000000000dd.part")])
    _age(intent, 2 * 3600)
    _write_run(str(tmp_path / "x.wav"), 2)  # young enough not to be taken as dead: left
    _write_run(str(tmp_path / "x.wav"), 3)
    assert _files.clean_folder(tmp_path, force=True) == (0, 0)
    assert _consistent_run(tmp_path / "x.wav") == 3 and _debris(tmp_path) == []


def test_the_stale_sidecar_is_decided_at_the_commit_not_before(tmp_path, monkeypatch):
    # Two runs: A writes a WAV alone, B commits a whole pair at that name while A is still
    # writing. A's commit must take B's sidecar (now naming a WAV that A replaces) with it,
    # never leave A's WAV beside B's sidecar.
    real, b_done = _files.FileSet.commit, []

    def b_commits_just_before(self):
        if not b_done:  # B's own commit goes through the real one
            b_done.append(True)
            _write_run(str(tmp_path / "x.wav"), 2)
        return real(self)

    monkeypatch.setattr(_files.FileSet, "commit", b_commits_just_before)
    audio_io.write_audio(tmp_path / "x.wav", np.full(4000, 0.25), FS)
    monkeypatch.setattr(_files.FileSet, "commit", real)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.wav"]
    assert np.all(audio_io.read_audio(tmp_path / "x.wav").x == np.float32(0.25))


def test_a_take_that_appears_while_a_file_is_written_at_its_name_is_not_replaced(tmp_path,
                                                                                 monkeypatch):
    from measure import session

    real, made = _files.FileSet.commit, []

    def take_recorded_just_before(self):
        if not made:
            made.append(None)  # the take's own sidecar commit goes through the real one
            made[0] = session.save_take(tmp_path, "hall", "S1", np.zeros((1, 100)), FS, {})
        return real(self)

    monkeypatch.setattr(_files.FileSet, "commit", take_recorded_just_before)
    target = tmp_path / "hall" / "S1-take1.wav"
    with pytest.raises(AudioFileError, match="never overwritten"):
        audio_io.write_audio(target, np.full(4000, 0.25), FS)
    monkeypatch.setattr(_files.FileSet, "commit", real)
    assert made[0].wav == target and audio_io.read_audio(target).x.shape == (1, 100)
    assert _debris(target.parent) == []


def test_a_sidecar_of_absurdly_nested_json_is_not_a_traceback(tmp_path):
    # json.loads raises RecursionError (not ValueError) on deep nesting: the guards that read
    # a sidecar beside a target must take it as "not one of ours", not crash.
    (tmp_path / "x.json").write_text("[" * 200_000)
    audio_io.write_audio(tmp_path / "x.wav", np.full(100, 0.25), FS)
    assert (tmp_path / "x.json").read_text() == "[" * 200_000  # not ours: left alone
