"""Kill tests: long writes of `measure batch` and `measure report` are killed with SIGKILL at
random moments, again and again.

Issue "Never lose a take, never crash on a bad file", kill tests: every file left is either its
complete old self or a complete new one (JSON parses, a WAV reads and its sidecar names its
SHA-256, the HTML ends), and after the next run no temporary or unfinished set is left anywhere.
The oracle is outside the code under test: json, soundfile, hashlib and the directory listing.
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import soundfile as sf
from _captures import room_folder

from measure.virtual import OCTAVE_CENTERS_HZ, VirtualRoom, room_ir

FS = 16000
ENV = dict(os.environ, MPLBACKEND="Agg")


def _debris(root: Path) -> list[str]:
    return sorted(str(p.relative_to(root)) for p in root.rglob(".*")
                  if p.name.endswith((".part", ".commit")))


def _whole(root: Path) -> None:
    """Every file under ``root`` is complete, and each WAV with a sidecar is its pair."""
    import hashlib

    for p in root.rglob("*"):
        if p.name.startswith(".") or not p.is_file():
            continue
        if p.suffix == ".json":
            json.loads(p.read_text())  # a torn JSON does not parse
        elif p.suffix == ".wav":
            sf.read(p)  # a torn WAV does not read (or reads short: the hash says so)
            side = p.with_suffix(".json")
            if side.exists():
                want = json.loads(side.read_text()).get("audio_sha256")
                if want is not None:
                    assert hashlib.sha256(p.read_bytes()).hexdigest() == want, p
        elif p.suffix == ".html":
            assert p.read_text().rstrip().endswith("</html>"), p


def _killed(argv: list[str], cwd: Path, after_s: float) -> None:
    proc = subprocess.Popen([sys.executable, "-m", "measure", *argv], cwd=cwd, env=ENV,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    time.sleep(after_s)
    proc.send_signal(signal.SIGKILL)
    proc.wait(30)


def _run(argv: list[str], cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "measure", *argv], cwd=cwd, env=ENV,
                          capture_output=True, text=True, timeout=300)


@pytest.fixture(scope="module")
def level(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("kill")
    rt = (0.6,) * len(OCTAVE_CENTERS_HZ)
    hs = [room_ir(VirtualRoom("r", OCTAVE_CENTERS_HZ, rt, direct_delay_s=0.01, drr_db=0.0,
                              length_s=0.9), FS, seed=i) for i in range(3)]
    room_folder(root, hs, [{}] * 3, FS)
    return root


def test_a_batch_killed_at_random_points_leaves_whole_files_and_the_next_run_tidies(level,
                                                                                     tmp_path):
    import shutil

    shutil.copytree(level / "captures", tmp_path / "captures")
    shutil.copytree(level / "sweeps", tmp_path / "sweeps")
    argv = ["batch", "captures", "--out", "results", "--jobs", "1"]
    first = _run(argv, tmp_path)
    assert first.returncode == 0, first.stderr
    rng = random.Random(3)
    side = tmp_path / "captures" / "hall" / "p1-take1.json"
    for i in range(5):
        # an edited sidecar makes the next batch redo that take and the room's exports
        doc = json.loads(side.read_text())
        doc["notes"] = f"edited {i}"
        side.write_text(json.dumps(doc))
        _killed(argv, tmp_path, rng.uniform(1.0, 4.0))
        _whole(tmp_path / "results")
        again = _run(argv, tmp_path)
        assert again.returncode == 0, again.stderr
        _whole(tmp_path / "results")
        assert _debris(tmp_path) == []
        level_doc = json.loads((tmp_path / "results" / "level.json").read_text())
        for room in level_doc["rooms"]:  # everything the level file names is there
            for t in room["takes"]:
                assert (tmp_path / "results" / t["ir"]).exists()


def test_a_report_killed_at_random_points_is_old_or_new_never_torn(level, tmp_path):
    import shutil

    shutil.copytree(level / "captures", tmp_path / "captures")
    shutil.copytree(level / "sweeps", tmp_path / "sweeps")
    argv = ["report", "captures/hall", "--out", "report.html"]
    first = _run(argv, tmp_path)
    assert first.returncode == 0, first.stderr
    old = (tmp_path / "report.html").read_bytes()
    rng = random.Random(5)
    for _ in range(4):
        _killed(argv, tmp_path, rng.uniform(0.5, 5.0))
        _whole(tmp_path)
        now = (tmp_path / "report.html").read_bytes()
        assert now.rstrip().endswith(b"</html>") and len(now) > len(old) // 2
    # the next run in the folder removes what the killed ones left
    assert _run(["sweep", "spare-sweep.wav"], tmp_path).returncode == 0
    assert _debris(tmp_path) == []
