"""Benchmark the room prediction: a 10 × 8 × 3 m room, image sources to order 10, at 48 kHz.

Run as ``python bench/bench_predict.py`` from the repository root. It prints:

1. :func:`measure.predict.predict` of the worked-example room of measurement.md §7 (10 × 8 ×
   3 m, ᾱ = 0.20 on every surface, so T ≈ 0.65 s) with image sources to order 10 and the
   diffuse tail, at 48 kHz: wall time, best of 3, against the 2 s budget;
2. the same time as a ratio to a floor measured in this run: one real FFT and its inverse of
   the response at the padded length :func:`predict` uses, the least a frequency-domain band
   split of the response must do;
3. the image sources alone (no tail), and the stairwell example (the longest decay of the
   example rooms) for scale.

Each timing is the best of several runs (the machine is shared). Nothing here is a test; it
only prints.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from _timing import best_of

from measure.predict import example_room_paths, load_room, predict, room_from_dict  # noqa: E402

FS = 48000
N_RUNS = 3
BUDGET_S = 2.0
ORDER = 10
ROOM = room_from_dict({"name": "worked example", "dimensions_m": [10.0, 8.0, 3.0],
                       "source_m": [2.1, 3.3, 1.4], "receiver_m": [7.3, 5.1, 1.7],
                       "surfaces": {"floor": [0.2] * 8, "ceiling": [0.2] * 8,
                                    "walls": [0.2] * 8}})


def main() -> None:
    t_pred, p = best_of(lambda: predict(ROOM, FS, max_order=ORDER), N_RUNS)
    n = p.h.size
    m = 1 << int(math.ceil(math.log2(n + FS // 2)))
    x = np.asarray(p.h)
    t_floor, _ = best_of(lambda: np.fft.irfft(np.fft.rfft(x, m), m), N_RUNS)
    print(f"10 x 8 x 3 m, alpha 0.20, order {ORDER}, {FS} Hz ({p.n_images} images, "
          f"{n / FS:.2f} s response):")
    print(f"  predict             {t_pred:6.3f} s   budget {BUDGET_S:.0f} s: "
          f"{'within' if t_pred < BUDGET_S else 'OVER'} ({t_pred / BUDGET_S:.3f} of it)")
    bits = int(math.log2(m))
    print(f"  floor (one rfft + irfft at 2^{bits} points) {t_floor:6.4f} s; "
          f"ratio {t_pred / t_floor:.1f}x")
    t_img, _ = best_of(lambda: predict(ROOM, FS, max_order=ORDER, diffuse_tail=False), N_RUNS)
    print(f"  of which the image sources alone (no tail) {t_img:.3f} s")
    stair = [q for q in example_room_paths() if q.stem == "stairwell"]
    if stair:
        room = load_room(stair[0])
        t_st, ps = best_of(lambda: predict(room, FS, max_order=ORDER), N_RUNS)
        print(f"  stairwell example ({ps.h.size / FS:.2f} s response, {ps.n_images} images) "
              f"{t_st:.3f} s")


if __name__ == "__main__":
    main()
