"""Benchmark measure batch: 12 takes of 10 s at 48 kHz, two jobs against one.

Run as ``python bench/bench_batch.py`` from the repository root. It writes a captures tree of
one room with 12 positions (10 s takes of a 4 s sweep through a virtual room), then times
:func:`measure.batch.run_batch` into a fresh results folder with ``jobs=1`` (the floor: the
same takes one after another) and with ``jobs=2``, and prints the ratio (the issue's target is
at most 0.7 on this 2-core machine). The per-room work (model fit, exports) is the same in both
and is included. Each timing is the best of two runs; nothing here is a test.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from measure import audio_io, session  # noqa: E402
from measure.batch import run_batch  # noqa: E402
from measure.sweep import SweepSpec, make_sweep  # noqa: E402
from measure.virtual import DEMO_ROOMS, room_ir, virtual_take  # noqa: E402

FS = 48000
TARGET = 0.7


def tree(root: Path) -> Path:
    sweep = make_sweep(SweepSpec(fs=FS, f1_hz=20.0, f2_hz=24000.0, duration_s=4.0, gap_s=5.0,
                                 lead_in_s=0.5, level_dbfs=-12.0))
    wav = audio_io.write_audio(root / "sweeps" / "s.wav", sweep.program, FS, subtype="FLOAT")
    audio_io.write_json(audio_io.sidecar_path(wav), sweep.sidecar())
    for i in range(12):
        h = room_ir(DEMO_ROOMS[1], FS, seed=i)
        y = virtual_take(sweep.program, FS, h, latency_s=0.02, drift_ppm=20.0,
                         noise_dbfs=-80.0, extra_s=0.5, seed=i)
        session.save_take(root / "captures", "office", f"p{i + 1}", y[np.newaxis, :], FS,
                          {"sweep_file": str(wav)})
    return root / "captures"


def timed(captures: Path, jobs: int, n_runs: int = 2) -> float:
    best = float("inf")
    for _ in range(n_runs):
        with tempfile.TemporaryDirectory() as out:
            t = time.perf_counter()
            run_batch(captures, Path(out) / "r", jobs=jobs)
            best = min(best, time.perf_counter() - t)
    return best


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        captures = tree(Path(tmp))
        n = len(list(captures.glob("*/*-take*.wav")))
        secs = len(audio_io.read_audio(next(captures.glob("*/*-take1.wav"))).x[0]) / FS
        t1 = timed(captures, 1)
        t2 = timed(captures, 2)
    print(f"measure batch, {n} takes of {secs:.1f} s at {FS} Hz (one room):")
    print(f"  --jobs 1 (floor)   {t1:6.2f} s")
    print(f"  --jobs 2           {t2:6.2f} s")
    print(f"  ratio              {t2 / t1:6.2f}   (target <= {TARGET})")


if __name__ == "__main__":
    main()
