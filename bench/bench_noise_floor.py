"""Benchmark: the recovered response's noise against an ideal in-band inverse (run by hand).

For each sweep design of tests/test_noise_floor.py (44.1/48/96 kHz; f2 at 10, 16, 20, 40 kHz
or Nyquist; fades 0-0.5 s; 1-3 repeats; drift to ±200 ppm; white, pink or rumble noise at
-45 dBFS) prints the worst octave's noise excess of the recovery over the ideal in-band
inverse of the same recording (tests/_oracle.py, numpy and scipy only), in dB; target: at most
1 dB in every octave. The same measurement is the test's.

    python bench/bench_noise_floor.py
"""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

from test_noise_floor import DESIGNS, _design_id, noise_excess_db  # noqa: E402


def main() -> None:
    worst_all = 0.0
    print(f"{'sweep design':<52} {'worst octave':>12} {'excess dB':>10}")
    for design in DESIGNS:
        excess = noise_excess_db(design)
        label, worst = max(excess.items(), key=lambda kv: abs(kv[1]))
        worst_all = max(worst_all, abs(worst))
        print(f"{_design_id(design):<52} {label:>12} {worst:>+10.3f}")
    print(f"worst over all designs: {worst_all:.3f} dB   (target <= 1)")


if __name__ == "__main__":
    main()
