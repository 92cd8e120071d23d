"""Render a room model as an impulse response at any rate, and auralize a dry sound with an IR.

See :mod:`measure.model.modelfile` for the model. Rendering is

    h = sosfilt(C_fs, g·[δ(t0) + Σ a_k·δ(t0 + t_k)]) + late(t − t0),

with band-limited (windowed-sinc) impulses at the exact, fractional delays, the coloration
filter ``C`` at the rendering rate (remapped by :func:`measure.model.coloration.coloration_sos`
when the rate differs from the fitting rate) and the late part from
:func:`measure.model.late.render_late` at the fitting rate, resampled to the rendering rate
(the envelope was fitted to that rendering; see :func:`_late_at`).
"""

from __future__ import annotations

import numpy as np

from measure._dsp import HALF_WIDTH, fractional_impulse
from measure._validate import check_fs, check_positive, check_signal
from measure.errors import ParameterError
from measure.model.late import render_late
from measure.model.modelfile import RoomModel

__all__ = ["render_model", "render_early", "auralize", "default_seconds"]


def render_early(model: RoomModel, fs: int, n_samples: int) -> np.ndarray:
    """Direct sound and echoes through the coloration filter, ``n_samples`` long."""
    from scipy.signal import sosfilt

    from measure.model.coloration import coloration_sos

    fs = check_fs(fs)
    t0 = model.direct_delay_s * fs
    x = np.zeros(n_samples)
    width = 2 * HALF_WIDTH + 2
    for delay_s, gain in ((0.0, 1.0), *model.echoes):
        pos = t0 + delay_s * fs
        if pos >= n_samples:
            continue
        # the kernel is zero beyond HALF_WIDTH samples: build it locally and add it in place
        base = int(np.floor(pos)) - HALF_WIDTH
        kern = fractional_impulse(width, pos - base)
        lo, hi = max(0, base), min(n_samples, base + width)
        if hi > lo:
            x[lo:hi] += gain * kern[lo - base: hi - base]
    x *= model.direct_gain
    if model.coloration is not None:
        x = sosfilt(coloration_sos(model.coloration, fs), x)
    return x


def default_seconds(model: RoomModel) -> float:
    """A rendering length that holds the whole decay: direct delay + the late part's start +
    1.2 × the longest T60 (72 dB of decay)."""
    return float(model.direct_delay_s + model.late.start_s + 1.2 * max(model.late.t60_s))


def render_model(model: RoomModel, fs: int, seconds: float) -> np.ndarray:
    """The model's impulse response at rate ``fs``.

    Parameters
    ----------
    model : RoomModel
    fs : int, > 0, Hz
        Any rate; bands of the late part above 0.45·fs are left out.
    seconds : float, > 0, s
        Length of the result (the direct sound stays at ``model.direct_delay_s``).

    Returns
    -------
    ndarray, shape (round(seconds·fs),), float64
    """
    fs = check_fs(fs)
    seconds = check_positive(seconds, "seconds", unit="s")
    n = int(round(seconds * fs))
    if n < 1:
        raise ParameterError(f"seconds={seconds:g} gives no sample at {fs} Hz; ask for more")
    h = render_early(model, fs, n)
    shift = int(round(model.direct_delay_s * fs))
    if shift < n:
        h[shift:] += _late_at(model, fs, n - shift)
    return h


def _late_at(model: RoomModel, fs: int, n_samples: int) -> np.ndarray:
    """The late part at ``fs``: rendered at the fitting rate and resampled when ``fs`` differs.

    The envelope correction was fitted to the network's output at the fitting rate; the
    network at another rate (other prime line lengths) is another realisation, which the
    envelope does not fit (measured on the demo office: EDT at 1 kHz 32 JNDs off at 96 kHz).
    So the late part is rendered where it was fitted and resampled (scipy.signal.
    resample_poly), band-limited to the fitting rate's Nyquist like the measurement it
    models. Its amplitude is scaled by fit_fs/fs: a discrete unit impulse at the fitting rate,
    resampled to ``fs`` and so scaled, is a unit impulse at ``fs`` low-passed at the old
    Nyquist frequency (derived: both have the spectrum fit_fs/fs·1 below it), so every band's
    late energy keeps its ratio to the direct sound's, which is a unit impulse at every rate.
    """
    from math import gcd

    from scipy.signal import resample_poly

    fit_fs = model.fit_fs
    if fit_fs == fs:
        return render_late(model.late, fs, n_samples)
    n_fit = int(np.ceil(n_samples * fit_fs / fs)) + 16
    y = render_late(model.late, fit_fs, n_fit)
    g = gcd(fs, fit_fs)
    out = resample_poly(y, fs // g, fit_fs // g)[:n_samples] * (fit_fs / fs)
    if out.size < n_samples:
        out = np.concatenate((out, np.zeros(n_samples - out.size)))
    return out


def auralize(dry: np.ndarray, fs: int, ir: np.ndarray) -> np.ndarray:
    """Convolve a dry sound with an impulse response (both at ``fs``): what the room makes of it.

    Parameters
    ----------
    dry : ndarray, shape (n,) or (channels, n)
    fs : int, > 0, Hz
        Rate of both signals (the caller resamples or renders the IR at the dry sound's rate).
    ir : ndarray, shape (m,)

    Returns
    -------
    ndarray, shape (n + m − 1,) or (channels, n + m − 1)
        Not normalised: the level is the room's (see ``measure auralize --peak``).
    """
    from scipy.signal import fftconvolve

    check_fs(fs)
    x = check_signal(dry, "dry sound")
    h = check_signal(ir, "impulse response", ndim=(1,))
    if x.ndim == 2:
        return fftconvolve(x, h[np.newaxis, :], axes=-1)
    return fftconvolve(x, h)
