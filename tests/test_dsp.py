"""Band-limited interpolation (measure._dsp): the kernel's pass band and stop band, checked with
scipy.signal.freqz, and interpolated values against the analytic signal."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.signal import freqz

from measure._dsp import (
    HALF_WIDTH,
    TABLE_STEPS,
    _kernel_table,
    fractional_impulse,
    interpolate,
    parabolic_peak,
)

#: The claims of measure._dsp's module notes: flat to within 0.01 dB up to 0.9 of Nyquist, a
#: stop band below -80 dB (beyond 1.1 × Nyquist).
PASS_DB = 0.01
STOP_DB = -80.0


@pytest.mark.parametrize("frac", [0.0, 0.1, 0.25, 0.37, 0.5])
def test_each_fractional_delay_filter_is_flat_in_the_pass_band(frac):
    # The 64 taps that interpolate at one fractional position form an FIR filter; its magnitude
    # (scipy.signal.freqz, scipy >= 1.2 ``fs`` keyword) must stay within PASS_DB of 0 dB up to
    # 0.9 of Nyquist. Measured worst case 0.0005 dB; the tolerance is the documented claim.
    taps = fractional_impulse(4 * HALF_WIDTH, 2 * HALF_WIDTH + frac)
    f = np.linspace(0.0, 0.45, 512)  # cycles per sample; Nyquist = 0.5
    _, h = freqz(taps, worN=f, fs=1.0)
    assert np.max(np.abs(20 * np.log10(np.abs(h)))) < PASS_DB


def test_the_continuous_kernel_has_its_stop_band_below_minus_80_db():
    # The tabulated kernel samples the continuous windowed sinc at TABLE_STEPS points per
    # sample, so freqz with fs=TABLE_STEPS gives its spectrum in cycles per sample (divided by
    # TABLE_STEPS for the unit DC gain). Beyond 1.1 × Nyquist it must be below STOP_DB
    # (measured -91 dB, Kaiser beta = 9).
    table = _kernel_table(HALF_WIDTH)
    f = np.linspace(0.55, 2.0, 800)
    _, h = freqz(table, worN=f, fs=float(TABLE_STEPS))
    assert 20 * math.log10(np.max(np.abs(h)) / TABLE_STEPS) < STOP_DB
    _, dc = freqz(table, worN=[0.0], fs=float(TABLE_STEPS))
    assert abs(dc[0]) / TABLE_STEPS == pytest.approx(1.0, abs=1e-3)


@pytest.mark.parametrize("f_cycles", [0.05, 0.25, 0.45])
def test_interpolated_sine_matches_the_analytic_one(f_cycles):
    # sin(2π f t) evaluated between samples: the error is bounded by the pass-band ripple
    # (10^(0.01/20) − 1 = 1.15e-3 of the amplitude) plus the stop-band leakage (1e-4), far from
    # the ends where the zero padding starts. Measured: at most 1.4e-5 (at 0.9 of Nyquist).
    k = np.arange(4000)
    x = np.sin(2 * np.pi * f_cycles * k)
    pos = np.arange(1000, 3000) + 0.37
    got = interpolate(x, pos)
    bound = (10 ** (PASS_DB / 20) - 1) + 10 ** (STOP_DB / 20)
    assert np.max(np.abs(got - np.sin(2 * np.pi * f_cycles * pos))) < bound
    # whole-number positions return the samples themselves (sinc(n) = 0 for n ≠ 0)
    np.testing.assert_allclose(interpolate(x, np.arange(100, 200, dtype=float)), x[100:200],
                               atol=1e-9)


def test_parabolic_peak_is_exact_on_a_parabola():
    # Three points of v(i) = −(i − 5.3)² determine the parabola: its vertex is at 5.3 (analytic).
    v = -((np.arange(10) - 5.3) ** 2)
    assert parabolic_peak(v, 5) == pytest.approx(5.3, abs=1e-12)
    assert parabolic_peak(v, 0) == 0.0  # at an end there is no parabola: the index itself
