"""A small dry demo sound, synthesised here (no recordings): clicks, plucks and vowel-like bursts.

Played through a measured or a modelled room (``measure auralize``), it shows what the room
does to transients (clicks), to tonal decays (plucked strings) and to speech-like sounds
(formant bursts). Everything is deterministic: the same call gives the same samples.

The plucks are Karplus–Strong strings [1]_ (a noise burst recirculating through a delay line
with a two-point average); the vowels are a glottal-like pulse train at a gliding pitch through
a cascade of second-order formant resonators with textbook formant frequencies [2]_.

References
----------
.. [1] K. Karplus, A. Strong, "Digital synthesis of plucked-string and drum timbres", Computer
   Music Journal 7(2):43–55, 1983.
.. [2] G. E. Peterson, H. L. Barney, "Control methods used in a study of the vowels", J.
   Acoust. Soc. Am. 24(2):175–184, 1952 (average formants of adult male speakers).
"""

from __future__ import annotations

import math

import numpy as np

from measure._validate import check_fs

__all__ = ["dry_demo_sound", "DRY_DEMO_SECONDS"]

#: Length of the demo sound, s.
DRY_DEMO_SECONDS = 6.0
#: Formants F1, F2, F3 in Hz of /a/, /i/, /u/ (adult male averages after [2]).
VOWEL_FORMANTS_HZ = {"a": (730.0, 1090.0, 2440.0), "i": (270.0, 2290.0, 3010.0),
                     "u": (300.0, 870.0, 2240.0)}
#: Peak level of the result, dBFS (leaves room for a reverberant room's build-up).
PEAK_DBFS = -6.0


def _click(fs: int) -> np.ndarray:
    n = max(2, int(0.0005 * fs))
    return np.hanning(n + 2)[1:-1] * np.array([(-1.0) ** k for k in range(n)])


def _pluck(fs: int, f0_hz: float, seconds: float, seed: int) -> np.ndarray:
    """A Karplus-Strong string: a delay of fs/f0 samples with a two-point average in its loop."""
    from scipy.signal import lfilter

    period = max(2, int(round(fs / f0_hz)))
    rng = np.random.default_rng(seed)
    n = int(seconds * fs)
    burst = np.zeros(n)
    burst[:period] = rng.uniform(-1.0, 1.0, period)
    # y[n] = x[n] + 0.4975·(y[n−P] + y[n−P−1]): loop gain just under 1 gives a decaying string
    a = np.zeros(period + 2)
    a[0] = 1.0
    a[period] = -0.4975
    a[period + 1] = -0.4975
    y = lfilter([1.0], a, burst)
    return y / np.max(np.abs(y))


def _vowel(fs: int, vowel: str, f0_start_hz: float, f0_end_hz: float, seconds: float) -> np.ndarray:
    """A glottal-like pulse train through three formant resonators, with an attack/release."""
    from scipy.signal import sosfilt

    n = int(seconds * fs)
    f0 = np.linspace(f0_start_hz, f0_end_hz, n)
    phase = np.cumsum(f0) / fs
    pulses = np.zeros(n)
    idx = np.flatnonzero(np.diff(np.floor(phase)) > 0) + 1
    pulses[idx] = 1.0
    # glottal pulse shape: a one-pole low-pass, then differentiated (lip radiation)
    src = np.diff(sosfilt(np.array([[1.0, 0.0, 0.0, 1.0, -0.97, 0.0]]), pulses), prepend=0.0)
    sos = []
    for f_hz, bw_hz in zip(VOWEL_FORMANTS_HZ[vowel], (80.0, 100.0, 120.0), strict=True):
        r = math.exp(-math.pi * bw_hz / fs)
        theta = 2 * math.pi * f_hz / fs
        gain = 1.0 - r  # roughly unit peak gain
        sos.append([gain, 0.0, 0.0, 1.0, -2 * r * math.cos(theta), r * r])
    y = sosfilt(np.array(sos), src)
    env = np.ones(n)
    k = int(0.03 * fs)
    env[:k] = np.sin(0.5 * np.pi * np.arange(k) / k) ** 2
    env[-k:] = env[:k][::-1]
    y = y * env
    return y / np.max(np.abs(y))


def dry_demo_sound(fs: int) -> np.ndarray:
    """About six seconds of dry test sound at ``fs``.

    Parameters
    ----------
    fs : int, > 0, Hz

    Returns
    -------
    ndarray, shape (round(6·fs),), float64, peak −6 dBFS
        Four clicks (0.0–1.2 s), three plucked notes (1.5–3.2 s), three vowel bursts /a/ /i/ /u/
        (3.5–5.3 s), silence to the end so a room's tail can ring out.

    Examples
    --------
    >>> x = dry_demo_sound(16000)
    >>> x.shape, bool(abs(abs(x).max() - 10 ** (-6 / 20)) < 1e-12)
    ((96000,), True)
    """
    fs = check_fs(fs)
    out = np.zeros(int(round(DRY_DEMO_SECONDS * fs)))

    def put(at_s: float, sig: np.ndarray, gain: float) -> None:
        i = int(round(at_s * fs))
        m = min(sig.size, out.size - i)
        out[i: i + m] += gain * sig[:m]

    for k, at in enumerate((0.0, 0.3, 0.6, 1.2)):
        put(at + 0.05, _click(fs), 1.0 if k < 3 else 0.5)
    for k, (at, f0) in enumerate(((1.5, 196.0), (2.0, 293.66), (2.5, 440.0))):
        put(at, _pluck(fs, f0, 0.7, seed=k), 0.7)
    for at, vowel, fa, fb in ((3.5, "a", 120.0, 140.0), (4.2, "i", 140.0, 110.0),
                                (4.9, "u", 110.0, 125.0)):
        put(at, _vowel(fs, vowel, fa, fb, 0.45), 0.6)
    return out * (10.0 ** (PEAK_DBFS / 20.0) / np.max(np.abs(out)))
