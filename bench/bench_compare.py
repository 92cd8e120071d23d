"""Benchmark comparing two rooms: two 3 s responses at 48 kHz.

Run as ``python bench/bench_compare.py`` from the repository root. It prints the time of a
whole comparison (both ISO 3382-1 analyses, the cells, the spectral distance and the energy
decay relief: what ``measure compare A.wav B.wav`` computes) against a floor measured in the
same run, the two analyses alone (``measure.parameters.analyze_ir`` of each response); the
issue's target is a ratio under 2.

Each timing is the best of several runs (the machine is shared). Nothing here is a test; it
only prints.
"""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from _timing import best_of

from measure.compare import compare_sides, side_from_figures  # noqa: E402
from measure.parameters import analyze_ir  # noqa: E402
from measure.virtual import OCTAVE_CENTERS_HZ, VirtualRoom, room_ir  # noqa: E402

FS = 48000
N_RUNS = 3
TARGET = 2.0


def main() -> None:
    def room(k: float) -> VirtualRoom:
        return VirtualRoom("r", OCTAVE_CENTERS_HZ, tuple(k * t for t in
                                                         (2.0, 1.8, 1.6, 1.5, 1.4, 1.2, 1.0, 0.8)),
                           direct_delay_s=0.01, drr_db=-3.0, reflections=((0.008, 0.4),),
                           length_s=3.0)

    ha, hb = room_ir(room(1.0), FS, seed=1), room_ir(room(1.1), FS, seed=2)
    t_floor, _ = best_of(lambda: (analyze_ir(ha, FS), analyze_ir(hb, FS)), N_RUNS)

    def whole():
        a = side_from_figures(analyze_ir(ha, FS), label="A", kind="impulse response", h=ha)
        b = side_from_figures(analyze_ir(hb, FS), label="B", kind="impulse response", h=hb)
        return compare_sides(a, b)

    t_cmp, cmp = best_of(whole, N_RUNS)
    print(f"two 3 s responses at {FS} Hz:")
    print(f"  analyze both (floor)   {t_floor:6.3f} s")
    print(f"  compare (whole)        {t_cmp:6.3f} s")
    print(f"  ratio                  {t_cmp / t_floor:6.2f}   (target < {TARGET:g})")
    print(f"  verdict: {cmp.summary()['verdict']}")


if __name__ == "__main__":
    main()
