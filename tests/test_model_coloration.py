"""Coloration fit and the smoothing / log-spectral-distance helpers.

References used below:
- modeling.md = /work/shared/reference/modeling.md (§1.9 smoothing, §1.10 error measures).
- scipy.signal (SciPy 1.17.1): sosfilt, freqz_sos, cheby1, ellip produce the reference filters.
- The peaking biquad is the audio-EQ-cookbook form (R. Bristow-Johnson), common practice.
- IEC 61260-1:2014: base-10 exact midband frequencies f_m = 1000·10^(3x/(10b)) (odd b).
"""

from __future__ import annotations

import math
import time

import numpy as np
import pytest
from scipy import signal

from measure.errors import ParameterError
from measure.model._smoothing import (
    band_centers_hz,
    log_spectral_distance,
    max_abs_difference_db,
    smooth_power,
)
from measure.model.coloration import (
    bark_warping_lambda,
    coloration_from_dict,
    coloration_response,
    coloration_sos,
    fit_coloration,
    remap_coloration,
)

FS = 48000


def peaking_sos(f0_hz: float, gain_db: float, q: float, fs: int) -> np.ndarray:
    """Audio-EQ-cookbook peaking biquad as one SOS row (common practice)."""
    a_lin = 10.0 ** (gain_db / 40.0)
    w0 = 2.0 * math.pi * f0_hz / fs
    alpha = math.sin(w0) / (2.0 * q)
    b = np.array([1 + alpha * a_lin, -2 * math.cos(w0), 1 - alpha * a_lin])
    a = np.array([1 + alpha / a_lin, -2 * math.cos(w0), 1 - alpha / a_lin])
    return np.concatenate((b / a[0], a / a[0]))


#: Three peaking sections: a 6th-order minimum-phase reference with boost and cut.
PEAKING = np.array([peaking_sos(100.0, 6.0, 2.0, FS), peaking_sos(1000.0, -8.0, 1.5, FS),
                    peaking_sos(6000.0, 4.0, 1.0, FS)])


def impulse_response(sos: np.ndarray, n: int = FS) -> np.ndarray:
    x = np.zeros(n)
    x[0] = 1.0
    return signal.sosfilt(sos, x)


def max_error_db(sos_ref: np.ndarray, col, f_lo: float = 50.0, f_hi: float = 15000.0,
                 mask_db: float | None = None) -> float:
    f = np.geomspace(f_lo, f_hi, 4000)
    _, h_ref = signal.freqz_sos(sos_ref, worN=f, fs=FS)
    h_fit = coloration_response(col, f)
    err = 20 * np.log10(np.abs(h_fit) / np.abs(h_ref))
    if mask_db is not None:
        level = 20 * np.log10(np.abs(h_ref) / np.max(np.abs(h_ref)))
        err = err[level >= mask_db]
    return float(np.max(np.abs(err)))


def room_like_ir(seed: int, fs: int = FS, length_s: float = 2.0) -> np.ndarray:
    """Exponentially decaying noise with octave-dependent decay, a direct sound, a speaker."""
    rng = np.random.default_rng(seed)
    n = int(length_s * fs)
    t = np.arange(n) / fs
    h = np.zeros(n)
    edges = [20, 90, 180, 355, 710, 1400, 2800, 5600, 11200, 0.49 * fs]
    rts = [1.6, 1.5, 1.3, 1.2, 1.1, 1.0, 0.9, 0.7, 0.5]
    for lo, hi, rt in zip(edges[:-1], edges[1:], rts, strict=True):
        sos = signal.butter(4, [lo, hi], btype="band", fs=fs, output="sos")
        h += signal.sosfilt(sos, rng.standard_normal(n)) * np.exp(-6.91 * t / rt)
    h[:int(0.01 * fs)] = 0.0
    h[int(0.01 * fs)] += 8.0
    speaker = signal.butter(2, [60, 18000], btype="band", fs=fs, output="sos")
    return signal.sosfilt(speaker, h)


# ---------------------------------------------------------------------------------------------
# smoothing and log-spectral distance


def test_band_centers_follow_iec_61260_base_ten_formula():
    c = band_centers_hz(63.0, 16000.0, fraction=3)
    # IEC 61260-1: f_m = 1000·10^(x/10) for third octaves; 63 Hz nominal is x = -12, 16 kHz
    # is x = +12, so 25 bands. Exact formula, so only rounding error is allowed.
    expected = 1000.0 * 10.0 ** (np.arange(-12, 13) / 10.0)
    np.testing.assert_allclose(c, expected, rtol=1e-12)


def test_smoothing_flat_spectrum_stays_flat():
    # modeling.md §1.10 unit test: smoothing a flat spectrum leaves it flat (exact: the
    # average of a constant is the constant; tolerance is rounding).
    f = np.fft.rfftfreq(4096, 1 / FS)
    out = smooth_power(f, np.full(f.size, 3.5), np.geomspace(20, 20000, 50), fraction=3)
    np.testing.assert_allclose(out, 3.5, rtol=1e-12)


def test_smoothing_of_a_power_law_matches_the_analytic_band_average():
    # Analytic: the mean of f² over [f/a, f·a] (linear frequency) is
    # f²·(a³ − a⁻³) / (3·(a − a⁻¹)), a = 2^(1/6) for third octaves. The smoother integrates
    # the piecewise-linear interpolant of f² on the 1-Hz grid, which exceeds f² by
    # (f − f_i)(f_i+1 − f) ∈ [0, Δf²/4] (derived), so the band mean is high by at most 0.25.
    f = np.arange(0.0, 24001.0)
    f_out = np.geomspace(100, 10000, 20)
    a = 2.0 ** (1.0 / 6.0)
    expected = f_out**2 * (a**3 - a**-3) / (3.0 * (a - 1.0 / a))
    diff = smooth_power(f, f**2, f_out, fraction=3) - expected
    assert np.all(diff >= -1e-9 * expected) and np.all(diff <= 0.25 + 1e-9 * expected)


def test_lsd_of_identical_responses_is_zero():
    # modeling.md §1.10: LSD(H, H) = 0, exactly.
    h = room_like_ir(1, length_s=0.5)
    spec = np.fft.rfft(h)
    f = np.fft.rfftfreq(h.size, 1 / FS)
    assert log_spectral_distance(spec[1:], spec[1:], f[1:]) == 0.0


@pytest.mark.parametrize("g_db", [-6.0, 0.5, 3.0])
@pytest.mark.parametrize("fraction", [3, None])
def test_lsd_of_a_gain_change_is_the_gain(g_db, fraction):
    # modeling.md §1.10: a gain-only change of g dB gives LSD = |g|; power smoothing is linear
    # in power, so this holds exactly (tolerance: floating-point rounding).
    h = room_like_ir(2, length_s=0.5)
    spec = np.fft.rfft(h)[1:]
    f = np.fft.rfftfreq(h.size, 1 / FS)[1:]
    lsd = log_spectral_distance(spec, spec * 10 ** (g_db / 20), f, fraction=fraction)
    assert lsd == pytest.approx(abs(g_db), abs=1e-9)
    assert max_abs_difference_db(spec, spec * 10 ** (g_db / 20), f) == pytest.approx(
        abs(g_db), abs=1e-9)


# ---------------------------------------------------------------------------------------------
# recovering reference filters


def test_peaking_cascade_is_recovered_at_its_true_order():
    # Reference: three cookbook peaking biquads run by scipy.signal.sosfilt (6 poles, 6 zeros,
    # minimum phase). Acceptance of the issue: magnitude error < 0.1 dB over 50 Hz - 15 kHz at
    # the true order. Unsmoothed target, because smoothing itself changes the response being
    # recovered (that is what it is for); measured error is ~1e-3 dB.
    col = fit_coloration(impulse_response(PEAKING), FS, order=6, smoothing_fraction=None)
    assert col.order == 6 and col.n_sections == 3
    assert max_error_db(PEAKING, col) < 0.1
    assert np.all(np.abs(col.poles) < 1.0) and np.all(np.abs(col.zeros) < 1.0)


def test_automatic_order_finds_the_true_order():
    # With an error target far below what four poles can do for three separate peaks, the
    # smallest order meeting it is the true order 6 (the order search tries 2, 4, 6, ...).
    col = fit_coloration(impulse_response(PEAKING), FS, lsd_target_db=0.05,
                         smoothing_fraction=None)
    assert col.order == 6
    assert col.lsd_db <= 0.05


def test_fine_smoothing_barely_changes_the_recovered_peaking_cascade():
    # 1/24-octave power smoothing of these low-Q peaks moves the level by well under 0.1 dB
    # (measured 0.006 dB), so the acceptance bound still holds with smoothing on.
    col = fit_coloration(impulse_response(PEAKING), FS, order=6, smoothing_fraction=24)
    assert max_error_db(PEAKING, col) < 0.1


def test_chebyshev_band_pass_is_recovered():
    # Reference: scipy.signal.cheby1(3, 1 dB, [300, 3000] Hz, 'bandpass') -> order 6, zeros at
    # z = ±1 on the unit circle, which a strictly minimum-phase fit approaches from inside.
    # Acceptance bound 0.1 dB over 50 Hz - 15 kHz (measured 0.006 dB).
    sos = signal.cheby1(3, 1.0, [300.0, 3000.0], btype="bandpass", fs=FS, output="sos")
    col = fit_coloration(impulse_response(sos), FS, order=6, smoothing_fraction=None)
    assert max_error_db(sos, col) < 0.1


def test_elliptic_band_pass_is_recovered_outside_its_notches():
    # Reference: scipy.signal.ellip(3, 1 dB, 40 dB, [300, 3000] Hz, 'bandpass'), order 6. Its
    # stop-band zeros lie on the unit circle, where the level is -inf dB and no dB error is
    # defined; the bound 0.1 dB applies where the reference is within 45 dB of its maximum
    # (pass band, transition bands and the 40-dB stop-band plateau).
    sos = signal.ellip(3, 1.0, 40.0, [300.0, 3000.0], btype="bandpass", fs=FS, output="sos")
    col = fit_coloration(impulse_response(sos), FS, order=6, smoothing_fraction=None)
    assert max_error_db(sos, col, mask_db=-45.0) < 0.1


@pytest.mark.parametrize("order", [1, 2, 3, 5, 8])
def test_fit_is_stable_and_minimum_phase(order):
    # Stability and minimum phase by construction: every pole and zero strictly inside the
    # unit circle, checked on the SOS actually stored (scipy.signal.sos2zpk).
    col = fit_coloration(room_like_ir(3, length_s=0.5), FS, order=order)
    z, p, _ = signal.sos2zpk(col.sos)
    assert col.order == order
    assert np.all(np.abs(p) < 1.0)
    assert np.all(np.abs(z) < 1.0)
    assert np.all(np.isfinite(col.sos))


def test_lsd_reported_is_the_lsd_of_the_stored_filter():
    # lsd_db is defined as the third-octave LSD 63 Hz - 16 kHz between the IR and the filter
    # (modeling.md §1.10); recompute it independently from the stored SOS.
    h = room_like_ir(4, length_s=1.0)
    col = fit_coloration(h, FS, order=6)
    n_fft = 1 << 16
    f = np.fft.rfftfreq(n_fft, 1 / FS)[1:]
    _, h_fit = signal.freqz_sos(col.sos, worN=f, fs=FS)
    lsd = log_spectral_distance(np.fft.rfft(h, n_fft)[1:], h_fit, f)
    # the fit evaluates on the same 2^16-point FFT grid (the next power of two >= fs for a 1 s
    # response) and the same sections, so only floating-point rounding may differ
    assert col.lsd_db == pytest.approx(lsd, abs=1e-9)


def test_pole_zero_fit_beats_warped_lp_per_section():
    # The reason for the default method: at equal number of second-order sections, and even
    # with twice as many for warped LP, the pole-zero log-magnitude fit has the lower LSD on a
    # room-like response (measured here: LM order 4: 0.64 dB, warped LP order 4: 2.37 dB,
    # order 8: 2.11 dB).
    h = room_like_ir(5)
    lm4 = fit_coloration(h, FS, order=4, method="lm")
    wlp4 = fit_coloration(h, FS, order=4, method="warped_lp")
    wlp8 = fit_coloration(h, FS, order=8, method="warped_lp")
    assert lm4.lsd_db < wlp4.lsd_db
    assert lm4.lsd_db < wlp8.lsd_db


def test_bark_lambda_matches_smith_and_abel_values():
    # modeling.md §1.6 (Smith & Abel 1999 formula, values computed there): 0.7564 @ 44.1 kHz,
    # 0.7660 @ 48 kHz; 4 decimals as printed.
    assert bark_warping_lambda(44100) == pytest.approx(0.7564, abs=5e-5)
    assert bark_warping_lambda(48000) == pytest.approx(0.7660, abs=5e-5)


# ---------------------------------------------------------------------------------------------
# other sample rates, serialisation


def test_same_rate_returns_the_stored_sections():
    col = fit_coloration(room_like_ir(6, length_s=0.5), FS, order=4)
    np.testing.assert_array_equal(coloration_sos(col, FS), col.sos)


@pytest.mark.parametrize("fs_new", [44100, 96000, 32000])
def test_remap_to_another_rate_keeps_the_magnitude(fs_new):
    # Re-rendering at another rate: the re-fitted filter must match the original's magnitude
    # over the common band to well under 1 dB, the JND of level-type quantities in ISO 3382-1
    # Table A.1 (modeling.md §7.1); bound 0.3 dB LSD (measured 0.01-0.12 dB). Going up in
    # rate, a root at the old Nyquist frequency becomes a pair: the order may grow by one.
    col = fit_coloration(room_like_ir(7), FS, order=8)
    new = remap_coloration(col, fs_new)
    n_neg = int(np.sum((np.abs(col.poles.imag) < 1e-9) & (col.poles.real < 0))
                + np.sum((np.abs(col.zeros.imag) < 1e-9) & (col.zeros.real < 0)))
    assert new.fs == fs_new
    assert col.order <= new.order <= col.order + (n_neg if fs_new > FS else 0)
    assert new.lsd_db < 0.3
    z, p, _ = signal.sos2zpk(coloration_sos(col, fs_new))
    assert np.all(np.abs(p) < 1.0) and np.all(np.abs(z) < 1.0)


def test_dict_round_trip_is_exact():
    col = fit_coloration(room_like_ir(8, length_s=0.5), FS, order=5)
    back = coloration_from_dict(col.to_dict())
    np.testing.assert_array_equal(back.sos, col.sos)
    np.testing.assert_array_equal(back.poles, col.poles)
    assert back.fs == col.fs and back.order == col.order and back.lsd_db == col.lsd_db


def test_early_window_ignores_a_late_echo():
    # A strong echo 100 ms after the direct sound makes a comb in the full response; fitting
    # only the first 20 ms sees the filter alone, so its error against the filter is smaller.
    h = impulse_response(PEAKING, FS // 2)
    h_echo = h.copy()
    h_echo[int(0.1 * FS):] += 0.9 * h[:h.size - int(0.1 * FS)]
    full = fit_coloration(h_echo, FS, order=6, smoothing_fraction=24)
    early = fit_coloration(h_echo, FS, order=6, smoothing_fraction=24, window_s=0.02)
    assert max_error_db(PEAKING, early) < max_error_db(PEAKING, full)


# ---------------------------------------------------------------------------------------------
# errors and timing


@pytest.mark.parametrize("kwargs, match", [
    ({"order": 0}, "order"),
    ({"method": "prony"}, "method"),
    ({"lsd_target_db": 0.0}, "lsd_target_db"),
    ({"f_hi_hz": 30000.0}, "fit band"),
    ({"smoothing_fraction": 0}, "fraction"),
])
def test_bad_arguments_raise(kwargs, match):
    with pytest.raises(ParameterError, match=match):
        fit_coloration(impulse_response(PEAKING, 4800), FS, **kwargs)


def test_silent_input_raises():
    with pytest.raises(ParameterError, match="all zeros"):
        fit_coloration(np.zeros(4800), FS)


def test_fit_of_a_two_second_ir_is_fast():
    # Performance goal of the issue: the whole model fit of a 2 s IR at 48 kHz under 2 s; this
    # part is budgeted well under 1 s (measured 0.05 s for the automatic order, idle machine).
    h = room_like_ir(9)
    t0 = time.perf_counter()
    fit_coloration(h, FS)
    assert time.perf_counter() - t0 < 1.0


def test_remap_keeps_a_root_at_the_origin_without_warning():
    # issue 12, fuzzing: a zero at z = 0 (a pure delay factor, |e^{jω} − 0| = 1) went through
    # log(0) in the matched-z map and warned of a division by zero and an invalid value. It
    # maps to the origin at every rate (s = fs·ln z = −∞ is kept), so the remapped filter keeps
    # the original's flat magnitude: 0 dB within 0.01 dB (the remap's own error, module notes).
    import warnings

    from measure.model.coloration import Coloration, coloration_response, remap_coloration

    sos = np.array([[1.0, 0.0, 0.0, 1.0, 0.0, 0.0]])
    col = Coloration(sos=sos, fs=48000, order=2, zeros=np.zeros(2, complex),
                     poles=np.zeros(2, complex), gain=1.0, lsd_db=0.0, method="lm",
                     f_lo_hz=20.0, f_hi_hz=20000.0, smoothing_fraction=3)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        new = remap_coloration(col, 44100)
    mag_db = 20 * np.log10(np.abs(coloration_response(new, np.geomspace(63, 16000, 50))))
    assert np.max(np.abs(mag_db)) < 0.01


def test_a_very_quiet_coloration_loads_without_a_bad_coefficients_warning():
    # issue 12, fuzzing: the fit of an impulse of amplitude 8e-22 (a level the fuzzing draws)
    # gives sections whose numerators are ~1e-21; reading the model back checked the poles
    # with sos2zpk, which normalises the numerators too and warned "Badly conditioned filter
    # coefficients". The poles come from the denominators alone now; the filter is the same.
    import warnings

    from measure.model.coloration import coloration_from_dict

    x = np.zeros(2048)
    x[100] = 8e-22
    col = fit_coloration(x, FS, order=2)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        back = coloration_from_dict(col.to_dict())
    assert np.array_equal(back.sos, col.sos)
