"""The virtual room (measure.virtual) must be physically sound: it is the tests' reference."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.signal import butter, sosfilt

from measure.errors import ParameterError
from measure.virtual import (
    DEMO_ROOMS,
    OCTAVE_CENTERS_HZ,
    VirtualRoom,
    background_noise,
    impulsive_noise,
    loudspeaker_ir,
    room_ir,
    virtual_take,
)

FS = 48000


def _band_t20(hs: list[np.ndarray], center_hz: float, t0: int) -> float:
    """T20 by the ISO 3382-2 definition (Schroeder integral, fit −5…−25 dB), written out here
    independently of measure.decay, from the ensemble-averaged energy of several realisations
    (Schroeder 1965: the backward integral equals the ensemble average of noise decays), in a
    third-octave band at the octave's centre (inside the band's flat part), filtered
    time-reversed (ISO 3382-2:2008 7.3 note: B·T > 4 suffices then)."""
    g = 10 ** (0.3 / 6)
    sos = butter(3, [center_hz / g, center_hz * g], "bandpass", fs=FS, output="sos")
    energy = np.mean([sosfilt(sos, h[::-1])[::-1][t0:] ** 2 for h in hs], axis=0)
    e = np.cumsum(energy[::-1])[::-1]
    level = 10 * np.log10(e / e[0])
    i5, i25 = np.argmax(level <= -5), np.argmax(level <= -25)
    t = np.arange(i5, i25) / FS
    slope = np.polyfit(t, level[i5:i25], 1)[0]
    return -60.0 / slope


@pytest.mark.parametrize("room", DEMO_ROOMS, ids=[r.name for r in DEMO_ROOMS])
def test_each_band_decays_at_its_own_rate(room):
    # Construction: each octave's noise carries exp(−13.8155·t/T_b) in energy (ISO 3382-1
    # definition of T). Tolerance 5 % (one JND, ISO 3382-1 Table A.1); eight realisations keep
    # the random scatter of a noise decay well below it.
    hs = [room_ir(room, FS, seed=s) for s in range(8)]
    t0 = int(room.direct_delay_s * FS) + int(0.03 * FS)  # past the direct sound and reflections
    for fc, rt in zip(room.band_centers_hz, room.rt_s, strict=True):
        if fc < 120.0:  # 63 Hz: too few cycles in a third octave for the fit
            continue
        assert _band_t20(hs, fc, t0) == pytest.approx(rt, rel=0.05), fc


def test_reflections_are_where_they_are_put():
    room = VirtualRoom("test", OCTAVE_CENTERS_HZ, (0.4,) * 8, direct_delay_s=0.01,
                       drr_db=0.0, reflections=((0.00317, 0.5), (0.00791, -0.3)),
                       length_s=0.5, tail_onset_s=0.02)
    h = room_ir(room, FS)
    for delay_s, gain in ((0.0, 1.0), *room.reflections):
        pos = (room.direct_delay_s + delay_s) * FS
        i = int(round(pos))
        # band-limited impulse: the sample nearest the position carries sinc(frac) of it
        frac = pos - i
        assert h[i] == pytest.approx(gain * np.sinc(frac), abs=2e-3)


def test_direct_to_reverberant_ratio_is_as_asked():
    room = DEMO_ROOMS[0]
    h = room_ir(room, FS)
    t0 = room.direct_delay_s * FS
    n = np.arange(h.size)
    direct = np.abs(n - t0) < 32  # the direct sound's band-limited kernel
    direct_e = 1.0  # unit impulse energy (Parseval for a band-limited unit impulse ≈ 1)
    rest = np.sum(h[~direct & (n > t0)] ** 2)
    assert 10 * math.log10(direct_e / rest) == pytest.approx(room.drr_db, abs=0.3)


def test_take_latency_and_drift_scale_the_recording():
    x = np.zeros(48000)
    x[1000] = 1.0
    y = virtual_take(x, FS, np.array([1.0]), latency_s=0.01, noise_dbfs=None)
    assert int(np.argmax(y)) == 1000 + 480
    y = virtual_take(x, FS, np.array([1.0]), drift_ppm=1000.0, noise_dbfs=None)
    # a recorder 1000 ppm fast records sample 1000 at 1000·1.001 (definition of drift)
    peak = int(np.argmax(y))
    assert abs(peak - 1001) <= 1


def test_bad_rooms_are_refused():
    with pytest.raises(ParameterError, match="one reverberation time per band"):
        VirtualRoom("x", (1000.0,), (), direct_delay_s=0.0, drr_db=0.0)
    with pytest.raises(ParameterError, match="reflections"):
        room_ir(VirtualRoom("x", (1000.0,), (1.0,), direct_delay_s=0.0, drr_db=10.0,
                            reflections=((0.01, 0.9),)), FS)


@pytest.mark.parametrize("kind, slope_db_per_octave", [("white", 0.0), ("pink", -3.0)])
def test_background_noise_has_its_spectrum_and_level(kind, slope_db_per_octave):
    # White: flat power density; pink: -3 dB per octave (power ∝ 1/f, the definition). The
    # density is estimated with scipy.signal.welch (scipy 1.17) between 100 Hz and 10 kHz and
    # its slope fitted in dB against octaves; 0.3 dB/octave covers the estimate's scatter
    # (measured 0.05). The RMS is the level asked, exactly (it is scaled to it).
    from scipy.signal import welch

    z = background_noise(10 * FS, FS, level_dbfs=-40.0, kind=kind, seed=1)
    assert 20 * np.log10(np.sqrt(np.mean(z ** 2))) == pytest.approx(-40.0, abs=1e-9)
    f, p = welch(z, fs=FS, nperseg=8192)
    m = (f >= 100) & (f <= 10000)
    slope = np.polyfit(np.log2(f[m]), 10 * np.log10(p[m]), 1)[0]
    assert slope == pytest.approx(slope_db_per_octave, abs=0.3)


def test_rumble_is_low_frequency_noise():
    # The rumble's power ∝ 1/(1 + (f/50)^4) over a floor 50 dB down (virtual.py): its density
    # at 400 Hz is 10 lg(1 + 8^4) = 36 dB below the plateau at 20 Hz (derived; ±2 dB for
    # Welch's scatter), and most of its power lies below 100 Hz.
    from scipy.signal import welch

    z = background_noise(10 * FS, FS, level_dbfs=-30.0, kind="rumble", seed=2)
    f, p = welch(z, fs=FS, nperseg=16384)
    at = lambda hz: 10 * np.log10(np.mean(p[(f > hz * 0.9) & (f < hz * 1.1)]))  # noqa: E731
    assert at(20.0) - at(400.0) == pytest.approx(10 * np.log10(1 + 8.0 ** 4), abs=2.0)
    assert np.sum(p[f < 100]) / np.sum(p) > 0.9


def test_a_small_loudspeaker_is_scipys_butterworth_high_pass():
    # loudspeaker_ir is the impulse response of scipy.signal.butter(order, fc, "highpass");
    # its spectrum must equal the filter's (scipy.signal.sosfreqz) within 0.01 dB above
    # 50 Hz (the 0.25 s response truncates the filter's decay by far less).
    from scipy.signal import butter, sosfreqz

    g = loudspeaker_ir(FS, highpass_hz=250.0, order=2)
    f = np.array([50.0, 125.0, 250.0, 1000.0, 8000.0])
    _, want = sosfreqz(butter(2, 250.0, "highpass", fs=FS, output="sos"), worN=f, fs=FS)
    got = np.array([np.abs(np.sum(g * np.exp(-2j * np.pi * fk * np.arange(g.size) / FS)))
                    for fk in f])
    assert np.allclose(20 * np.log10(got), 20 * np.log10(np.abs(want)), atol=0.01)


def test_impulsive_noise_has_its_peak_where_asked():
    for kind in ("door", "cough"):
        z = impulsive_noise(3 * FS, FS, at_s=1.0, level_dbfs=-20.0, kind=kind, seed=3)
        assert 20 * np.log10(np.max(np.abs(z))) == pytest.approx(-20.0, abs=1e-9)
        assert not np.any(z[:FS]) and np.any(z[FS:FS + 100])


def test_distortion_does_not_fold_above_nyquist():
    # A 15 kHz tone at 48 kHz through 3 % HD2: the second harmonic (30 kHz) is above Nyquist
    # and must not appear folded at 48 - 30 = 18 kHz, as a recorder's anti-alias filter removes
    # it (derived); the 5 kHz tone's HD2 at 10 kHz stays, at 3 % of the fundamental (the
    # virtual loudspeaker's definition, within 0.1 %).
    t = np.arange(FS) / FS
    for f0, fold_hz in ((15000.0, 18000.0), (5000.0, None)):
        x = 0.1 * np.sin(2 * np.pi * f0 * t)
        y = virtual_take(x, FS, np.array([1.0]), hd2_percent=3.0)
        spec = np.abs(np.fft.rfft(y * np.hanning(y.size)))
        fund = spec[int(f0)]
        if fold_hz is not None:
            assert spec[int(fold_hz)] < 1e-4 * fund
        else:
            assert spec[int(2 * f0)] / fund == pytest.approx(0.03, abs=0.001)
