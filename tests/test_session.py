"""Takes on disk: CAPTURES/ROOM/POSITION-takeN.wav + .json, numbering, never an overwrite."""

from __future__ import annotations

import os
import stat

import numpy as np
import pytest

from measure import audio_io, session
from measure.errors import ParameterError

FS = 48000


def _y(rng: np.random.Generator, n_ch: int = 2, n: int = 4800) -> np.ndarray:
    return 0.1 * rng.standard_normal((n_ch, n))


def test_first_take_layout_and_sidecar(tmp_path, rng):
    y = _y(rng)
    take = session.save_take(tmp_path, "hall", "S1-R1", y, FS, {"notes": "by the door"})
    assert take.number == 1
    assert take.wav == tmp_path / "hall" / "S1-R1-take1.wav"
    assert take.json == tmp_path / "hall" / "S1-R1-take1.json"
    back = audio_io.read_audio(take.wav)
    # 32-bit float WAV keeps float32 samples exactly: the round trip error is float32 rounding
    # of the float64 input, at most 2^-24 relative (IEEE 754 binary32, 24-bit significand).
    np.testing.assert_allclose(back.x, y, rtol=2.0**-24, atol=0)
    assert back.fs == FS and back.subtype == "FLOAT"
    side = audio_io.read_json(take.json)
    assert side["format"] == session.TAKE_FORMAT
    assert (side["room"], side["position"], side["take"]) == ("hall", "S1-R1", 1)
    assert side["audio_file"] == "S1-R1-take1.wav"
    assert (side["fs"], side["n_channels"], side["n_samples"]) == (FS, 2, 4800)
    assert side["notes"] == "by the door"
    # Only the two files: the temporary ones are gone.
    assert sorted(p.name for p in (tmp_path / "hall").iterdir()) == [
        "S1-R1-take1.json", "S1-R1-take1.wav"]
    # Readable like any file the user makes (not the owner-only mode of a temporary file).
    mode = stat.S_IMODE(os.stat(take.wav).st_mode)
    mask = os.umask(0)
    os.umask(mask)
    assert mode == 0o666 & ~mask


def test_numbers_increase_and_never_overwrite(tmp_path, rng):
    first = session.save_take(tmp_path, "hall", "P1", _y(rng), FS, {})
    before = first.wav.read_bytes()
    second = session.save_take(tmp_path, "hall", "P1", _y(rng), FS, {})
    other = session.save_take(tmp_path, "hall", "P2", _y(rng), FS, {})
    assert (first.number, second.number, other.number) == (1, 2, 1)
    assert first.wav.read_bytes() == before
    assert session.take_numbers(tmp_path, "hall", "P1") == [1, 2]
    assert [t.number for t in session.list_takes(tmp_path) if t.position == "P1"] == [1, 2]


def test_orphan_sidecar_or_gap_still_counts(tmp_path, rng):
    room = tmp_path / "hall"
    room.mkdir()
    (room / "P1-take4.json").write_text("{}")  # a sidecar whose audio was moved away
    take = session.save_take(tmp_path, "hall", "P1", _y(rng), FS, {})
    assert take.number == 5
    assert (room / "P1-take4.json").read_text() == "{}"


def test_claim_skips_a_name_taken_after_listing(tmp_path, rng, monkeypatch):
    # A second capture claimed take 1 between our listing and our write: the link refuses to
    # replace it and the next number is used.
    existing = session.save_take(tmp_path, "hall", "P1", _y(rng), FS, {"who": "first"})
    monkeypatch.setattr(session, "next_take_number", lambda *a, **k: 1)
    take = session.save_take(tmp_path, "hall", "P1", _y(rng), FS, {"who": "second"})
    assert take.number == 2
    assert audio_io.read_json(existing.json)["who"] == "first"
    assert audio_io.read_json(take.json)["who"] == "second"


def test_interrupt_while_writing_leaves_nothing(tmp_path, rng, monkeypatch):
    import soundfile as sf

    real_write = sf.write

    def half_write(fh, data, *a, **k):
        real_write(fh, data[: len(data) // 2], *a, **k)
        raise KeyboardInterrupt

    monkeypatch.setattr(sf, "write", half_write)
    with pytest.raises(KeyboardInterrupt):
        session.save_take(tmp_path, "hall", "P1", _y(rng), FS, {})
    assert list((tmp_path / "hall").iterdir()) == []


@pytest.mark.parametrize("bad", ["", "..", ".hidden", "a/b", "a\\b", "x:y", "what?", "P1-take3"])
def test_bad_labels_are_refused(tmp_path, rng, bad):
    with pytest.raises(ParameterError, match="position"):
        session.save_take(tmp_path, "hall", bad, _y(rng), FS, {})
    assert not (tmp_path / "hall").exists() or list((tmp_path / "hall").iterdir()) == []


def test_update_sidecar_keeps_audio(tmp_path, rng):
    take = session.save_take(tmp_path, "hall", "P1", _y(rng), FS, {"a": 1})
    before = take.wav.read_bytes()
    side = session.update_sidecar(take, verdict={"verdict": "good"})
    assert side["a"] == 1 and side["verdict"] == {"verdict": "good"}
    assert audio_io.read_json(take.json)["verdict"] == {"verdict": "good"}
    assert take.wav.read_bytes() == before
