"""The model commands: measure fit / render / auralize (scripting contract and errors)."""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf

from measure.audio_io import write_audio
from measure.cli import main
from measure.model.drysound import dry_demo_sound
from measure.model.modelfile import model_from_dict
from measure.model.render import default_seconds
from measure.virtual import DEMO_ROOMS, room_ir

FS = 48000


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("model")
    ir = d / "office.wav"
    write_audio(ir, room_ir(DEMO_ROOMS[1], FS), FS)
    dry = d / "dry.wav"
    write_audio(dry, dry_demo_sound(FS)[: 2 * FS], FS)
    model = d / "office.json"
    assert main(["fit", str(ir), "--out", str(model)]) == 0
    return {"dir": d, "ir": ir, "dry": dry, "model": model}


def test_fit_writes_the_model_and_prints_the_report(files, capsys):
    out = files["dir"] / "again.json"
    assert main(["fit", str(files["ir"]), "--out", str(out), "--order", "4", "--echoes", "3"]) == 0
    text = capsys.readouterr().out
    assert "max |Δ| in JNDs" in text and "I3DL2" in text
    doc = json.loads(out.read_text())
    assert doc["format"] == "measure.room-model" and doc["version"] == 1
    assert doc["coloration"]["order"] == 4 and len(doc["echoes"]) == 3
    assert set(doc["i3dl2"]["values"]) >= {"Room", "DecayTime", "HFReference"}


def test_fit_json(files, capsys):
    out = files["dir"] / "j.json"
    assert main(["fit", str(files["ir"]), "--out", str(out), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert set(doc) == {"model", "report", "i3dl2"}
    assert doc["model"] == json.loads(out.read_text())
    cell = doc["report"]["cells"][0]
    assert set(cell) == {"band", "parameter", "measured", "modelled", "difference_jnd"}


@pytest.mark.parametrize("rate, seconds", [(44100, 1.0), (96000, 0.5), (16000, 1.25)])
def test_render_gives_mono_float_at_the_rate(files, rate, seconds):
    # Scripting contract: a mono 32-bit float IR at rate R, S seconds long.
    out = files["dir"] / f"r{rate}.wav"
    assert main(["render", str(files["model"]), "--out", str(out), "--rate", str(rate),
                 "--seconds", str(seconds)]) == 0
    info = sf.info(str(out))
    assert (info.samplerate, info.channels, info.subtype) == (rate, 1, "FLOAT")
    assert info.frames == round(rate * seconds)


def test_render_defaults_to_the_fitting_rate(files):
    out = files["dir"] / "default.wav"
    assert main(["render", str(files["model"]), "--out", str(out)]) == 0
    info = sf.info(str(out))
    assert info.samplerate == FS and info.channels == 1
    # and the documented default length (render --help, measure.model.render.default_seconds)
    model = model_from_dict(json.loads(files["model"].read_text()))
    assert info.frames == round(default_seconds(model) * FS)


def test_auralize_measured_and_modelled(files):
    for room, name in ((files["ir"], "wet_meas.wav"), (files["model"], "wet_model.wav")):
        out = files["dir"] / name
        assert main(["auralize", str(room), str(files["dry"]), "--out", str(out),
                     "--peak", "-1"]) == 0
        x, fs = sf.read(str(out))
        assert fs == FS and x.ndim == 1 and x.size > 2 * FS
        # --peak -1 scales the peak to −1 dBFS; 1e-6 is float32 rounding
        assert np.max(np.abs(x)) == pytest.approx(10 ** (-1 / 20), rel=1e-6)


def _refused(argv, out, capsys, match):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and match in err
    assert not out.exists()


def test_bad_inputs_exit_2_and_write_nothing(files, capsys, tmp_path):
    out_json = tmp_path / "m.json"
    out_wav = tmp_path / "o.wav"
    _refused(["fit", str(tmp_path / "missing.wav"), "--out", str(out_json)], out_json, capsys,
             "does not exist")
    _refused(["fit", str(files["ir"]), "--out", str(tmp_path / "m.txt")],
             tmp_path / "m.txt", capsys, ".json")
    _refused(["fit", str(files["ir"]), "--out", str(out_json), "--order", "0"], out_json, capsys,
             "--order")
    _refused(["render", str(files["ir"]), "--out", str(out_wav)], out_wav, capsys, "JSON")
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps({"format": "other"}))
    _refused(["render", str(bad), "--out", str(out_wav)], out_wav, capsys, "room model")
    _refused(["render", str(files["model"]), "--out", str(out_wav), "--rate", "100"], out_wav,
             capsys, "--rate")
    ir44 = tmp_path / "ir44.wav"
    write_audio(ir44, room_ir(DEMO_ROOMS[1], 44100)[:44100], 44100)
    _refused(["auralize", str(ir44), str(files["dry"]), "--out", str(out_wav)], out_wav,
             capsys, "resample")


def test_commands_are_listed(capsys):
    with pytest.raises(SystemExit):
        main(["--help"])
    text = capsys.readouterr().out
    for name in ("fit", "render", "auralize"):
        assert name in text
