"""Coloration: a low-order minimum-phase pole-zero filter fitted to a smoothed magnitude response.

The room's colour is the fractional-octave-smoothed magnitude of its impulse response (or of
its early part). It is modelled as

    H(z) = k · Π_i (1 − z_i z⁻¹) / Π_i (1 − p_i z⁻¹),   |z_i| < 1, |p_i| < 1,

with as many zeros as poles (the order), stored as second-order sections.

Method (``method="lm"``, the default)
    1. Target: 1/N-octave power-smoothed level L(f) on a 48-per-octave log grid over the fit
       band (modeling.md §1.9); half an octave below and up to 0.49·fs above, the data clipped
       to the band-edge level ± 20 dB at a small weight, so the filter stays tame outside the
       band without chasing an anti-aliasing roll-off.
    2. Start: warped linear prediction in the frequency domain (modeling.md §1.6). The target
       power is resampled onto a uniform grid of the warped frequency ω̃ (Bark-matched λ of
       Smith & Abel), its inverse FFT is the warped autocorrelation, and the Toeplitz normal
       equations give poles; zeros come from the same on the inverse of the residual
       spectrum, alternating a few times. Autocorrelation LP is minimum phase, and the
       unwarping map z = (z̃ + λ)/(1 + λz̃) keeps roots inside the unit circle, so the start
       is stable and minimum phase, with order poles and order zeros.
    3. Refinement: Levenberg-Marquardt (``scipy.optimize.least_squares``, analytic Jacobian)
       on the log-magnitude error 20·log10|H(f_k)| − L(f_k), i.e. on the very log-spectral
       distance that is reported. Each section's numerator and denominator 1 + c1·z⁻¹ + c2·z⁻²
       is parameterised as c2 = tanh(α), c1 = (1 + c2)·tanh(β), which spans exactly the
       stability triangle, so every iterate is stable and minimum phase by construction (no
       reflection step). A second start per order adds a peaking section at the largest
       residual to the previous order's fit; the better of the two is kept.

``method="warped_lp"`` returns the all-pole warped LP of step 2 alone (order poles, order zeros
fixed at z = λ), kept for comparison.

Why this method: a game engine pays per section, so the measure is accuracy per coefficient
(2·order + 1 for every method here). Third-octave LSD 63 Hz - 16 kHz in dB at 48 kHz, measured by
bench/bench_coloration.py on ``room_like_ir(5)`` of tests/test_model_coloration.py (2 s) and as
the mean over six responses (``room_like_ir`` seeds 5, 6, 7 and the first 2 s of the three demo
rooms of :mod:`measure.virtual`); SM is Steiglitz-McBride (Prony start with nb = 0, 10
iterations) on the minimum-phase impulse response of the same smoothed target, unstable roots
reflected inside with the gain correction::

    order (coefficients)        2 (5)   4 (9)   6 (13)   8 (17)   12 (25)
    room_like_ir(5)  LM          1.71    0.64    0.61     0.42     0.44
                     warped LP   2.42    2.37    2.21     2.11     1.95
                     SM          1.47    0.86    0.75     0.55     0.62
    mean of six      LM          1.16    0.80    0.73     0.53     0.49
                     warped LP   1.54    1.49    1.46     1.43     1.37
                     SM          1.17    0.92    0.87     0.79     1.04

Two LM sections beat six warped-LP sections. SM ties LM at order 2 on average and is 0.1-0.55 dB
worse from order 4 up; at order 12 it can fail (3.05 dB on the office room). It is faster (about
10-40 ms a fit against 10-650 ms for LM up to order 12), but on the quantity LM minimises (the
weighted RMS dB error on the fitting grid) LM is lower in all 30 cases; SM's lower band LSD in 6
of them (by at most 0.24 dB, mostly at order 2) comes from the two measures differing (grid and
guard regions against third-octave bands), not from a better fit. SM's time-domain error weights
linear frequency (Parseval), whereas the LM fit minimises a log-magnitude error on a log grid
(close to, though not the same as, the reported band LSD), needs no phase target, and its parameterisation makes stability and
minimum phase structural. Sanathanan-Koerner / vector fitting need a complex (phase) target and
are poorly conditioned for roots crowded near z = 1 at low frequencies; they were not
implemented, so not measured.

Representation and other sample rates
    The fit is stored exactly as SOS at the fitting ``fs`` together with its zeros, poles and
    gain. :func:`coloration_sos` at another sample rate re-fits the same order to the stored
    filter's own magnitude over the band common to both rates (held flat above the old
    Nyquist band edge), starting from matched-z mapped roots z' = z^(fs_old/fs_new)
    (s = fs·ln z kept fixed), so resonance frequencies and bandwidths in Hz are preserved and
    the magnitude error is minimised in the log domain again. A negative real root (at the old
    Nyquist frequency) becomes a conjugate pair at the same frequency in Hz when the new rate
    is higher, so the order may grow by one per such root. :func:`remap_coloration` returns
    the re-fitted :class:`Coloration` with the remapping error in ``lsd_db`` (measured on
    room-like fits of order 8 at 48 kHz: 0.01 dB at 32 and 44.1 kHz, 0.07-0.12 dB at 88.2 and
    96 kHz).

References
----------
.. [1] J. O. Smith III, J. S. Abel, "Bark and ERB bilinear transforms", IEEE Trans. Speech
   Audio Process. 7(6):697-708, 1999 (Bark-matched allpass coefficient λ).
.. [2] A. Härmä et al., "Frequency-warped signal processing for audio applications", J. Audio
   Eng. Soc. 48(11):1011-1031, 2000 (warped linear prediction).
.. [3] K. Levenberg (1944), D. Marquardt (1963): damped Gauss-Newton least squares, as in
   ``scipy.optimize.least_squares``.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import linalg, optimize, signal, special

from measure._validate import check_fs, check_positive, check_signal
from measure.decay import onset_index
from measure.errors import FitError, ParameterError
from measure.model._smoothing import log_grid_hz, log_spectral_distance, smooth_power

__all__ = [
    "Coloration",
    "fit_coloration",
    "coloration_sos",
    "remap_coloration",
    "coloration_response",
    "coloration_from_dict",
    "bark_warping_lambda",
]

Method = Literal["lm", "warped_lp"]
METHODS: tuple[str, ...] = ("lm", "warped_lp")

#: Budget of residual evaluations of one Levenberg-Marquardt solve, per parameter.
MAX_NFEV_PER_PARAM = 20
#: Points per octave of the fitting grid.
GRID_PER_OCTAVE = 48
#: Weight of the guard regions outside the fit band (half an octave below, up to 0.49·fs above).
GUARD_WEIGHT = 0.03
#: In the guard regions the target is the data clipped to the band-edge level ± this, in dB,
#: so that an anti-aliasing roll-off near Nyquist does not pull the fit.
GUARD_RANGE_DB = 20.0
#: Band of the reported log-spectral distance: third octaves 63 Hz - 16 kHz (the issue).
LSD_BAND_HZ = (63.0, 16000.0)
#: Alternations of the pole/zero warped LP start.
N_ALTERNATIONS = 6
#: Points of the uniform warped-frequency grid of the warped LP.
N_WARPED = 2048
SOS_FORMAT = "measure.coloration/1"
#: Bound on the tanh-parameters of the roots: tanh(14) = 1 − 1.4e-12, so every root stays
#: strictly inside the unit circle in floating point (a root the data puts on the circle,
#: such as a DC zero, lands at radius ≈ 1 − 1e-12).
PARAM_LIMIT = 14.0


@dataclass(frozen=True, slots=True, eq=False)
class Coloration:
    """A fitted minimum-phase pole-zero filter.

    Attributes
    ----------
    sos : ndarray, shape (n_sections, 6)
        Second-order sections at ``fs`` (``scipy.signal.sosfilt`` layout).
    fs : int, Hz
        Sample rate of ``sos``.
    order : int
        Number of poles (= number of zeros).
    zeros, poles : ndarray of complex, shape (order,)
        Roots in the z-plane at ``fs``; all strictly inside the unit circle.
    gain : float
        k of H(z) = k·Π(1 − z_i z⁻¹)/Π(1 − p_i z⁻¹).
    lsd_db : float, dB
        Log-spectral distance between the fitted filter and the response it was fitted to,
        third-octave smoothed, bands 63 Hz - 16 kHz (limited to 0.45·fs).
    method : str
        ``"lm"`` or ``"warped_lp"``; ``"remap"`` after :func:`remap_coloration`.
    f_lo_hz, f_hi_hz : float, Hz
        Fit band.
    smoothing_fraction : int or None
        1/N-octave smoothing of the target (None: unsmoothed).
    """

    sos: NDArray[np.float64]
    fs: int
    order: int
    zeros: NDArray[np.complex128]
    poles: NDArray[np.complex128]
    gain: float
    lsd_db: float
    method: str
    f_lo_hz: float
    f_hi_hz: float
    smoothing_fraction: int | None

    def __post_init__(self) -> None:
        for name in ("sos", "zeros", "poles"):
            getattr(self, name).flags.writeable = False

    @property
    def n_sections(self) -> int:
        """Number of second-order sections."""
        return int(self.sos.shape[0])

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON description (rebuilt exactly by :func:`coloration_from_dict`)."""
        return {
            "format": SOS_FORMAT,
            "fs": self.fs,
            "order": self.order,
            "method": self.method,
            "lsd_db": self.lsd_db,
            "f_lo_hz": self.f_lo_hz,
            "f_hi_hz": self.f_hi_hz,
            "smoothing_fraction": self.smoothing_fraction,
            "gain": self.gain,
            "zeros": [[float(z.real), float(z.imag)] for z in self.zeros],
            "poles": [[float(p.real), float(p.imag)] for p in self.poles],
            "sos": [[float(v) for v in row] for row in self.sos],
        }


def coloration_from_dict(d: dict[str, Any]) -> Coloration:
    """Rebuild a :class:`Coloration` from :meth:`Coloration.to_dict` output."""
    try:
        if d.get("format") != SOS_FORMAT:
            raise ParameterError(
                f"coloration format {d.get('format')!r} is not {SOS_FORMAT!r}; "
                "re-fit the model with this version")
        fs = check_fs(d["fs"])
        zeros = np.array([complex(a, b) for a, b in d["zeros"]], dtype=np.complex128)
        poles = np.array([complex(a, b) for a, b in d["poles"]], dtype=np.complex128)
        sos = np.array(d["sos"], dtype=np.float64).reshape(-1, 6)
        if not (np.all(np.isfinite(sos)) and np.all(np.isfinite(zeros))
                and np.all(np.isfinite(poles))):
            raise ParameterError("coloration: sos, zeros and poles must be finite numbers; "
                                 "re-fit the model")
        # the poles of the sections from their denominators alone (sos2zpk would also
        # normalise the numerators, which warns of bad coefficients for a very quiet filter)
        sos_poles = np.concatenate([np.roots(row[3:]) for row in sos]) if sos.size else poles
        if np.any(np.abs(poles) >= 1.0) or np.any(np.abs(sos_poles) >= 1.0):
            raise ParameterError("coloration: a pole lies on or outside the unit circle, so the "
                                 "filter is unstable; re-fit the model")
        frac = d["smoothing_fraction"]
        return Coloration(sos=sos, fs=fs, order=int(d["order"]), zeros=zeros, poles=poles,
                          gain=float(d["gain"]), lsd_db=float(d["lsd_db"]),
                          method=str(d["method"]), f_lo_hz=float(d["f_lo_hz"]),
                          f_hi_hz=float(d["f_hi_hz"]),
                          smoothing_fraction=None if frac is None else int(frac))
    except (KeyError, TypeError, ValueError) as err:
        if isinstance(err, ParameterError):
            raise
        raise ParameterError(
            f"coloration description is malformed ({err}); re-fit the model") from err


def bark_warping_lambda(fs: int) -> float:
    """Bark-matched allpass coefficient λ(fs) of Smith & Abel [1]_ (0.7660 at 48 kHz).

    λ = 1.0674·√((2/π)·arctan(0.06583·fs/kHz)) − 0.1916.
    """
    fs = check_fs(fs)
    return 1.0674 * math.sqrt(2.0 / math.pi * math.atan(0.06583 * fs / 1000.0)) - 0.1916


# ----------------------------------------------------------------------------------------------
# Magnitude model on quadratic factors
#
# Each second-order factor is 1 + c1·z⁻¹ + c2·z⁻² with c2 = tanh(α), c1 = (1 + c2)·tanh(β):
# this covers exactly the open stability triangle |c2| < 1, |c1| < 1 + c2 (Jury's criterion
# for a quadratic), complex and real root pairs alike, so an iterate can never leave it. For
# odd orders one first-order factor 1 + x·z⁻¹ with x = tanh(u). Parameters x: per section
# (αz, βz, αp, βp), then (uz, up) if odd, then the gain in dB.


def _to_factors(roots: NDArray[np.complex128]) -> tuple[list[tuple[float, float]], float | None]:
    """Quadratic factors (c1, c2) and an optional first-order x from monic roots."""
    roots = np.asarray(roots, dtype=np.complex128)
    tol = 1e-9
    upper = roots[roots.imag > tol]
    real = np.sort(roots[np.abs(roots.imag) <= tol].real)
    if int(np.count_nonzero(roots.imag < -tol)) != upper.size:  # unpaired: treat as real
        real = np.sort(np.concatenate((real, roots[np.abs(roots.imag) > tol].real)))
        upper = upper[:0]
    quads = [(float(-2.0 * r.real), float(abs(r) ** 2)) for r in upper]
    # pair real roots of like magnitude (largest with largest)
    real = real[np.argsort(-np.abs(real))]
    for i in range(0, real.size - 1, 2):
        quads.append((float(-(real[i] + real[i + 1])), float(real[i] * real[i + 1])))
    first = float(-real[-1]) if real.size % 2 else None
    return quads, first


def _factor_params(c1: float, c2: float) -> tuple[float, float]:
    c2 = float(np.clip(c2, -1 + 1e-12, 1 - 1e-12))
    t = float(np.clip(c1 / (1.0 + c2), -1 + 1e-12, 1 - 1e-12))
    return math.atanh(c2), math.atanh(t)


def _pack(zeros: NDArray[np.complex128], poles: NDArray[np.complex128],
          gain_db: float) -> NDArray[np.float64]:
    qz, fz = _to_factors(zeros)
    qp, fp = _to_factors(poles)
    if len(qz) != len(qp) or (fz is None) != (fp is None):
        raise FitError("internal: zeros and poles do not pair into sections; try another order")
    x: list[float] = []
    for (z1, z2), (p1, p2) in zip(qz, qp, strict=True):
        x += [*_factor_params(z1, z2), *_factor_params(p1, p2)]
    if fz is not None and fp is not None:
        x += [math.atanh(np.clip(fz, -1 + 1e-12, 1 - 1e-12)),
              math.atanh(np.clip(fp, -1 + 1e-12, 1 - 1e-12))]
    return np.array(x + [gain_db])


def _n_sections(x: NDArray[np.float64]) -> tuple[int, bool]:
    n = x.size - 1
    return n // 4, bool(n % 4)


def _factors(x: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Second-order sections [1, c1z, c2z, 1, c1p, c2p] of x (gain not applied)."""
    n_sec, odd = _n_sections(x)
    q = x[:4 * n_sec].reshape(n_sec * 2, 2)
    c2 = np.tanh(q[:, 0])
    c1 = (1.0 + c2) * np.tanh(q[:, 1])
    rows = [[1.0, c1[2 * s], c2[2 * s], 1.0, c1[2 * s + 1], c2[2 * s + 1]] for s in range(n_sec)]
    if odd:
        rows.append([1.0, math.tanh(x[-3]), 0.0, 1.0, math.tanh(x[-2]), 0.0])
    sos = np.array(rows, dtype=np.float64).reshape(-1, 6)
    return sos, x[-1:]


def _unpack(x: NDArray[np.float64]) -> tuple[NDArray[np.complex128], NDArray[np.complex128],
                                             float]:
    sos, _ = _factors(x)
    n_sec, _odd = _n_sections(x)
    z: list[complex] = []
    p: list[complex] = []
    for i, row in enumerate(sos):
        n_coef = 3 if i < n_sec else 2
        z.extend(np.roots(row[:n_coef]).astype(np.complex128))
        p.extend(np.roots(row[3:3 + n_coef]).astype(np.complex128))
    return np.array(z, dtype=np.complex128), np.array(p, dtype=np.complex128), float(x[-1])


_DB = 10.0 / math.log(10.0)


def _model_db(x: NDArray[np.float64], w: NDArray[np.float64],
              jac: bool) -> tuple[NDArray[np.float64], NDArray[np.float64] | None]:
    """20·log10|H(e^{jω})| and optionally its Jacobian with respect to x.

    |1 + c1 e^{−jω} + c2 e^{−2jω}|² is evaluated as P²S² − 2U·P²S + 2U·M² + 4·c2·U² with
    P = 1 + c2, M = 1 − c2, and (S, U) = (1 + tanh β, 1 − cos ω) for factors with roots in the
    right half plane or (1 − tanh β, 1 + cos ω) otherwise, each computed without cancellation
    (expit, sin²): the plain expansion loses all precision for roots near z = ±1, which is
    where room responses put them (low-frequency roll-off, top octave).
    """
    n_sec, odd = _n_sections(x)
    u_lo = 2.0 * np.sin(0.5 * w) ** 2  # 1 − cos ω
    u_hi = 2.0 * np.cos(0.5 * w) ** 2  # 1 + cos ω
    q = x[:4 * n_sec].reshape(n_sec * 2, 2)  # rows: z0, p0, z1, p1, ...
    sign = np.tile([1.0, -1.0], n_sec)[:, None]
    alpha, beta = q[:, 0:1], q[:, 1:2]
    pp, mm = 2.0 * special.expit(2.0 * alpha), 2.0 * special.expit(-2.0 * alpha)
    c2 = np.tanh(alpha)
    right = beta < 0.0  # c1 < 0: roots in the right half plane
    ss = np.where(right, 2.0 * special.expit(2.0 * beta), 2.0 * special.expit(-2.0 * beta))
    uu = np.where(right, u_lo[None, :], u_hi[None, :])
    mag2 = pp * pp * ss * ss - 2.0 * uu * pp * pp * ss + 2.0 * uu * mm * mm + 4.0 * c2 * uu * uu
    mag2 = np.maximum(mag2, 1e-300)
    level = x[-1] + _DB * np.sum(sign * np.log(mag2), axis=0)
    if odd:
        firsts = []
        for k, sgn in ((-3, 1.0), (-2, -1.0)):
            xv = math.tanh(x[k])
            if xv <= 0.0:
                m1 = (2.0 * special.expit(2.0 * x[k])) ** 2 - 2.0 * xv * u_lo
                dm = 2.0 * (1.0 + xv) - 2.0 * u_lo
            else:
                m1 = (2.0 * special.expit(-2.0 * x[k])) ** 2 + 2.0 * xv * u_hi
                dm = -2.0 * (1.0 - xv) + 2.0 * u_hi
            m1 = np.maximum(m1, 1e-300)
            level = level + sgn * _DB * np.log(m1)
            firsts.append(sgn * _DB * dm / m1 * (1.0 - xv * xv))
    if not jac:
        return level, None
    dir_b = np.where(right, 1.0, -1.0)
    d_beta = 2.0 * pp * pp * (ss - uu) * dir_b * ss * (2.0 - ss)
    d_alpha = pp * mm * (2.0 * pp * ss * ss - 4.0 * uu * pp * ss - 4.0 * uu * mm + 4.0 * uu * uu)
    cols = np.empty((x.size, w.size))
    cols[0:4 * n_sec:2] = _DB * sign * d_alpha / mag2
    cols[1:4 * n_sec:2] = _DB * sign * d_beta / mag2
    if odd:
        cols[-3], cols[-2] = firsts
    cols[-1] = 1.0
    return level, cols.T


def _zpk_db(zeros: NDArray[np.complex128], poles: NDArray[np.complex128], k: float,
            w: NDArray[np.float64]) -> NDArray[np.float64]:
    e = np.exp(1j * w)[None, :]
    num = np.sum(np.log(np.abs(e - zeros[:, None]) ** 2 + 1e-300), axis=0)
    den = np.sum(np.log(np.abs(e - poles[:, None]) ** 2 + 1e-300), axis=0)
    return 20.0 * np.log10(abs(k) + 1e-300) + _DB * (num - den)


def _peaking_roots(f0_hz: float, gain_db: float, q: float, fs: int
                   ) -> tuple[NDArray[np.complex128], NDArray[np.complex128], float]:
    """Roots and gain (dB) of a peaking biquad (the audio-EQ-cookbook form, common practice)."""
    a_lin = 10.0 ** (gain_db / 40.0)
    w0 = 2.0 * math.pi * f0_hz / fs
    alpha = math.sin(w0) / (2.0 * q)
    b = np.array([1 + alpha * a_lin, -2 * math.cos(w0), 1 - alpha * a_lin])
    a = np.array([1 + alpha / a_lin, -2 * math.cos(w0), 1 - alpha / a_lin])
    return (np.roots(b).astype(np.complex128), np.roots(a).astype(np.complex128),
            20.0 * math.log10(b[0] / a[0]))


# ----------------------------------------------------------------------------------------------
# Warped linear prediction (start and the "warped_lp" method)


def _lp(power: NDArray[np.float64], order: int) -> NDArray[np.float64]:
    """Autocorrelation-method LP polynomial [1, a1..an] from a power spectrum on [0, π]."""
    r = np.fft.irfft(power)[:order + 1].copy()
    r[0] *= 1.0 + 1e-9  # white-noise correction: keeps the Toeplitz system positive definite
    a = linalg.solve_toeplitz(r[:order], -r[1:order + 1])
    return np.concatenate(([1.0], a))


def _poly_power(a: NDArray[np.float64], n: int) -> NDArray[np.float64]:
    """|A(e^{jω̃})|² on the n+1 points of [0, π]."""
    return np.abs(np.fft.rfft(a, 2 * n)) ** 2


def _unwarp_roots(roots: NDArray[np.complex128], lam: float) -> NDArray[np.complex128]:
    return (roots + lam) / (1.0 + lam * roots)


def _warped_power(f_grid: NDArray[np.float64], level_db: NDArray[np.float64], fs: int,
                  lam: float) -> NDArray[np.float64]:
    """Target power on a uniform grid of warped frequency ω̃ ∈ [0, π]."""
    wt = np.linspace(0.0, math.pi, N_WARPED + 1)
    w = wt + 2.0 * np.arctan(-lam * np.sin(wt) / (1.0 + lam * np.cos(wt)))
    f = np.maximum(w * fs / (2.0 * math.pi), 1e-3)
    lvl = np.interp(np.log(f), np.log(f_grid), level_db)
    return 10.0 ** ((lvl - np.max(lvl)) / 10.0)


def _warped_start(f_grid: NDArray[np.float64], level_db: NDArray[np.float64], fs: int,
                  order: int, *, zeros: bool) -> tuple[NDArray[np.complex128],
                                                       NDArray[np.complex128]]:
    lam = bark_warping_lambda(fs)
    p = _warped_power(f_grid, level_db, fs, lam)
    a = _lp(p, order)
    b = np.array([1.0])
    if zeros:
        for _ in range(N_ALTERNATIONS):
            resid = p * _poly_power(a, N_WARPED)
            b = _lp(1.0 / np.maximum(resid, 1e-30), order)
            a = _lp(p / np.maximum(_poly_power(b, N_WARPED), 1e-30), order)
        z = _unwarp_roots(np.roots(b), lam)
    else:
        z = np.full(order, lam, dtype=np.complex128)
    return z.astype(np.complex128), _unwarp_roots(np.roots(a), lam).astype(np.complex128)


# ----------------------------------------------------------------------------------------------
# Target and fit


def _rfft_response(h: NDArray[np.float64], fs: int) -> tuple[NDArray[np.float64],
                                                             NDArray[np.complex128]]:
    n_fft = 1 << int(math.ceil(math.log2(max(h.size, fs))))
    return np.fft.rfftfreq(n_fft, 1.0 / fs), np.fft.rfft(h, n_fft)


def _fit_grid(f_lo_hz: float, f_hi_hz: float, fs: int) -> tuple[NDArray[np.float64],
                                                                NDArray[np.float64]]:
    """Grid frequencies (fit band plus guards) and their weights."""
    f_band = log_grid_hz(f_lo_hz, f_hi_hz, n_per_octave=GRID_PER_OCTAVE)
    f_low = log_grid_hz(f_lo_hz / 2.0, f_lo_hz, n_per_octave=GRID_PER_OCTAVE // 4)[:-1]
    top = 0.49 * fs
    f_high = (log_grid_hz(f_hi_hz, top, n_per_octave=GRID_PER_OCTAVE // 4)[1:]
              if top > f_hi_hz * 1.01 else np.empty(0))
    f = np.concatenate((f_low, f_band, f_high))
    weight = np.concatenate((np.full(f_low.size, GUARD_WEIGHT), np.ones(f_band.size),
                             np.full(f_high.size, GUARD_WEIGHT)))
    return f, weight


def _guard(target_db: NDArray[np.float64], weight: NDArray[np.float64]) -> NDArray[np.float64]:
    """Clip guard-region targets to within GUARD_RANGE_DB of the level at the band edge."""
    band = np.flatnonzero(weight >= 1.0)
    out = target_db.copy()
    lo, hi = band[0], band[-1]
    out[:lo] = np.clip(out[:lo], out[lo] - GUARD_RANGE_DB, out[lo] + GUARD_RANGE_DB)
    out[hi + 1:] = np.clip(out[hi + 1:], out[hi] - GUARD_RANGE_DB, out[hi] + GUARD_RANGE_DB)
    return out


def _solve(x0: NDArray[np.float64], w: NDArray[np.float64], target_db: NDArray[np.float64],
           weight: NDArray[np.float64]) -> tuple[NDArray[np.float64], float]:
    """Levenberg-Marquardt on the weighted log-magnitude error; returns (x, cost)."""
    sw = np.sqrt(weight)

    def fun(x: NDArray[np.float64]) -> NDArray[np.float64]:
        return sw * (_model_db(x, w, False)[0] - target_db)

    def jac(x: NDArray[np.float64]) -> NDArray[np.float64]:
        j = _model_db(x, w, True)[1]
        assert j is not None
        return sw[:, None] * j

    cost0 = 0.5 * float(np.sum(fun(x0) ** 2))
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        res = optimize.least_squares(fun, x0, jac=jac, method="lm", xtol=1e-9, ftol=1e-9,
                                     gtol=1e-9, max_nfev=MAX_NFEV_PER_PARAM * (x0.size + 1))
    x = res.x.copy()
    x[:-1] = np.clip(x[:-1], -PARAM_LIMIT, PARAM_LIMIT)  # roots strictly inside |z| = 1
    cost = 0.5 * float(np.sum(fun(x) ** 2))
    if np.all(np.isfinite(x)) and np.isfinite(cost) and cost <= cost0:
        return x, cost
    return x0, cost0


def _x_from_roots(zeros: NDArray[np.complex128], poles: NDArray[np.complex128],
                  w: NDArray[np.float64], target_db: NDArray[np.float64],
                  weight: NDArray[np.float64]) -> NDArray[np.float64]:
    g0 = float(np.average(target_db - _zpk_db(zeros, poles, 1.0, w), weights=weight))
    x = _pack(zeros, poles, g0)
    x[:-1] = np.clip(x[:-1], -PARAM_LIMIT, PARAM_LIMIT)
    return x


def _add_section(x: NDArray[np.float64], f_grid: NDArray[np.float64], w: NDArray[np.float64],
                 target_db: NDArray[np.float64], weight: NDArray[np.float64],
                 fs: int) -> NDArray[np.float64]:
    """Append a peaking section at the largest in-band residual (its level and width)."""
    n_sec, odd = _n_sections(x)
    resid = np.where(weight >= 1.0, target_db - _model_db(x, w, False)[0], 0.0)
    i = int(np.argmax(np.abs(resid)))
    g = float(resid[i])
    same = np.sign(resid) == np.sign(g)
    big = same & (np.abs(resid) >= 0.5 * abs(g))
    lo = i
    while lo > 0 and big[lo - 1]:
        lo -= 1
    hi = i
    while hi < resid.size - 1 and big[hi + 1]:
        hi += 1
    n_oct = max(math.log2(f_grid[hi] / f_grid[lo]), 1.0 / 12.0)
    q = float(np.clip(math.sqrt(2.0 ** n_oct) / (2.0 ** n_oct - 1.0), 0.3, 30.0))
    f0 = float(np.clip(f_grid[i], 1.0, 0.49 * fs))
    zr, pr, g_sec = _peaking_roots(f0, g, q, fs)
    (z1, z2), = _to_factors(zr)[0]
    (p1, p2), = _to_factors(pr)[0]
    sec = np.array([*_factor_params(z1, z2), *_factor_params(p1, p2)])
    tail = x[4 * n_sec:-1]
    return np.concatenate((x[:4 * n_sec], sec, tail, [x[-1] + g_sec]))


def _add_first_order(x: NDArray[np.float64]) -> NDArray[np.float64]:
    """Append a first-order pole-zero pair: a mild shelf (roots 0.5 and 0.6) for LM to shape."""
    return np.concatenate((x[:-1], [math.atanh(-0.5), math.atanh(-0.6)], x[-1:]))


def _build(x: NDArray[np.float64], fs: int, lsd_db: float, method: str, f_lo_hz: float,
           f_hi_hz: float, fraction: int | None) -> Coloration:
    sos, g_db = _factors(x)
    k = 10.0 ** (float(g_db[0]) / 20.0)
    sos[0, :3] *= k
    z, p, _ = _unpack(x)
    return Coloration(sos=sos, fs=fs, order=int(p.size), zeros=_radial_clip(z),
                      poles=_radial_clip(p), gain=float(k), lsd_db=float(lsd_db), method=method,
                      f_lo_hz=f_lo_hz, f_hi_hz=f_hi_hz, smoothing_fraction=fraction)


def _radial_clip(roots: NDArray[np.complex128]) -> NDArray[np.complex128]:
    """Keep every root strictly inside the unit circle (|r| <= 1 − 1e-9)."""
    r = np.abs(roots)
    scale = np.where(r > 1.0 - 1e-9, (1.0 - 1e-9) / np.maximum(r, 1e-300), 1.0)
    return (roots * scale).astype(np.complex128)


def coloration_response(coloration: Coloration, f_hz: ArrayLike) -> NDArray[np.complex128]:
    """Complex frequency response of the coloration filter at ``f_hz`` (Hz)."""
    _, hh = signal.freqz_sos(coloration.sos, worN=np.asarray(f_hz, dtype=np.float64),
                             fs=coloration.fs)
    return hh


def _lsd_band(fs: int) -> tuple[float, float]:
    return LSD_BAND_HZ[0], min(LSD_BAND_HZ[1], 0.45 * fs)


def _taper_early(h: NDArray[np.float64], fs: int, window_s: float) -> NDArray[np.float64]:
    onset = onset_index(h, fs)  # first sample within 20 dB of the peak
    n_win = max(8, int(round(window_s * fs)))
    end = min(h.size, onset + n_win)
    seg = h[:end].copy()
    n_fade = max(2, (end - onset) // 4)
    seg[end - n_fade:] *= np.cos(0.5 * math.pi * np.arange(1, n_fade + 1) / n_fade) ** 2
    return seg


def fit_coloration(h: ArrayLike, fs: int, *, order: int | None = None,
                   lsd_target_db: float = 1.0, max_order: int = 12,
                   window_s: float | None = None, smoothing_fraction: int | None = 3,
                   f_lo_hz: float = 20.0, f_hi_hz: float | None = None,
                   method: Method = "lm") -> Coloration:
    """Fit a stable, minimum-phase pole-zero filter to the smoothed magnitude of ``h``.

    Parameters
    ----------
    h : array_like, shape (n,)
        Impulse response at ``fs``.
    fs : int, Hz
        Sample rate.
    order : int >= 1, optional
        Number of poles (and zeros). If omitted, the smallest even order 2, 4, ... up to
        ``max_order`` whose log-spectral distance is <= ``lsd_target_db`` is chosen; if none
        reaches it, the ``max_order`` fit is returned (check ``lsd_db``).
    lsd_target_db : float, > 0, dB
        Error target of the automatic order (third octaves 63 Hz - 16 kHz).
    max_order : int, >= 2
        Largest order tried automatically.
    window_s : float, > 0, s, optional
        Fit only the early part: from the start of ``h`` to ``window_s`` after the onset (first
        sample within 20 dB of the peak), the last quarter faded with a half Hann window.
    smoothing_fraction : int >= 1 or None
        1/N-octave power smoothing of the target; ``None`` fits the raw magnitude.
    f_lo_hz, f_hi_hz : float, Hz
        Fit band; ``f_hi_hz`` defaults to min(20 kHz, 0.45·fs).
    method : {"lm", "warped_lp"}
        Pole-zero log-magnitude fit (default) or all-pole warped LP (see the module notes).

    Returns
    -------
    Coloration

    Raises
    ------
    ParameterError
        If an argument is out of range or ``h`` is silent.
    FitError
        If the fit produced no finite filter.
    """
    fs = check_fs(fs)
    h = check_signal(h, "h", ndim=(1,))
    if method not in METHODS:
        raise ParameterError(f"method={method!r} is not one of {', '.join(METHODS)}; pick one")
    check_positive(lsd_target_db, "lsd_target_db", unit="dB")
    f_lo_hz = check_positive(f_lo_hz, "f_lo_hz", unit="Hz")
    f_hi_hz = min(20000.0, 0.45 * fs) if f_hi_hz is None else check_positive(
        f_hi_hz, "f_hi_hz", unit="Hz")
    if not f_hi_hz <= 0.49 * fs or not f_lo_hz * 2.0 <= f_hi_hz:
        raise ParameterError(
            f"fit band {f_lo_hz:g}-{f_hi_hz:g} Hz must span at least an octave below "
            f"0.49·fs = {0.49 * fs:g} Hz; widen it or lower f_hi_hz")
    if order is not None and (isinstance(order, bool) or not isinstance(order, (int, np.integer))
                              or not 1 <= order <= 64):
        raise ParameterError(f"order={order!r} must be a whole number from 1 to 64")
    if isinstance(max_order, bool) or not isinstance(max_order, (int, np.integer)) \
            or not 2 <= max_order <= 64:
        raise ParameterError(f"max_order={max_order!r} must be a whole number from 2 to 64")
    if not np.any(h):
        raise ParameterError("h is all zeros; give a measured impulse response")
    if window_s is not None:
        h = _taper_early(h, fs, check_positive(window_s, "window_s", unit="s"))

    f_fft, spectrum = _rfft_response(h, fs)
    f_grid, weight = _fit_grid(f_lo_hz, f_hi_hz, fs)
    p_src = smooth_power(f_fft[1:], np.abs(spectrum[1:]) ** 2, f_grid, fraction=smoothing_fraction)
    target_db = _guard(10.0 * np.log10(np.maximum(p_src, np.max(p_src) * 1e-20)), weight)
    w = 2.0 * math.pi * f_grid / fs
    lsd_lo, lsd_hi = _lsd_band(fs)
    f_eval = f_fft[1:]
    h_eval = spectrum[1:]

    def finish(x: NDArray[np.float64]) -> Coloration:
        col = _build(x, fs, 0.0, method, f_lo_hz, f_hi_hz, smoothing_fraction)
        resp = coloration_response(col, f_eval)
        if not np.all(np.isfinite(resp)):
            raise FitError(f"the order-{col.order} fit produced a non-finite response; "
                           "try another order")
        lsd = log_spectral_distance(h_eval, resp, f_eval, f_lo_hz=lsd_lo, f_hi_hz=lsd_hi)
        return dataclasses.replace(col, lsd_db=float(lsd))

    if method == "warped_lp":
        def fit_wlp(n: int) -> Coloration:
            z0, p0 = _warped_start(f_grid, target_db, fs, n, zeros=False)
            return finish(_x_from_roots(z0, p0, w, target_db, weight))
        if order is not None:
            return fit_wlp(int(order))
        for n in range(2, int(max_order) + 1, 2):
            col = fit_wlp(n)
            if col.lsd_db <= lsd_target_db:
                break
        return col

    if order is None:
        col = None
        for _, x in _lm_path(f_grid, w, target_db, weight, fs, int(max_order)):
            col = finish(x)
            if col.lsd_db <= lsd_target_db:
                break
        assert col is not None
        return col
    return finish(_lm_fit(f_grid, w, target_db, weight, fs, int(order)))


def _lm_path(f_grid: NDArray[np.float64], w: NDArray[np.float64], target_db: NDArray[np.float64],
             weight: NDArray[np.float64], fs: int, max_order: int
             ) -> Iterator[tuple[int, NDArray[np.float64]]]:
    """Yield (order, x) for orders 2, 4, ... max_order.

    Two starts per order, the better one kept: the previous order's fit plus a peaking section
    at the largest residual, and the alternating warped LP of that order.
    """
    x = np.array([float(np.average(target_db, weights=weight))])
    for n_sec in range(1, max_order // 2 + 1):
        x_a, cost_a = _solve(_add_section(x, f_grid, w, target_db, weight, fs), w, target_db,
                             weight)
        z0, p0 = _warped_start(f_grid, target_db, fs, 2 * n_sec, zeros=True)
        x_b, cost_b = _solve(_x_from_roots(z0, p0, w, target_db, weight), w, target_db, weight)
        x = x_b if cost_b < cost_a else x_a
        yield 2 * n_sec, x


def _lm_fit(f_grid: NDArray[np.float64], w: NDArray[np.float64], target_db: NDArray[np.float64],
            weight: NDArray[np.float64], fs: int, order: int) -> NDArray[np.float64]:
    x = np.array([float(np.average(target_db, weights=weight))])
    for _, x_n in _lm_path(f_grid, w, target_db, weight, fs, order - order % 2):
        x = x_n
    if order % 2:
        x, _ = _solve(_add_first_order(x), w, target_db, weight)
    return x


def remap_coloration(coloration: Coloration, fs: int) -> Coloration:
    """The same coloration re-fitted at another sample rate (see the module notes).

    The order of the result may exceed the original's by the number of negative real roots
    when ``fs`` is higher than the fitting rate.

    ``lsd_db`` of the result is the log-spectral distance to the original filter over the
    third octaves 63 Hz - 16 kHz common to both rates (unsmoothed, 48 points per octave).
    """
    fs = check_fs(fs)
    if fs == coloration.fs:
        return coloration
    c = coloration
    f_hi = min(c.f_hi_hz, 0.45 * c.fs, 0.45 * fs)
    f_lo = min(c.f_lo_hz, f_hi / 2.0)
    f_grid, weight = _fit_grid(f_lo, f_hi, fs)
    source = np.minimum(f_grid, 0.49 * c.fs)  # above the old band: held at its top
    target_db = _guard(20.0 * np.log10(np.abs(coloration_response(c, source)) + 1e-300), weight)
    ratio = c.fs / fs
    z0, p0 = _balance(_matched_z(c.zeros, ratio), _matched_z(c.poles, ratio))
    w = 2.0 * math.pi * f_grid / fs
    x, _ = _solve(_x_from_roots(z0, p0, w, target_db, weight), w, target_db, weight)
    new = _build(x, fs, 0.0, "remap", f_lo, f_hi, c.smoothing_fraction)
    f_cmp = log_grid_hz(f_lo, f_hi, n_per_octave=GRID_PER_OCTAVE)
    lo, hi = _lsd_band(min(fs, c.fs))
    lsd = log_spectral_distance(coloration_response(c, f_cmp), coloration_response(new, f_cmp),
                                f_cmp, f_lo_hz=lo, f_hi_hz=hi, fraction=None)
    return dataclasses.replace(new, lsd_db=float(lsd))


def _matched_z(roots: NDArray[np.complex128], ratio: float) -> NDArray[np.complex128]:
    """z' = exp(ratio·ln z) for complex and positive roots (s = fs·ln z kept).

    A negative real root r (a root "at the old Nyquist frequency") has no real image: when
    the new rate is higher (ratio < 1) it becomes the pair |r|^ratio·e^(±jπ·ratio) at the
    same frequency in Hz; when it is lower it stays real, −|r|^ratio.
    """
    roots = np.asarray(roots, dtype=np.complex128)
    real = np.abs(roots.imag) <= 1e-9
    neg_real = real & (roots.real < 0)
    kept = roots[~neg_real]
    # a root at the origin stays there (s = −∞ at every rate); log(0) would warn and give NaN
    out = np.zeros(kept.size, dtype=np.complex128)
    nz = kept != 0
    out[nz] = np.exp(ratio * np.log(kept[nz]))
    out[real[~neg_real]] = out[real[~neg_real]].real
    mag = np.abs(roots[neg_real]) ** ratio
    if ratio < 1.0:
        extra = np.concatenate((mag * np.exp(1j * math.pi * ratio),
                                mag * np.exp(-1j * math.pi * ratio)))
    else:
        extra = -mag + 0j
    return _radial_clip(np.concatenate((out, extra)))


def _balance(zeros: NDArray[np.complex128], poles: NDArray[np.complex128]
             ) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
    """Pad the shorter root list with roots at the origin (|e^{jω} − 0| = 1: no effect on the
    magnitude) so that zeros and poles pair into sections."""
    n = max(zeros.size, poles.size)
    pad = np.zeros(1, dtype=np.complex128)
    return (np.concatenate((zeros, np.repeat(pad, n - zeros.size))),
            np.concatenate((poles, np.repeat(pad, n - poles.size))))


def coloration_sos(coloration: Coloration, fs: int) -> NDArray[np.float64]:
    """Second-order sections of the coloration at sample rate ``fs``.

    At the fitting rate this is the stored ``sos`` (a copy); at any other rate the filter is
    re-fitted by :func:`remap_coloration` (remembered for the last few colorations and rates,
    so rendering one model repeatedly at a foreign rate does not re-fit every time).
    """
    return np.array(_remapped_sos(coloration, int(fs)))


@functools.lru_cache(maxsize=16)
def _remapped_sos(coloration: Coloration, fs: int) -> NDArray[np.float64]:
    # Coloration is eq=False: cached by identity (it is frozen, so that is safe)
    sos = np.array(remap_coloration(coloration, fs).sos)
    sos.setflags(write=False)
    return sos
