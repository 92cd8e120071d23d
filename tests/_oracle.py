"""An independent oracle for recovered responses: numpy and scipy only, none of measure's code.

measurement.md §1.7 (derived there): split a virtual capture into its signal part and its noise
part, deconvolve each separately with an ideal in-band inverse of the sweep file's samples,

    G(f) = X*(f) / (|X(f)|² + 1e-6·max|X|²),   G = 0 outside [f1, f2],

read the responses at the positions the virtual take put them (known from its construction, not
located), average the repeats, and band-filter both with Butterworth octaves
(scipy.signal.butter, order 3, i.e. a sixth-order band-pass; scipy 1.17). A band's noise is the
mean power of its noise part; its available decay range is the strongest 10 ms of its signal
part over that noise. The noise-free reference response is the true response through the same
in-band inverse's band limit, |X|²/(|X|² + 1e-6·max|X|²) inside [f1, f2] and 0 outside
(measured: a noise-free recovery's figures equal its figures within 0.05 JND in every octave).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.signal import butter, sosfilt


def _n_fft(n: int) -> int:
    return 1 << int(math.ceil(math.log2(n)))


def ideal_inverse(x: np.ndarray, n_fft: int, fs: int, f1_hz: float, f2_hz: float) -> np.ndarray:
    """rfft-domain ideal in-band inverse of the sweep samples ``x`` (module notes)."""
    X = np.fft.rfft(x, n_fft)
    f = np.fft.rfftfreq(n_fft, 1.0 / fs)
    p = np.abs(X) ** 2
    g = np.conj(X) / (p + 1e-6 * p.max())
    g[(f < f1_hz) | (f > f2_hz)] = 0.0
    return g


def band_limit(h: np.ndarray, x: np.ndarray, fs: int, f1_hz: float, f2_hz: float, *,
               pad_s: float = 0.2) -> tuple[np.ndarray, int]:
    """``h`` through the in-band inverse's zero-phase band limit, with ``pad_s`` of room before
    it for the band limit's ringing; returns the response and the padding in samples."""
    pad = int(round(pad_s * fs))
    n = _n_fft(h.size + pad + x.size)
    X = np.fft.rfft(x, n)
    f = np.fft.rfftfreq(n, 1.0 / fs)
    p = np.abs(X) ** 2
    w = p / (p + 1e-6 * p.max())
    w[(f < f1_hz) | (f > f2_hz)] = 0.0
    src = np.concatenate([np.zeros(pad), h])
    return np.fft.irfft(np.fft.rfft(src, n) * w, n)[:src.size], pad


def deconvolved_windows(y: np.ndarray, x: np.ndarray, fs: int, f1_hz: float, f2_hz: float,
                        starts: list[float], n_out: int, pre: int) -> np.ndarray:
    """The average of the windows ``[s − pre, s − pre + n_out)`` of ``y`` deconvolved by the
    ideal in-band inverse, ``s`` the known positions of the direct sound (rounded)."""
    n = _n_fft(y.size + x.size)
    d = np.fft.irfft(np.fft.rfft(y, n) * ideal_inverse(x, n, fs, f1_hz, f2_hz), n)
    rows = [d.take(np.arange(int(round(s)) - pre, int(round(s)) - pre + n_out), mode="wrap")
            for s in starts]
    return np.mean(rows, axis=0)


def octave_sos(fc_hz: float, fs: int) -> np.ndarray:
    """Butterworth octave band-pass around ``fc_hz`` (edges fc/√2, fc·√2)."""
    return butter(3, [fc_hz / math.sqrt(2.0), min(fc_hz * math.sqrt(2.0), 0.49 * fs)],
                  btype="bandpass", fs=fs, output="sos")


def band_noise_power(noise: np.ndarray, fs: int, fc_hz: float, *, skip_s: float = 0.1) -> float:
    """Mean power of ``noise`` in the octave around ``fc_hz`` (the filter's start skipped)."""
    b = sosfilt(octave_sos(fc_hz, fs), noise)
    return float(np.mean(b[int(skip_s * fs):] ** 2))


def band_decay_range_db(signal: np.ndarray, noise_power: float, fs: int, fc_hz: float) -> float:
    """The strongest 10 ms of ``signal`` in the octave over ``noise_power``, dB."""
    b = sosfilt(octave_sos(fc_hz, fs), signal) ** 2
    m = int(0.01 * fs)
    k = b.size // m
    return 10.0 * math.log10(float(b[:k * m].reshape(k, m).mean(axis=1).max()) / noise_power)


def octaves_inside(f1_hz: float, f2_hz: float, fs: int,
                   nominal: tuple[float, ...] = (63, 125, 250, 500, 1000, 2000, 4000, 8000)
                   ) -> list[tuple[str, float]]:
    """(label, exact centre) of the octaves whose edges lie inside [f1, f2] and below
    0.49·fs (IEC 61260-1 base-10 centres 1000·10^(3k/10))."""
    out = []
    for nom in nominal:
        fc = 1000.0 * 10.0 ** (0.3 * round(10.0 * math.log10(nom / 1000.0) / 3.0))
        if fc / math.sqrt(2) >= f1_hz * 0.999 and fc * math.sqrt(2) <= min(f2_hz * 1.001,
                                                                              0.49 * fs):
            label = f"{nom / 1000:g}k" if nom >= 1000 else f"{nom:g}"
            out.append((label, fc))
    return out
