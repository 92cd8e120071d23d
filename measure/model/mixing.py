"""Mixing time from the normalised echo density of Abel & Huang [1]_.

In a sliding window w (Hann, normalised to Σw = 1) centred at t, the echo density is the
weighted fraction of samples that lie outside one local standard deviation, divided by what a
Gaussian would give (modeling.md §4.3):

    η(t) = (1 / erfc(1/√2)) · Σ_τ w(τ)·1{|h(t+τ)| > σ(t)},   σ(t) = √(Σ_τ w(τ)·h²(t+τ)),

erfc(1/√2) = 0.31731. η ≈ 1 for Gaussian noise (a diffuse, mixed field) and η ≪ 1 for sparse
early reflections. The mixing time is the first window centre after the direct sound at which
η reaches 1 (the threshold of Abel & Huang; the 20 ms window is common practice, modeling.md
§4.3).

References
----------
.. [1] J. S. Abel, P. Huang, "A simple, robust measure of reverberation echo density", AES
   121st Convention, San Francisco, 2006.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import signal, special

from measure._validate import check_fs, check_positive, check_signal
from measure.decay import onset_index
from measure.errors import FitError, ParameterError

__all__ = ["EchoDensity", "echo_density", "mixing_time", "GAUSSIAN_FRACTION"]

#: erfc(1/√2): fraction of a Gaussian outside ±1 standard deviation (analytic).
GAUSSIAN_FRACTION = float(special.erfc(1.0 / math.sqrt(2.0)))
#: Frames evaluated per block (bounds the memory of the windowed view).
_BLOCK = 4096


@dataclass(frozen=True, slots=True, eq=False)
class EchoDensity:
    """Normalised echo density profile.

    Attributes
    ----------
    times_s : ndarray, s
        Window centres, re the first sample of ``h``.
    eta : ndarray
        η at those times (1 for Gaussian noise).
    fs : int, Hz
    window_s, hop_s : float, s
        Window length and spacing of the window centres.
    """

    times_s: NDArray[np.float64]
    eta: NDArray[np.float64]
    fs: int
    window_s: float
    hop_s: float

    def __post_init__(self) -> None:
        self.times_s.flags.writeable = False
        self.eta.flags.writeable = False

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form."""
        return {"fs": self.fs, "window_s": self.window_s, "hop_s": self.hop_s,
                "times_s": self.times_s.tolist(), "eta": self.eta.tolist()}


def echo_density(h: ArrayLike, fs: int, *, window_s: float = 0.02,
                 hop_s: float = 0.001) -> EchoDensity:
    """Normalised echo density η(t) of an impulse response (Abel & Huang 2006).

    Parameters
    ----------
    h : array_like, shape (n,)
        Impulse response.
    fs : int, Hz
        Sample rate.
    window_s : float, > 0, s
        Length of the Hann window; at least 16 samples and at most the length of ``h``.
    hop_s : float, > 0, s
        Spacing of the window centres (rounded to whole samples, at least one sample).

    Returns
    -------
    EchoDensity
        η at every window position that lies entirely inside ``h``.

    Raises
    ------
    ParameterError
        If the window is shorter than 16 samples or longer than ``h``.
    """
    fs = check_fs(fs)
    h = check_signal(h, "h", ndim=(1,))
    window_s = check_positive(window_s, "window_s", unit="s")
    hop_s = check_positive(hop_s, "hop_s", unit="s")
    n_win = int(round(window_s * fs))
    if n_win < 16 or n_win > h.size:
        raise ParameterError(
            f"window_s={window_s} s is {n_win} samples at {fs} Hz; it must be 16 samples or "
            f"more and no longer than h ({h.size} samples)")
    hop = max(1, int(round(hop_s * fs)))
    w = signal.windows.hann(n_win + 2)[1:-1]  # no zero-weight end points
    w /= np.sum(w)
    frames = np.lib.stride_tricks.sliding_window_view(h, n_win)[::hop]
    eta = np.empty(frames.shape[0])
    for i in range(0, frames.shape[0], _BLOCK):
        blk = frames[i:i + _BLOCK]
        sigma = np.sqrt(np.maximum(blk * blk @ w, 0.0))
        eta[i:i + _BLOCK] = ((np.abs(blk) > sigma[:, None]) @ w) / GAUSSIAN_FRACTION
    starts = np.arange(frames.shape[0]) * hop
    times = (starts + 0.5 * (n_win - 1)) / fs
    return EchoDensity(times_s=times, eta=eta, fs=fs, window_s=n_win / fs, hop_s=hop / fs)


def mixing_time(h: ArrayLike, fs: int, *, window_s: float = 0.02, threshold: float = 1.0,
                hop_s: float = 0.001) -> float:
    """Mixing time: the first window centre after the direct sound where η >= ``threshold``.

    Parameters
    ----------
    h : array_like, shape (n,)
        Impulse response.
    fs : int, Hz
        Sample rate.
    window_s : float, > 0, s
        Echo-density window (see :func:`echo_density`).
    threshold : float, > 0
        η to reach; 1 is the Gaussian value of Abel & Huang.
    hop_s : float, > 0, s
        Spacing of the evaluated window centres; the result is on this grid.

    Returns
    -------
    float, s
        Time re the first sample of ``h`` (not re the direct sound: subtract the direct-sound
        time for that). The search starts at the onset, the first sample within 20 dB of the
        peak (:func:`measure.decay.onset_index`, ISO 3382-1 A.3.4), so that noise before the
        direct sound is not taken for a mixed field.

    Raises
    ------
    FitError
        If η never reaches ``threshold`` after the onset (a response too short, too sparse or
        cut too early); give the mixing time explicitly in that case.
    """
    threshold = check_positive(threshold, "threshold")
    prof = echo_density(h, fs, window_s=window_s, hop_s=hop_s)
    n0 = onset_index(np.asarray(h, dtype=np.float64), prof.fs)
    after = prof.times_s >= n0 / prof.fs
    hit = np.flatnonzero(after & (prof.eta >= threshold))
    if hit.size == 0:
        raise FitError(
            f"the echo density never reached {threshold:g} after the onset (largest "
            f"{float(np.max(prof.eta[after], initial=0.0)):.2f}); the response is too short or "
            "too sparse: give the mixing time explicitly")
    return float(prof.times_s[hit[0]])
