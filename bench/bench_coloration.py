"""Benchmark the coloration fitting methods: accuracy per coefficient, and time.

Run as ``python bench/bench_coloration.py`` from the repository root. For each target response
and each order 2, 4, 6, 8, 12 (2·order + 1 coefficients for every method: order poles, order
zeros or b0..b_order, one gain) it prints the third-octave log-spectral distance 63 Hz - 16 kHz
(``measure.model._smoothing.log_spectral_distance``, computed exactly as
``fit_coloration`` computes ``lsd_db``) and the wall time of one fit for:

- ``lm``: ``fit_coloration(method="lm")``, the module's method (warped LP start + LM on the
  log magnitude);
- ``wlp``: ``fit_coloration(method="warped_lp")``, the warped LP start alone;
- ``sm``: a Steiglitz-McBride iteration implemented here (modeling.md §1.3): Prony with
  nb = 0 gives the start denominator, then N_SM_ITER times the signals are prefiltered by
  1/A of the previous iteration and (a, b) solved by least squares on the time-domain
  equation error. It is fitted to the minimum-phase impulse response (folded real cepstrum,
  modeling.md §1.8) of the very target ``fit_coloration`` fits (the 1/3-octave power-smoothed
  level with the guard regions of the module), so all three see the same magnitude; unstable
  poles and non-minimum-phase zeros of the result are reflected inside the unit circle with
  the gain correction of modeling.md §1.8 (the magnitude does not change).

Targets: ``room_like_ir(5)`` of tests/test_model_coloration.py (2 s, whole response; the
module's method comparison), seeds 6 and 7 of the same, and the first 2 s of the three demo
rooms of ``measure.virtual`` (``room_ir``). With ``--early`` it adds the demo rooms cut to their
early part the way ``measure.model.fit`` does (``window_s`` = 0.9 x the first reflection
delay, clipped to 1-5 ms); there the virtual direct sound is a single impulse, the target is
flat and every method is within 0.1 dB (measured: LM 0.00, SM <= 0.01, warped LP <= 0.08 dB),
so those rows say nothing about the methods.

Also printed: the LSD of the smoothed target itself against the response (the floor of any
fit to it), and the weighted RMS dB error on the fitting grid (what LM minimises) for LM and SM.

Timings are the best of N_RUNS (the machine is shared). Nothing here is a test; it only
prints.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
from scipy import linalg, signal

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from _timing import best_of

from measure.model._smoothing import log_spectral_distance, smooth_power  # noqa: E402
from measure.model.coloration import (  # noqa: E402
    _fit_grid,
    _guard,
    _lsd_band,
    _rfft_response,
    _taper_early,
    _zpk_db,
    fit_coloration,
)
from measure.virtual import DEMO_ROOMS, room_ir  # noqa: E402
from tests.test_model_coloration import room_like_ir  # noqa: E402

FS = 48000
ORDERS = (2, 4, 6, 8, 12)
N_RUNS = 2
#: Steiglitz-McBride iterations after the Prony start (modeling.md §1.3: 5-10 usual).
N_SM_ITER = 10
#: Samples of the minimum-phase target impulse response used by the SM least squares.
N_SM_SAMPLES = 8192
SMOOTHING = 3
F_LO_HZ = 20.0
#: Seeds of room_like_ir; 5 is the one quoted in the module docstring.
SEEDS = (5, 6, 7)


def _best(fn, n: int = N_RUNS):
    return best_of(fn, n)


# ---------------------------------------------------------------------------------------------
# Steiglitz-McBride on the minimum-phase version of the module's target


def _min_phase_target(h: np.ndarray, fs: int) -> tuple[np.ndarray, int]:
    """Minimum-phase impulse response whose magnitude is fit_coloration's target."""
    f_fft, spectrum = _rfft_response(h, fs)
    f_hi = min(20000.0, 0.45 * fs)
    f_grid, weight = _fit_grid(F_LO_HZ, f_hi, fs)
    p_src = smooth_power(f_fft[1:], np.abs(spectrum[1:]) ** 2, f_grid, fraction=SMOOTHING)
    target_db = _guard(10.0 * np.log10(np.maximum(p_src, np.max(p_src) * 1e-20)), weight)
    # the target on every FFT bin: log-frequency interpolation, held at the grid ends
    f = np.maximum(f_fft, f_fft[1])
    level_db = np.interp(np.log(f), np.log(f_grid), target_db)
    # folded real cepstrum (modeling.md §1.8): c_mp[0] = c[0], 2c[n] for 0 < n < N/2, c[N/2]
    n_fft = 2 * (f_fft.size - 1)
    c = np.fft.irfft(level_db * (math.log(10.0) / 20.0), n_fft)
    fold = np.zeros(n_fft)
    fold[0] = c[0]
    fold[1:n_fft // 2] = 2.0 * c[1:n_fft // 2]
    fold[n_fft // 2] = c[n_fft // 2]
    h_mp = np.fft.irfft(np.exp(np.fft.rfft(fold)), n_fft)
    return h_mp[:N_SM_SAMPLES], n_fft


def _conv_matrix(x: np.ndarray, n_cols: int, first_lag: int) -> np.ndarray:
    """Columns x[n − k] for k = first_lag .. first_lag + n_cols − 1 (zero before n = 0)."""
    m = np.zeros((x.size, n_cols))
    for j in range(n_cols):
        k = first_lag + j
        m[k:, j] = x[:x.size - k]
    return m


def _reflect(a: np.ndarray) -> tuple[np.ndarray, float]:
    """Roots of the monic polynomial a reflected inside |z| = 1; (new a, magnitude factor).

    |e^jω − r| = |r|·|e^jω − 1/r*| (modeling.md §1.8), so the magnitude of the polynomial is
    kept when the result is multiplied by the returned factor Π|r| over reflected roots.
    """
    roots = np.roots(a)
    out = np.abs(roots) > 1.0
    factor = float(np.prod(np.abs(roots[out])))
    roots = np.where(out, 1.0 / np.conj(roots), roots)
    return np.real(np.poly(roots)), factor


def steiglitz_mcbride(h: np.ndarray, order: int, n_iter: int = N_SM_ITER
                      ) -> tuple[np.ndarray, np.ndarray]:
    """(b, a) with nb = na = order: Prony (nb = 0) start, then n_iter SM iterations."""
    n = h.size
    # Prony, nb = 0: h[n] + Σ a_k h[n−k] ≈ 0 for n = 1 .. N−1 (covariance form, modeling.md §1.2)
    hm = _conv_matrix(h, order, 1)
    a_tail = linalg.lstsq(hm[1:], -h[1:])[0]
    a = np.concatenate(([1.0], a_tail))
    x = np.zeros(n)
    x[0] = 1.0
    b = np.array([h[0]])
    for _ in range(n_iter):
        # prefilter by 1/A of the previous iteration; an unstable A is reflected first so the
        # prefilter does not blow up (the magnitude weighting 1/|A|² is unchanged up to a gain)
        a_pre, _ = _reflect(a)
        y_f = signal.lfilter([1.0], a_pre, h)
        x_f = signal.lfilter([1.0], a_pre, x)
        # y_f[n] + Σ a_k y_f[n−k] = Σ b_k x_f[n−k]: linear least squares in (a_1..a_na, b_0..b_nb)
        m = np.hstack((-_conv_matrix(y_f, order, 1), _conv_matrix(x_f, order + 1, 0)))
        sol = linalg.lstsq(m, y_f)[0]
        a = np.concatenate(([1.0], sol[:order]))
        b = sol[order:]
    return b, a


def fit_sm(h: np.ndarray, fs: int, order: int) -> tuple[np.ndarray, np.ndarray, float]:
    """Stable, minimum-phase (zeros, poles, gain) of the SM fit to the module's target."""
    h_mp, _ = _min_phase_target(h, fs)
    b, a = steiglitz_mcbride(h_mp, order)
    k = float(b[0]) if b[0] != 0.0 else 1e-300
    b_monic, fz = _reflect(b / k)
    a_monic, fp = _reflect(a)
    k = k * fz / fp  # modeling.md §1.8: × |z0| per reflected zero, × 1/|p| per reflected pole
    return np.roots(b_monic), np.roots(a_monic), k


# ---------------------------------------------------------------------------------------------


def _lsd_of_zpk(h: np.ndarray, fs: int, z: np.ndarray, p: np.ndarray, k: float) -> float:
    """fit_coloration's lsd_db for a given (z, p, k): the same spectrum, band and smoothing."""
    f_fft, spectrum = _rfft_response(h, fs)
    _, resp = signal.freqz_zpk(z, p, k, worN=f_fft[1:], fs=fs)
    lo, hi = _lsd_band(fs)
    return log_spectral_distance(spectrum[1:], resp, f_fft[1:], f_lo_hz=lo, f_hi_hz=hi)


def _targets() -> list[tuple[str, np.ndarray, float | None]]:
    out: list[tuple[str, np.ndarray, float | None]] = [
        (f"room_like_ir({seed}), 2 s", room_like_ir(seed), None) for seed in SEEDS]
    for room in DEMO_ROOMS:
        out.append((f"{room.name}, first 2 s", room_ir(room, FS)[:2 * FS], None))
    if "--early" in sys.argv[1:]:
        for room in DEMO_ROOMS:
            window_s = float(np.clip(0.9 * room.reflections[0][0], 0.001, 0.005))
            out.append((f"{room.name}, early {window_s * 1000:.1f} ms", room_ir(room, FS),
                        window_s))
    return out


def _grid_rms_db(h: np.ndarray, fs: int, z: np.ndarray, p: np.ndarray, k: float) -> float:
    """The quantity LM minimises: weighted RMS dB error against the target on the fit grid."""
    f_fft, spectrum = _rfft_response(h, fs)
    f_grid, weight = _fit_grid(F_LO_HZ, min(20000.0, 0.45 * fs), fs)
    p_src = smooth_power(f_fft[1:], np.abs(spectrum[1:]) ** 2, f_grid, fraction=SMOOTHING)
    target_db = _guard(10.0 * np.log10(np.maximum(p_src, np.max(p_src) * 1e-20)), weight)
    err = _zpk_db(z, p, k, 2.0 * math.pi * f_grid / fs) - target_db
    return float(np.sqrt(np.average(err * err, weights=weight)))


def main() -> int:
    print(f"coloration fit at {FS} Hz: third-octave LSD 63 Hz-16 kHz (dB) / time of one fit "
          f"(ms, best of {N_RUNS}); coefficients = 2·order + 1")
    print(f"  sm = Steiglitz-McBride, Prony start + {N_SM_ITER} iterations, "
          f"{N_SM_SAMPLES} samples of the minimum-phase target")
    summary: dict[str, dict[int, list[float]]] = {"lm": {}, "wlp": {}, "sm": {}}
    for name, h, window_s in _targets():
        h_fit = h if window_s is None else _taper_early(h, FS, window_s)
        h_mp, n_fft = _min_phase_target(h_fit, FS)
        f_fft, spectrum = _rfft_response(h_fit, FS)
        floor = log_spectral_distance(spectrum[1:], np.fft.rfft(h_mp, n_fft)[1:], f_fft[1:],
                                      f_lo_hz=_lsd_band(FS)[0], f_hi_hz=_lsd_band(FS)[1])
        print(f"\n{name}: LSD of the smoothed target itself {floor:.2f} dB")
        print(f"  {'order':>5} {'coefs':>5}   {'lm dB':>7} {'ms':>6}   {'wlp dB':>7} {'ms':>6}"
              f"   {'sm dB':>7} {'ms':>6}   {'grid rms lm':>11} {'sm':>5}")
        for order in ORDERS:
            t_lm, lm = _best(lambda o=order, h=h, ws=window_s: fit_coloration(
                h, FS, order=o, window_s=ws))
            t_w, wlp = _best(lambda o=order, h=h, ws=window_s: fit_coloration(
                h, FS, order=o, window_s=ws, method="warped_lp"))
            t_sm, (z, p, k) = _best(lambda o=order, h=h_fit: fit_sm(h, FS, o))
            assert np.all(np.abs(p) < 1.0) and np.all(np.abs(z) <= 1.0)
            lsd_sm = _lsd_of_zpk(h_fit, FS, z, p, k)
            rms_lm = _grid_rms_db(h_fit, FS, lm.zeros, lm.poles, lm.gain)
            rms_sm = _grid_rms_db(h_fit, FS, z, p, k)
            for key, v in (("lm", lm.lsd_db), ("wlp", wlp.lsd_db), ("sm", lsd_sm)):
                summary[key].setdefault(order, []).append(v)
            print(f"  {order:>5} {2 * order + 1:>5}   {lm.lsd_db:7.2f} {t_lm * 1e3:6.0f}"
                  f"   {wlp.lsd_db:7.2f} {t_w * 1e3:6.0f}   {lsd_sm:7.2f} {t_sm * 1e3:6.0f}"
                  f"   {rms_lm:11.2f} {rms_sm:5.2f}")
    print("\nmean LSD over the targets (dB)")
    print(f"  {'order':>5}   {'lm':>6} {'wlp':>6} {'sm':>6}")
    for order in ORDERS:
        print(f"  {order:>5}   " + " ".join(f"{np.mean(summary[m][order]):6.2f}"
                                          for m in ("lm", "wlp", "sm")))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
