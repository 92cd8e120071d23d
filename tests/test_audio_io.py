"""Reading audio files that recorders and copies really leave (measure.audio_io.read_audio).

Issue "Never lose a take, never crash on a bad file", accepted without a word: a truncated WAV
(half its bytes) was read as a shorter recording. The RIFF/WAVE layout (a ``data`` chunk whose
header gives its size in bytes, chunks padded to even sizes) is that of the Microsoft/IBM
"Multimedia Programming Interface and Data Specifications 1.0" (1991); soundfile (libsndfile)
writes the files here.
"""

from __future__ import annotations

import struct

import numpy as np
import pytest
import soundfile as sf

from measure.audio_io import read_audio
from measure.errors import AudioFileError


@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24", "FLOAT"])
def test_a_wav_cut_to_half_its_bytes_is_refused_with_what_is_there(tmp_path, subtype):
    whole = tmp_path / "whole.wav"
    sf.write(whole, 0.1 * np.random.default_rng(0).standard_normal(48000), 48000,
             subtype=subtype)
    cut = tmp_path / "cut.wav"
    data = whole.read_bytes()
    cut.write_bytes(data[: len(data) // 2])
    assert read_audio(whole).x.shape == (1, 48000)
    with pytest.raises(AudioFileError, match=r"cut short: .* \(50 %\)"):
        read_audio(cut)


def test_a_size_unknown_header_as_written_while_recording_is_read(tmp_path):
    # Recorders write 0 or 0xFFFFFFFF as the data size until they stop (common practice);
    # libsndfile then reads to the end of the file.
    p = tmp_path / "streaming.wav"
    sf.write(p, np.full(1000, 0.25), 8000, subtype="PCM_16")
    b = bytearray(p.read_bytes())
    i = b.index(b"data")
    b[i + 4:i + 8] = struct.pack("<I", 0xFFFFFFFF)
    p.write_bytes(bytes(b))
    assert read_audio(p).x.shape[1] == 1000


def test_an_odd_sized_8_bit_file_with_its_pad_byte_is_whole(tmp_path):
    p = tmp_path / "odd.wav"
    sf.write(p, np.full(1001, 0.25), 8000, subtype="PCM_U8")  # 1001 data bytes + 1 pad
    a = read_audio(p)
    assert a.x.shape == (1, 1001) and a.subtype == "PCM_U8"


def test_a_file_too_long_for_the_machines_memory_is_refused_with_the_bound(tmp_path,
                                                                          monkeypatch):
    # Issue "Never lose a take", item 1: sizes are bounded by what the machine can hold, with
    # the bound in the message (it used to end in a MemoryError). 1 s at 8 kHz, mono, needs
    # 8000 × 8 B × 10 = 640 kB of working memory; with 320 kB free the bound is 0.5 s.
    import measure.audio_io as aio

    p = tmp_path / "long.wav"
    sf.write(p, np.zeros(8000), 8000, subtype="PCM_16")
    monkeypatch.setattr(aio, "available_memory_bytes", lambda: 320_000)
    with pytest.raises(AudioFileError, match=r"too long for this machine: .* at most 0.5 s"):
        read_audio(p)
    monkeypatch.setattr(aio, "available_memory_bytes", lambda: 640_000)
    assert read_audio(p).x.shape == (1, 8000)


@pytest.mark.parametrize("files, free", [
    ({"memory.max": "1073741824\n", "memory.current": "536870912\n"}, 536870912),  # v2
    ({"memory.max": "max\n", "memory.current": "536870912\n"}, None),  # v2, no limit
    ({"memory/memory.limit_in_bytes": "1073741824\n",
      "memory/memory.usage_in_bytes": "1000000000\n"}, 73741824),  # v1
    ({"memory/memory.limit_in_bytes": "9223372036854771712\n",
      "memory/memory.usage_in_bytes": "1\n"}, None),  # v1, "no limit" is the largest page
    ({}, None),
])
def test_a_containers_memory_limit_bounds_what_is_free(tmp_path, files, free):
    # Linux control groups (kernel documentation, cgroup-v2 "memory.max", "memory.current";
    # cgroup-v1 memory "limit_in_bytes", "usage_in_bytes"): inside a container MemAvailable
    # shows the host's memory, the group's limit is what the process can really have.
    import measure.audio_io as aio

    for name, text in files.items():
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_text(text)
    meminfo = tmp_path / "meminfo"
    meminfo.write_text("MemTotal:       16000000 kB\nMemAvailable:    8000000 kB\n")
    host = 8000000 * 1024
    got = aio.available_memory_bytes(meminfo=str(meminfo), cgroup_root=str(tmp_path))
    assert got == (host if free is None else min(host, free))
