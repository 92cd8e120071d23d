"""Benchmark: recovering one IR from a 10 s capture at 48 kHz (run by hand, not a test).

Prints two ratios against floors measured in the same run:
- time: recover_ir / one scipy.signal.fftconvolve of the capture with the inverse filter
  (target: at most 3);
- peak memory (tracemalloc, which sees numpy's buffers) / the capture's size as float64
  (target: at most 10).

    python bench/bench_ir.py
"""

from __future__ import annotations

import tracemalloc

import numpy as np
from _timing import best_of
from scipy.signal import fftconvolve

from measure.deconvolve import recover_ir
from measure.sweep import SweepSpec, make_sweep
from measure.virtual import DEMO_ROOMS, room_ir, virtual_take

FS = 48000
REPEATS = 7


def main() -> None:
    spec = SweepSpec(fs=FS, f1_hz=20.0, f2_hz=FS / 2, duration_s=5.0, gap_s=4.5, lead_in_s=0.5)
    sweep = make_sweep(spec)
    h = room_ir(DEMO_ROOMS[1], FS, seed=1)
    y = virtual_take(sweep.program, FS, h, latency_s=0.0371, drift_ppm=35.0, hd2_percent=1.0,
                     hd3_percent=0.5, noise_dbfs=-70.0)[:10 * FS]
    inverse = sweep.x[::-1].copy()  # the time-reversed sweep: same length as the inverse filter
    print(f"capture {y.size / FS:.1f} s at {FS} Hz, sweep {spec.duration_s:g} s, drift 35 ppm")

    t_floor, _ = best_of(lambda: fftconvolve(y, inverse), REPEATS)
    from measure.deconvolve import _dispersion_factor
    from measure.sweep import _weight_on_grid

    def fresh():  # as a command-line run sees it: nothing cached from an earlier call
        _weight_on_grid.cache_clear()
        _dispersion_factor.cache_clear()
        return recover_ir(y, sweep)

    t_ir, _ = best_of(fresh, REPEATS)
    print(f"fftconvolve(capture, inverse)   {t_floor * 1000:8.1f} ms  (floor)")
    print(f"recover_ir(capture)             {t_ir * 1000:8.1f} ms")
    print(f"time ratio                      {t_ir / t_floor:8.2f}   (target <= 3)")

    tracemalloc.start()
    fresh()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"peak memory / capture float64   {peak / y.astype(np.float64).nbytes:8.2f}   "
          f"(target <= 10)")


if __name__ == "__main__":
    main()
