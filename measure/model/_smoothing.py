"""Fractional-octave power smoothing and the log-spectral distance.

Power smoothing averages |H|² over the 1/N-octave band [f·2^(−1/(2N)), f·2^(1/(2N))] around
each output frequency f (modeling.md §1.9). The spectrum between the given frequencies is taken
as piecewise linear in power and integrated exactly, so a band narrower than the frequency
spacing (low frequencies of an FFT) reduces smoothly to linear interpolation, and a flat
spectrum stays exactly flat.

The log-spectral distance over a band B (modeling.md §1.10) is

    LSD_B = √( (1/K) Σ_k [10·log10(P_ref(f_k)/P(f_k))]² )  dB,

taken here at the 1/N-octave band centres f_k of IEC 61260-1 (base-10 exact midband
frequencies), on power-smoothed spectra, so every octave counts equally. LSD(H, H) = 0 and a
gain-only change of g dB gives LSD = |g| exactly, whatever the smoothing, because power
smoothing is linear in power.

References
----------
.. [1] IEC 61260-1:2014, Electroacoustics - Octave-band and fractional-octave-band filters -
   Part 1: Specifications, clause 5 (base-10 octave ratio G = 10^(3/10), exact midband
   frequencies f_m = f_r·G^(x/b) for odd b and f_r·G^((2x+1)/(2b)) for even b, f_r = 1000 Hz;
   clause numbers from memory).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measure.errors import ParameterError

__all__ = [
    "band_centers_hz",
    "log_grid_hz",
    "smooth_power",
    "smoothed_level_db",
    "log_spectral_distance",
    "max_abs_difference_db",
]

#: Base-10 octave ratio of IEC 61260-1 [1].
OCTAVE_RATIO = 10.0 ** (3.0 / 10.0)
#: Reference frequency of IEC 61260-1 [1].
REFERENCE_HZ = 1000.0
#: Power below this is treated as this (−300 dB), so that log10 stays finite.
POWER_FLOOR = 1e-30


def _check_fraction(fraction: int | None) -> int | None:
    if fraction is None:
        return None
    if isinstance(fraction, bool) or not isinstance(fraction, (int, np.integer)) or fraction < 1:
        raise ParameterError(
            f"fraction={fraction!r} must be a whole number >= 1 (3 for third octaves) or None "
            "for no smoothing; give e.g. 3, 6 or 24")
    return int(fraction)


def band_centers_hz(f_lo_hz: float, f_hi_hz: float, *, fraction: int = 3) -> NDArray[np.float64]:
    """Exact midband frequencies of the 1/``fraction``-octave bands from ``f_lo_hz`` to ``f_hi_hz``.

    Parameters
    ----------
    f_lo_hz, f_hi_hz : float, 0 < f_lo_hz <= f_hi_hz, Hz
        Nominal band limits: a band is included when its centre lies within half a band of the
        range, so (63, 16000) with ``fraction=3`` gives the 25 bands 63.1 Hz ... 15849 Hz.
    fraction : int, >= 1
        Bands per octave.

    Returns
    -------
    ndarray of float, Hz
        Base-10 exact midband frequencies (IEC 61260-1 [1]), ascending.
    """
    b = _check_fraction(fraction)
    if b is None:
        raise ParameterError("fraction=None has no band centres; give a whole number >= 1")
    if not (0 < f_lo_hz <= f_hi_hz):
        raise ParameterError(
            f"band limits f_lo_hz={f_lo_hz}, f_hi_hz={f_hi_hz} must satisfy 0 < f_lo <= f_hi")
    half = OCTAVE_RATIO ** (1.0 / (2 * b))

    def center(x: int) -> float:
        exponent = x / b if b % 2 else (2 * x + 1) / (2 * b)
        return REFERENCE_HZ * OCTAVE_RATIO ** exponent

    x_lo = math.floor(b * math.log(f_lo_hz / REFERENCE_HZ, OCTAVE_RATIO)) - 2
    x_hi = math.ceil(b * math.log(f_hi_hz / REFERENCE_HZ, OCTAVE_RATIO)) + 2
    centers = [center(x) for x in range(x_lo, x_hi + 1)]
    return np.array([c for c in centers if f_lo_hz / half <= c <= f_hi_hz * half])


def log_grid_hz(f_lo_hz: float, f_hi_hz: float, *, n_per_octave: int) -> NDArray[np.float64]:
    """Logarithmically spaced frequencies from ``f_lo_hz`` to ``f_hi_hz``, both included."""
    if not (0 < f_lo_hz < f_hi_hz):
        raise ParameterError(
            f"grid limits f_lo_hz={f_lo_hz}, f_hi_hz={f_hi_hz} must satisfy 0 < f_lo < f_hi")
    n = max(2, int(math.ceil(n_per_octave * math.log2(f_hi_hz / f_lo_hz))) + 1)
    return np.geomspace(f_lo_hz, f_hi_hz, n)


def _cumulative_integral(f: NDArray[np.float64], p: NDArray[np.float64],
                         x: NDArray[np.float64]) -> NDArray[np.float64]:
    """Exact integral from f[0] to x of the piecewise-linear interpolant of p (held outside)."""
    seg = np.diff(f)
    cum = np.concatenate(([0.0], np.cumsum(0.5 * (p[1:] + p[:-1]) * seg)))
    xc = np.clip(x, f[0], f[-1])
    i = np.clip(np.searchsorted(f, xc, side="right") - 1, 0, f.size - 2)
    d = xc - f[i]
    slope = (p[i + 1] - p[i]) / seg[i]
    inside = cum[i] + p[i] * d + 0.5 * slope * d * d
    # Beyond the ends the spectrum is held at its end value.
    return inside + (x - xc) * np.where(x > f[-1], p[-1], p[0])


def smooth_power(f_hz: ArrayLike, power: ArrayLike, f_out_hz: ArrayLike, *,
                 fraction: int | None) -> NDArray[np.float64]:
    """Average a power spectrum over the 1/``fraction``-octave band around each output frequency.

    Parameters
    ----------
    f_hz : array_like of float, strictly increasing, Hz
        Frequencies at which ``power`` is given (e.g. the bins of an FFT).
    power : array_like of float, >= 0, same shape as ``f_hz``
        |H|² at those frequencies.
    f_out_hz : array_like of float, > 0, Hz
        Centres of the smoothing bands.
    fraction : int >= 1 or None
        1/N-octave smoothing; ``None`` interpolates linearly without smoothing.

    Returns
    -------
    ndarray of float
        Smoothed power at ``f_out_hz``. The band is rectangular in frequency, and the spectrum
        is linear in power between the given points and held constant beyond the ends.
    """
    b = _check_fraction(fraction)
    f = np.asarray(f_hz, dtype=np.float64)
    p = np.asarray(power, dtype=np.float64)
    fo = np.asarray(f_out_hz, dtype=np.float64)
    if f.ndim != 1 or p.shape != f.shape or f.size < 2:
        raise ParameterError("f_hz and power must be 1-D arrays of the same length >= 2")
    if np.any(np.diff(f) <= 0):
        raise ParameterError("f_hz must be strictly increasing; sort the spectrum first")
    if b is None:
        return np.interp(fo, f, p)
    half = 2.0 ** (1.0 / (2 * b))
    lo, hi = fo / half, fo * half
    return (_cumulative_integral(f, p, hi) - _cumulative_integral(f, p, lo)) / (hi - lo)


def smoothed_level_db(H: ArrayLike, f_hz: ArrayLike, f_out_hz: ArrayLike, *,
                      fraction: int | None = 3) -> NDArray[np.float64]:
    """10·log10 of the 1/``fraction``-octave smoothed power of ``H`` at ``f_out_hz``, in dB."""
    p = np.abs(np.asarray(H)) ** 2
    s = smooth_power(f_hz, p, f_out_hz, fraction=fraction)
    return 10.0 * np.log10(np.maximum(s, POWER_FLOOR))


def _difference_db(H_ref: ArrayLike, H: ArrayLike, f_hz: ArrayLike, f_lo_hz: float,
                   f_hi_hz: float, fraction: int | None) -> NDArray[np.float64]:
    b = _check_fraction(fraction)
    if b is None:
        grid = log_grid_hz(f_lo_hz, f_hi_hz, n_per_octave=48)
    else:
        grid = band_centers_hz(f_lo_hz, f_hi_hz, fraction=b)
    href, hh = np.asarray(H_ref), np.asarray(H)
    if href.shape != hh.shape:
        raise ParameterError(
            f"H_ref has shape {href.shape} but H has {hh.shape}; sample both on the same f_hz")
    return (smoothed_level_db(href, f_hz, grid, fraction=b)
            - smoothed_level_db(hh, f_hz, grid, fraction=b))


def log_spectral_distance(H_ref: ArrayLike, H: ArrayLike, f_hz: ArrayLike, *,
                          f_lo_hz: float = 63.0, f_hi_hz: float = 16000.0,
                          fraction: int | None = 3) -> float:
    """Log-spectral distance between two responses over a band, in dB.

    Parameters
    ----------
    H_ref, H : array_like, complex or real, same shape as ``f_hz``
        Frequency responses (only the magnitude is used).
    f_hz : array_like of float, strictly increasing, Hz
        Frequencies of the samples, e.g. ``np.fft.rfftfreq(n, 1/fs)``.
    f_lo_hz, f_hi_hz : float, Hz
        Band of the comparison; the default is the third octaves 63 Hz - 16 kHz.
    fraction : int >= 1 or None
        Compare 1/N-octave power-smoothed levels at the IEC 61260-1 band centres (default:
        third octaves). ``None`` compares unsmoothed levels on a 48-per-octave log grid.

    Returns
    -------
    float, dB
        √(mean over bands of ΔL²), with ΔL the level difference in dB (modeling.md §1.10).
    """
    d = _difference_db(H_ref, H, f_hz, f_lo_hz, f_hi_hz, fraction)
    return float(np.sqrt(np.mean(d * d)))


def max_abs_difference_db(H_ref: ArrayLike, H: ArrayLike, f_hz: ArrayLike, *,
                          f_lo_hz: float = 63.0, f_hi_hz: float = 16000.0,
                          fraction: int | None = 3) -> float:
    """Largest |level difference| in dB over the same bands as :func:`log_spectral_distance`."""
    d = _difference_db(H_ref, H, f_hz, f_lo_hz, f_hi_hz, fraction)
    return float(np.max(np.abs(d)))
