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


GIB = 1 << 30


@pytest.mark.parametrize("proc, files, free", [
    # v2, the limit on the process's own group; 0.4 GiB of it reclaimable page cache
    ("0::/job/step\n", {"job/step/memory.max": f"{GIB}\n",
                        "job/step/memory.current": f"{GIB // 2 + (400 << 20)}\n",
                        "job/step/memory.stat": f"anon 1\ninactive_file {400 << 20}\n"},
     GIB // 2),
    # v2, no limit on the group, a tighter one on its parent (a batch job's slice)
    ("0::/job/step\n", {"job/step/memory.max": "max\n", "job/step/memory.current": "5\n",
                        "job/memory.max": f"{2 * GIB}\n", "job/memory.current": f"{GIB}\n"},
     GIB),
    ("0::/\n", {"memory.max": "max\n", "memory.current": "536870912\n"}, None),
    # v1, as this machine has it: memory:/group, the group's files under memory/group
    ("4:memory:/grp\n0::/\n", {"memory/grp/memory.limit_in_bytes": f"{GIB}\n",
                               "memory/grp/memory.usage_in_bytes": f"{GIB - (64 << 20)}\n",
                               "memory/grp/memory.stat": "total_inactive_file 0\n"},
     64 << 20),
    # v1, "no limit" is the largest multiple of the page size
    ("4:memory:/grp\n", {"memory/grp/memory.limit_in_bytes": "9223372036854771712\n",
                         "memory/grp/memory.usage_in_bytes": "1\n"}, None),
    # the group's path is outside this namespace's view: the namespace's root counts
    ("0::/elsewhere\n", {"memory.max": f"{GIB}\n", "memory.current": "0\n"}, GIB),
    # a namespaced process sees "/../.." paths: never read above the root
    ("0::/../other\n", {"../memory.max": "900\n", "../memory.current": "0\n"}, None),
    ("0::/caf\u00e9.slice\n", {"caf\u00e9.slice/memory.max": f"{GIB}\n",
                              "caf\u00e9.slice/memory.current": "0\n"}, GIB),
    ("", {}, None),
])
def test_a_containers_memory_limit_bounds_what_is_free(tmp_path, proc, files, free):
    # Linux control groups (kernel documentation, admin-guide/cgroup-v2 "memory.max",
    # "memory.current", "memory.stat"; cgroup-v1/memory "limit_in_bytes", "usage_in_bytes",
    # "total_inactive_file"): inside a container MemAvailable shows the host's memory; the
    # tightest limit from the process's group up, less what is used but reclaimable, is what
    # the process can really have.
    import measure.audio_io as aio

    root = tmp_path / "cgroup"
    root.mkdir()
    for name, text in files.items():
        (root / name).parent.mkdir(parents=True, exist_ok=True)
        (root / name).write_text(text)
    (tmp_path / "proc_cgroup").write_text(proc, encoding="utf-8")
    meminfo = tmp_path / "meminfo"
    meminfo.write_text("MemTotal:       16000000 kB\nMemAvailable:    8000000 kB\n")
    host = 8000000 * 1024
    got = aio.available_memory_bytes(meminfo=str(meminfo), cgroup_root=str(root),
                                     proc_cgroup=str(tmp_path / "proc_cgroup"))
    assert got == (host if free is None else min(host, free))
