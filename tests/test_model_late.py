"""Late reverberation: the feedback delay network of measure.model.late."""

from __future__ import annotations

import math

import numpy as np
import pytest

from measure.bands import make_bands
from measure.decay import fit_decay, schroeder
from measure.errors import ParameterError
from measure.model.late import (
    DelayNetwork,
    LateReverb,
    NetworkState,
    band_masks,
    calibrate_decay,
    coprime_delays,
    half_spectrum_weights,
    line_gains,
    min_total_delay,
    nominal_delays_s,
    octave_t30_s,
    orthogonal_matrix,
    render_late,
    render_late_bands,
    run_network,
    stored_energy,
    white_levels_db,
)

FS = 48000


def test_hadamard_feedback_matrix_is_orthogonal():
    # modeling.md §4.2 test: A·Aᵀ = I to 1e-12 (a normalised Hadamard matrix is orthogonal by
    # construction; 1e-12 leaves room for float64 round-off in 16-term sums).
    for n in (2, 4, 8, 16):
        a = orthogonal_matrix(n)
        assert np.max(np.abs(a @ a.T - np.eye(n))) < 1e-12
    with pytest.raises(ParameterError, match="power of two"):
        orthogonal_matrix(6)


def test_delays_pairwise_coprime_and_dense_enough():
    # modeling.md §4.2 test: pairwise gcd = 1 and Σm >= 0.15·T60·fs (Schroeder & Logan's modal
    # density rule, via JOS PASP "delay-line lengths").
    for t60 in (0.3, 1.0, 2.0, 3.4):
        for fs in (44100, 48000, 96000):
            m = coprime_delays(nominal_delays_s(t60), fs)
            assert all(math.gcd(a, b) == 1 for i, a in enumerate(m) for b in m[i + 1:])
            assert sum(m) >= min_total_delay(t60, fs)


def test_lossless_network_keeps_its_energy():
    # modeling.md §4.2 test: with g_i = 1 and A orthogonal the stored energy is constant to
    # 1e-9 over 1e5 samples (exact in exact arithmetic, ‖A·s‖ = ‖s‖ each sample; 1e-9 bounds
    # the float64 round-off of ~200 block matrix products).
    rng = np.random.default_rng(7)
    delays = coprime_delays(nominal_delays_s(2.0), FS)
    n = len(delays)
    net = DelayNetwork(delays, orthogonal_matrix(n), np.ones((1, n)), np.ones(n), np.ones(n))
    state = NetworkState(tuple(rng.standard_normal((1, m)) for m in delays))
    e0 = float(stored_energy(state)[0])
    _, after = run_network(net, 100_000, state=state)
    e1 = float(stored_energy(after)[0])
    assert abs(e1 - e0) / e0 < 1e-9
    # and the energy really moved through the lines (not a network that does nothing)
    assert not np.allclose(after.lines[0], state.lines[0])


def test_comb_relation_schroeder_1962():
    # Schroeder 1962 (modeling.md §4.1): the IR of 1/(1 − g·z^−M) with g = 10^(−3M/(fs·T60))
    # decays 60 dB in T60. Check value: T60 = 2 s, M = 1500 at 48 kHz gives g = 0.89769
    # (modeling.md §4.1, computed); tolerance 5e-6 is the rounding of that printed value.
    m, t60 = 1500, 2.0
    g = float(line_gains([m], FS, t60)[0])
    assert abs(g - 0.89769) < 5e-6
    # A one-line network with A = [[1]] and line gain g is that comb, delayed by M.
    net = DelayNetwork((m,), np.ones((1, 1)), np.array([[g]]), np.ones(1), np.ones(1))
    n = 3 * FS
    y, _ = run_network(net, n, x=np.ones(1))
    comb = np.zeros(n)
    comb[m::m] = g ** np.arange(len(comb[m::m]))
    assert np.max(np.abs(y[0] - comb)) < 1e-12
    # T30 from the Schroeder curve equals T60 within 1 % (the acceptance tolerance; the
    # stepwise decay of a comb fitted by least squares deviates by well under that).
    h = comb[m:]
    t30, _ = fit_decay(schroeder(h), FS, -5.0, -35.0)
    assert abs(t30 / t60 - 1.0) < 0.01


def test_band_masks_partition_of_unity():
    # Complementary masks: Σ_b W_b(f) = 1 at every frequency (analytic: the product form
    # telescopes); 1e-12 is float64 round-off.
    f = np.linspace(0.0, 24000.0, 5001)
    w = band_masks((63.0, 125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0), f)
    assert np.max(np.abs(w.sum(axis=0) - 1.0)) < 1e-12
    assert np.all(w >= 0.0)
    # at each centre its own mask is 1 (transitions are narrower than an octave)
    for b, fc in enumerate((125.0, 1000.0)):
        k = int(np.argmin(np.abs(f - fc)))
        assert w[1 + 3 * b, k] == pytest.approx(1.0, abs=1e-3)


def test_level_is_the_energy_of_the_late_part():
    # One band: the mask is 1 everywhere, so the energy of the late part is exactly the level
    # asked for (definition of level_db), less what decays after the end of the rendering:
    # exp(−13.8·2.5/0.4) ≈ 1e-37 here, and the fade-in does not matter (scaled after it).
    late = LateReverb((1000.0,), (0.4,), (-12.0,), 0.01, 0.005, nominal_delays_s(0.4))
    h = render_late(late, FS, int(2.5 * FS))
    assert 10 * math.log10(np.sum(h**2)) == pytest.approx(-12.0, abs=1e-6)
    # nothing before start − 10 ms lead but FFT round-off (float64, relative 1e-12)
    assert np.max(np.abs(h[: int(0.009 * FS)])) < 1e-12 * np.max(np.abs(h))


def test_equal_decay_raw_octave_t30_within_5_percent():
    # Jot & Chaigne 1991 line gains make every path decay 60 dB in T60; with the same T60 in
    # every band the masks sum to one and each octave's T30 must match without calibration.
    # Tolerance 5 % = 1 JND of T (ISO 3382-1 Table A.1, modeling.md §7.1), the acceptance value;
    # a single rendering's modal fluctuation at 125 Hz with T = 2 s is ~2-3 % (ISO 3382-2
    # statistical uncertainty formula gives σ(T30) ≈ 0.55·T·sqrt(2.52/(B·T)) ≈ 6 % at most).
    bands = make_bands(FS, "octave", 125.0, 4000.0)
    fc = tuple(b.center_hz for b in bands)
    t60 = (2.0,) * len(fc)
    late = LateReverb(fc, t60, white_levels_db(fc, FS, -20.0), 0.0, 0.0, nominal_delays_s(2.0))
    t30 = octave_t30_s(render_late(late, FS, int(2.2 * FS)), FS, bands)
    for want, got in zip(t60, t30, strict=True):
        assert got is not None and abs(got / want - 1.0) < 0.05


@pytest.mark.parametrize("t60", [
    (2.6, 2.5, 2.4, 2.3, 2.1, 1.8, 1.4),   # a bright stairwell-like decay, 63 Hz-4 kHz
    (0.75, 0.62, 0.52, 0.45, 0.42, 0.40, 0.36),  # a dull office-like decay
])
def test_absorbing_network_octave_t30_within_5_percent(t60):
    # Acceptance: with absorption, each octave's T30 of the rendered IR (125 Hz-4 kHz, analysed
    # by measure.bands + measure.decay, ISO 3382-1 A.2.2) is within 5 % (1 JND, ISO 3382-1
    # Table A.1) of its target, after calibrate_decay (the octave filters pass part of the
    # neighbouring bands, see late.py; fit_model runs its own loop of this kind on the whole
    # rendered model, calibrate_decay is the late part's alone).
    bands = make_bands(FS, "octave", 63.0, 4000.0)
    fc = tuple(b.center_hz for b in bands)
    # levels of a white spectrum (each band's energy proportional to its mask's bandwidth), as
    # in a measured room, whose top band holds everything up to Nyquist
    late = LateReverb(fc, t60, white_levels_db(fc, FS, -20.0), 0.02, 0.005,
                      nominal_delays_s(max(t60)))
    tuned, _ = calibrate_decay(late, FS, t60)
    h = render_late(tuned, FS, int((0.02 + 1.3 * max(tuned.t60_s)) * FS))
    t30 = octave_t30_s(h, FS, bands)
    for b, want, got in zip(bands, t60, t30, strict=True):
        if b.center_hz < 100:
            continue  # 63 Hz is outside the acceptance range 125 Hz-4 kHz
        assert got is not None and abs(got / want - 1.0) < 0.05, (b.label, got, want)


def test_absorbing_network_raw_octave_t30_within_5_percent():
    # The network alone, without calibrate_decay: Jot & Chaigne gains per band, masks summed.
    # Stairwell-like targets (slope 2.5 -> 1.4 s over 125 Hz-4 kHz). Each octave's T30 within
    # 5 % (1 JND, ISO 3382-1 Table A.1). This is one deterministic rendering: its modal
    # fluctuation and the octave filters' leakage from neighbouring bands both show up here
    # (bench/bench_model.py prints the errors: max 3.3 % for these targets).
    bands = make_bands(FS, "octave", 63.0, 4000.0)
    fc = tuple(b.center_hz for b in bands)
    t60 = (2.6, 2.5, 2.4, 2.3, 2.1, 1.8, 1.4)
    late = LateReverb(fc, t60, white_levels_db(fc, FS, -10.0), 0.0, 0.0,
                      nominal_delays_s(max(t60)))
    t30 = octave_t30_s(render_late(late, FS, 2 * FS), FS, bands)
    for b, want, got in zip(bands, t60, t30, strict=True):
        if b.center_hz < 100:
            continue
        assert got is not None and abs(got / want - 1.0) < 0.05, (b.label, got, want)


def _band_power_db(y: np.ndarray, t_s: np.ndarray, t60_s: float, lo_s: float, hi_s: float
                   ) -> float:
    """Mean power over [lo_s, hi_s) with the band's exponential decay taken out, dB."""
    k = (t_s >= lo_s) & (t_s < hi_s)
    return 10 * math.log10(np.mean(y[k] ** 2 * np.exp(6 * math.log(10) * t_s[k] / t60_s)))


def test_early_diffuse_part_continues_the_network_level():
    # diffuse_from_s: band-shaped noise from 2.5 ms carries the diffuse energy up to the
    # network's start and cross-fades into it. Its power per band is set to the network's
    # power at its start continued back along the band's decay (derived from level_db and
    # T60 in late._early_diffuse), so, decay taken out, the power before and after the
    # cross-fade must agree. Tolerance 1 dB: each side is an estimate over ~0.2-0.4 s of an
    # octave of noise, whose normalised random error is 1/sqrt(B·T) (Bendat & Piersol, Random
    # Data, power estimates): ≤ 0.1 at 1 kHz and 4 kHz, i.e. ≤ 0.4 dB, plus the network's
    # deviation from a pure exponential.
    fc = (250.0, 1000.0, 4000.0)
    t60 = (1.0, 0.9, 0.8)
    start, fade = 0.2, 0.005
    late = LateReverb(fc, t60, white_levels_db(fc, FS, -10.0), start, fade,
                      nominal_delays_s(max(t60)), diffuse_from_s=0.0025)
    y = render_late_bands(late, FS, int(0.7 * FS))
    t = np.arange(y.shape[1]) / FS
    for b in (1, 2):
        before = _band_power_db(y[b], t, t60[b], 0.01, start - 0.005)
        after = _band_power_db(y[b], t, t60[b], start + fade + 0.005, 0.6)
        assert abs(before - after) < 1.0, (fc[b], before, after)
    # nothing before the early diffuse part starts but the masks' FFT round-off
    assert np.max(np.abs(y[:, : int(0.001 * FS)])) < 1e-9 * np.max(np.abs(y))
    # and it is deterministic (fixed seed): a model renders the same every time
    assert np.array_equal(y, render_late_bands(late, FS, int(0.7 * FS)))


def test_early_diffuse_start_is_checked():
    with pytest.raises(ParameterError, match="diffuse_from_s"):
        LateReverb((1000.0,), (0.5,), (-10.0,), 0.02, 0.005, nominal_delays_s(0.5),
                   diffuse_from_s=0.03)


@pytest.mark.parametrize("n_fft", [64, 65])
def test_half_spectrum_weights_give_parseval(n_fft):
    # Parseval's theorem for the DFT: Σ x² = (1/N) Σ_k |X_k|² over all N bins; the rfft half
    # holds each interior bin once for itself and once for its mirror (derived). Even and odd
    # N differ only in whether a Nyquist bin exists. 1e-12: float64 round-off.
    x = np.random.default_rng(3).standard_normal(n_fft)
    e = np.abs(np.fft.rfft(x)) ** 2 @ half_spectrum_weights(n_fft) / n_fft
    assert e == pytest.approx(float(np.sum(x * x)), rel=1e-12)
