"""Benchmark distance and direction: a 12-position series of 2 s responses at 48 kHz.

Run as ``python bench/bench_attenuation.py`` from the repository root. It prints:

1. :func:`measure.attenuation.analyze_series` on 12 virtual positions (8 distances on the
   source's axis, 1-16 m, and 5 angles at 1 m sharing the 1 m one; :mod:`measure.virtual`),
   2 s each at 48 kHz: wall time, best of a few runs, against the issue's 3 s budget;
2. the same time as a ratio to a floor measured in this run: one real FFT and its inverse of
   every response at the padded length the direct-to-reverberant split uses (2^18 points for
   2 s at 48 kHz), the least any spectral analysis of the series must do;
3. where the time goes: the per-position transfer fits, the band-limited energies (DRR), and
   the rest;
4. the whole command on the 12 responses as WAV files, ``python -m measure attenuation ...
   --json`` in a fresh process (interpreter start, imports, reading the files).

Each timing is the best of several runs (the machine is shared). Nothing here is a test; it
only prints.
"""

from __future__ import annotations

import math
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from _timing import best_of

from measure import attenuation, audio_io  # noqa: E402
from measure.virtual import OCTAVE_CENTERS_HZ, VirtualSpace, positioned_ir  # noqa: E402

FS = 48000
N_RUNS = 3
BUDGET_S = 3.0
SPACE = VirtualSpace("hall", OCTAVE_CENTERS_HZ, (1.6, 1.5, 1.4, 1.3, 1.2, 1.0, 0.8, 0.6),
                     volume_m3=1500.0, directivity=(0.0, 0.0, 0.05, 0.1, 0.2, 0.3, 0.4, 0.45),
                     length_s=2.0)
DISTANCES = (1.0, 1.5, 2.0, 3.0, 4.0, 6.0, 8.0, 16.0)
ANGLES = (45.0, 90.0, 135.0, 180.0)


def series() -> tuple[list[np.ndarray], list[float], list[float]]:
    d = list(DISTANCES) + [1.0] * len(ANGLES)
    a = [0.0] * len(DISTANCES) + list(ANGLES)
    h = [positioned_ir(SPACE, FS, distance_m=x, angle_deg=y, seed=i)
         for i, (x, y) in enumerate(zip(d, a, strict=True))]
    return h, d, a


def floor(h: list[np.ndarray]) -> None:
    m = 1 << int(math.ceil(math.log2(2 * h[0].size)))
    for x in h:
        np.fft.irfft(np.fft.rfft(x, m), m)


def main() -> None:
    h, d, a = series()
    assert len(h) == 12
    t_fit, result = best_of(lambda: attenuation.analyze_series(h, FS, distances_m=d,
                                                                angles_deg=a), N_RUNS)
    t_floor, _ = best_of(lambda: floor(h), N_RUNS)
    print(f"12-position series, 2 s at {FS} Hz (8 distances, 5 angles):")
    print(f"  analyze_series      {t_fit:6.2f} s   budget {BUDGET_S:.0f} s: "
          f"{'within' if t_fit < BUDGET_S else 'OVER'} ({t_fit / BUDGET_S:.2f} of it)")
    bits = int(math.ceil(math.log2(2 * h[0].size)))
    print(f"  floor (FFT + inverse of each response at 2^{bits} points) {t_floor:6.3f} s; "
          f"ratio {t_fit / t_floor:.1f}x")
    t_tf, _ = best_of(lambda: [attenuation.position_transfer(x, h[0], FS) for x in h], N_RUNS)
    t_e, _ = best_of(lambda: [attenuation._band_limited_energies(x, FS, 50.0, 20000.0)
                              for x in h], N_RUNS)
    print(f"  of which: position_transfer x12 {t_tf:.2f} s (band-limited energies for the DRR "
          f"{t_e:.2f} s of it), series fits and curves {max(t_fit - t_tf, 0.0):.2f} s")
    dist = result.distance
    print(f"  result: rolloff factor {dist.direct_law.rolloff_factor:.3f}, critical distance "
          f"{dist.critical_distance_m:.2f} m, {len(result.direction.positions)} angles")

    with tempfile.TemporaryDirectory() as tmp:
        files = []
        for i, x in enumerate(h):
            files.append(str(audio_io.write_audio(Path(tmp) / f"p{i}.wav", x, FS,
                                                  subtype="FLOAT")))
        argv = [sys.executable, "-m", "measure", "attenuation", *files, "--distances",
                ",".join(f"{v:g}" for v in d), "--angles", ",".join(f"{v:g}" for v in a),
                "--json"]
        root = Path(__file__).resolve().parents[1]
        t_cmd, _ = best_of(lambda: subprocess.run(argv, check=True, capture_output=True,
                                                  cwd=root), N_RUNS)
    print(f"  the command on 12 WAV files, fresh process: {t_cmd:.2f} s   budget "
          f"{BUDGET_S:.0f} s: {'within' if t_cmd < BUDGET_S else 'OVER'}")


if __name__ == "__main__":
    main()
