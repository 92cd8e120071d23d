"""Normalised echo density and mixing time (Abel & Huang 2006; modeling.md §4.3).

modeling.md = /work/shared/reference/modeling.md. The expectations below are the §4.3 tests
(η of Gaussian noise 1.00 ± 0.05, η of sparse spikes < 0.3, t_mix of decaying noise at its
onset) plus analytic values derived from the definition.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special

from measure.errors import FitError, ParameterError
from measure.model.mixing import GAUSSIAN_FRACTION, echo_density, mixing_time

FS = 48000


def test_gaussian_fraction_is_erfc_of_one_over_root_two():
    # modeling.md §4.3: erfc(1/√2) = 0.31731 (computed; scipy.special.erfc, SciPy 1.17.1).
    assert GAUSSIAN_FRACTION == pytest.approx(0.31731, abs=5e-6)
    assert GAUSSIAN_FRACTION == pytest.approx(float(special.erfc(2 ** -0.5)), rel=1e-15)


def test_echo_density_of_white_gaussian_noise_is_one(rng):
    # modeling.md §4.3 / Abel & Huang: η ≈ 1 for Gaussian noise; the §4.3 test asks 1.00 ± 0.05
    # for the profile. The per-window fraction of |x| > σ over ~600 effective samples has a
    # standard deviation of ~0.045·η (binomial, derived), so the mean over a second of windows
    # is within ±0.05 with a wide margin, and no window strays beyond ±0.25 (5.5 σ).
    x = rng.standard_normal(FS)
    prof = echo_density(x, FS)
    assert np.mean(prof.eta) == pytest.approx(1.0, abs=0.05)
    assert np.all(np.abs(prof.eta - 1.0) < 0.25)


def test_echo_density_of_sparse_spikes_is_small(rng):
    # modeling.md §4.3: η < 0.3 for sparse spikes. Analytic bound: with k spikes in a window,
    # at most k samples exceed σ, so η <= k·max(w)/erfc(1/√2), max(w) ≈ 2/N for a Hann window
    # of N samples; one spike per 5 ms gives k <= 5 in 20 ms and η <= 0.066.
    h = np.zeros(FS)
    pos = np.arange(100, FS, int(0.005 * FS))
    h[pos] = rng.choice([-1.0, 1.0], pos.size) * rng.uniform(0.2, 1.0, pos.size)
    prof = echo_density(h, FS)
    n_win = int(round(0.02 * FS))
    bound = 5 * (2.0 / n_win) / GAUSSIAN_FRACTION
    assert np.max(prof.eta) < 0.3
    assert np.max(prof.eta) <= bound * 1.01


def test_half_filled_window_matches_the_analytic_value():
    # Derived from the definition: a window centred on a silence-to-noise step holds half of
    # the (symmetric Hann) weight on noise, so σ² = σn²/2 and the noise samples exceed σ with
    # probability erfc(1/2) = 0.4795: η = 0.5·erfc(1/2)/erfc(1/√2) = 0.7556. Averaged over 40
    # seeds the estimator's spread (~0.05 per window) shrinks to < 0.01; bound 0.03.
    expected = 0.5 * special.erfc(0.5) / GAUSSIAN_FRACTION
    values = []
    for seed in range(40):
        r = np.random.default_rng(seed)
        h = np.zeros(FS // 4)
        on = 480 + 48 * 100  # a 960-sample window starting at a 48-sample hop is centred here
        h[on:] = r.standard_normal(h.size - on)
        prof = echo_density(h, FS)
        i = int(np.argmin(np.abs(prof.times_s - (on - 0.5) / FS)))
        assert prof.times_s[i] == pytest.approx((on - 0.5) / FS, abs=1e-12)
        values.append(prof.eta[i])
    assert np.mean(values) == pytest.approx(expected, abs=0.03)


def test_mixing_time_of_decaying_noise_sits_at_the_onset():
    # modeling.md §4.3: for exponentially decaying noise, t_mix sits at the onset. With a
    # window of 20 ms the window is entirely inside the noise once its centre is 10 ms after
    # the onset, and η then reaches 1 within a few windows' decorrelation (derived), so over
    # seeds and decay times the median lies within one window after the onset, and none
    # before it.
    delays = []
    for seed in range(12):
        for rt_s in (0.3, 1.0, 2.0):
            r = np.random.default_rng(seed)
            n = FS
            on = int(0.05 * FS)
            t = np.arange(n - on) / FS
            h = np.zeros(n)
            h[on:] = r.standard_normal(n - on) * np.exp(-3 * math.log(10) * t / rt_s)
            delays.append(mixing_time(h, FS) - on / FS)
    delays = np.array(delays)
    assert np.all(delays >= 0.0)
    assert np.median(delays) <= 0.02


def test_mixing_time_after_sparse_early_part():
    # Sparse reflections (one per 4 ms) for 60 ms, then a diffuse tail: t_mix is where the
    # tail begins, within one 20-ms window after it (same reasoning as above), and not in the
    # sparse part (η there <= 0.066 by the spike bound above).
    r = np.random.default_rng(7)
    n = FS
    h = np.zeros(n)
    h[1000] = 1.0
    for k in range(1, 15):
        h[1000 + k * int(0.004 * FS)] = 0.5 * r.choice([-1, 1])
    tail_on = 1000 + int(0.06 * FS)
    t = np.arange(n - tail_on) / FS
    h[tail_on:] = 0.1 * r.standard_normal(n - tail_on) * np.exp(-6.91 * t / 1.0)
    t_mix = mixing_time(h, FS)
    assert tail_on / FS <= t_mix <= tail_on / FS + 0.02


def test_noise_before_the_onset_is_not_taken_for_a_mixed_field(rng):
    # A measured IR has noise before the direct sound; the search starts at the onset rule
    # (first sample within 20 dB of the peak, modeling.md §3), so t_mix cannot precede it.
    h = 1e-4 * rng.standard_normal(FS)
    on = int(0.1 * FS)
    h[on] = 1.0
    t = np.arange(FS - on - 200) / FS
    h[on + 200:] += 0.05 * rng.standard_normal(t.size) * np.exp(-6.91 * t / 0.5)
    assert mixing_time(h, FS) >= on / FS


def test_never_mixing_raises():
    h = np.zeros(FS // 2)
    h[::2400] = 1.0
    with pytest.raises(FitError, match="never reached"):
        mixing_time(h, FS)


@pytest.mark.parametrize("kwargs, match", [({"window_s": 0.0001}, "16 samples"),
                                           ({"window_s": 2.0}, "no longer than h"),
                                           ({"hop_s": 0.0}, "hop_s")])
def test_bad_windows_raise(kwargs, match):
    with pytest.raises(ParameterError, match=match):
        echo_density(np.ones(FS // 2), FS, **kwargs)
