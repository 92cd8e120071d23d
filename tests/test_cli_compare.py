"""`measure compare`: its scripting contract (cells, summary, --fail-above exit status), every
kind of input, and one-line errors.

Truths: virtual rooms with known decay (measure.virtual), ISO 3382-1 Table A.1 JNDs (5 % for
the decay times), the I3DL2 renderer's documented reading (measure.model.i3dl2).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from _captures import room_folder

from measure import audio_io
from measure.cli import main
from measure.virtual import OCTAVE_CENTERS_HZ, VirtualRoom, room_ir

FS = 48000
RT_S = (1.0, 0.95, 0.9, 0.85, 0.8, 0.75, 0.7, 0.6)
I3DL2 = {"Room": -1000.0, "RoomHF": -100.0, "RoomRolloffFactor": 0.0, "DecayTime": 1.5,
         "DecayHFRatio": 0.5, "Reflections": -2602.0, "ReflectionsDelay": 0.007,
         "Reverb": 200.0, "ReverbDelay": 0.011, "Diffusion": 100.0, "Density": 100.0,
         "HFReference": 5000.0}


def run(argv: list[str], capsys) -> tuple[int, str, str]:
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def _room(rt_s) -> VirtualRoom:
    return VirtualRoom("r", OCTAVE_CENTERS_HZ, tuple(rt_s), direct_delay_s=0.01, drr_db=0.0,
                       reflections=((0.006, 0.4),), length_s=2.0)


@pytest.fixture(scope="module")
def irs(tmp_path_factory) -> tuple[Path, Path]:
    folder = tmp_path_factory.mktemp("cmp")
    rt_b = list(RT_S)
    rt_b[3] *= 1.10  # 500 Hz
    rt_b[5] *= 1.10  # 2 kHz
    a = audio_io.write_audio(folder / "a.wav", room_ir(_room(RT_S), FS, seed=1), FS,
                             subtype="FLOAT")
    b = audio_io.write_audio(folder / "b.wav", room_ir(_room(rt_b), FS, seed=1), FS,
                             subtype="FLOAT")
    return a, b


def test_the_json_keeps_the_scripting_contract(irs, capsys):
    a, _ = irs
    code, out, err = run(["compare", str(a), str(a), "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["cells"] and "summary" in doc
    for c in doc["cells"]:
        assert set(c) >= {"band_hz", "parameter", "a", "b", "difference", "jnd", "verdict"}
        if c["jnd"] is not None:  # compare(A, A): zero everywhere (modeling.md §7.3)
            assert c["difference"] == 0.0 and c["jnd"] == 0.0
    assert {c["parameter"] for c in doc["cells"]} == {
        "EDT", "T20", "T30", "C50", "C80", "D50", "Ts", "DRR", "STI"}
    assert doc["summary"]["n_audible"] == 0


def test_fail_above_sets_the_exit_status(irs, capsys):
    # T30 10 % longer in two octaves: 2 JNDs there (ISO 3382-1 Table A.1, 5 %)
    a, b = irs
    code, out, err = run(["compare", str(a), str(b), "--fail-above", "1"], capsys)
    assert code == 1, err
    last = out.splitlines()[-1]
    assert last.startswith("audible difference") and "T30 500 Hz" in last and "T30 2k Hz" in last
    named = {w for w in ("63 Hz", "125 Hz", "250 Hz", "1k Hz", "4k Hz", "8k Hz") if w in last}
    assert not named  # only the two changed octaves
    code, _, err = run(["compare", str(a), str(b), "--fail-above", "5"], capsys)
    assert code == 0, err
    code, _, _ = run(["compare", str(a), str(b)], capsys)
    assert code == 0  # without --fail-above the difference is reported, not an exit status


def test_an_i3dl2_set_and_a_model_are_rendered_first(irs, tmp_path, capsys):
    from measure.model.fit import fit_with_i3dl2

    a, _ = irs
    preset = tmp_path / "preset.json"
    audio_io.write_json(preset, I3DL2)
    code, out, err = run(["compare", str(preset), str(preset), "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["a"]["kind"] == "reverb parameters"
    # rendered at 48 kHz by default: DecayTime is the low-frequency T30 (IA-SIG I3DL2, 1999)
    t30 = {c["band_hz"]: c["a"] for c in doc["cells"] if c["parameter"] == "T30"}
    assert t30["250"] == pytest.approx(1.5, rel=0.05)
    res, _ = fit_with_i3dl2(audio_io.read_audio(a).x[0], FS)
    model = tmp_path / "model.json"
    audio_io.write_json(model, res.model.to_dict())
    code, out, err = run(["compare", str(a), str(model), "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["b"]["kind"] == "model"
    t30 = [c for c in doc["cells"] if c["parameter"] == "T30" and c["band_hz"] in
           ("250", "500", "1k", "2k")]
    assert all(c["jnd"] is not None and abs(c["jnd"]) < 2.0 for c in t30), t30


def _room_folder(root: Path) -> Path:
    hs = [room_ir(_room([t * k for t in RT_S]), FS, seed=10 + i)
          for i, k in enumerate((0.97, 1.03))]
    return room_folder(root, hs, [{}, {}], FS, noise_dbfs=-95.0)


def test_a_room_folder_is_position_averaged(irs, tmp_path, capsys):
    # ISO 3382-2:2008 Table 1: two combinations are the survey grade
    a, _ = irs
    folder = _room_folder(tmp_path)
    code, out, err = run(["compare", str(folder), str(a), "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["a"]["kind"] == "position average" and doc["a"]["grade"] == "survey"
    assert doc["a"]["n_positions"] == 2
    assert doc["a"]["bands"]["1k"]["count"]["t30_s"] == 2
    cell = next(c for c in doc["cells"] if c["band_hz"] == "1k" and c["parameter"] == "T30")
    assert cell["spread"] > 0
    # a take is recovered with the sweep its sidecar names
    take = sorted(folder.glob("*-take1.wav"))[0]
    code, out, err = run(["compare", str(take), str(a), "--json"], capsys)
    assert code == 0, err
    assert json.loads(out)["a"]["kind"] == "capture"
    # a take without its sidecar, with --sweep; the IR on the other side stays an IR
    bare = tmp_path / "bare.wav"
    bare.write_bytes(take.read_bytes())
    code, out, err = run(["compare", str(bare), str(a), "--sweep",
                          str(tmp_path / "sweeps" / "s.wav"), "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["a"]["kind"] == "capture" and doc["b"]["kind"] == "impulse response"


@pytest.mark.parametrize("make, match", [
    (lambda d: d / "missing.wav", "does not exist"),
    (lambda d: (d / "notes.txt").write_text("x") and d / "notes.txt", "not a kind"),
    (lambda d: (d / "other.json").write_text('{"a": 1}') and d / "other.json",
     "neither a model file"),
    (lambda d: (d / "bad.json").write_text(json.dumps(dict(I3DL2, DecayTime=100.0)))
     and d / "bad.json", "DecayTime"),
])
def test_bad_inputs_are_one_error_line(irs, tmp_path, capsys, make, match):
    a, _ = irs
    bad = make(tmp_path)
    before = sorted(tmp_path.iterdir())
    code, out, err = run(["compare", str(a), str(bad)], capsys)
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and match in lines[0], err
    assert sorted(tmp_path.iterdir()) == before  # nothing written


def test_fail_above_takes_its_verdicts_at_the_threshold(irs, tmp_path, capsys):
    # the exit status and the verdicts agree: at --fail-above 5 the 2-JND differences are
    # "within 5 JND", and exit 0; a preset whose i3dl2 entry is not a table is one error line
    a, b = irs
    code, out, _ = run(["compare", str(a), str(b), "--fail-above", "5", "--json"], capsys)
    doc = json.loads(out)
    assert code == 0 and doc["summary"]["n_audible"] == 0
    assert all(c["verdict"] in ("within 5 JND", "not compared") for c in doc["cells"])
    bad = tmp_path / "odd.json"
    bad.write_text('{"i3dl2": "x"}')
    code, out, err = run(["compare", str(a), str(bad)], capsys)
    assert code == 2 and err.startswith("error: ") and len(err.strip().splitlines()) == 1
