"""Benchmark the compact room model: fitting a 2 s IR at 48 kHz, and rendering.

Run as ``python bench/bench_model.py`` from the repository root. It prints:

1. ``fit_model`` on a 2 s impulse response at 48 kHz (the stairwell of the demo building cut
   to 2 s): wall time, best of a few runs, against the 2 s budget; and how much of it is the
   ISO 3382 analysis (``measure.parameters.analyze_ir``, run once on the measurement and once
   per calibration pass on the model).
2. ``render_model`` of the fitted model, 2 s at 44.1, 48 and 96 kHz: how many times faster than
   real time, against the required 20 (the first rendering at a rate other than the fitting
   rate re-fits the coloration there and is not timed; see coloration_sos).
3. The choice of per-band absorption (measure/model/late.py): the per-band network with
   complementary band masks against one network with a graphic-EQ absorption filter in every
   line (a low shelf, octave peaking sections and a high shelf whose gains are solved so that
   each line loses 60·m_i/(fs·T60) dB at every octave centre). For each: render time of 2 s, and the octave
   T30 error (125 Hz-4 kHz) against the targets, raw (no calibration).

Each timing is the best of several runs (the machine is shared). Nothing here is a test; it
only prints.
"""

from __future__ import annotations

import dataclasses
import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from _timing import best_of

from measure.bands import make_bands  # noqa: E402
from measure.model.coloration import _remapped_sos  # noqa: E402
from measure.model.fit import N_CALIBRATION_PASSES, fit_model  # noqa: E402
from measure.model.late import (  # noqa: E402
    LateReverb,
    coprime_delays,
    nominal_delays_s,
    octave_t30_s,
    orthogonal_matrix,
    render_late,
    white_levels_db,
)
from measure.model.render import render_model  # noqa: E402
from measure.parameters import analyze_ir  # noqa: E402
from measure.virtual import DEMO_ROOMS, room_ir  # noqa: E402

FS = 48000
N_RUNS = 3
RENDER_RATES = (44100, 48000, 96000)


def _best(fn, n: int = N_RUNS):
    return best_of(fn, n)


def _eq_sos(kind: str, f0_hz: float, gain_db: float, fs: int, q: float = 1.0) -> np.ndarray:
    """RBJ audio-EQ-cookbook peaking / shelving section (R. Bristow-Johnson; common practice).

    Shelves use slope S = 1; their ``f0_hz`` is the shelf midpoint."""
    a = 10.0 ** (gain_db / 40.0)
    w0 = 2 * math.pi * f0_hz / fs
    cw, sw = math.cos(w0), math.sin(w0)
    if kind == "peak":
        alpha = sw / (2 * q)
        b = np.array([1 + alpha * a, -2 * cw, 1 - alpha * a])
        den = np.array([1 + alpha / a, -2 * cw, 1 - alpha / a])
    else:
        alpha = sw / 2 * math.sqrt(2.0)  # S = 1
        sa = 2 * math.sqrt(a) * alpha
        if kind == "low":
            b = a * np.array([(a + 1) - (a - 1) * cw + sa, 2 * ((a - 1) - (a + 1) * cw),
                              (a + 1) - (a - 1) * cw - sa])
            den = np.array([(a + 1) + (a - 1) * cw + sa, -2 * ((a - 1) + (a + 1) * cw),
                            (a + 1) + (a - 1) * cw - sa])
        else:
            b = a * np.array([(a + 1) + (a - 1) * cw + sa, -2 * ((a - 1) + (a + 1) * cw),
                              (a + 1) + (a - 1) * cw - sa])
            den = np.array([(a + 1) - (a - 1) * cw + sa, 2 * ((a - 1) - (a + 1) * cw),
                            (a + 1) - (a - 1) * cw - sa])
    return np.concatenate((b / den[0], den / den[0]))


def _cascade(fc: np.ndarray, gains: np.ndarray, fs: int) -> np.ndarray:
    """Low shelf below the first centre, peaking sections at the inner centres, high shelf
    above the last (its midpoint half an octave above the last centre)."""
    out = [_eq_sos("low", fc[0] * math.sqrt(2), gains[0], fs)]
    out += [_eq_sos("peak", f, g, fs) for f, g in zip(fc[1:-1], gains[1:-1], strict=True)]
    out.append(_eq_sos("high", fc[-1] / math.sqrt(2), gains[-1], fs))
    return np.vstack(out)


def _graphic_eq_network(centers, t60, fs: int, n: int) -> np.ndarray:
    """One FDN, each line followed by a graphic-EQ cascade (shelves at the ends).

    Section gains are refined so that the cascade's dB response at the octave centres equals
    −60·m_i/(fs·T60(f_c)) (fixed-point passes for the interaction of the sections). Block processing as in measure.model.late.run_network, with a filter state per
    line carried across blocks.
    """
    from scipy.signal import sosfilt, sosfreqz

    delays = coprime_delays(nominal_delays_s(max(t60)), fs)
    nl = len(delays)
    a_mat = orthogonal_matrix(nl)
    fc = np.asarray(centers)
    sos_lines, zi = [], []
    for m in delays:
        target = -60.0 * m / (fs * np.asarray(t60))
        g = target.copy()
        for _ in range(6):
            _, resp = sosfreqz(_cascade(fc, g, fs), worN=fc, fs=fs)
            g += target - 20 * np.log10(np.abs(resp))
        sos = _cascade(fc, g, fs)
        sos_lines.append(sos)
        zi.append(np.zeros((sos.shape[0], 2)))
    block = min(delays)
    p = 1 << int(math.ceil(math.log2(max(delays) + block + 1)))
    buf = np.zeros((nl, p))
    bvec = np.where(np.arange(nl) % 3 == 0, -1.0, 1.0)
    cvec = np.where(np.arange(nl) % 2 == 0, 1.0, -1.0) / math.sqrt(nl)
    y = np.zeros(n)
    k = 0
    while k < n:
        nb = min(block, n - k)
        idx = (k + np.arange(nb)) % p
        s = buf[:, idx]
        y[k: k + nb] = cvec @ s
        filt = np.empty_like(s)
        for i in range(nl):
            filt[i], zi[i] = sosfilt(sos_lines[i], s[i], zi=zi[i])
        v = a_mat @ filt
        if k == 0:
            v[:, 0] += bvec
        for i, m in enumerate(delays):
            buf[i, (k + m + np.arange(nb)) % p] = v[i]
        k += nb
    return y


def main() -> int:
    room = dataclasses.replace(DEMO_ROOMS[0], length_s=2.0)
    h = room_ir(room, FS)
    t_an, _ = _best(lambda: analyze_ir(h, FS, sti=False))
    t_fit, res = _best(lambda: fit_model(h, FS))
    model = res.model
    print(f"fit_model, 2 s IR at {FS} Hz: {t_fit:.2f} s (budget 2 s: "
          f"{'OK' if t_fit < 2.0 else 'OVER'}); of which ~{(1 + N_CALIBRATION_PASSES) * t_an:.2f} s "
          f"in {1 + N_CALIBRATION_PASSES} (+1 when bands are taken from different passes) "
          f"ISO 3382 analyses at {t_an:.2f} s each")
    seconds = 2.0
    print(f"render_model, {seconds:g} s of the fitted model (required >= 20x real time):")
    for rate in RENDER_RATES:
        # the first call at a foreign rate re-fits the coloration there (then remembered)
        _remapped_sos.cache_clear()
        t_first = time.perf_counter()
        render_model(model, rate, seconds)
        t_first = time.perf_counter() - t_first
        t_r, _ = _best(lambda rate=rate: render_model(model, rate, seconds), 5)
        note = "" if rate == FS else f" (coloration remapped; first call {seconds / t_first:.0f}x)"
        print(f"  {rate:>6} Hz: {t_r * 1000:4.0f} ms = {seconds / t_r:3.0f}x real time "
              f"{'OK' if seconds / t_r >= 20 else 'SHORT'}{note}")

    bands = make_bands(FS, "octave", 63.0, 4000.0)
    fc = tuple(b.center_hz for b in bands)
    t60 = (2.6, 2.5, 2.4, 2.3, 2.1, 1.8, 1.4)
    late = LateReverb(fc, t60, white_levels_db(fc, FS, -10.0), 0.0, 0.0,
                      nominal_delays_s(max(t60)))
    n = int(2.0 * FS)
    print("per-band absorption, 2 s at 48 kHz, octave T30 error vs target 125 Hz-4 kHz (raw):")
    t_a, ha = _best(lambda: render_late(late, FS, n))
    t_b, hb = _best(lambda: _graphic_eq_network(fc, t60, FS, n))
    for name, t, hh in (("per-band networks + masks", t_a, ha),
                        ("graphic-EQ filter per line", t_b, hb)):
        t30 = octave_t30_s(hh, FS, bands)
        err = [100 * (v / w - 1) if v is not None else float("nan")
               for v, w, b in zip(t30, t60, bands, strict=True) if b.center_hz > 100]
        print(f"  {name:<28} {t * 1000:6.0f} ms   T30 error % "
              + " ".join(f"{e:+5.1f}" for e in err)
              + f"   max |err| {max(abs(e) for e in err):.1f} %")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
