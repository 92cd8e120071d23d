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


# ---------------------------------------------------------------------------------------------
# Issue "Never lose a take", accepted without a word: each is now refused with one line, or
# (a DC offset) recovered with a warning line.
# ---------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def room_files(tmp_path_factory):
    """A 2 s sweep, a virtual take of it (mono, and with a loopback channel 2), a room IR and a
    model fitted to it, a dry sound and digital silence, built once for these tests."""
    import contextlib
    import io

    from measure.audio_io import read_sweep, write_audio
    from measure.virtual import DEMO_ROOMS, room_ir, virtual_take

    d = tmp_path_factory.mktemp("bounds")
    with contextlib.redirect_stderr(io.StringIO()), contextlib.redirect_stdout(io.StringIO()):
        assert main(["sweep", str(d / "s.wav"), "--duration", "2", "--gap", "1"]) == 0
        sweep = read_sweep(d / "s.wav")
        y = virtual_take(sweep.program, 48000, room_ir(DEMO_ROOMS[1], 48000, seed=1),
                         latency_s=0.05, noise_dbfs=-80.0, extra_s=0.2)
        write_audio(d / "cap.wav", y, 48000, subtype="PCM_24")
        loop = np.zeros_like(y)
        loop[:sweep.program.size] = sweep.program[:y.size]
        write_audio(d / "cap2.wav", np.vstack([y, loop]), 48000, subtype="PCM_24")
        h = room_ir(DEMO_ROOMS[1], 48000, seed=1)
        write_audio(d / "ir.wav", 0.5 * h / np.max(np.abs(h)), 48000)
        assert main(["fit", str(d / "ir.wav"), "--out", str(d / "model.json")]) == 0
        write_audio(d / "dry.wav", 0.1 * np.sin(np.arange(48000) * 0.05), 48000)
        write_audio(d / "zero.wav", np.zeros(48000), 48000)
    return d


def _files(d):
    return {p.relative_to(d).as_posix(): p.read_bytes() for p in sorted(d.rglob("*"))
            if p.is_file()}


def _refused(argv, d, capsys, *needles):
    """Run ``argv`` (``{d}`` is the folder): one error line holding every needle, exit 2, and
    every file of ``d`` unchanged, none added."""
    before = _files(d)
    try:
        code = main([a.format(d=d) for a in argv])
    except SystemExit as exc:  # argparse's own errors
        code = exc.code
    out, err = capsys.readouterr()
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1 and lines[0].startswith("error: "), err
    assert all(n in lines[0] for n in needles), lines[0]
    assert "Traceback" not in err
    assert _files(d) == before
    return lines[0]


def test_dc_offset_warning_gives_the_offset_and_the_headroom_it_costs():
    from measure.capture import DC_WARN_DBFS, dc_offset_warning, dc_offsets_dbfs

    # an offset of 0.3 full scale: 20 lg 0.3 = -10.46 dBFS, and the signal can swing 0.7
    # before clipping on that side: -20 lg 0.7 = 3.10 dB of headroom (derived)
    x = np.full((1, 1000), 0.3)
    (dc,) = dc_offsets_dbfs(x)
    assert dc == pytest.approx(20 * np.log10(0.3), abs=1e-9)
    w = dc_offset_warning(dc, "channel 1")
    assert "-10.5 dBFS" in w and "3.10 dB of headroom" in w
    # the threshold: |mean| above -40 dBFS (1 % of full scale; common practice)
    assert DC_WARN_DBFS == -40.0
    assert dc_offset_warning(-40.5, "c") is None and dc_offset_warning(-39.5, "c") is not None
    assert dc_offset_warning(None, "c") is None  # a mean of exactly 0
    assert "all of the headroom" in dc_offset_warning(0.0, "c")  # a mean at full scale


def test_a_capture_with_a_large_dc_offset_is_recovered_with_a_warning(room_files, tmp_path,
                                                                      capsys):
    # Issue "Never lose a take", accepted without a word: a capture with a large DC offset.
    # The inverse filter is band-limited (above f1), so the response is recovered; the user is
    # told the offset and its cost. 0.1 full scale is -20 dBFS, above the -40 dBFS threshold.
    from measure.audio_io import read_audio, write_audio

    cap = read_audio(room_files / "cap.wav")
    write_audio(tmp_path / "dc.wav", cap.x + 0.1, cap.fs, subtype="PCM_24")
    code = main(["ir", str(tmp_path / "dc.wav"), "--sweep", str(room_files / "s.wav"),
                 "--out", str(tmp_path / "ir.wav")])
    err = capsys.readouterr().err
    assert code == 0 and (tmp_path / "ir.wav").exists()
    dc_lines = [ln for ln in err.splitlines() if "DC offset" in ln]
    assert len(dc_lines) == 1 and dc_lines[0].startswith("warning: channel 1: DC offset -20.0 dBFS")
    assert "0.92 dB of headroom" in dc_lines[0]  # -20 lg(1 - 0.1) = 0.915 dB (derived)
    # the take verdict of `import --sweep` carries the warning, and the sidecar the offset
    code = main(["import", str(tmp_path / "dc.wav"), "--room", "r", "--position", "p",
                 "--sweep", str(room_files / "s.wav"), "--captures", str(tmp_path / "caps"),
                 "--json"])
    import json

    summary = json.loads(capsys.readouterr().out)
    assert any("DC offset -20.0 dBFS" in w for w in summary["verdict"]["warnings"])
    side = json.loads((tmp_path / "caps" / "r" / "p-take1.json").read_text())
    assert side["input"][0]["dc_dbfs"] == pytest.approx(-20.0, abs=0.05)
    # no warning for the clean take (its mean is far below -40 dBFS)
    main(["ir", str(room_files / "cap.wav"), "--sweep", str(room_files / "s.wav"),
          "--out", str(tmp_path / "clean.wav")])
    assert "DC offset" not in capsys.readouterr().err


@pytest.mark.parametrize("argv", [
    ["ir", "{d}/cap2.wav", "--sweep", "{d}/s.wav", "--out", "{d}/o.wav", "--channel", "2",
     "--loopback-channel", "2"],
    ["ir", "{d}/cap2.wav", "--sweep", "{d}/s.wav", "--out", "{d}/o.wav", "--channel", "1",
     "--channel", "2", "--loopback-channel", "2"],
    ["import", "{d}/cap2.wav", "--room", "r", "--position", "p", "--sweep", "{d}/s.wav",
     "--channels", "2", "--loopback-channel", "2", "--captures", "{d}/caps"],
])
def test_a_channel_referenced_to_itself_is_refused(room_files, capsys, argv):
    # Issue "Never lose a take": `--loopback-channel 2 --channel 2` gave a unit impulse at
    # latency 0 and a GOOD verdict; now one line, nothing written (no take filed either)
    _refused(argv, room_files, capsys, "loopback-channel", "referenced to itself")


def test_import_with_a_microphone_and_its_loopback_is_still_fine(room_files, tmp_path, capsys):
    code = main(["import", str(room_files / "cap2.wav"), "--room", "r", "--position", "p",
                 "--sweep", str(room_files / "s.wav"), "--channels", "1,2",
                 "--loopback-channel", "2", "--captures", str(tmp_path)])
    capsys.readouterr()
    assert code in (0, 1) and (tmp_path / "r" / "p-take1.wav").exists()


def test_render_refuses_a_length_that_holds_no_decay(room_files, tmp_path, capsys):
    # Issue "Never lose a take": `render --seconds 0.001` wrote a 48-sample file. The rule:
    # the direct delay + the late part's start + T60/6 of the slowest band (10 dB of decay,
    # the range of EDT, ISO 3382-1:2009 A.2.2)
    import json

    from measure.cli.cmd_render import minimum_seconds
    from measure.model.modelfile import model_from_dict

    model = model_from_dict(json.loads((room_files / "model.json").read_text()))
    need = minimum_seconds(model)
    expected = model.direct_delay_s + model.late.start_s + max(model.late.t60_s) / 6
    assert expected <= need < expected + 0.001  # rounded up to the millisecond
    line = _refused(["render", "{d}/model.json", "--out", "{d}/r.wav", "--seconds", "0.001"],
                    room_files, capsys, "--seconds 0.001 is too short", f"{need:.3f} s")
    assert "ISO 3382-1" in line
    assert main(["render", str(room_files / "model.json"), "--out", str(tmp_path / "r.wav"),
                 "--seconds", f"{need:.3f}"]) == 0
    capsys.readouterr()


@pytest.mark.parametrize("argv, needle", [
    (["auralize", "{d}/zero.wav", "{d}/dry.wav", "--out", "{d}/w.wav"], "all zeros"),
    (["auralize", "{d}/ir.wav", "{d}/zero.wav", "--out", "{d}/w.wav"], "silent"),
    (["auralize", "{d}/model.json", "{d}/zero.wav", "--out", "{d}/w.wav"], "silent"),
    (["auralize", "{d}/ir.wav", "{d}/zero.wav", "--out", "{d}/w.wav", "--peak", "-1"], "silent"),
])
def test_auralize_refuses_a_silent_result(room_files, capsys, argv, needle):
    # Issue "Never lose a take": an all-zero IR or a silent dry sound gave a silent output
    _refused(argv, room_files, capsys, needle)


@pytest.mark.parametrize("text", ["nan", "NaN", "inf", "-inf", "1e400"])
def test_finite_float_refuses_what_float_accepts(text):
    # argparse's `float` accepts "nan", "inf" and overflows to inf (Python float semantics);
    # no option of this tool can use them
    import argparse

    from measure.cli._common import finite_float, positive_float

    with pytest.raises(argparse.ArgumentTypeError, match="not a finite number"):
        finite_float(text)
    with pytest.raises(argparse.ArgumentTypeError, match="not a finite number"):
        positive_float(text)
    assert finite_float("-3.5") == -3.5
    with pytest.raises(argparse.ArgumentTypeError, match="must be positive"):
        positive_float("-3")


def test_no_command_takes_a_bare_float_option():
    # Every float option goes through finite_float or positive_float; `measure sweep` (whose
    # module is kept by another engineer) is the exception: its values are checked by
    # SweepSpec, which refuses NaN and Inf with one line (tested in test_catalogue.py)
    import argparse

    from measure.cli import build_parser

    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    bare = [f"{name} {opt.option_strings[0]}" for name, p in sub.choices.items()
            for opt in p._actions if opt.type is float and name != "sweep"]
    assert bare == []


def test_check_air_refuses_the_impossible_and_warns_outside_iso_9613_1():
    from measure.cli._common import check_air
    from measure.errors import ParameterError

    assert check_air(None, None) == [] and check_air(20.0, 50.0) == []
    # relative humidity lies in 0..100 % by definition
    for rh in (150.0, -1.0, 100.01):
        with pytest.raises(ParameterError, match="not a relative humidity"):
            check_air(None, rh)
    # -50..60 °C as a room description accepts (measure.predict.RoomDescription)
    for t in (-60.0, 61.0, 1e9):
        with pytest.raises(ParameterError, match="outside -50..60 °C"):
            check_air(t, None)
    # ISO 9613-1:1993 covers -20..+50 °C and 10..100 % RH (clause 1, Table 1; from memory):
    # outside it, a warning, and the value is kept
    assert check_air(-20.0, 10.0) == [] and check_air(50.0, 100.0) == []
    (w,) = check_air(55.0, None)
    assert "ISO 9613-1" in w and "-20..50 °C" in w
    (w,) = check_air(None, 5.0)
    assert "ISO 9613-1" in w and "10..100 %" in w


@pytest.mark.parametrize("option, value, needle", [
    ("--humidity", "150", "not a relative humidity"),
    ("--humidity", "nan", "not a finite number"),
    ("--distance", "-3", "must be positive"),
    ("--distance", "0", "must be positive"),
    ("--distance", "inf", "not a finite number"),
    ("--temperature", "nan", "not a finite number"),
    ("--temperature", "-300", "outside -50..60 °C"),
    ("--angle", "inf", "not a finite number"),
])
def test_import_refuses_impossible_conditions(room_files, capsys, option, value, needle):
    # Issue "Never lose a take": `import --humidity 150`, `--distance -3` and a NaN temperature
    # (stored as null) were filed without a word
    _refused(["import", "{d}/cap.wav", "--room", "r", "--position", "p", "--captures",
              "{d}/caps", f"{option}={value}"], room_files, capsys, needle)


@pytest.mark.parametrize("argv, needle", [
    (["attenuation", "{d}/ir.wav", "--distances", "1", "--humidity", "150"], "relative humidity"),
    (["attenuation", "{d}/ir.wav", "--distances", "1", "--temperature=nan"], "finite"),
    (["attenuation", "{d}/ir.wav", "--distances", "1", "--pressure", "0"], "positive"),
    (["attenuation", "{d}/ir.wav", "--distances", "1", "--reference=-1"], "positive"),
    (["compare", "{d}/ir.wav", "{d}/ir.wav", "--fail-above", "nan"], "finite"),
    (["auralize", "{d}/ir.wav", "{d}/dry.wav", "--out", "{d}/w.wav", "--peak", "nan"], "finite"),
    (["ir", "{d}/cap.wav", "--sweep", "{d}/s.wav", "--out", "{d}/o.wav", "--pre", "nan"],
     "finite"),
    (["render", "{d}/model.json", "--out", "{d}/r.wav", "--seconds", "inf"], "finite"),
])
def test_nan_and_inf_options_are_refused_everywhere(room_files, capsys, argv, needle):
    _refused(argv, room_files, capsys, needle)


@pytest.mark.parametrize("argv, needle", [
    # the model file holds orders 1..64 and at most 400 echoes (measure.model.modelfile); an
    # option beyond them is refused before the fit, not after seconds of work
    (["fit", "{d}/ir.wav", "--out", "{d}/m.json", "--order", "100000"], "from 1 to 64"),
    (["fit", "{d}/ir.wav", "--out", "{d}/m.json", "--echoes", "100000"], "from 0 to 400"),
    (["render", "{d}/model.json", "--out", "{d}/r.wav", "--rate", "1000"], "8000 and 384000"),
    # the channel options of capture are checked before any sound device is opened
    (["capture", "--sweep", "{d}/s.wav", "--room", "r", "--position", "p", "--input-channels",
      "2", "--loopback-channel", "2", "--yes"], "referenced to itself"),
])
def test_options_beyond_what_a_command_can_make_are_refused_first(room_files, capsys, argv,
                                                                  needle):
    _refused(argv, room_files, capsys, needle)


def test_a_reader_that_goes_away_ends_the_command_quietly_with_141(tmp_path):
    # `measure analyze IR.wav --json | head` ended in a BrokenPipeError traceback. It now stops
    # as a program killed by SIGPIPE would, status 128 + 13 (common practice; Python docs,
    # "Note on SIGPIPE", for the /dev/null redirection), with nothing on stderr.
    import subprocess
    import sys

    from measure.audio_io import write_audio
    from measure.virtual import DEMO_ROOMS, room_ir

    h = room_ir(DEMO_ROOMS[0], 48000, seed=1)
    write_audio(tmp_path / "ir.wav", 0.5 * h / np.max(np.abs(h)), 48000)
    p = subprocess.Popen([sys.executable, "-m", "measure", "analyze", str(tmp_path / "ir.wav"),
                          "--json"], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    p.stdout.close()
    err = p.stderr.read().decode()
    assert p.wait(60) == 141 and err == ""


def test_an_integer_too_large_for_a_float_is_a_parameter_error():
    # Fuzzing (issue 12): float(10**400) raises OverflowError, which escaped the checks.
    from measure._validate import check_nonnegative, check_positive
    from measure.errors import ParameterError

    for check in (check_positive, check_nonnegative):
        with pytest.raises(ParameterError, match="not a number"):
            check(10**400, "x")
