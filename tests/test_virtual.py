"""The virtual room (measure.virtual) must be physically sound: it is the tests' reference."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.signal import butter, sosfilt

from measure.errors import ParameterError
from measure.virtual import DEMO_ROOMS, OCTAVE_CENTERS_HZ, VirtualRoom, room_ir, virtual_take

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
