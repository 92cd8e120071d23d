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


def figure_scatter(signal: np.ndarray, noise_power: float, fs: int, fc_hz: float
                   ) -> dict[str, float]:
    """The 1 σ scatter that noise of ``noise_power`` (per sample, in the octave) puts into each
    figure of the octave band of ``signal`` (the noise-free part), from first principles.

    The decay-noise cross term 2·Σ s·n of band-limited noise (about 2B degrees of freedom per
    second, B the Butterworth octave's width 0.707·fc) has standard deviation
    2·√(E·N·fs/(2B)) over a stretch holding signal energy E (derived). Hence the relative error
    ε = 2·√(N·fs/(2B·E)) of a sum of energy E; the Schroeder level at −D dB is off by 4.34·ε
    with E = E0·10^(−D/10), which moves a decay time fitted from −H to −D dB by that over
    |slope at −D|·(t_D − t_H); C_te is off by 4.34·√(ε_early² + ε_late²) dB; Ts by
    √2·(T/13.8155)·ε(E0) (an exponential decay's first moment); D50 by D(1−D)·ln10/10 times
    C50's. Returns relative values for EDT/T20/T30, dB for C50/C80, s for Ts, and D50's.
    """
    b = sosfilt(octave_sos(fc_hz, fs), signal) ** 2
    start = int(np.argmax(b >= 0.01 * b.max()))
    e = b[start:]
    backward = np.cumsum(e[::-1])[::-1]
    e0 = float(backward[0])
    level = 10.0 * np.log10(np.maximum(backward / e0, 1e-30))
    width = 0.7071 * fc_hz
    eps = lambda energy: 2.0 * math.sqrt(noise_power * fs / (2.0 * width * energy))  # noqa: E731
    out = {}
    for key, hi, lo in (("edt_s", 0.0, -10.0), ("t20_s", -5.0, -25.0), ("t30_s", -5.0, -35.0)):
        i_hi = int(np.argmax(level <= hi))
        below = np.nonzero(level <= lo)[0]
        if not below.size:
            out[key] = math.inf
            continue
        i_lo = int(below[0])
        w = max(int(0.005 * fs), (i_lo - i_hi) // 10, 1)
        a, c = max(i_lo - w, 0), min(i_lo + w, level.size - 1)
        slope = abs(level[c] - level[a]) / ((c - a) / fs)
        span_s = (i_lo - i_hi) / fs
        out[key] = (4.343 * eps(e0 * 10.0 ** (lo / 10.0)) / (slope * span_s)
                    if slope > 0 and span_s > 0 else math.inf)
    for key, te in (("c50_db", 0.050), ("c80_db", 0.080)):
        k = int(round(te * fs))
        late = float(backward[k])
        out[key] = 4.343 * math.hypot(eps(e0 - late), eps(late))
    d = 1.0 - float(backward[int(round(0.05 * fs))]) / e0
    out["d50"] = d * (1.0 - d) * math.log(10.0) / 10.0 * out["c50_db"]
    i5, i25 = int(np.argmax(level <= -5.0)), int(np.argmax(level <= -25.0))
    t_s = 60.0 * (i25 - i5) / fs / 20.0 if i25 > i5 else 1.0
    out["ts_s"] = math.sqrt(2.0) * t_s / 13.8155 * eps(e0)
    return out
