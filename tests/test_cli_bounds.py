"""Absurd sizes are refused where they enter, with the bound in the message (issue "Never lose
a take, never crash on a bad file": they ended in memory errors), and nothing is written."""

from __future__ import annotations

import numpy as np
import pytest

from measure.cli import main
from measure.sweep import MAX_FILE_S


def _run(argv, capsys):
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def sweep_and_silence(tmp_path, capsys):
    from measure.audio_io import write_audio

    assert main(["sweep", str(tmp_path / "s.wav"), "--duration", "2", "--gap", "1"]) == 0
    capsys.readouterr()
    write_audio(tmp_path / "silence.wav", np.zeros(48000 * 5), 48000, subtype="PCM_16")
    return tmp_path


@pytest.mark.parametrize("args, bound", [
    (["sweep", "{d}/x.wav", "--duration", "1e9"], f"at most {MAX_FILE_S:g} s"),
    (["sweep", "{d}/x.wav", "--repeats", "100000"], f"at most {MAX_FILE_S:g} s"),
    (["ir", "{d}/silence.wav", "--sweep", "{d}/s.wav", "--out", "{d}/o.wav", "--pre", "1e6"],
     "at most 10 s"),
    (["ir", "{d}/silence.wav", "--sweep", "{d}/s.wav", "--out", "{d}/o.wav", "--harmonics",
      "100000"], "from 0 to 16"),
    (["ir", "{d}/silence.wav", "--sweep", "{d}/s.wav", "--out", "{d}/o.wav"], "no sweep found"),
])
def test_absurd_sizes_are_one_error_line_and_write_nothing(sweep_and_silence, capsys, args,
                                                            bound):
    d = sweep_and_silence
    before = sorted(p.name for p in d.iterdir())
    code, out, err = _run([a.format(d=d) for a in args], capsys)
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and bound in lines[0], err
    assert "Traceback" not in err
    assert sorted(p.name for p in d.iterdir()) == before


def test_no_command_writes_over_its_own_inputs(tmp_path, capsys):
    # Issue "Never lose a take", inputs destroyed: `ir --out` equal to the sweep overwrote it
    # and its sidecar; `auralize --out` equal to the dry sound or the IR; a model written over
    # an IR's sidecar. Each is refused, and every file keeps its bytes.
    from measure.audio_io import write_audio
    from measure.virtual import DEMO_ROOMS, room_ir

    assert main(["sweep", str(tmp_path / "s.wav"), "--duration", "2", "--gap", "1"]) == 0
    h = room_ir(DEMO_ROOMS[1], 48000, seed=1)
    write_audio(tmp_path / "ir.wav", 0.5 * h / np.max(np.abs(h)), 48000)
    (tmp_path / "ir.json").write_text('{"format": "an IR sidecar kept beside it"}')
    write_audio(tmp_path / "dry.wav", 0.1 * np.sin(np.arange(48000) * 0.05), 48000)
    capsys.readouterr()
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    d = str(tmp_path)
    for argv in (["ir", f"{d}/ir.wav", "--sweep", f"{d}/s.wav", "--out", f"{d}/s.wav"],
                 ["auralize", f"{d}/ir.wav", f"{d}/dry.wav", "--out", f"{d}/dry.wav"],
                 ["auralize", f"{d}/ir.wav", f"{d}/dry.wav", "--out", f"{d}/ir.wav"],
                 ["fit", f"{d}/ir.wav", "--out", f"{d}/ir.json"],
                 ["ir", f"{d}/ir.wav", "--sweep", f"{d}/s.wav", "--out", f"{d}/ir.wav"]):
        code, out, err = _run(argv, capsys)
        assert code == 2 and "would overwrite the input" in err, (argv, err)
        assert len(err.strip().splitlines()) == 1
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before


@pytest.mark.parametrize("argv, names", [
    (["sweep", "x.wav", "--duration", "abc"], ("--duration", "measure sweep --help")),
    (["analyze", "a.wav", "b.wav"], ("unrecognized arguments: b.wav", "measure analyze --help")),
    (["nosuch"], ("invalid choice", "measure --help")),
])
def test_argparse_errors_are_one_line_naming_the_command(capsys, argv, names):
    # Issue "Never lose a take": argparse printed its whole usage block, and for extra
    # arguments the top-level usage instead of the command's
    with pytest.raises(SystemExit) as exc:
        main(argv)
    assert exc.value.code == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and err.startswith("error: "), err
    assert "usage:" not in err and all(n in err for n in names), err


def test_devices_json_with_no_devices_is_an_empty_list(monkeypatch, capsys):
    # Issue "Never lose a take": `measure devices --json` with no devices exited 2; a script
    # reads an empty list instead (the table form still says no device was found)
    import json

    from measure import capture

    class FakeSd:
        class PortAudioError(Exception):
            pass

        @staticmethod
        def query_devices():
            return []

        @staticmethod
        def query_hostapis():
            return []

        default = type("D", (), {"device": (-1, -1)})()

    monkeypatch.setattr(capture, "_sd", lambda: FakeSd)
    assert main(["devices", "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == {"devices": []}
    assert main(["devices"]) == 2
    assert "no sound devices" in capsys.readouterr().err


def test_an_unreadable_sidecar_is_reported_as_unreadable_not_as_bad_json(tmp_path):
    # Issue "Never lose a take": a sidecar that cannot be read was reported as "not valid JSON
    # (Permission denied)"; a folder in the sidecar's place stands for any unreadable file
    # (permissions do not bind the root user who runs CI)
    from measure.audio_io import read_json
    from measure.errors import AudioFileError

    (tmp_path / "x.json").mkdir()
    with pytest.raises(AudioFileError, match="cannot be read") as exc:
        read_json(tmp_path / "x.json")
    assert "not valid JSON" not in str(exc.value)
    (tmp_path / "y.json").write_text("{ nope")
    with pytest.raises(AudioFileError, match="not valid JSON"):
        read_json(tmp_path / "y.json")


def test_demo_refuses_a_non_empty_folder_without_force(tmp_path, capsys):
    # Issue "Never lose a take": `demo --out` into an existing folder overwrote earlier
    # responses and models; it now refuses before writing anything
    (tmp_path / "keep.txt").write_text("an earlier result")
    code, out, err = _run(["demo", "--out", str(tmp_path)], capsys)
    assert code == 2 and "not empty" in err and "--force" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["keep.txt"]


def test_sigterm_ends_cleanly_with_143_and_leaves_no_temporaries(tmp_path):
    # Issue "Never lose a take": SIGTERM ended analyze, fit and demo silently with 143; now the
    # same one line as an interrupt, exit 143 (128 + SIGTERM's 15, common practice), and no
    # temporary file of an atomic write left behind
    import signal
    import subprocess
    import sys
    import time
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    p = subprocess.Popen([sys.executable, "-m", "measure", "demo", "--out", str(tmp_path / "d")],
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=root)
    deadline = time.monotonic() + 60
    while not (tmp_path / "d" / "captures").exists() and time.monotonic() < deadline:
        time.sleep(0.1)  # the demo is writing its first take
    time.sleep(0.5)
    p.send_signal(signal.SIGTERM)
    out, err = p.communicate(timeout=60)
    assert p.returncode == 143
    assert err.decode().strip().splitlines()[-1] == \
        "error: terminated; nothing half-written was kept"
    assert not [f for f in (tmp_path / "d").rglob("*") if f.name.endswith(".part")]


def test_a_room_description_that_is_not_text_is_one_error_line(tmp_path, capsys):
    # a binary file named .toml was a UnicodeDecodeError traceback
    bad = tmp_path / "room.toml"
    bad.write_bytes(b"\xff\xfe\x00binary")
    code, out, err = _run(["predict", str(bad)], capsys)
    assert code == 2 and out == "" and "not TOML" in err
    assert len(err.strip().splitlines()) == 1
