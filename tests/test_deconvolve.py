"""Impulse-response recovery (measure.deconvolve) through the virtual room.

The reference ("true") response is the virtual room's own impulse response; the recording is
what real equipment would deliver (latency, clock drift, loudspeaker distortion, noise).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from _oracle import band_noise_power, octave_sos, octaves_inside  # noqa: I001
from scipy.optimize import minimize_scalar
from scipy.signal import butter, sosfilt, sosfiltfilt

from measure._dsp import parabolic_peak
from measure.deconvolve import (
    DETECTION_DB,
    deconvolve_rows,
    estimate_timing,
    locate_sweeps,
    plan_window,
    read_back,
    recover_ir,
    response_length,
)
from measure.errors import AudioFileError, ParameterError
from measure.sweep import SweepSpec, make_sweep
from measure.virtual import (
    DEMO_ROOMS,
    VirtualRoom,
    background_noise,
    impulsive_noise,
    room_ir,
    virtual_take,
)

FS = 48000
OFFICE = DEMO_ROOMS[1]


@pytest.fixture(scope="module")
def sweep5():
    return make_sweep(SweepSpec(fs=FS, f1_hz=20.0, f2_hz=FS / 2, duration_s=5.0, gap_s=2.0))


@pytest.fixture(scope="module")
def office_h():
    return room_ir(OFFICE, FS, seed=3)


def waveform_error_db(true: np.ndarray, rec: np.ndarray, t0_true: int, t0_rec: int,
                      duration_s: float = 0.3) -> float:
    """Energy of (true − g·rec shifted) over energy of true, in 100 Hz–8 kHz, best g and delay.

    Both are band-passed with the same zero-phase Butterworth (scipy.signal.butter, order 4,
    sosfiltfilt); the delay is found to a fraction of a sample (cross-correlation, then a
    bounded scalar search over an exact linear-phase shift).
    """
    sos = butter(4, [100.0, 8000.0], "bandpass", fs=FS, output="sos")
    n, pre, pad = int(duration_s * FS), int(0.002 * FS), 400
    a = sosfiltfilt(sos, true)[t0_true - pre:t0_true + n]
    r = np.concatenate([np.zeros(pad), sosfiltfilt(sos, rec), np.zeros(pad)])
    b = r[pad + t0_rec - pre - 200:pad + t0_rec + n + 200]
    m = 1 << int(math.ceil(math.log2(a.size + b.size)))
    A, B = np.fft.rfft(a, m), np.fft.rfft(b, m)
    c = np.abs(np.fft.irfft(B * np.conj(A), m))
    lag = parabolic_peak(c, int(np.argmax(c)))
    k = np.arange(m // 2 + 1)

    def err(shift: float) -> float:
        bs = np.fft.irfft(B * np.exp(2j * np.pi * k * shift / m), m)[:a.size]
        g = np.dot(a, bs) / np.dot(bs, bs)
        return float(np.sum((a - g * bs) ** 2) / np.sum(a**2))

    best = minimize_scalar(err, bounds=(lag - 1, lag + 1), method="bounded")
    return 10 * math.log10(best.fun)


def take(sweep, h, **kw):
    defaults = dict(latency_s=0.0123, drift_ppm=0.0, hd2_percent=0.0, hd3_percent=0.0,
                    noise_dbfs=-90.0, seed=7)
    defaults.update(kw)
    return virtual_take(sweep.program, FS, h, **defaults)


def test_waveform_matches_the_true_response_with_drift_and_distortion(sweep5, office_h):
    # Issue acceptance: 35 ppm drift, 3 % HD2, 2 % HD3, noise at −90 dBFS → waveform error below
    # −35 dB in 100 Hz–8 kHz over 300 ms from the direct sound; without drift correction about
    # −12 dB (measurement.md §1.6 reports −12 dB uncorrected, −38 to −46 dB corrected).
    y = take(sweep5, office_h, drift_ppm=35.0, hd2_percent=3.0, hd3_percent=2.0)
    t0 = int(round(OFFICE.direct_delay_s * FS))
    ir = recover_ir(y, sweep5)
    assert waveform_error_db(office_h, ir.h[0], t0, ir.onset_index) < -35.0
    raw = recover_ir(y, sweep5, correct_drift=False)
    assert waveform_error_db(office_h, raw.h[0], t0, raw.onset_index) > -20.0


@pytest.mark.parametrize("drift_ppm", [-200.0, -35.0, 35.0, 200.0])
def test_drift_is_estimated_within_2_ppm_from_one_sweep(sweep5, office_h, drift_ppm):
    # Issue acceptance: drift within 2 ppm over ±200 ppm (USB microphone beside a laptop).
    ir = recover_ir(take(sweep5, office_h, drift_ppm=drift_ppm), sweep5)
    assert ir.drift_ppm == pytest.approx(drift_ppm, abs=2.0)


def test_drift_is_estimated_from_repeated_sweeps(office_h):
    sweep = make_sweep(SweepSpec(fs=FS, f1_hz=20.0, f2_hz=FS / 2, duration_s=2.0, gap_s=1.5,
                                 repeats=3))
    ir = recover_ir(take(sweep, office_h, drift_ppm=-120.0), sweep)
    assert ir.n_averaged == 3
    assert ir.drift_ppm == pytest.approx(-120.0, abs=2.0)


@pytest.mark.parametrize("latency_s", [0.0, 0.0123, 1.7379, 3.2])
def test_latency_within_one_sample_without_drift(sweep5, office_h, latency_s):
    # Issue acceptance: latency within 1 sample when there is no drift; the reported latency
    # is the arrival of the direct sound (chain latency + acoustic path).
    y = take(sweep5, office_h, latency_s=latency_s)
    y = np.concatenate([0.001 * np.random.default_rng(1).standard_normal(4000), y])  # noise first
    ir = recover_ir(y, sweep5)
    expected = latency_s + OFFICE.direct_delay_s + 4000 / FS
    assert abs(ir.latency_s[0] - expected) * FS <= 1.0


def test_three_repeats_raise_peak_to_noise_by_4_8_db(office_h):
    # Synchronous averaging of M sweeps improves the SNR by 10·lg M (common practice;
    # measurement.md §1.5): 4.77 dB for 3, tolerance ±0.5 dB from the issue.
    short = VirtualRoom("dry", OFFICE.band_centers_hz, tuple(0.3 for _ in OFFICE.rt_s),
                        direct_delay_s=0.005, drr_db=3.0, length_s=0.8)
    h = room_ir(short, FS, seed=5)
    spec = dict(fs=FS, f1_hz=20.0, f2_hz=FS / 2, duration_s=1.0, gap_s=2.0)
    one = make_sweep(SweepSpec(repeats=1, **spec))
    three = make_sweep(SweepSpec(repeats=3, **spec))
    p1 = recover_ir(take(one, h, noise_dbfs=-60.0, seed=11), one, max_length_s=1.5)
    p3 = recover_ir(take(three, h, noise_dbfs=-60.0, seed=12), three, max_length_s=1.5)
    gain = p3.peak_to_noise_db[0] - p1.peak_to_noise_db[0]
    assert gain == pytest.approx(10 * math.log10(3), abs=0.5)


@pytest.mark.parametrize("duration_s, repeats", [(5.0, 1), (2.0, 3)])
def test_harmonic_distortion_is_reported_per_harmonic(duration_s, repeats):
    # The virtual loudspeaker's HD2/HD3 are defined relative to the output fundamental
    # (measure.virtual docstring, from the sin² and sin³ identities); through a wire the
    # recovered levels must equal them. Tolerance 3 % of the value (the harmonic windows are
    # short at the top of the band). The short sweep leaves only 0.2 s between the second
    # harmonic's response and the linear one's.
    sweep5 = make_sweep(SweepSpec(fs=FS, f1_hz=20.0, f2_hz=FS / 2, duration_s=duration_s,
                                  gap_s=2.0, repeats=repeats))
    ir = recover_ir(take(sweep5, np.array([1.0]), hd2_percent=3.0, hd3_percent=2.0), sweep5)
    hd = {d.order: d for d in ir.harmonics[0]}
    assert hd[2].percent == pytest.approx(3.0, rel=0.03)
    assert hd[3].percent == pytest.approx(2.0, rel=0.03)
    # A cubic makes no 4th or 5th harmonic (the identities above): their windows hold the
    # −90 dBFS noise and leakage from the neighbouring orders' band limits; either reading
    # (the level, or the bound of one below the noise) is under 0.1 %.
    for order in (4, 5):
        d = hd[order]
        assert (d.percent if d.above_noise else d.noise_percent) < 0.1
    assert hd[2].above_noise and hd[3].above_noise
    # the advance L·ln N of Farina 2000
    assert hd[2].advance_s == pytest.approx(sweep5.spec.rate_constant_s * math.log(2))


def test_multichannel_gives_one_response_per_channel_and_a_chosen_one(sweep5, office_h):
    far = take(sweep5, office_h, latency_s=0.02)
    near = take(sweep5, np.array([0.5]), latency_s=0.0123, seed=9)
    y = np.stack([near[:far.size], far[:near.size]])
    ir = recover_ir(y, sweep5)
    assert ir.h.shape[0] == 2 and ir.channels == (0, 1)
    # each channel's own arrival, on one common time grid
    assert ir.latency_s[0] * FS == pytest.approx(0.0123 * FS, abs=1.0)
    assert ir.latency_s[1] * FS == pytest.approx((0.02 + OFFICE.direct_delay_s) * FS, abs=1.0)
    one = recover_ir(y, sweep5, channels=[1])
    assert one.h.shape[0] == 1 and one.channels == (1,)


def test_loopback_reference_channel_times_everything(sweep5, office_h):
    # Channel 2 carries the played signal back (a loopback cable): latencies are relative to it,
    # so the microphone's latency is the acoustic path alone.
    mic = take(sweep5, office_h, latency_s=0.0431, drift_ppm=80.0)
    loop = take(sweep5, np.array([1.0]), latency_s=0.0431, drift_ppm=80.0, noise_dbfs=None)
    n = min(mic.size, loop.size)
    ir = recover_ir(np.stack([mic[:n], loop[:n]]), sweep5, reference_channel=1)
    assert ir.channels == (0,)
    assert ir.latency_s[0] * FS == pytest.approx(OFFICE.direct_delay_s * FS, abs=1.0)
    assert ir.reference_latency_s * FS == pytest.approx(0.0431 * FS, abs=1.0)
    assert ir.drift_ppm == pytest.approx(80.0, abs=2.0)


def test_the_response_keeps_its_tail_into_the_noise(sweep5, office_h):
    ir = recover_ir(take(sweep5, office_h, noise_dbfs=-60.0), sweep5)
    h = ir.h[0]
    tail = h[-int(0.1 * FS):]
    noise = 10 * math.log10(np.mean(tail**2))
    assert noise == pytest.approx(ir.noise_dbfs[0], abs=1.5)
    # peak-to-noise: the peak is near 0 dB re the direct sound (unit amplitude in the room)
    assert ir.peak_to_noise_db[0] > 40.0
    # Analytic (derived, Parseval, as in test_capture's level check): white noise of variance
    # σ² through the inverse filter f_inv leaves σ²·Σ f_inv² in the response. 0.5 dB: three
    # seeds scatter by ±0.15 dB about it (measured).
    from measure.sweep import inverse_spectrum

    spec = sweep5.spec
    n_fft = 1 << int(np.ceil(np.log2(spec.n_sweep + 1)))
    f_inv = np.fft.irfft(inverse_spectrum(spec, n_fft), n_fft)
    expected_db = 10 * math.log10(10 ** (-60.0 / 10) * np.sum(f_inv**2))
    assert ir.noise_dbfs[0] == pytest.approx(expected_db, abs=0.5)


def test_errors_say_what_to_do(sweep5, office_h):
    with pytest.raises(AudioFileError, match="shorter than one sweep"):
        recover_ir(np.zeros(1000), sweep5)
    with pytest.raises(AudioFileError, match="no sweep found"):
        recover_ir(1e-3 * np.random.default_rng(0).standard_normal(10 * FS), sweep5)
    y = take(sweep5, office_h)
    bad = y.copy()
    bad[100] = np.nan
    with pytest.raises(AudioFileError, match="NaN"):
        recover_ir(bad, sweep5)
    with pytest.raises(ParameterError, match="does not exist"):
        recover_ir(y, sweep5, channels=[3])


def test_clipping_is_counted_and_warned(sweep5, office_h):
    y = np.clip(40 * take(sweep5, office_h), -1.0, 1.0)
    ir = recover_ir(y, sweep5)
    assert ir.n_clipped > 0
    assert any("clipped" in w for w in ir.warnings)


@pytest.mark.parametrize("seed", range(4))
def test_a_noise_only_take_of_the_default_sweep_is_not_a_sweep(seed):
    # A disconnected microphone: 8 s of white noise for the command line's default sweep (5 s,
    # 2 s gap, 0.5 s lead-in, 0.5 s extra). Deconvolved noise is Gaussian; the largest of N
    # Gaussian samples lies near sqrt(2 ln 2N)·σ (extreme-value theory; analytic), 5.0σ =
    # 14 dB for the 1.44e5 lags where a whole sweep fits (measured 12.3-13.7 dB), far below
    # DETECTION_DB (24 dB). Judged over every lag, this noise used to reach 29-30 dB, and
    # seed 2 was "found" against the 30 dB then required.
    spec = SweepSpec(fs=FS, f1_hz=20.0, f2_hz=FS / 2, duration_s=5.0)
    sweep = make_sweep(spec)
    y = 1e-3 * np.random.default_rng(seed).standard_normal(sweep.program.size + FS // 2)
    with pytest.raises(AudioFileError, match="no sweep found"):
        recover_ir(y, sweep)


def test_a_weak_take_is_still_found_with_a_warning(sweep5, office_h):
    # Background noise at -5 dBFS against the -20 dBFS sweep: the response stands about 30 dB
    # out of the noise, which DETECTION_DB (24 dB) finds; below the 30 dB of the warning it is
    # flagged (ISO 3382-1 5.3.3 asks 35 dB for T20).
    ir = recover_ir(take(sweep5, office_h, noise_dbfs=-5.0, seed=3), sweep5)
    assert any("peak-to-noise ratio is only" in w for w in ir.warnings)


# ---------------------------------------------------------------------------------------------
# Real rooms: detection, robust averaging, length from the decay (issue "Real rooms")

def _long_room(rt_s: float, drr_db: float) -> VirtualRoom:
    return VirtualRoom("long", OFFICE.band_centers_hz, tuple(rt_s for _ in OFFICE.rt_s),
                       direct_delay_s=0.012, drr_db=drr_db, reflections=((0.004, 0.3),),
                       length_s=1.6 * rt_s, tail_onset_s=0.004)


def test_a_long_decay_with_a_weak_direct_sound_is_found():
    # Issue acceptance: a room with a 4 s decay and a direct-to-reverberant ratio of -12 dB is
    # found. Its deconvolved response spreads most of its energy over seconds; the direct
    # sound's peak must still stand DETECTION_DB above the noise, and the position found is
    # the direct sound's (latency within one sample, as for a dry room).
    room = _long_room(4.0, -12.0)
    sweep = make_sweep(SweepSpec(fs=FS, f1_hz=20.0, f2_hz=20000.0, duration_s=5.0, gap_s=6.5))
    y = take(sweep, room_ir(room, FS, seed=2), noise_dbfs=-70.0, latency_s=0.05)
    ir = recover_ir(y, sweep)
    assert abs(ir.latency_s[0] - (0.05 + room.direct_delay_s)) * FS <= 1.0
    # a 4 s decay takes longer than the 6.5 s gap to fall 100 dB to this noise at 63 Hz: the
    # recovery says so and asks for more
    assert not ir.noise_reached[0] and ir.gap_needed_s > 6.5


def test_a_take_whose_noise_is_20_db_below_the_signal_is_found():
    # Issue acceptance: background noise 20 dB below the signal (RMS over the sweep) in the
    # recording. The deconvolution gains about 10 lg(T·B) (common practice; ~50 dB for 5 s at
    # 20 kHz), so the response stands far above DETECTION_DB.
    sweep = make_sweep(SweepSpec(fs=FS, f1_hz=20.0, f2_hz=20000.0, duration_s=5.0, gap_s=2.5))
    h = room_ir(_long_room(1.5, -6.0), FS, seed=3)
    clean = take(sweep, h, noise_dbfs=None)
    s = slice(sweep.spec.n_lead, sweep.spec.n_lead + sweep.spec.n_sweep)
    sig_dbfs = 10 * math.log10(np.mean(clean[s] ** 2))
    y = clean + background_noise(clean.size, FS, level_dbfs=sig_dbfs - 20.0, kind="pink",
                                 seed=4)
    ir = recover_ir(y, sweep)
    assert abs(ir.latency_s[0] - (0.0123 + 0.012)) * FS <= 1.0
    assert ir.peak_to_noise_db[0] > DETECTION_DB + 10


def test_silence_and_another_sweep_are_still_refused(sweep5, office_h):
    # Issue acceptance: digital silence and a recording of a different sweep hold no response
    # of this sweep: refused with the message of a recording without a sweep.
    with pytest.raises(AudioFileError, match="no sweep found"):
        recover_ir(np.zeros(sweep5.program.size + FS), sweep5)
    other = make_sweep(SweepSpec(fs=FS, f1_hz=50.0, f2_hz=16000.0, duration_s=3.0, gap_s=3.0))
    y = take(other, office_h, noise_dbfs=-70.0)
    with pytest.raises(AudioFileError, match="no sweep found"):
        recover_ir(np.concatenate([y, np.zeros(2 * FS)]), sweep5)


def test_a_short_sweep_through_a_wire_is_found():
    # The arrival check looks ±2 s around the peak; a recording shorter than that must not
    # wrap onto itself (a 0.5 s sweep through a perfect wire, no noise: the deconvolution is
    # an impulse at the latency, derived).
    sweep = make_sweep(SweepSpec(fs=FS, f1_hz=50.0, f2_hz=FS / 2, duration_s=0.5, gap_s=0.3,
                                 lead_in_s=0.3))
    ir = recover_ir(np.concatenate([np.zeros(240), sweep.program]), sweep)
    assert abs(ir.latency_s[0] - 240 / FS) * FS <= 0.05


def _three_repeats(noise_dbfs=-60.0, drift_ppm=40.0, repeats=3, fs=FS, seed=0):
    sweep = make_sweep(SweepSpec(fs=fs, f1_hz=20.0, f2_hz=20000.0, duration_s=3.0, gap_s=2.0,
                                 repeats=repeats))
    h = room_ir(_long_room(1.0, -3.0), fs, seed=1 + seed)
    y = virtual_take(sweep.program, fs, h, latency_s=0.02, drift_ppm=drift_ppm)
    y = y + background_noise(y.size, fs, level_dbfs=noise_dbfs, kind="pink", seed=3 + seed)
    return sweep, y


@pytest.mark.parametrize("kind, where", [("door", 0.5), ("door", 1.2), ("cough", 0.9)])
def test_a_disturbed_repeat_is_left_out_and_said(kind, where):
    # Issue acceptance: an impulsive disturbance in one of three repeats is detected and left
    # out; the result equals the average of the two clean repeats within 0.5 dB (here, per
    # octave band, and waveform-wise: the error energy is measured at -125 dB). The reference
    # is the same recording without the disturbance, its repeats 1 and 3 averaged by
    # read_back at the origins the recovery used.
    sweep, y = _three_repeats()
    at_s = sweep.spec.sweep_start(1) / FS + where * sweep.spec.duration_s
    yd = y + impulsive_noise(y.size, FS, at_s=at_s, level_dbfs=-20.0, kind=kind, seed=5)
    ir = recover_ir(yd, sweep)
    assert ir.n_averaged == 2 and ir.repeats_found == 3
    assert [k for k, _ in ir.repeats_left_out] == [2]
    assert any(w.startswith("sweep 2 of 3 was left out") for w in ir.warnings)
    d = deconvolve_rows(y[np.newaxis, :], sweep, [0])[0]
    ref = read_back(d, ir.origins, ir.h.shape[1], sweep, ir.drift_ppm * 1e-6)
    err_db = 10 * math.log10(np.sum((ir.h[0] - ref) ** 2) / np.sum(ref ** 2))
    assert err_db < -60.0
    for _, fc in octaves_inside(20.0, 20000.0, FS):
        sos = octave_sos(fc, FS)
        diff = 10 * math.log10(np.sum(sosfilt(sos, ir.h[0]) ** 2) / np.sum(sosfilt(sos, ref) ** 2))
        assert abs(diff) <= 0.5


def test_with_two_repeats_the_disturbed_one_is_the_one_left_out():
    # With two repeats the residual is the same for both; the disturbance adds energy, so the
    # louder one in the blocks where they differ is the disturbed one (select_repeats).
    sweep, y = _three_repeats(repeats=2)
    at_s = sweep.spec.sweep_start(0) / FS + 0.6 * sweep.spec.duration_s
    ir = recover_ir(y + impulsive_noise(y.size, FS, at_s=at_s, level_dbfs=-20.0, seed=6), sweep)
    assert ir.n_averaged == 1 and [k for k, _ in ir.repeats_left_out] == [1]


@pytest.mark.parametrize("fs, drift_ppm, noise_dbfs, seed", [
    (48000, 200.0, -60.0, 0), (48000, -200.0, -40.0, 1), (96000, 35.0, -60.0, 2),
    (44100, 0.0, -80.0, 3)])
def test_clean_repeats_are_all_kept(fs, drift_ppm, noise_dbfs, seed):
    # No false alarm: residual noise in blocks of >= 8 degrees of freedom exceeds its median by
    # DISTURBANCE_DB = 15 dB with a probability below 1e-12 (χ², derived), and a clean repeat's
    # residual near the direct sound (sub-sample misalignment, growing with frequency) stays
    # below the bound of 15 dB under its block's signal (measured 19 dB under in the 8 kHz
    # octave at -120 ppm).
    sweep, y = _three_repeats(noise_dbfs=noise_dbfs, drift_ppm=drift_ppm, fs=fs, seed=seed)
    ir = recover_ir(y, sweep)
    assert ir.n_averaged == 3 and not ir.repeats_left_out


def test_the_response_is_kept_until_every_octave_meets_the_noise():
    # Issue acceptance (item 3): never cut before the decay meets the noise. A 2 s room with
    # noise 50 dB down used to be cut 1.4 s after its direct sound (the broadband level met
    # the noise early); every octave's decay must now be inside the response, with noise after
    # it: the oracle band noise (tests/_oracle.py) read from the response's last 0.3 s is the
    # noise, not the decay (within 1.5 dB: 0.3 s of octave noise at 125 Hz, ~27 degrees of
    # freedom, scatters by ±0.85 dB at 1 σ, derived).
    sweep = make_sweep(SweepSpec(fs=FS, f1_hz=20.0, f2_hz=20000.0, duration_s=5.0, gap_s=4.0))
    room = _long_room(2.0, -6.0)
    signal = take(sweep, room_ir(room, FS, seed=5), noise_dbfs=None)
    noise = background_noise(signal.size, FS, level_dbfs=-50.0, kind="white", seed=6)
    ir = recover_ir(signal + noise, sweep)
    assert all(ir.noise_reached)
    d = deconvolve_rows(noise[np.newaxis, :], sweep, [0])[0]
    noise_ir = read_back(d, ir.origins, ir.h.shape[1], sweep, ir.drift_ppm * 1e-6)
    tail = slice(ir.h.shape[1] - int(0.3 * FS), None)
    for _, fc in octaves_inside(125.0, 8000.0, FS):
        got = band_noise_power(ir.h[0][tail], FS, fc, skip_s=0.0)
        want = band_noise_power(noise_ir, FS, fc)
        assert abs(10 * math.log10(got / want)) <= 1.5, fc


def test_a_gap_shorter_than_the_decay_is_reported_with_the_gap_the_room_needs():
    # Issue acceptance (items 3 and 7): the response of a 3 s room recorded with 1 s gaps
    # between repeats ends at the next sweep's distortion products; the recovery says so and
    # estimates the --gap, and a take made with that gap reaches the noise in every octave.
    room = _long_room(3.0, -6.0)
    h = room_ir(room, FS, seed=7)

    def recover(gap_s):
        sweep = make_sweep(SweepSpec(fs=FS, f1_hz=20.0, f2_hz=20000.0, duration_s=2.0,
                                     gap_s=gap_s, repeats=2))
        # 2 s recorded after the file: the repeats' spacing, not the file's end, limits
        return recover_ir(take(sweep, h, noise_dbfs=-60.0, seed=8, extra_s=2.0), sweep)

    short = recover(1.0)
    assert not short.noise_reached[0] and short.unreached_bands[0]
    assert short.limited_by == "the next sweep's distortion products"
    assert short.gap_needed_s is not None and short.gap_needed_s > 1.0
    assert any("before its decay reaches the noise" in w and "--gap" in w
               for w in short.warnings)
    ctx = short.context(0)
    assert ctx.cut_s == pytest.approx(short.available_s, abs=0.01) and ctx.gap_needed_s
    enough = recover(short.gap_needed_s)
    assert all(enough.noise_reached), enough.unreached_bands


def test_stages_locate_time_and_window_on_their_own(sweep5, office_h):
    # Each stage of recover_ir on its own: the sweeps are located where the take put them,
    # the drift is estimated (within 2 ppm, as recover_ir's), and the window stops at the
    # recording's end (single sweep) before the next sweep's distortion products (repeats).
    spec = SweepSpec(fs=FS, f1_hz=20.0, f2_hz=20000.0, duration_s=2.0, gap_s=1.5, repeats=3)
    sweep = make_sweep(spec)
    y = take(sweep, office_h, drift_ppm=60.0, latency_s=0.03, extra_s=2.0)[np.newaxis, :]
    d = deconvolve_rows(y, sweep, [0])[0]
    starts = locate_sweeps(d, sweep, y.shape[1])
    truth = [(spec.sweep_start(k) + (0.03 + OFFICE.direct_delay_s) * FS) * (1 + 60e-6)
             for k in range(3)]
    # before drift removal the direct sound is dispersed over ε·L·(ln(f2/f1) + 1) = 6.6
    # samples (measurement.md §1.6, derived): its strongest sample lies within that
    assert np.all(np.abs(starts - truth) <= 60e-6 * spec.rate_constant_s * FS
                  * (math.log(1000.0) + 1.0) + 1.0)
    tm = estimate_timing(d, starts, sweep)
    assert tm.eps * 1e6 == pytest.approx(60.0, abs=2.0)
    assert np.all(np.abs(tm.fine - truth) <= 0.5)
    win = plan_window(tm, sweep, y.shape[1], pre=480, n_harmonics=4)
    assert win.limited_by == "the next sweep's distortion products"
    # the next sweep's 5th harmonic lands L·ln 5 before its response (Farina 2000)
    lim = spec.n_period - spec.rate_constant_s * FS * math.log(5) - 480 - 0.01 * FS
    assert win.n_after == int(lim)
    one = plan_window(estimate_timing(d, starts[:1], make_sweep(SweepSpec(
        fs=FS, f1_hz=20.0, f2_hz=20000.0, duration_s=2.0))), sweep, y.shape[1], pre=480,
        n_harmonics=4, max_length_s=0.5)
    assert one.limited_by == "the length limit of 0.5 s" and one.n_after == int(0.5 * FS)


def test_response_length_finds_each_octaves_crossing():
    # response_length on an exponential decay of known T in white noise of known level: the
    # crossing is where the decay's power meets the noise's, t = T·(range)/60 (the definition
    # of T), within 10 % (Lundeby's crossing from averaged intervals, common practice), and the
    # response is kept to twice that.
    rng = np.random.default_rng(9)
    t60, range_db, pre = 1.0, 50.0, 480
    n = 3 * FS
    t = np.arange(n) / FS
    decay = rng.standard_normal(n) * np.exp(-0.5 * 13.8155 * t / t60)
    h = np.concatenate([np.zeros(pre), decay + 10 ** (-range_db / 20) * rng.standard_normal(n)])
    length = response_length(h[np.newaxis, :], FS, pre, bands_hz=())
    assert length.noise_reached == (True,)
    assert length.crossing_s[0] == pytest.approx(t60 * range_db / 60.0, rel=0.1)
    assert (length.end - pre) / FS == pytest.approx(2 * length.crossing_s[0], rel=0.05)


def test_distortion_below_the_noise_is_said_so():
    # Issue acceptance (item 5): background noise at -50 dBFS and no distortion at all: the
    # harmonic windows hold only noise, which used to read as H2 6.2 %, H3 4.7 % ("lower the
    # level"). Each harmonic is now below the noise with its bound, and the bound is the
    # noise's own level in that window (a harmonic of that size would double the energy).
    sweep = make_sweep(SweepSpec(fs=FS, f1_hz=20.0, f2_hz=20000.0, duration_s=3.0, gap_s=2.0))
    y = take(sweep, room_ir(_long_room(1.0, -3.0), FS, seed=2), noise_dbfs=-50.0, seed=11)
    ir = recover_ir(y, sweep)
    for hd in ir.harmonics[0]:
        assert not hd.above_noise and hd.percent is None and hd.noise_percent > 0
        assert "below the noise" in hd.describe()


def test_digital_silence_is_named_as_such():
    # issue 12, fuzzing: a recording of exact zeros was reported as "its strongest response is
    # only 0.0 dB above the noise" (0/0 under a 1e-300 guard), and a near-silent one as
    # "-0.0 dB". Digital silence now gets its own message; the ratio never prints as -0.0.
    sweep = make_sweep(SweepSpec(fs=8000, f1_hz=50.0, f2_hz=4000.0, duration_s=0.2, gap_s=0.2,
                                 lead_in_s=0.05, fade_in_s=0.01))
    with pytest.raises(AudioFileError, match=r"^no sweep found in the recording: it is digital silence"):
        recover_ir(np.zeros(sweep.program.size), sweep)
    y = np.random.default_rng(3).standard_normal(sweep.program.size) * 1e-3
    with pytest.raises(AudioFileError, match=r"no sweep found") as err:
        recover_ir(y, sweep)
    assert "-0.0 dB" not in str(err.value)
