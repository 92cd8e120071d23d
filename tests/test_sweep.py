"""Exponential sweep design (measure.sweep), checked against Farina (2000) and scipy."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.signal import hilbert

from measure.errors import ParameterError
from measure.sweep import SweepSpec, inverse_spectrum, make_sweep, sweep_signal
from measure.virtual import virtual_take

FS = 48000


def test_instantaneous_frequency_follows_the_exponential_law():
    # Farina 2000 (AES 108th Conv., preprint 5093), eq. for the ESS: f(t) = f1·exp(t·ln(f2/f1)/T).
    # The tolerance is 0.5 %; away from the fades the Hilbert phase derivative of a pure
    # chirp is exact to far better than that.
    spec = SweepSpec(fs=FS, f1_hz=50.0, f2_hz=16000.0, duration_s=2.0, fade_in_s=0.05,
                     fade_out_s=0.005, gap_s=0.0, lead_in_s=0.0)
    x = sweep_signal(spec)
    phase = np.unwrap(np.angle(hilbert(x)))
    f_inst = np.diff(phase) * FS / (2 * math.pi)
    t = (np.arange(f_inst.size) + 0.5) / FS
    expected = spec.f1_hz * np.exp(t * math.log(spec.f2_hz / spec.f1_hz) / spec.duration_s)
    keep = (t > spec.fade_in_s + 0.05) & (t < spec.duration_s - spec.fade_out_s - 0.05)
    rel = np.abs(f_inst[keep] / expected[keep] - 1.0)
    assert rel.max() < 0.005


@pytest.mark.parametrize("order, advance_s", [(2, 0.50172), (3, 0.79520), (4, 1.00343)])
def test_harmonic_responses_land_l_ln_n_before_the_linear_one(order, advance_s):
    # Farina 2000: the N-th harmonic IR is advanced by L·ln N; check values for a 5 s
    # 20–20000 Hz sweep from measurement.md §1.3 (computed there and verified by simulation).
    # The distortion is a memoryless polynomial in the virtual loudspeaker; tolerance 1 sample.
    spec = SweepSpec(fs=FS, f1_hz=20.0, f2_hz=20000.0, duration_s=5.0, gap_s=1.5, lead_in_s=1.5)
    assert spec.harmonic_advance_s(order) == pytest.approx(advance_s, abs=1e-5)
    sweep = make_sweep(spec)
    y = virtual_take(sweep.program, FS, np.array([1.0]), hd2_percent=10.0, hd3_percent=5.0,
                     extra_s=0.0)
    # A fourth harmonic needs a 4th-power term: add one of our own.
    y = y + 0.05 * (y / 0.1) ** 4 * 0.1
    n_fft = 1 << 20
    d = np.fft.irfft(np.fft.rfft(y, n_fft) * inverse_spectrum(spec, n_fft), n_fft)
    linear = spec.n_lead
    assert int(np.argmax(np.abs(d))) == linear
    expect = linear - advance_s * FS
    lo, hi = int(expect) - 200, int(expect) + 200
    found = lo + int(np.argmax(np.abs(d[lo:hi])))
    assert abs(found - expect) <= 1.0


def test_program_layout_and_level():
    spec = SweepSpec(fs=FS, f1_hz=20.0, f2_hz=24000.0, duration_s=1.0, repeats=3, gap_s=0.5,
                     lead_in_s=0.25, level_dbfs=-12.0)
    s = make_sweep(spec)
    assert s.program.size == int(0.25 * FS) + 3 * int(1.5 * FS)
    # peak of the program is the requested level (definition of dBFS peak; 1e-3 dB because the
    # sampled sine need not hit its crest exactly)
    assert 20 * math.log10(np.max(np.abs(s.program))) == pytest.approx(-12.0, abs=1e-3)
    for k in range(3):
        i = spec.sweep_start(k)
        np.testing.assert_array_equal(s.program[i:i + spec.n_sweep], s.x)
        assert not np.any(s.program[i + spec.n_sweep:i + spec.n_period])  # the gap is silent
    assert not np.any(s.program[:spec.n_lead])


def test_loopback_gives_a_unit_impulse():
    # A wire (capture = the file, delayed) must deconvolve to a unit impulse: the regularised
    # inverse is exact inside [f1, f2] (Kirkeby et al. 1998). Sweep to Nyquist so the impulse
    # is full-band (Farina 2007 recommends ending at Nyquist). Issue tolerances: 0.1 dB.
    spec = SweepSpec(fs=FS, f1_hz=20.0, f2_hz=FS / 2, duration_s=3.0, gap_s=1.0)
    sweep = make_sweep(spec)
    from measure.deconvolve import recover_ir

    y = np.concatenate([np.zeros(3217), sweep.program, np.zeros(2000)])
    ir = recover_ir(y, sweep)
    h = ir.h[0]
    assert 20 * math.log10(np.max(np.abs(h))) == pytest.approx(0.0, abs=0.1)
    assert ir.latency_s[0] * FS == pytest.approx(3217.0, abs=1.0)
    seg = np.roll(h, -ir.onset_index)  # the whole response, impulse at index 0 of the frame
    n = seg.size
    mag_db = 20 * np.log10(np.abs(np.fft.rfft(seg)))
    f = np.fft.rfftfreq(n, 1 / FS)
    band = (f >= 2 * spec.f1_hz) & (f <= spec.f2_hz / 2)
    assert np.max(np.abs(mag_db[band])) < 0.1


@pytest.mark.parametrize("kwargs, match", [
    ({"f2_hz": 30000.0}, "exceeds Nyquist"),
    ({"f1_hz": 2000.0, "f2_hz": 1000.0}, "must be below"),
    ({"f1_hz": 1000.0, "f2_hz": 1000.0}, "must be below"),
    ({"duration_s": 0.0}, "duration"),
    ({"duration_s": -1.0}, "duration"),
    ({"duration_s": float("nan")}, "duration"),
    ({"fs": 0}, "sample rate"),
    ({"fs": -48000}, "sample rate"),
    ({"repeats": 0}, "repeats"),
    ({"gap_s": -0.5}, "gap"),
    ({"level_dbfs": 3.0}, "full scale"),
    ({"fade_in_s": 3.0, "duration_s": 2.0}, "fades"),
])
def test_bad_parameters_are_refused_with_what_to_do(kwargs, match):
    base = {"fs": FS, "f1_hz": 20.0, "f2_hz": 20000.0, "duration_s": 2.0}
    base.update(kwargs)
    with pytest.raises(ParameterError, match=match):
        SweepSpec(**base)


def test_stretched_sweep_is_the_same_signal_on_a_faster_clock():
    # sweep_signal(stretch) samples the same continuous x(t) at fs·stretch (definition).
    spec = SweepSpec(fs=8000, f1_hz=50.0, f2_hz=3000.0, duration_s=0.5, fade_in_s=0.0,
                     fade_out_s=0.0)
    a = sweep_signal(spec, stretch=2.0)
    b = sweep_signal(spec)
    np.testing.assert_allclose(a[::2][:b.size], b, atol=1e-9)
