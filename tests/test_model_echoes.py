"""Direct sound, discrete echoes and ITDG (modeling.md §3).

modeling.md = /work/shared/reference/modeling.md. The synthetic responses are sums of copies
of a continuous-time wavelet sampled at the exact (fractional) arrival times, so every delay
and gain is known in closed form: the wavelet is the impulse response of an analog 2nd-order
Butterworth high-pass at 80 Hz times a 4th-order Butterworth low-pass at 12 kHz (a
loudspeaker-like band), evaluated from its partial-fraction expansion
(scipy.signal.butter(analog=True) and scipy.signal.residue, SciPy 1.17.1).
"""

from __future__ import annotations

import math
import time

import numpy as np
import pytest
from scipy import signal

from measure.errors import ParameterError
from measure.model.echoes import find_echoes

FS = 48000
T0_S = 0.01
_b1, _a1 = signal.butter(2, 2 * math.pi * 80.0, "high", analog=True)
_b2, _a2 = signal.butter(4, 2 * math.pi * 12000.0, analog=True)
_R, _P, _ = signal.residue(np.polymul(_b1, _b2), np.polymul(_a1, _a2))


def wavelet(t: np.ndarray) -> np.ndarray:
    """The analog band-pass impulse response at arbitrary times (zero before t = 0)."""
    out = np.zeros_like(t)
    m = t >= 0
    out[m] = np.real(np.sum(_R[:, None] * np.exp(_P[:, None] * t[m][None, :]), axis=0))
    return out


def synth(reflections, *, length_s=0.2, pnr_db=None, rng=None):
    """Direct sound at T0_S plus (delay_s re direct, gain re direct) copies, plus noise whose
    standard deviation is pnr_db below the direct sound's peak."""
    t = np.arange(int(length_s * FS)) / FS
    h = wavelet(t - T0_S)
    peak = np.max(np.abs(h))
    for d, g in reflections:
        h = h + g * wavelet(t - T0_S - d)
    if pnr_db is not None:
        h = h + rng.standard_normal(h.size) * peak * 10 ** (-pnr_db / 20)
    return h / peak


def match(echoes, reflections):
    """Indices of the found echoes nearest to each true one, and the unmatched rest."""
    d = np.array(echoes.delays_s)
    idx = [int(np.argmin(np.abs(d - dt))) for dt, _ in reflections]
    rest = sorted(set(range(d.size)) - set(idx))
    return idx, rest


def test_modeling_sheet_two_echo_case():
    # modeling.md §3 test: y = x + 0.5·x(t − 3.2 ms) − 0.3·x(t − 7.9 ms) + noise at 40 dB SNR
    # (here: noise standard deviation 40 dB below the direct peak): lags within ±0.05 ms on a
    # fractional grid, gains within ±0.05, first echo's ripple spacing 1/t1 = 312.5 Hz.
    refl = [(0.0032, 0.5), (0.0079, -0.3)]
    e = find_echoes(synth(refl, pnr_db=40, rng=np.random.default_rng(11)), FS)
    idx, rest = match(e, refl)
    for (dt, g), i in zip(refl, idx, strict=True):
        assert e.delays_s[i] == pytest.approx(dt, abs=0.05e-3)
        assert e.gains[i] == pytest.approx(g, abs=0.05)
    # Comb ripple spacing of one echo is 1/t1 (derived, modeling.md §3); ±0.05 ms on 3.2 ms
    # is ±5 Hz.
    assert 1.0 / e.delays_s[idx[0]] == pytest.approx(312.5, abs=5.0)
    # ITDG = t1 − t0 (Beranek 1962, modeling.md §3): the first echo.
    assert e.itdg_s == pytest.approx(0.0032, abs=1 / FS)
    # Anything else found must be weaker than -25 dB (acceptance of the issue).
    assert all(abs(e.gains[i]) < 10 ** (-25 / 20) for i in rest)


@pytest.mark.parametrize("seed", range(8))
def test_random_reflections_are_found_within_a_sample_and_half_a_db(seed):
    # Acceptance of the issue: reflections at least 1 ms apart, from -1 to -20 dB re direct,
    # either sign, at fractional delays: each found within 1 sample and 0.5 dB, and nothing
    # else above -25 dB. Noise 60 dB below the peak, a clean measurement (at that level the
    # matched-filter gain error is ~0.001, far inside 0.5 dB; measured worst over 60 random
    # sets: 0.02 samples, 0.23 dB).
    rng = np.random.default_rng(100 + seed)
    d = np.sort(rng.uniform(1e-3, 60e-3, int(rng.integers(3, 9))))
    keep = [d[0]]
    for v in d[1:]:
        if v - keep[-1] >= 1e-3:
            keep.append(v)
    gains = 10 ** (-rng.uniform(1, 20, len(keep)) / 20) * rng.choice([-1, 1], len(keep))
    refl = list(zip(keep, gains, strict=True))
    e = find_echoes(synth(refl, pnr_db=60, rng=rng), FS)
    idx, rest = match(e, refl)
    for (dt, g), i in zip(refl, idx, strict=True):
        assert abs(e.delays_s[i] - dt) * FS <= 1.0
        assert np.sign(e.gains[i]) == np.sign(g)
        assert abs(20 * math.log10(abs(e.gains[i] / g))) <= 0.5
    assert all(abs(e.gains[i]) < 10 ** (-25 / 20) for i in rest)
    assert e.itdg_s == pytest.approx(min(keep), abs=1 / FS)


@pytest.mark.parametrize("seed", range(3))
def test_reflections_over_a_diffuse_tail(seed):
    # A diffuse tail (wavelet-coloured decaying noise, 40 dB below the direct peak per sample,
    # from 4 ms on) adds to every echo; the matched-filter amplitude then has a spread of about
    # the tail's per-sample level, 0.01 (derived: the wavelet-coloured background's correlation
    # with the wavelet, normalised by its energy), so gains are held to ±0.05 (5 σ); delays
    # still within a sample, and no tail fluctuation may pass for an echo above -25 dB.
    rng = np.random.default_rng(seed)
    refl = [(1.3e-3, 0.3), (2.9e-3, -0.2), (6.1e-3, 0.1), (11.7e-3, -0.5), (18.2e-3, 0.15),
            (26.0e-3, -0.12)]
    h = synth(refl, pnr_db=60, rng=rng)
    t = np.arange(h.size) / FS
    on = int((T0_S + 0.004) * FS)
    tail = np.zeros(h.size)
    tail[on:] = rng.standard_normal(h.size - on) * np.exp(-6.91 * (t[on:] - t[on]) / 0.8)
    tail = signal.fftconvolve(tail, wavelet(np.arange(200) / FS))[:h.size]
    tail *= 10 ** (-40 / 20) / np.std(tail[on:on + 480])
    e = find_echoes(h + tail, FS)
    idx, rest = match(e, refl)
    for (dt, g), i in zip(refl, idx, strict=True):
        assert abs(e.delays_s[i] - dt) * FS <= 1.0
        assert e.gains[i] == pytest.approx(g, abs=0.05)
    assert all(abs(e.gains[i]) < 10 ** (-25 / 20) for i in rest)


def test_given_number_of_echoes_returns_the_strongest():
    # With n_echoes = K the K strongest reflections are returned (matching pursuit picks in
    # order of matched-filter amplitude), whatever the thresholds.
    refl = [(2e-3, 0.2), (5e-3, -0.6), (9e-3, 0.05), (14e-3, 0.4), (21e-3, -0.02)]
    e = find_echoes(synth(refl), FS, n_echoes=3)
    assert e.n_echoes == 3
    np.testing.assert_allclose(sorted(e.delays_s), [2e-3, 5e-3, 14e-3], atol=1 / FS)


def test_shift_moves_the_direct_sound_and_not_the_delays():
    # Delays are re the direct sound, so a whole-sample shift of the response moves only
    # direct_index / direct_time_s, by exactly that shift (analytic).
    refl = [(3e-3, 0.4), (8.5e-3, -0.25)]
    h = synth(refl)
    a = find_echoes(h, FS)
    b = find_echoes(np.concatenate((np.zeros(37), h)), FS)
    assert b.direct_index - a.direct_index == 37
    assert b.direct_time_s - a.direct_time_s == pytest.approx(37 / FS, abs=1e-12)
    np.testing.assert_allclose(b.delays_s, a.delays_s, atol=1e-9)
    np.testing.assert_allclose(b.gains, a.gains, atol=1e-9)


def test_no_echo_gives_no_itdg():
    e = find_echoes(synth([], pnr_db=60, rng=np.random.default_rng(3)), FS)
    assert e.n_echoes == 0 and e.itdg_s is None
    assert e.to_dict()["itdg_s"] is None


@pytest.mark.parametrize("kwargs, match", [({"min_gain_db": 3.0}, "min_gain_db"),
                                           ({"n_echoes": -1}, "n_echoes"),
                                           ({"highpass_hz": 20000.0}, "highpass_hz"),
                                           ({"max_delay_s": 0.0}, "max_delay_s")])
def test_bad_arguments_raise(kwargs, match):
    with pytest.raises(ParameterError, match=match):
        find_echoes(synth([(3e-3, 0.5)]), FS, **kwargs)


def test_silent_input_raises():
    with pytest.raises(ParameterError, match="all zeros"):
        find_echoes(np.zeros(4800), FS)


def test_two_second_room_response_is_fast(rng):
    # Performance budget of the issue (whole model fit of a 2 s IR at 48 kHz under 2 s): echo
    # search over 100 ms of a 2 s response with a dense diffuse tail, well under 1 s.
    refl = [(1.3e-3, 0.3), (2.9e-3, -0.2), (6.1e-3, 0.1), (11.7e-3, -0.5)]
    h = synth(refl, length_s=2.0, pnr_db=60, rng=rng)
    t = np.arange(h.size) / FS
    on = int((T0_S + 0.004) * FS)
    h[on:] += 0.03 * rng.standard_normal(h.size - on) * np.exp(-6.91 * (t[on:] - t[on]) / 1.5)
    t0 = time.perf_counter()
    find_echoes(h, FS)
    assert time.perf_counter() - t0 < 1.0
