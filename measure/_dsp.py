"""Small signal-processing primitives shared by the stages (band-limited interpolation)."""

from __future__ import annotations

import functools

import numpy as np

#: Half-width of the interpolation kernel in samples, and its Kaiser window's beta. With 32
#: taps a side and beta = 9 the kernel's stop band is below -80 dB beyond 1.1 × Nyquist
#: (measured -91 dB) and its pass band is flat to within 0.01 dB up to 0.9 of Nyquist
#: (measured 0.0005 dB); checked with scipy.signal.freqz in tests/test_dsp.py.
HALF_WIDTH = 32
KAISER_BETA = 9.0


#: Oversampling of the tabulated kernel; values between table points are interpolated linearly.
TABLE_STEPS = 2048


def _kaiser_sinc(d: np.ndarray, half_width: int) -> np.ndarray:
    """The kernel at distances ``d`` (samples): sinc(d) under a Kaiser window reaching ±half_width."""
    w = np.i0(KAISER_BETA * np.sqrt(np.clip(1.0 - (d / half_width) ** 2, 0.0, 1.0)))
    return np.sinc(d) * w / np.i0(KAISER_BETA)


@functools.lru_cache(maxsize=4)
def _kernel_table(half_width: int) -> np.ndarray:
    """The kernel tabulated at 1/TABLE_STEPS-sample steps over ±half_width."""
    d = np.arange(-half_width * TABLE_STEPS, half_width * TABLE_STEPS + 2) / TABLE_STEPS
    table = _kaiser_sinc(d, half_width)
    table.setflags(write=False)
    return table


def interpolate(x: np.ndarray, positions: np.ndarray, *, half_width: int = HALF_WIDTH,
                chunk: int = 8192) -> np.ndarray:
    """Evaluate the band-limited signal ``x`` at fractional sample ``positions``.

    Windowed-sinc (Kaiser) interpolation along the last axis; samples outside ``x`` count as
    zero. Used for clock-drift resampling and sub-sample alignment.

    Parameters
    ----------
    x : ndarray, (..., n)
    positions : ndarray, (m,)
        Fractional indices into the last axis of ``x``.

    Returns
    -------
    ndarray, (..., m)
    """
    from numpy.lib.stride_tricks import sliding_window_view

    x = np.asarray(x, dtype=np.float64)
    positions = np.asarray(positions, dtype=np.float64)
    lead = x.shape[:-1]
    flat = x.reshape(-1, x.shape[-1])
    n = flat.shape[-1]
    taps = 2 * half_width
    pad = taps + 1
    padded = np.zeros((flat.shape[0], n + 2 * pad))
    padded[:, pad:pad + n] = flat
    windows = sliding_window_view(padded, taps, axis=-1)  # (c, n + 2·pad − taps + 1, taps)
    table = _kernel_table(half_width)
    offsets = np.arange(taps) * TABLE_STEPS  # table index of tap j at zero fraction, from the left
    out = np.zeros((flat.shape[0], positions.size))
    for start in range(0, positions.size, chunk):
        p = positions[start:start + chunk]
        base = np.floor(p)
        frac = p - base
        first = base.astype(np.int64) - half_width + 1  # index of the first tap in x
        ok = (first > -taps) & (first < n)
        if not np.any(ok):
            continue
        w0 = (1.0 - frac) * TABLE_STEPS  # table position of tap 0, measured from its left end
        t = w0[:, None] + offsets[None, :]
        ti = t.astype(np.int64)
        tf = t - ti
        kern = table[ti] * (1.0 - tf) + table[ti + 1] * tf
        rows = np.clip(first + pad, 0, windows.shape[1] - 1)
        seg = windows[:, rows, :]  # (c, m, taps)
        vals = np.einsum("cmt,mt->cm", seg, kern)
        out[:, start:start + p.size] = np.where(ok, vals, 0.0)
    return out.reshape(*lead, positions.size)


def fractional_impulse(n: int, position: float, *, half_width: int = HALF_WIDTH) -> np.ndarray:
    """A unit band-limited impulse of length ``n`` centred at fractional index ``position``."""
    dist = np.arange(n, dtype=np.float64) - position
    return np.where(np.abs(dist) < half_width, _kaiser_sinc(dist, half_width), 0.0)


def parabolic_peak(v: np.ndarray, i: int) -> float:
    """Sub-sample position of the peak of ``v`` at index ``i`` by a parabola through 3 points."""
    if i <= 0 or i >= v.size - 1:
        return float(i)
    a, b, c = v[i - 1], v[i], v[i + 1]
    den = a - 2.0 * b + c
    if den == 0:
        return float(i)
    return i + 0.5 * (a - c) / den
