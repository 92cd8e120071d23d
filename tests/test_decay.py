"""Decay analysis: Schroeder curve, Lundeby truncation/compensation, EDT/T20/T30, honesty."""

from __future__ import annotations

import math

import numpy as np
import pytest

from measure.bands import filter_bands, make_bands
from measure.decay import (
    DECAY_CONSTANT,
    analyze_decay,
    fit_decay,
    lundeby,
    onset_index,
    schroeder,
)
from measure.errors import ParameterError

FS = 48000


def ideal_decay(t60_s: float, duration_s: float, fs: int = FS) -> np.ndarray:
    """h with h² = exp(−13.8155 t/T): the ideal exponential energy decay (measurement.md §8)."""
    t = np.arange(int(round(duration_s * fs))) / fs
    return np.exp(-DECAY_CONSTANT * t / (2.0 * t60_s))


def decaying_noise(rng, t60_s: float, duration_s: float, fs: int = FS) -> np.ndarray:
    t = np.arange(int(round(duration_s * fs))) / fs
    return rng.standard_normal(t.size) * np.exp(-DECAY_CONSTANT * t / (2.0 * t60_s))


def test_decay_constant():
    # 6 ln 10 = 13.8155 (measurement.md conventions; derived from 60 dB = 10 lg e^{κT}).
    assert DECAY_CONSTANT == pytest.approx(13.815510557964274, rel=1e-15)


@pytest.mark.parametrize("t60", [0.5, 1.0, 2.0])
def test_ideal_decay_gives_edt_t20_t30_equal_T(t60):
    # Closed form (measurement.md §8, derived from the ISO 3382-1 definitions): the Schroeder
    # curve of exp(−13.8155 t/T) is the straight line −60 t/T, so EDT = T20 = T30 = T.
    # Acceptance tolerance 0.1 %; the discrete computation is exact to rounding (§8 says 5
    # decimals), so 0.1 % leaves room only for float error.
    d = analyze_decay(ideal_decay(t60, 2.0 * t60), FS, onset=0)
    for v in (d.edt_s, d.t20_s, d.t30_s):
        assert v == pytest.approx(t60, rel=1e-3)
    assert d.flags == ()
    # ξ = 1000(1 − r²) of a straight line is 0 (ISO 3382-2 Annex B); C = 0.
    assert d.xi_t30_permille == pytest.approx(0.0, abs=1e-6)
    assert d.curvature_percent == pytest.approx(0.0, abs=1e-6)


def test_schroeder_curve_of_ideal_decay_is_a_line():
    # measurement.md §8: L(t) = −60 t/T exactly. The backward sum of a geometric sequence
    # truncated at N is (r^n − r^N)/(1 − r); over the first half of a 120 dB decay the r^N
    # term is below 1e-6 relative, so 1e-5 dB is float-level agreement.
    t60 = 1.0
    h = ideal_decay(t60, 2.0)
    L = schroeder(h)
    t = np.arange(h.size) / FS
    half = h.size // 2
    assert L[:half] == pytest.approx(-60.0 * t[:half] / t60, abs=1e-5)


@pytest.mark.parametrize("depth_db, expected", [
    (35.0, (0.9989, 0.9844, 0.9400)),
    (45.0, (0.9999, 0.9984, 0.9915)),
    (55.0, (1.0000, 0.9998, 0.9991)),
])
def test_truncation_oracle(depth_db, expected):
    # measurement.md §3.2 table (computed): an ideal decay T = 1 s truncated D dB below its
    # start gives these uncompensated EDT/T20/T30; with the exact compensation
    # C = Σ_{n≥n1} h²[n] the result is exactly T. Tolerance: the table's 4 decimals (±6e-5 s
    # plus rounding of the truncation sample).
    t60 = 1.0
    h = ideal_decay(t60, 2.0)
    n1 = int(round(depth_db / 60.0 * t60 * FS))
    raw = schroeder(h, stop_index=n1)
    got = [fit_decay(raw, FS, hi, lo, end_db=None) for hi, lo in
           ((0.0, -10.0), (-5.0, -25.0), (-5.0, -35.0))]
    if depth_db == 35.0:
        # the curve ends at −inf dB (nothing after n1): T30's range is reached at the last sample
        assert got[2] is not None
    assert [g[0] for g in got] == pytest.approx(expected, abs=1.2e-4)
    comp = float(np.sum(h[n1:] ** 2)) + float(h[-1] ** 2) / (
        1.0 - math.exp(-DECAY_CONSTANT / (t60 * FS)))  # the rest of the infinite decay
    e0 = float(np.sum(h[:n1] ** 2)) + comp
    L = schroeder(h, stop_index=n1, compensation=comp)
    end_db = 10 * math.log10(comp / e0)
    for hi, lo in ((0.0, -10.0), (-5.0, -25.0), (-5.0, -35.0)):
        t_s, _ = fit_decay(L, FS, hi, lo, end_db=end_db)
        assert t_s == pytest.approx(t60, rel=1e-9)


def test_uncompensated_t30_ratio_0940():
    # The oracle: ideal decay truncated at 35 dB, uncompensated T30 = 0.940 T
    # (measurement.md §3.2). Tolerance: the 3 printed decimals.
    h = ideal_decay(1.0, 2.0)
    n1 = int(round(35.0 / 60.0 * FS))
    t30, _ = fit_decay(schroeder(h, stop_index=n1), FS, -5.0, -35.0)
    assert t30 == pytest.approx(0.940, abs=5e-4)


def test_onset_rule_20_db_below_max():
    # ISO 3382-1:2009 A.3.4: the start is where the response first comes within 20 dB of its
    # maximum. Pre-delay noise at −40 dB, a rise at sample 1000 (−30 dB), −18 dB at 1001, the
    # peak at 1003: onset is 1001.
    h = np.full(3000, 0.01) * np.tile([1.0, -1.0], 1500)
    h[1000], h[1001], h[1002], h[1003] = 0.0316, 0.126, 0.5, 1.0
    assert onset_index(h, FS) == 1001
    with pytest.raises(ParameterError, match="all zero"):
        onset_index(np.zeros(100), FS)


def test_lundeby_finds_noise_and_crosspoint(rng):
    # Broadband decaying noise (T = 1 s) plus steady noise 40 dB below the decay's start
    # energy. Derived: the decay meets the noise at t = 40/60·T = 0.667 s. Tolerances: the
    # noise power is a mean over > 0.3 s of white noise at 48 kHz (σ ≈ 0.1 %): 0.2 dB;
    # the crosspoint is found from block averages and a fitted line: 5 %.
    t60 = 1.0
    h = decaying_noise(rng, t60, 3.0)
    noise_power = 10 ** (-40 / 10)
    y = h + rng.standard_normal(h.size) * math.sqrt(noise_power)
    nf = lundeby(y, FS)
    assert nf.ok and nf.noise_floor_found and nf.converged
    assert 10 * math.log10(nf.noise_power / noise_power) == pytest.approx(0.0, abs=0.2)
    assert nf.truncation_index / FS == pytest.approx(40 / 60 * t60, rel=0.05)
    assert nf.late_decay_s == pytest.approx(t60, rel=0.05)


def _band_ensemble(t60, n_real, pnr_db=None, seed=0, duration_s=2.0):
    """Decay figures of n_real independent decaying-noise IRs in octaves 250 Hz–8 kHz."""
    bands = make_bands(FS, "octave", 250, 8000)
    rng = np.random.default_rng(seed)
    rng_noise = np.random.default_rng(seed + 1000)  # separate stream: same IRs with or without
    out = []
    for _ in range(n_real):
        h = np.concatenate([np.zeros(240), decaying_noise(rng, t60, duration_s)])
        if pnr_db is not None:
            peak = float(np.max(h * h))
            h = h + rng_noise.standard_normal(h.size) * math.sqrt(peak * 10 ** (-pnr_db / 10))
        on = onset_index(h, FS)
        yb = filter_bands(h, FS, bands, mode="reversed")
        out.append([analyze_decay(y, FS, onset=on, bandwidth_hz=b.bandwidth_hz, label=b.label)
                    for b, y in zip(bands, yb, strict=True)])
    return bands, out


def test_decaying_noise_in_octave_bands():
    # Acceptance: exponentially decaying noise, T = 1.2 s, octaves 250 Hz–8 kHz: EDT, T20, T30
    # within 2 % of T.
    # One noise realisation scatters by more than that at low frequencies (ISO 3382-2 Annex A:
    # σ(T20) ≈ 0.88 T √(1.19/(B T)) = 6.6 % at 250 Hz; we measure 7 % for T20 and 11 % for EDT
    # over 300 realisations), so the 2 % is checked on the ensemble: the squared band responses
    # of 256 independent realisations are averaged (the ensemble average of squared decays that
    # Schroeder's integral estimates) and that decay is analysed. Its statistical error is
    # σ/√256 ≤ 0.7 % (EDT at 250 Hz), so the 2 % tests the bias of filters and fits.
    # Separately, every single realisation must lie within 4 σ of the Annex A uncertainty.
    from measure.parameters import t20_uncertainty_s

    t60 = 1.2
    n_real = 256
    bands = make_bands(FS, "octave", 250, 8000)
    rng = np.random.default_rng(11)
    acc = None
    for i in range(n_real):
        h = np.concatenate([np.zeros(240), decaying_noise(rng, t60, 1.2)])
        yb = filter_bands(h, FS, bands, mode="reversed")
        acc = yb * yb if acc is None else acc + yb * yb
        if i < 4:
            for b, y in zip(bands, yb, strict=True):
                d = analyze_decay(y, FS, onset=240, bandwidth_hz=b.bandwidth_hz)
                assert abs(d.t20_s - t60) < 4 * t20_uncertainty_s(t60, b.bandwidth_hz)
    errors = {}
    for b, e in zip(bands, acc, strict=True):
        d = analyze_decay(np.sqrt(e / n_real), FS, onset=240, bandwidth_hz=b.bandwidth_hz)
        assert d.flags == (), d.flags
        errors[b.label] = [d.edt_s / t60 - 1, d.t20_s / t60 - 1, d.t30_s / t60 - 1]
    worst = max(abs(v) for row in errors.values() for v in row)
    assert worst < 0.02, errors


def test_noise_at_50_db_pnr_keeps_t20():
    # Acceptance: the same IRs with noise at a peak-to-noise ratio of 50 dB: T20 within 3 %
    # (Lundeby truncation and compensation, plus noise subtraction), T30 within 5 % or null
    # with a reason. "The same IR": each noisy result is compared with the noise-free analysis
    # of the same realisation, so the comparison isolates the noise handling from the
    # statistical scatter of decaying noise. The 50 dB are re the IR's peak sample; the
    # decay's start energy is ~12 dB below that peak, so the bands have ~38 dB of decay above
    # the noise: enough for T20 (35 dB, ISO 3382-1 5.3.3), not for T30 (45 dB).
    t60 = 1.2
    _, clean = _band_ensemble(t60, 6, seed=5)
    bands, noisy = _band_ensemble(t60, 6, pnr_db=50.0, seed=5)
    n_t30_null = 0
    for rc, rn in zip(clean, noisy, strict=True):
        for b, dc, dn in zip(bands, rc, rn, strict=True):
            assert dn.t20_s is not None, dn.flags
            assert dn.t20_s == pytest.approx(dc.t20_s, rel=0.03), b.label
            if dn.t30_s is None:
                n_t30_null += 1
                assert any(f.startswith(f"{b.label}: T30 needs 45 dB of decay above the noise")
                           for f in dn.flags), dn.flags
            else:
                assert dn.t30_s == pytest.approx(dc.t30_s, rel=0.05)
            # band PNR near the broadband 50 dB: white noise and the IR's start lose the same
            # share in a band (derived), the peak factors differ; the bounds are the measured
            # 44.6-51.8 dB of these six seeded realisations widened by about 1 dB, no source
            assert 44.0 < dn.peak_to_noise_db < 53.0
    assert n_t30_null > 0


def test_too_little_range_gives_null_with_reason(rng):
    # ISO 3382-1:2009 5.3.3: T20 needs 35 dB and T30 45 dB of decay above the noise. A decay
    # whose start energy is 30 dB above the noise: EDT measurable (20 dB), T20 and T30 null.
    h = decaying_noise(rng, 0.8, 3.0)
    h = h + rng.standard_normal(h.size) * math.sqrt(10 ** (-30 / 10))
    d = analyze_decay(h, FS, onset=0)
    assert d.t20_s is None and d.t30_s is None and d.edt_s is not None
    assert d.edt_s == pytest.approx(0.8, rel=0.05)  # broadband: σ(EDT) small at B = 24 kHz
    assert any(f.startswith("T30 needs 45 dB of decay above the noise, this band has 3")
               for f in d.flags), d.flags
    assert any(f.startswith("T20 needs 35 dB") for f in d.flags)


def test_only_noise_gives_null(rng):
    d = analyze_decay(rng.standard_normal(FS), FS, onset=0)
    assert (d.edt_s, d.t20_s, d.t30_s) == (None, None, None)
    assert d.flags and "no decay can be measured" in d.flags[0]


def test_bt_limit_of_the_band_filter():
    # ISO 3382-2:2008 7.3: with time-reversed filtering the filter does not bias the decay when
    # B·T > 4. An ideal decay of T = 0.03 s in the 125 Hz octave (B = 88.7 Hz, B·T = 2.7) must be
    # refused with the reason; the same decay in the 4 kHz octave (B·T = 84) is measured.
    h = np.concatenate([np.zeros(2400), ideal_decay(0.03, 0.5)])
    for label, ok in (("125", False), ("4k", True)):
        band = make_bands(FS, "octave", float(label.replace("k", "000")),
                          float(label.replace("k", "000")))[0]
        y = filter_bands(h, FS, (band,), mode="reversed")[0]
        d = analyze_decay(y, FS, onset=2400, bandwidth_hz=band.bandwidth_hz, label=band.label)
        if ok:
            assert d.t20_s == pytest.approx(0.03, rel=0.05)
        else:
            assert d.t20_s is None
            assert any("B·T" in f and "needs > 4" in f for f in d.flags), d.flags


def test_double_slope_is_flagged():
    # ISO 3382-2:2008 Annex B: curvature C = 100 (T30/T20 − 1); above 10 % the decay is
    # suspect. h² = e^{−κ1 t} + 10^{−2.5} e^{−κ2 t} with T1 = 0.4 s, T2 = 2 s: the second slope
    # takes over near −25 dB, so T30 > T20 by far more than 10 %.
    t = np.arange(3 * FS) / FS
    e = np.exp(-DECAY_CONSTANT * t / 0.4) + 10 ** -2.5 * np.exp(-DECAY_CONSTANT * t / 2.0)
    d = analyze_decay(np.sqrt(e), FS, onset=0)
    assert d.curvature_percent == pytest.approx(100 * (d.t30_s / d.t20_s - 1), rel=1e-12)
    assert d.curvature_percent > 10
    assert any("not a single exponential" in f for f in d.flags)


def test_bad_inputs():
    with pytest.raises(ParameterError, match="NaN or Inf"):
        analyze_decay(np.array([1.0, np.nan, 0.5]), FS)
    with pytest.raises(ParameterError, match="onset=10"):
        analyze_decay(np.ones(5), FS, onset=10)
    with pytest.raises(ParameterError, match="filter_mode"):
        analyze_decay(np.ones(500), FS, filter_mode="both")
