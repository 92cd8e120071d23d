"""The command line: sweep, ir and demo; errors as one `error:` line with exit status 2."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from measure.cli import main
from measure.cli.cmd_sweep import default_fade_in_s
from measure.sweep import SweepSpec, make_sweep
from measure.virtual import DEMO_ROOMS, room_ir, virtual_take

FS = 48000


def run(argv: list[str], capsys) -> tuple[int, str, str]:
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def sweep_file(tmp_path: Path, capsys) -> Path:
    path = tmp_path / "sweep.wav"
    code, _, _ = run(["sweep", str(path), "--rate", str(FS), "--f1", "20", "--duration", "2",
                      "--gap", "1.5"], capsys)
    assert code == 0
    return path


@pytest.fixture
def capture_file(tmp_path: Path, sweep_file: Path) -> Path:
    from measure.audio_io import read_sweep

    sweep = read_sweep(sweep_file)
    y = virtual_take(sweep.program, FS, room_ir(DEMO_ROOMS[1], FS), latency_s=0.05,
                     drift_ppm=20.0, noise_dbfs=-80.0, extra_s=0.2)
    path = tmp_path / "capture.wav"
    sf.write(path, y, FS, subtype="PCM_24")
    return path


def test_sweep_writes_the_file_and_a_sidecar_that_rebuilds_it_bit_for_bit(sweep_file):
    side = json.loads(sweep_file.with_suffix(".json").read_text())
    assert side["format"] == "measure.sweep/1" and side["tool_version"]
    spec = SweepSpec(**side["sweep"])
    data, fs = sf.read(sweep_file, dtype="float32")
    assert fs == FS
    np.testing.assert_array_equal(data, make_sweep(spec).program.astype(np.float32))


def test_ir_writes_a_float_wav_and_its_json(tmp_path, sweep_file, capture_file, capsys):
    out = tmp_path / "ir.wav"
    code, stdout, _ = run(["ir", str(capture_file), "--sweep", str(sweep_file), "--out",
                           str(out), "--json", "--save-harmonics"], capsys)
    assert code == 0
    info = sf.info(out)
    assert info.subtype == "FLOAT" and info.samplerate == FS
    side = json.loads(out.with_suffix(".json").read_text())
    for key in ("sample_rate", "latency_s", "drift_ppm", "peak_to_noise_db",
                "harmonic_distortion", "sweep", "sources", "tool_version"):
        assert key in side
    assert side["drift_ppm"] == pytest.approx(20.0, abs=2.0)  # issue: drift within 2 ppm
    assert json.loads(stdout)["drift_ppm"] == side["drift_ppm"]
    harm = tmp_path / "ir.harmonics.wav"
    assert sf.info(harm).channels == 4 and side["sources"]["harmonics_file"] == harm.name


def _write(path: Path, x: np.ndarray, fs: int = FS, subtype: str = "FLOAT") -> Path:
    sf.write(path, x, fs, subtype=subtype)
    return path


@pytest.mark.parametrize("case", ["missing", "unreadable", "short", "no-sweep", "silence",
                                  "another-sweep", "rate", "no-sidecar", "bad-sidecar", "nan"])
def test_each_bad_input_is_one_error_line_exit_2_and_writes_nothing(
        case, tmp_path, sweep_file, capture_file, capsys):
    capture, sweep = capture_file, sweep_file
    if case == "missing":
        capture = tmp_path / "nothing.wav"
    elif case == "unreadable":
        capture = tmp_path / "text.wav"
        capture.write_text("not audio")
    elif case == "short":
        capture = _write(tmp_path / "short.wav", np.zeros(FS // 2))
    elif case == "no-sweep":
        rng = np.random.default_rng(0)
        capture = _write(tmp_path / "noise.wav", 0.01 * rng.standard_normal(5 * FS))
    elif case == "silence":
        capture = _write(tmp_path / "silence.wav", np.zeros(5 * FS), subtype="PCM_16")
    elif case == "another-sweep":
        # a quiet take of a 3 s 50 Hz-16 kHz sweep given with the 2 s 20 Hz-Nyquist sweep file
        from measure.sweep import SweepSpec, make_sweep

        other = make_sweep(SweepSpec(fs=FS, f1_hz=50.0, f2_hz=16000.0, duration_s=3.0))
        capture = _write(tmp_path / "other.wav", virtual_take(
            other.program, FS, room_ir(DEMO_ROOMS[1], FS), latency_s=0.05, noise_dbfs=-80.0,
            extra_s=0.5))
    elif case == "rate":
        data, _ = sf.read(capture_file)
        capture = _write(tmp_path / "44k.wav", data, fs=44100)
    elif case == "no-sidecar":
        sweep = tmp_path / "lonely.wav"
        sweep.write_bytes(sweep_file.read_bytes())
    elif case == "bad-sidecar":
        sweep_file.with_suffix(".json").write_text("{ not json")
    elif case == "nan":
        data, _ = sf.read(capture_file)
        data[1000] = np.nan
        capture = _write(tmp_path / "nan.wav", data)
    out = tmp_path / "ir.wav"
    code, _, err = run(["ir", str(capture), "--sweep", str(sweep), "--out", str(out)], capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ")
    assert ";" in lines[0]  # what was wrong; what to do
    assert "Traceback" not in err
    assert not out.exists() and not out.with_suffix(".json").exists()


def test_a_clipped_capture_is_recovered_with_a_warning(tmp_path, sweep_file, capture_file, capsys):
    data, _ = sf.read(capture_file)
    clipped = _write(tmp_path / "clipped.wav", np.clip(data * 50, -1, 1))
    out = tmp_path / "ir.wav"
    code, _, err = run(["ir", str(clipped), "--sweep", str(sweep_file), "--out", str(out)], capsys)
    assert code == 0 and out.exists()
    assert "warning:" in err and "clipped" in err


def test_a_sweep_that_takes_name_is_never_replaced_without_force(tmp_path, capsys):
    # Issue "Never lose a take", inputs are sacred: `measure sweep` silently replaced a sweep
    # that earlier takes name by SHA-256. The same sweep again is left alone; another one is
    # refused; with --force the old pair is kept beside it, where a take's sweep_sha256 finds it.
    from measure import audio_io, session

    out = tmp_path / "sweeps" / "s.wav"
    assert run(["sweep", str(out), "--duration", "1", "--gap", "0.5"], capsys)[0] == 0
    old = {p.name: p.read_bytes() for p in out.parent.iterdir()}
    old_sha = audio_io.file_sha256(out)
    code, _, err = run(["sweep", str(out), "--duration", "1", "--gap", "0.5"], capsys)
    assert code == 0 and "left as it is" in err
    code, _, err = run(["sweep", str(out), "--duration", "2"], capsys)
    assert code == 2 and err.count("\n") == 1 and "--force" in err
    assert {p.name: p.read_bytes() for p in out.parent.iterdir()} == old
    code, _, err = run(["sweep", str(out), "--duration", "2", "--force"], capsys)
    kept = out.with_name(f"s.replaced-{old_sha[:8]}.wav")
    assert code == 0 and kept.name in err
    assert kept.read_bytes() == old["s.wav"]
    assert audio_io.sidecar_path(kept).read_bytes() == old["s.json"]
    assert audio_io.read_sweep(kept).spec.duration_s == 1.0  # still a whole, readable pair
    assert audio_io.read_sweep(out).spec.duration_s == 2.0
    room = tmp_path / "captures" / "hall"
    assert session.resolve_sweep("s.wav", room, sha256=old_sha) == kept
    assert session.resolve_sweep("s.wav", room, sha256=audio_io.file_sha256(out)) == out
    assert session.resolve_sweep("s.wav", room) == out


def _listing(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def test_sweep_force_never_replaces_a_take(tmp_path, capsys):
    # Issue "Never lose a take": takes are never overwritten at all, --force or not.
    from measure import session

    t = session.save_take(tmp_path, "hall", "S1", np.zeros((1, 4800)), 48000, {})
    before = _listing(tmp_path)
    for force in ([], ["--force"]):
        code, _, err = run(["sweep", str(t.wav), "--duration", "1", *force], capsys)
        assert code == 2 and err.count("\n") == 1 and "never overwritten" in err
        assert _listing(tmp_path) == before


def test_sweep_over_a_file_that_is_not_a_sweep_says_so(tmp_path, capsys):
    out = tmp_path / "Voice.WAV"
    _write(out, np.zeros(4800))
    code, _, err = run(["sweep", str(out), "--duration", "1"], capsys)
    assert code == 2 and "not a sweep this tool wrote" in err and "--force" in err
    code, _, err = run(["sweep", str(out), "--duration", "1", "--force"], capsys)
    assert code == 0
    kept = [p.name for p in tmp_path.iterdir() if ".replaced-" in p.name]
    assert len(kept) == 1 and kept[0].endswith(".WAV")  # the suffix as the user spelled it


def test_an_interrupted_sweep_force_leaves_the_old_sweep_findable(tmp_path, capsys, monkeypatch):
    # --force dies after the old pair was kept and before the new pair is in place (here the
    # write fails; a SIGKILL at that moment leaves the same): the takes' sweep is still found.
    from measure import audio_io, session
    from measure.errors import AudioFileError

    out = tmp_path / "sweeps" / "s.wav"
    assert run(["sweep", str(out), "--duration", "1", "--gap", "0.5"], capsys)[0] == 0
    old_sha = audio_io.file_sha256(out)

    def fails(*args, **kwargs):
        raise AudioFileError("cannot write into the folder (disk full); free some space")

    monkeypatch.setattr(audio_io, "write_pair", fails)
    code, _, err = run(["sweep", str(out), "--duration", "2", "--force"], capsys)
    assert code == 2 and "disk full" in err
    monkeypatch.undo()
    room = tmp_path / "captures" / "hall"
    assert audio_io.file_sha256(session.resolve_sweep("s.wav", room, sha256=old_sha)) == old_sha
    out.unlink()  # even with the named file gone
    audio_io.sidecar_path(out).unlink()
    found = session.resolve_sweep("s.wav", room, sha256=old_sha)
    assert found == audio_io.replaced_path(out, old_sha)
    assert audio_io.read_sweep(found).spec.duration_s == 1.0


@pytest.mark.parametrize("links", [True, False])
def test_sweep_force_makes_again_a_kept_copy_cut_short(tmp_path, capsys, monkeypatch, links):
    # A --force killed while copying (a file system without hard links) left a truncated kept
    # copy: the next --force must not trust the name and replace the only whole old sweep.
    import os

    from measure import audio_io

    out = tmp_path / "s.wav"
    assert run(["sweep", str(out), "--duration", "1", "--gap", "0.5"], capsys)[0] == 0
    old = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    kept = audio_io.replaced_path(out, audio_io.file_sha256(out))
    kept.write_bytes(old["s.wav"][:100])
    if not links:
        def no_links(src, dst):
            raise OSError(1, "Operation not permitted")
        monkeypatch.setattr(os, "link", no_links)
    code, _, err = run(["sweep", str(out), "--duration", "2", "--force"], capsys)
    assert code == 0, err
    assert kept.read_bytes() == old["s.wav"]
    assert audio_io.sidecar_path(kept).read_bytes() == old["s.json"]
    assert audio_io.read_sweep(kept).spec.duration_s == 1.0
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_a_take_is_never_recovered_with_another_sweep_of_its_sweeps_name(tmp_path, capsys):
    # The sweep replaced behind the tool's back (copied over, no kept copy): the take's
    # sweep_sha256 no longer matches, which is one error line, not a silent wrong recovery.
    from measure import audio_io, session
    from measure.errors import AudioFileError

    out = tmp_path / "sweeps" / "s.wav"
    assert run(["sweep", str(out), "--duration", "1", "--gap", "0.5"], capsys)[0] == 0
    old_sha = audio_io.file_sha256(out)
    assert run(["sweep", str(tmp_path / "t.wav"), "--duration", "2"], capsys)[0] == 0
    for name in ("t.wav", "t.json"):
        (tmp_path / name).replace(out.with_name("s" + name[1:]))
    room = tmp_path / "captures" / "hall"
    with pytest.raises(AudioFileError, match="not the sweep the take was recorded with"):
        session.resolve_sweep("s.wav", room, sha256=old_sha)
    with pytest.raises(AudioFileError, match="not a SHA-256"):
        session.resolve_sweep("s.wav", room, sha256="../../etc")
    for named in (5, "s\0.wav"):  # a damaged sidecar
        with pytest.raises(AudioFileError, match="not a file name"):
            session.resolve_sweep(named, room, sha256=old_sha)
    assert session.resolve_sweep("missing.wav", room, sha256=old_sha) is None


@pytest.mark.parametrize("argv, match", [
    (["--f2", "30000"], "exceeds Nyquist"),
    (["--f1", "5000", "--f2", "1000"], "must be below"),
    (["--duration", "0"], "duration"),
    (["--rate", "0"], "sample rate"),
])
def test_sweep_refuses_bad_parameters(tmp_path, capsys, argv, match):
    out = tmp_path / "s.wav"
    code, _, err = run(["sweep", str(out), *argv], capsys)
    assert code == 2 and err.startswith("error: ") and match in err
    assert not out.exists()


def test_an_unwritable_output_is_one_error_line(tmp_path, capsys):
    # The output's folder is a file: the OSError of the atomic writer becomes one `error:` line
    # naming the folder and what to check (exit 2), never a traceback, and nothing is written.
    blocker = tmp_path / "not-a-folder"
    blocker.write_text("")
    code, _, err = run(["sweep", str(blocker / "s.wav")], capsys)
    assert code == 2 and err.startswith("error: cannot write into") and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == ["not-a-folder"]


def test_cli_defaults_match_the_library_defaults():
    # STYLE.md §9: one test that the CLI defaults match the library defaults.
    from measure.cli import build_parser

    args = build_parser().parse_args(["sweep", "x.wav"])
    spec_defaults = {f.name: f.default for f in SweepSpec.__dataclass_fields__.values()}
    assert args.gap == spec_defaults["gap_s"]
    assert args.lead_in == spec_defaults["lead_in_s"]
    assert args.fade_out == spec_defaults["fade_out_s"]
    assert args.repeats == spec_defaults["repeats"]
    assert args.level is None  # None means the library's DEFAULT_LEVEL_DBFS
    assert default_fade_in_s(20.0, 24000.0, 5.0) == pytest.approx(0.1 * 5.0 * np.log(2) / np.log(1200))


def test_python_dash_m_and_help_work():
    r = subprocess.run([sys.executable, "-m", "measure", "--help"], capture_output=True, text=True)
    assert r.returncode == 0 and "demo" in r.stdout and "sweep" in r.stdout


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    """One run of `measure demo` shared by the tests that read what it wrote (30 s)."""
    import contextlib
    import io

    root = tmp_path_factory.mktemp("demo") / "demo"
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["demo", "--out", str(root)])
    return code, out.getvalue(), root


def test_demo_runs_end_to_end_without_hardware(demo_run):
    code, out, root = demo_run
    assert code == 0
    from measure.audio_io import read_audio
    from measure.deconvolve import CLIP_LEVEL
    from measure.demo import CANTEEN, DEMO_TAKES

    n = len(DEMO_TAKES)
    assert (root / "sweeps" / "demo-sweep.wav").exists()
    takes = sorted(p for p in (root / "captures").glob("*/*-take1.wav")
                   if p.parent.name != CANTEEN.name)
    assert len(takes) == n == 4
    for take in takes:
        # no clipped take (the parking level used to reach +1.7 dBFS), and each one judged as
        # `measure capture` judges a take; the demo's takes pass its own verdict
        assert np.max(np.abs(read_audio(take).x)) < CLIP_LEVEL * 10 ** (-3 / 20)
        side = json.loads(take.with_suffix(".json").read_text())
        assert side["verdict"]["verdict"] == "good", side["verdict"]
    assert len(list((root / "irs").glob("*.wav"))) == n
    # the plant room's ventilation rumble buries its lowest octaves: null, with the reason
    plant = json.loads((root / "figures" / "plant-room-door-side.json").read_text())
    low = {b["label"]: b for b in plant["bands"]}
    assert low["63"]["t20_s"] is None and any("T20 needs 35 dB" in f for f in low["63"]["flags"])
    assert low["1k"]["t20_s"] is not None
    assert "plant-room: what is not measurable, and why" in out
    for fig in (root / "figures").glob("*.json"):
        doc = json.loads(fig.read_text())
        assert doc["drift_ppm"] == pytest.approx(23.0, abs=2.0)  # the demo's virtual USB mic
    assert "stairwell" in out and "Look in" in out
    models = [p for p in (root / "models").glob("*.json") if not p.name.endswith("-report.json")]
    assert len(models) == n + 1  # and the canteen's, with its measured RoomRolloffFactor
    for m in models:
        assert json.loads(m.read_text())["i3dl2"]["values"]["DecayTime"] > 0
    assert (root / "listen" / "dry.wav").exists()
    assert len(list((root / "listen").glob("*-measured.wav"))) == n
    assert len(list((root / "listen").glob("*-modelled.wav"))) == n
    assert len(list((root / "plots").glob("*.png"))) == 2 * n + 1


def test_demo_runs_the_batch_and_writes_the_report_and_the_summary(demo_run):
    # Issue "A whole level at once", item 6
    code, out, root = demo_run
    assert code == 0
    level = json.loads((root / "results" / "level.json").read_text())
    assert level["format"] == "measure.level/1" and len(level["rooms"]) == 5
    assert not level["left_out"]
    html = (root / "report.html").read_text()
    assert html.startswith("<!DOCTYPE html>") and html.count('<section class="room"') == 5
    assert (root / "summary.txt").read_text().rstrip("\n") == out.rstrip("\n")


def test_demo_compares_each_room_with_its_model_and_description(demo_run):
    # Issue "Compare", item 5: each room against its fitted model and its room description, and
    # one audible difference on purpose. ISO 3382-1 Table A.1: 1 JND of T30 is 5 %; heavy carpet
    # absorbs 0.14-0.65 from 500 Hz up where bare concrete absorbs 0.01-0.02 (measurement.md
    # §7's handbook table), so the office without it decays several JNDs longer there.
    code, out, root = demo_run
    assert code == 0
    for stem in ("stairwell-landing-2", "office-desk-4", "parking-bay-17",
                 "plant-room-door-side"):
        for what in ("fitted-model", "room-description"):
            doc = json.loads((root / "comparisons" / f"{stem}-vs-{what}.json").read_text())
            assert doc["cells"] and doc["summary"]["n_compared"] > 0
    model = json.loads((root / "comparisons" / "office-desk-4-vs-fitted-model.json").read_text())
    mid = [c for c in model["cells"] if c["parameter"] == "T30"
           and c["band_hz"] in ("500", "1k", "2k", "4k")]
    assert all(abs(c["jnd"]) <= 1.0 for c in mid)  # the fitted model holds the decay
    bare = json.loads((root / "comparisons" /
                       "office-desk-4-vs-the-office-with-carpet-taken-out.json").read_text())
    t30 = {c["band_hz"]: c for c in bare["cells"] if c["parameter"] == "T30"}
    for band in ("500", "1k", "2k", "4k", "8k"):
        assert t30[band]["jnd"] > 3.0 and t30[band]["verdict"] == "audible difference", band
    assert "The office without its carpet is the audible difference" in out


def test_demo_measures_distance_and_direction_in_the_canteen(demo_run):
    # Issue "Distance and direction", item 7: a distance series (≥ 5 distances) and an angle
    # series (≥ 5 angles) in one room, fitted from its room folder, the curves printed and the
    # rolloff written into that room's model. Truth: the virtual canteen's direct path falls as
    # 1/d (measure.virtual.positioned_ir, rolloff factor 1) and its source's directivity index
    # is 10·lg Q per octave (Q = 1/⟨D²⟩, measure.virtual.VirtualSpace.directivity_factor).
    import math

    from measure.demo import CANTEEN, DEMO_SERIES

    code, out, root = demo_run
    assert code == 0
    folder = root / "captures" / CANTEEN.name
    sides = [json.loads(p.read_text()) for p in sorted(folder.glob("*-take1.json"))]
    assert len(sides) == len(DEMO_SERIES)
    assert len({s["distance_m"] for s in sides if s["angle_deg"] == 0}) >= 5
    assert len({s["angle_deg"] for s in sides if s["distance_m"] == 1.0}) >= 5
    doc = json.loads((root / "attenuation" / f"{CANTEEN.name}.json").read_text())
    assert len(doc["positions"]) >= 5
    assert doc["rolloff_factor"] == pytest.approx(1.0, abs=0.05)
    for p in doc["positions"]:  # inside the critical distance the window holds the direct sound
        if p["distance_m"] <= 3.0:
            assert p["gain_db"] == pytest.approx(20 * math.log10(1.0 / p["distance_m"]),
                                                 abs=0.3)
    di = doc["direction"]["directivity_index_db"]
    assert len(doc["direction"]["angles"]) >= 5
    for band, fc in (("1k", 1000.0), ("2k", 1995.26), ("4k", 3981.07)):
        f = np.geomspace(fc / math.sqrt(2), fc * math.sqrt(2), 200)
        want = 10 * math.log10(float(np.mean(CANTEEN.directivity_factor(f))))
        assert di[band] == pytest.approx(want, abs=1.0), band
    model = json.loads((root / "models" / f"{CANTEEN.name}-axis-1m.json").read_text())
    assert model["i3dl2"]["values"]["RoomRolloffFactor"] == pytest.approx(
        doc["room_rolloff_factor"])
    assert "Distance series" in out and "Angle series" in out and "critical distance" in out
