"""Distance and direction: the gain and first-order filters a game applies to a moving source.

A game attenuates a source with a gain and first-order filters, K · b/(s+b) · s/(s+c), whose
values follow its distance and its angle, and sends more of it to the reverb as it moves away.
This module measures those curves from impulse responses taken at several positions.

Per position (:func:`position_transfer`), relative to a reference position: the power spectra
of a window around each direct sound (or of the whole response, to include the room) are
smoothed in fractional octaves and divided; the ratio in dB is fitted by robust least squares
(scipy.optimize.least_squares, soft-L1 loss, modeling.md §2.2) with

    M(f) = g − 10·lg(1 + (f/f_L)²) − 10·lg(1 + (f_H/f)²),

a gain, a first-order low-pass and a first-order high-pass corner. A corner that the fit puts
outside the analysed band, or whose removal changes the fit by less than
:data:`CORNER_MIN_EFFECT_DB`, is "not identified" (None with the reason), never a number.
Beyond the critical distance the window also holds early room sound, which raises the gain;
:func:`room_in_window_db` sizes it per position and the series notes where it exceeds
:data:`ROOM_IN_WINDOW_NOTE_DB` (a shorter window is the remedy).

Over a distance series (:func:`distance_series`):

* the direct gain against the clamped inverse-distance law of interactive audio (modeling.md
  §8.1), gain = d_ref/(d_ref + R·(d − d_ref)), R fitted with d_ref the reference position's
  distance; and the power law gain = (d/d_ref)^(−n), whose slope is −6.02·n dB per doubling
  (§8.2); the one that fits better is named;
* the reverberant level (energy after the direct window, noise-compensated) against distance:
  constant in classical diffuse-field theory, falling slowly in Barron's revised theory; its
  rolloff factor is the I3DL2 RoomRolloffFactor;
* the direct-to-reverberant ratio, a straight line in lg d, and the critical distance where it
  crosses 0 dB; the wet fraction 1/(1 + 10^(DRR/10)) a reverb send can follow;
* the fitted low-pass corner beside the one that ISO 9613-1 air absorption alone gives over the
  same extra path (:func:`air_absorption_db_per_m`).

Over an angle series at one distance (:func:`angle_series`): the muffling per angle (gain and
low-pass corner, or a high shelf when that fits better), and the source's directivity index per
octave, DI = 10·lg(2 / ∫₀^π (I(θ)/I(0))·sin θ dθ), taking the source as symmetric about its axis.

References
----------
.. [1] ISO 9613-1:1993, Acoustics - Attenuation of sound during propagation outdoors - Part 1:
   Calculation of the absorption of sound by the atmosphere (measurement.md §5).
.. [2] M. Barron, L.-J. Lee, "Energy relations in concert auditoriums. I", J. Acoust. Soc. Am.
   84(2), 618-628, 1988 (the revised theory; citation from memory).
.. [3] IA-SIG, Interactive 3D Audio Rendering Guidelines, Level 2.0, 1999 (RoomRolloffFactor).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from measure._validate import check_fs, check_positive, check_signal
from measure.errors import FitError, ParameterError

__all__ = [
    "air_absorption_db_per_m",
    "first_order_ba",
    "TransferFit",
    "ShelfFit",
    "fit_transfer",
    "fit_shelf",
    "direct_spectrum",
    "Position",
    "position_transfer",
    "room_in_window_db",
    "DistanceLaw",
    "DistanceSeries",
    "distance_series",
    "AngleSeries",
    "angle_series",
    "inverse_distance_gain_db",
    "expected_lowpass_hz",
    "position_filters",
    "Attenuation",
    "analyze_series",
    "DEFAULT_WINDOW_S",
    "DEFAULT_FRACTION",
]

#: Reference pressure, temperature and triple point of ISO 9613-1:1993 [1].
P_REF_KPA = 101.325
T_REF_K = 293.15
T_TRIPLE_K = 273.16
#: Direct-sound window after the arrival, s (a few ms: before the first reflections of an
#: ordinary room; common practice). Its length sets the lowest frequency analysed: 2/length.
DEFAULT_WINDOW_S = 0.004
#: The window starts this long before the direct sound's peak (a band-limited arrival rises
#: over a fraction of a millisecond; common practice).
WINDOW_PRE_S = 0.0005
#: A position whose :func:`room_in_window_db` exceeds this gets a note, dB.
ROOM_IN_WINDOW_NOTE_DB = 0.5
#: Fractional-octave smoothing of the spectra before they are divided (modeling.md §2.2: 1/6
#: or 1/3 octave).
DEFAULT_FRACTION = 6
#: A corner counts as identified when leaving it out worsens the fit's RMS by this much, dB
#: (modeling.md §2.2: a corner outside the band has a Jacobian column near zero; common
#: practice for the threshold).
CORNER_MIN_EFFECT_DB = 0.1
#: Direct-to-reverberant split: the direct sound is the response up to this long after its
#: peak (measure.parameters uses the same 2.5 ms; common practice).
DRR_DIRECT_S = 0.0025


# ---------------------------------------------------------------------------------------------
# ISO 9613-1 air absorption

def air_absorption_db_per_m(f_hz: np.ndarray | float, *, temperature_c: float = 20.0,
                            humidity_percent: float = 50.0, pressure_kpa: float = P_REF_KPA
                            ) -> np.ndarray:
    """Atmospheric absorption coefficient α (dB per metre) of ISO 9613-1:1993 [1]_.

    Parameters
    ----------
    f_hz : float or array_like, > 0, Hz
    temperature_c : float, °C
    humidity_percent : float, 0..100, %
        Relative humidity.
    pressure_kpa : float, > 0, kPa

    Returns
    -------
    ndarray
        α in dB/m; the attenuation over a path of d metres is α·d.

    Notes
    -----
    With h the molar concentration of water vapour (%) from the saturation pressure
    p_sat/p_r = 10^C, C = −6.8346·(T01/T)^1.261 + 4.6151, and the relaxation frequencies
    f_rO = (p_a/p_r)(24 + 4.04e4·h·(0.02 + h)/(0.391 + h)),
    f_rN = (p_a/p_r)(T/T0)^(−1/2)(9 + 280·h·exp(−4.170[(T/T0)^(−1/3) − 1])):
    α = 8.686 f² {1.84e−11 (p_a/p_r)^(−1)(T/T0)^(1/2) + (T/T0)^(−5/2)[0.01275 e^(−2239.1/T) /
    (f_rO + f²/f_rO) + 0.1068 e^(−3352.0/T) / (f_rN + f²/f_rN)]} (measurement.md §5).

    Examples
    --------
    >>> round(float(air_absorption_db_per_m(1000.0)) * 1000, 2)  # dB/km, ISO 9613-1 Table 1
    4.66
    """
    f = np.asarray(f_hz, dtype=np.float64)
    if not np.all(f > 0):
        raise ParameterError("frequencies must be positive for the air absorption")
    if not (0.0 <= humidity_percent <= 100.0):
        raise ParameterError(f"humidity {humidity_percent!r} % must lie in 0..100 %")
    check_positive(pressure_kpa, "pressure", unit="kPa")
    t = temperature_c + 273.15
    if not (t > 0):
        raise ParameterError(f"temperature {temperature_c!r} °C is below absolute zero")
    pa = pressure_kpa / P_REF_KPA
    c = -6.8346 * (T_TRIPLE_K / t) ** 1.261 + 4.6151
    h = humidity_percent * 10.0 ** c / pa
    fr_o = pa * (24.0 + 4.04e4 * h * (0.02 + h) / (0.391 + h))
    fr_n = pa * (t / T_REF_K) ** -0.5 * (9.0 + 280.0 * h * math.exp(
        -4.170 * ((t / T_REF_K) ** (-1.0 / 3.0) - 1.0)))
    return 8.686 * f * f * (
        1.84e-11 / pa * (t / T_REF_K) ** 0.5
        + (t / T_REF_K) ** -2.5 * (0.01275 * math.exp(-2239.1 / t) / (fr_o + f * f / fr_o)
                                   + 0.1068 * math.exp(-3352.0 / t) / (fr_n + f * f / fr_n)))


def speed_of_sound_m_s(temperature_c: float = 20.0) -> float:
    """c = 331.3·√(1 + θ/273.15) m/s, θ in °C (the ideal-gas law; common practice)."""
    return 331.3 * math.sqrt(1.0 + temperature_c / 273.15)


# ---------------------------------------------------------------------------------------------
# First-order filters

def first_order_ba(corner_hz: float, fs: int, kind: str) -> tuple[np.ndarray, np.ndarray]:
    """Digital first-order low-pass a/(s+a) or high-pass s/(s+c) by the bilinear transform with
    prewarping: the corner lands exactly on ``corner_hz`` (−3.01 dB there).

    With K = tan(π·f_c/fs) (modeling.md §2.1, derived there): H_L(z) = K/(1+K)·(1 + z⁻¹)/(1 +
    ((K−1)/(K+1))·z⁻¹) and H_H(z) = 1/(1+K)·(1 − z⁻¹)/(1 + ((K−1)/(K+1))·z⁻¹), equal to
    ``scipy.signal.butter(1, corner_hz, btype, fs=fs)``.

    Returns
    -------
    (b, a) : ndarray, ndarray
        Numerator and denominator, ``a[0] == 1``.

    Examples
    --------
    >>> b, a = first_order_ba(1000.0, 48000, "lowpass")
    >>> [round(float(v), 6) for v in b], [round(float(v), 6) for v in a]
    ([0.061512, 0.061512], [1.0, -0.876976])
    """
    fs = check_fs(fs)
    check_positive(corner_hz, "corner", unit="Hz")
    if not corner_hz < fs / 2:
        raise ParameterError(f"the corner {corner_hz:g} Hz must be below Nyquist ({fs / 2:g} Hz)")
    k = math.tan(math.pi * corner_hz / fs)
    a = np.array([1.0, (k - 1.0) / (k + 1.0)])
    if kind == "lowpass":
        b = np.array([k, k]) / (1.0 + k)
    elif kind == "highpass":
        b = np.array([1.0, -1.0]) / (1.0 + k)
    else:
        raise ParameterError(f"kind {kind!r} is not one of lowpass, highpass")
    return b, a


# ---------------------------------------------------------------------------------------------
# The spectrum of the direct sound, and the fit of a ratio

def _direct_window(h: np.ndarray, fs: int, window_s: float
                   ) -> tuple[int, int, int, np.ndarray]:
    """(peak, start, end, taper) of the direct-sound window of ``h``: from
    :data:`WINDOW_PRE_S` before the strongest sample to ``window_s`` after it, with a half-Hann
    taper of 0.5 ms at each end (common practice)."""
    p = int(np.argmax(np.abs(h)))
    a = max(p - int(round(WINDOW_PRE_S * fs)), 0)
    b = min(p + int(round(window_s * fs)), h.size)
    w = np.ones(b - a)
    nt = max(int(round(0.0005 * fs)), 1)
    if w.size > 2 * nt:
        ramp = 0.5 - 0.5 * np.cos(np.pi * (np.arange(nt) + 0.5) / nt)
        w[:nt] *= ramp
        w[-nt:] *= ramp[::-1]
    return p, a, b, w


def _fft_length(n_samples: int, fs: int, f_lo_hz: float) -> int:
    """A power of two holding ``n_samples`` and resolving ``f_lo_hz`` (2 bins per its period),
    from 1024 to 2^22."""
    n = 1 << int(math.ceil(math.log2(max(n_samples, 2 * int(fs / max(f_lo_hz, 1.0))))))
    return min(max(n, 1024), 1 << 22)


def direct_spectrum(h: np.ndarray, fs: int, f_grid_hz: np.ndarray, *,
                    window_s: float | None = DEFAULT_WINDOW_S,
                    fraction: int | None = DEFAULT_FRACTION) -> np.ndarray:
    """Fractional-octave smoothed power spectrum of the direct sound of ``h`` (or of all of it).

    The direct sound is the strongest sample's neighbourhood: from :data:`WINDOW_PRE_S` before
    it to ``window_s`` after it, a half-Hann taper of 0.5 ms at each end. ``window_s`` None
    takes the whole response (the room included). Power smoothing as in
    :func:`measure.model._smoothing.smooth_power`.
    """
    from measure.model._smoothing import smooth_power

    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    if window_s is None:
        seg = h
    else:
        check_positive(window_s, "window", unit="s")
        _, a, b, w = _direct_window(h, fs, window_s)
        seg = h[a:b] * w
    n = _fft_length(seg.size, fs, f_grid_hz[0])
    power = np.abs(np.fft.rfft(seg, n)) ** 2
    f = np.fft.rfftfreq(n, 1.0 / fs)
    return smooth_power(f[1:], power[1:], f_grid_hz, fraction=fraction)


@dataclass(frozen=True, slots=True)
class TransferFit:
    """Gain and first-order corners fitted to a level ratio in dB.

    Attributes
    ----------
    gain_db : float
        The ratio's level in the pass band.
    lowpass_hz, highpass_hz : float or None
        First-order corners; None when not identified (``reasons`` says why).
    rms_db : float
        RMS residual of the fit, dB.
    f_lo_hz, f_hi_hz : float
        The band the fit was made over.
    reasons : tuple of str
    """

    gain_db: float
    lowpass_hz: float | None
    highpass_hz: float | None
    rms_db: float
    f_lo_hz: float
    f_hi_hz: float
    reasons: tuple[str, ...] = ()

    def model_db(self, f_hz: np.ndarray) -> np.ndarray:
        """The fitted curve M(f) (module notes)."""
        f = np.asarray(f_hz, dtype=np.float64)
        out = np.full(f.shape, self.gain_db)
        if self.lowpass_hz is not None:
            out -= 10.0 * np.log10(1.0 + (f / self.lowpass_hz) ** 2)
        if self.highpass_hz is not None:
            out -= 10.0 * np.log10(1.0 + (self.highpass_hz / f) ** 2)
        return out

    def to_dict(self) -> dict[str, Any]:
        return {"gain_db": self.gain_db, "lowpass_hz": self.lowpass_hz,
                "highpass_hz": self.highpass_hz, "rms_db": self.rms_db,
                "band_hz": [self.f_lo_hz, self.f_hi_hz], "reasons": list(self.reasons)}


def _model(theta: np.ndarray, lf: np.ndarray, use_lp: bool, use_hp: bool) -> np.ndarray:
    out = np.full(lf.shape, theta[0])
    i = 1
    if use_lp:
        out = out - 10.0 * np.log10(1.0 + np.exp(2.0 * (lf - theta[i])))
        i += 1
    if use_hp:
        out = out - 10.0 * np.log10(1.0 + np.exp(2.0 * (theta[i] - lf)))
    return out


def _solve(f: np.ndarray, r: np.ndarray, use_lp: bool, use_hp: bool
           ) -> tuple[np.ndarray, float]:
    """Robust fit of the model with the chosen corners; (θ, RMS dB). θ = (g, ln f_L, ln f_H)."""
    from scipy.optimize import least_squares

    lf = np.log(f)
    lo, hi = lf[0] - math.log(8.0), lf[-1] + math.log(8.0)  # corners may sit beyond the band
    med = float(np.median(r))
    x0, lb, ub = [med], [-np.inf], [np.inf]
    if use_lp:
        below = np.nonzero(r < med - 3.0)[0]
        up = below[below > r.size // 2]
        x0.append(lf[up[0]] if up.size else hi - 1.0)
        lb.append(lo)
        ub.append(hi)
    if use_hp:
        below = np.nonzero(r < med - 3.0)[0]
        dn = below[below < r.size // 2]
        x0.append(lf[dn[-1]] if dn.size else lo + 1.0)
        lb.append(lo)
        ub.append(hi)
    x0 = np.clip(x0, np.array(lb) + 1e-9, np.array(ub) - 1e-9)
    res = least_squares(lambda th: _model(th, lf, use_lp, use_hp) - r, x0, bounds=(lb, ub),
                        loss="soft_l1", f_scale=1.0)
    resid = _model(res.x, lf, use_lp, use_hp) - r
    return res.x, float(np.sqrt(np.mean(resid ** 2)))


def fit_transfer(f_hz: np.ndarray, ratio_db: np.ndarray) -> TransferFit:
    """Fit gain + first-order low-pass + first-order high-pass to ``ratio_db`` (module notes).

    Each corner is kept only when it lies inside the band and leaving it out worsens the RMS
    by at least :data:`CORNER_MIN_EFFECT_DB`.

    Raises
    ------
    FitError
        If fewer than 8 finite points are given.
    """
    f = np.asarray(f_hz, dtype=np.float64)
    r = np.asarray(ratio_db, dtype=np.float64)
    ok = np.isfinite(r) & (f > 0)
    f, r = f[ok], r[ok]
    if f.size < 8:
        raise FitError("too few frequencies to fit a transfer function (at least 8 needed); "
                       "widen the analysed band or use a longer window")
    theta, rms = _solve(f, r, True, True)
    reasons = []
    lp, hp = math.exp(theta[1]), math.exp(theta[2])
    keep_lp = f[0] < lp < f[-1]
    keep_hp = f[0] < hp < f[-1]
    if keep_lp:
        _, rms_no = _solve(f, r, False, True)
        keep_lp = rms_no - rms >= CORNER_MIN_EFFECT_DB
    if keep_hp:
        _, rms_no = _solve(f, r, True, False)
        keep_hp = rms_no - rms >= CORNER_MIN_EFFECT_DB
    if not keep_lp:
        reasons.append(f"low-pass corner not identified: the ratio does not fall off within "
                       f"{f[0]:.0f}-{f[-1]:.0f} Hz")
    if not keep_hp:
        reasons.append(f"high-pass corner not identified: the ratio does not fall off within "
                       f"{f[0]:.0f}-{f[-1]:.0f} Hz")
    theta, rms = _solve(f, r, keep_lp, keep_hp)
    i = 1
    lp_v = hp_v = None
    if keep_lp:
        lp_v = math.exp(theta[i])
        i += 1
    if keep_hp:
        hp_v = math.exp(theta[i])
    return TransferFit(float(theta[0]), lp_v, hp_v, rms, float(f[0]), float(f[-1]),
                       tuple(reasons))


@dataclass(frozen=True, slots=True)
class ShelfFit:
    """A high shelf fitted to a level ratio: g below, g + shelf_db above, a first-order shelf
    (the ratio of a pole and a zero) with its transition centred on ``corner_hz``."""

    gain_db: float
    shelf_db: float
    corner_hz: float
    rms_db: float

    def model_db(self, f_hz: np.ndarray) -> np.ndarray:
        f = np.asarray(f_hz, dtype=np.float64)
        k = 10.0 ** (self.shelf_db / 20.0)
        x = f / self.corner_hz
        # first-order shelf H(s) = (s·√k + a)/(s/√k + a) normalised: |H|² = (k x² + 1)/(x²/k + 1)
        return self.gain_db + 10.0 * np.log10((k * x * x + 1.0) / (x * x / k + 1.0))

    def to_dict(self) -> dict[str, Any]:
        return {"gain_db": self.gain_db, "shelf_db": self.shelf_db,
                "corner_hz": self.corner_hz, "rms_db": self.rms_db}


def fit_shelf(f_hz: np.ndarray, ratio_db: np.ndarray) -> ShelfFit:
    """Robust fit of a first-order high shelf (gain, shelf gain, transition frequency)."""
    from scipy.optimize import least_squares

    f = np.asarray(f_hz, dtype=np.float64)
    r = np.asarray(ratio_db, dtype=np.float64)
    lf = np.log(f)

    def model(th: np.ndarray) -> np.ndarray:
        return ShelfFit(th[0], th[1], math.exp(th[2]), 0.0).model_db(f)

    lo_r, hi_r = float(np.median(r[: r.size // 4 + 1])), float(np.median(r[-(r.size // 4 + 1):]))
    x0 = [lo_r, float(np.clip(hi_r - lo_r, -59.0, 59.0)), float(np.median(lf))]
    res = least_squares(lambda th: model(th) - r, x0, loss="soft_l1", f_scale=1.0,
                        bounds=([-np.inf, -60.0, lf[0] - 2.0], [np.inf, 60.0, lf[-1] + 2.0]))
    rms = float(np.sqrt(np.mean((model(res.x) - r) ** 2)))
    return ShelfFit(float(res.x[0]), float(res.x[1]), float(math.exp(res.x[2])), rms)


# ---------------------------------------------------------------------------------------------
# A position

@dataclass(frozen=True, slots=True)
class Position:
    """One position's figures.

    Attributes
    ----------
    label : str
    distance_m, angle_deg : float or None
    transfer : TransferFit
        Relative to the reference position.
    shelf : ShelfFit or None
        The high-shelf alternative (angle series).
    direct_db, reverberant_db : float or None
        Energy of the direct sound (the first :data:`DRR_DIRECT_S` after its peak) and of the
        rest of the response (noise-compensated), dB re full scale·s, in the analysed band.
    drr_db : float or None
        Their difference.
    octave_direct_db : dict
        Octave label → direct-sound energy in that octave, dB (for directivity).
    room_in_window_db : float or None
        About how much room sound inside the direct window raises the gain, dB
        (:func:`room_in_window_db`); None for the whole response.
    """

    label: str
    distance_m: float | None
    angle_deg: float | None
    transfer: TransferFit
    shelf: ShelfFit | None
    direct_db: float | None
    reverberant_db: float | None
    drr_db: float | None
    octave_direct_db: dict[str, float] = field(default_factory=dict)
    room_in_window_db: float | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"label": self.label, "distance_m": self.distance_m, "angle_deg": self.angle_deg,
                "gain_db": self.transfer.gain_db, "lowpass_hz": self.transfer.lowpass_hz,
                "highpass_hz": self.transfer.highpass_hz, "drr_db": self.drr_db,
                "direct_db": self.direct_db, "reverberant_db": self.reverberant_db,
                "room_in_window_db": self.room_in_window_db,
                "fit": self.transfer.to_dict(),
                "shelf": None if self.shelf is None else self.shelf.to_dict()}


def _band_limited_energies(h: np.ndarray, fs: int, f_lo: float, f_hi: float
                           ) -> tuple[float | None, float | None]:
    """(direct, reverberant) energies of ``h`` in [f_lo, f_hi] (zero-phase FFT band limit),
    the reverberant part noise-compensated by Lundeby's method (measure.decay.lundeby)."""
    from measure.decay import lundeby

    n = h.size
    m = 1 << int(math.ceil(math.log2(2 * n)))
    H = np.fft.rfft(h, m)
    f = np.fft.rfftfreq(m, 1.0 / fs)
    H[(f < f_lo) | (f > f_hi)] = 0.0
    hb = np.fft.irfft(H, m)[:n]
    p = int(np.argmax(np.abs(hb)))
    end = min(p + int(round(DRR_DIRECT_S * fs)), n)
    e_d = float(np.sum(hb[max(p - int(round(WINDOW_PRE_S * fs)), 0):end] ** 2))
    rest = hb[end:]
    if rest.size < int(0.05 * fs):
        return (_db(e_d), None)
    nf = lundeby(rest, fs)
    if nf.ok:
        noise = nf.noise_power if nf.noise_floor_found else 0.0
        e_r = float(np.sum(rest[: nf.truncation_index] ** 2)) - noise * nf.truncation_index \
            + nf.compensation
    else:
        e_r = float(np.sum(rest ** 2))
    return _db(e_d), (_db(e_r) if e_r > 0 else None)


def _db(e: float) -> float | None:
    return 10.0 * math.log10(e) if e > 0 else None


#: Octave centres used for directivity (nominal labels, exact base-10 centres).
_OCTAVES = (("125", 125.89), ("250", 251.19), ("500", 501.19), ("1k", 1000.0),
            ("2k", 1995.26), ("4k", 3981.07), ("8k", 7943.28))


def position_transfer(h: np.ndarray, h_ref: np.ndarray, fs: int, *, label: str = "",
                      distance_m: float | None = None, angle_deg: float | None = None,
                      window_s: float | None = DEFAULT_WINDOW_S,
                      fraction: int | None = DEFAULT_FRACTION,
                      band_hz: tuple[float, float] | None = None,
                      with_shelf: bool = False) -> Position:
    """The figures of position ``h`` relative to the reference position ``h_ref`` (module notes).

    ``band_hz`` defaults to the band the window resolves: from 2/window (100 Hz for the whole
    response) to 0.45·fs, within 20 kHz.
    """
    fs = check_fs(fs)
    f_lo, f_hi = band_hz if band_hz is not None else _default_band(window_s, fs)
    if band_hz is not None:
        lowest = _default_band(window_s, fs)[0]
        if not (0 < f_lo < f_hi <= 0.45 * fs):
            raise ParameterError(f"the band {f_lo:g}-{f_hi:g} Hz must lie below 0.45 times the "
                                 f"sample rate ({0.45 * fs:g} Hz); give a lower HI")
        if window_s is not None and f_lo < lowest:
            raise ParameterError(f"the band starts at {f_lo:g} Hz but the direct window "
                                 f"resolves from {lowest:g} Hz (2/window); raise LO or give a "
                                 "longer --window")
    grid = np.geomspace(f_lo, f_hi, max(int(24 * math.log2(f_hi / f_lo)), 16))
    s = direct_spectrum(h, fs, grid, window_s=window_s, fraction=fraction)
    s_ref = direct_spectrum(h_ref, fs, grid, window_s=window_s, fraction=fraction)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = 10.0 * np.log10(s / s_ref)
    tf = fit_transfer(grid, ratio)
    shelf = fit_shelf(grid[np.isfinite(ratio)], ratio[np.isfinite(ratio)]) if with_shelf else None
    e_d, e_r = _band_limited_energies(h, fs, max(f_lo, 20.0), f_hi)
    octave_direct = {}
    for lab, fc in _OCTAVES:
        if fc * math.sqrt(2.0) < 0.49 * fs:
            d_b = _octave_direct_db(h, fs, fc / math.sqrt(2.0), fc * math.sqrt(2.0),
                                    DEFAULT_WINDOW_S if window_s is None else window_s)
            if d_b is not None:
                octave_direct[lab] = d_b
    drr = None if e_d is None or e_r is None else e_d - e_r
    room = None if window_s is None else room_in_window_db(h, fs, grid, window_s=window_s,
                                                           fraction=fraction)
    return Position(label, distance_m, angle_deg, tf, shelf, e_d, e_r, drr, octave_direct, room)


def room_in_window_db(h: np.ndarray, fs: int, f_grid_hz: np.ndarray, *,
                      window_s: float = DEFAULT_WINDOW_S,
                      fraction: int | None = DEFAULT_FRACTION) -> float:
    """An estimate of how far room sound inside the direct window raises the gain, dB.

    Beyond the critical distance the reverberant energy arriving within the few milliseconds
    of the window is no longer small beside the direct sound, and the window's level (so the
    gain) reads high. The room's power spectrum just after the window (the next ``window_s``,
    smoothed as :func:`direct_spectrum` smooths) is taken as present from the peak on, weighted
    by the window's taper: S_room ≈ S_after·Σw²/N; per frequency the excess is
    10·lg(1 + S_room/S_win), and the estimate is its median over ``f_grid_hz`` (the gain is a
    robust fit over the same grid). It is a size, not a correction: the room sound may start
    later than the peak (a gap before the first reflection, which makes the estimate high) and
    the window's own level already holds it (which makes it low). In a virtual hall of
    :mod:`measure.virtual` (critical distance 2.7 m, room sound from 1 ms after the direct
    sound) it gave 1.6 and 2.5 dB where the gain read 0.6 and 1.1 dB high (8 and 12 m); in
    others 2.5 to 4 times the excess: an upper size, not a correction.
    """
    from measure.model._smoothing import smooth_power

    h = check_signal(h, "h", ndim=(1,))
    p, a, b, w = _direct_window(h, fs, window_s)
    nw = int(round(window_s * fs))
    after = h[b:min(b + nw, h.size)]
    if after.size < nw // 2:
        return 0.0
    scale = float(np.sum(w[p - a:] ** 2)) / after.size
    s_win = direct_spectrum(h, fs, f_grid_hz, window_s=window_s, fraction=fraction)
    n = _fft_length(after.size, fs, f_grid_hz[0])
    f = np.fft.rfftfreq(n, 1.0 / fs)
    s_room = scale * smooth_power(f[1:], (np.abs(np.fft.rfft(after, n)) ** 2)[1:], f_grid_hz,
                                  fraction=fraction)
    with np.errstate(divide="ignore", invalid="ignore"):
        excess = 10.0 * np.log10(1.0 + s_room / s_win)
    return float(np.median(excess))


def _octave_direct_db(h: np.ndarray, fs: int, f_lo: float, f_hi: float, window_s: float
                      ) -> float | None:
    """Direct-sound energy in [f_lo, f_hi]: the direct window of the broadband response (the
    spectra's window; the default one when they take the whole response, since directivity is
    a property of the direct sound), band-limited afterwards, so a slow band filter's ringing
    cannot smear the room into it."""
    _, a, b, _ = _direct_window(h, fs, window_s)
    seg = h[a:b]
    m = 1 << int(math.ceil(math.log2(max(8 * seg.size, int(4 * fs / f_lo)))))
    S = np.abs(np.fft.rfft(seg, m)) ** 2
    f = np.fft.rfftfreq(m, 1.0 / fs)
    sel = (f >= f_lo) & (f < f_hi)
    return _db(float(np.sum(S[sel])) * 2.0 / m)


def _default_band(window_s: float | None, fs: int) -> tuple[float, float]:
    lo = 100.0 if window_s is None else max(2.0 / window_s, 50.0)
    return lo, min(0.45 * fs, 20000.0)


# ---------------------------------------------------------------------------------------------
# Distance

def inverse_distance_gain_db(d_m: np.ndarray | float, d_ref_m: float, rolloff: float, *,
                             d_max_m: float | None = None, clamp: bool = True) -> np.ndarray:
    """The clamped inverse-distance law of interactive audio in dB (modeling.md §8.1):
    d' = max(d_ref, min(d, d_max)), gain = d_ref/(d_ref + R·(d' − d_ref)).

    Examples
    --------
    >>> [round(10 ** (float(g) / 20), 3) for g in inverse_distance_gain_db(
    ...     np.array([0.5, 1, 2, 4, 8, 100]), 1.0, 1.0, d_max_m=50.0)]
    [1.0, 1.0, 0.5, 0.25, 0.125, 0.02]
    """
    d = np.asarray(d_m, dtype=np.float64)
    if clamp:
        d = np.maximum(d, d_ref_m)
        if d_max_m is not None:
            d = np.minimum(d, d_max_m)
    return -20.0 * np.log10(np.maximum(1.0 + rolloff * (d - d_ref_m) / d_ref_m, 1e-12))


@dataclass(frozen=True, slots=True)
class DistanceLaw:
    """A level-vs-distance law fitted to a series.

    Attributes
    ----------
    rolloff_factor : float
        R of the clamped inverse-distance law with reference distance ``reference_distance_m``.
    reference_distance_m : float
    power_exponent : float
        n of the power law (d/d_ref)^(−n); −6.02·n dB per doubling.
    better : str
        "inverse distance" or "power", the law with the smaller RMS residual.
    rms_inverse_db, rms_power_db : float
    """

    rolloff_factor: float
    reference_distance_m: float
    power_exponent: float
    better: str
    rms_inverse_db: float
    rms_power_db: float

    def gain_db(self, d_m: np.ndarray, *, clamp: bool = False) -> np.ndarray:
        """The law's gain at ``d_m``; ``clamp`` holds the inverse-distance law at 0 dB below
        the reference distance, as an engine's clamped law does (modeling.md §8.1)."""
        d = np.asarray(d_m, dtype=np.float64)
        if self.better == "power":
            return -20.0 * self.power_exponent * np.log10(d / self.reference_distance_m)
        return inverse_distance_gain_db(d, self.reference_distance_m, self.rolloff_factor,
                                        clamp=clamp)

    def to_dict(self) -> dict[str, Any]:
        return {"rolloff_factor": self.rolloff_factor,
                "reference_distance_m": self.reference_distance_m,
                "power_exponent": self.power_exponent,
                "db_per_doubling": -20.0 * math.log10(2.0) * self.power_exponent,
                "better": self.better, "rms_inverse_db": self.rms_inverse_db,
                "rms_power_db": self.rms_power_db}


def fit_distance_law(d_m: Sequence[float], level_db: Sequence[float], d_ref_m: float
                     ) -> DistanceLaw:
    """Fit R (inverse-distance law, d_ref fixed) and n (power law) to levels re the reference.

    The inverse law's R ≥ 0 is found by a bounded 1-D least squares (modeling.md §8.2); the power
    law's n by linear least squares in lg(d/d_ref). Levels are relative to the level at
    ``d_ref_m`` (0 dB there).
    """
    from scipy.optimize import minimize_scalar

    d = np.asarray(d_m, dtype=np.float64)
    g = np.asarray(level_db, dtype=np.float64)
    x = np.log10(d / d_ref_m)
    sxx = float(np.sum(x * x))
    n = float(-np.sum(x * g) / (20.0 * sxx)) if sxx > 0 else 0.0
    rms_p = float(np.sqrt(np.mean((g + 20.0 * n * x) ** 2)))

    def cost(r: float) -> float:
        return float(np.sum((inverse_distance_gain_db(d, d_ref_m, r, clamp=False) - g) ** 2))

    best = minimize_scalar(cost, bounds=(0.0, 50.0), method="bounded",
                           options={"xatol": 1e-6})
    r = float(best.x)
    rms_i = math.sqrt(cost(r) / d.size)
    better = "power" if rms_p < rms_i - 1e-9 else "inverse distance"
    return DistanceLaw(r, float(d_ref_m), n, better, rms_i, rms_p)


def expected_lowpass_hz(extra_m: float, f_lo_hz: float, f_hi_hz: float, **air: float
                        ) -> float | None:
    """The first-order low-pass corner that fits ISO 9613-1 air absorption over ``extra_m``
    metres of extra path within the band (None when no corner falls in the band)."""
    if not extra_m > 0:
        return None
    f = np.geomspace(f_lo_hz, f_hi_hz, 64)
    r = -air_absorption_db_per_m(f, **air) * extra_m
    try:
        fit = fit_transfer(f, r)
    except FitError:
        return None
    return fit.lowpass_hz


@dataclass(frozen=True, slots=True)
class DistanceSeries:
    """The curves of a distance series (module notes)."""

    positions: tuple[Position, ...]
    reference: Position
    direct_law: DistanceLaw
    room_law: DistanceLaw | None
    reverberant_db_per_doubling: float | None
    drr_line: tuple[float, float] | None
    critical_distance_m: float | None
    expected_lowpass_hz: dict[float, float | None]
    air: dict[str, float]
    notes: tuple[str, ...] = ()

    def drr_db(self, d_m: np.ndarray) -> np.ndarray | None:
        if self.drr_line is None:
            return None
        a, b = self.drr_line
        return a + b * np.log10(np.asarray(d_m, dtype=np.float64))

    def curves(self, distances_m: Sequence[float]) -> list[dict[str, Any]]:
        """The fitted curves sampled at ``distances_m`` (gain, reverberant level, DRR, wet
        fraction, expected low-pass corner)."""
        out = []
        d_ref = self.reference.distance_m or 1.0
        f_lo, f_hi = self.reference.transfer.f_lo_hz, self.reference.transfer.f_hi_hz
        for d in distances_m:
            drr = self.drr_db(np.array([d]))
            drr_v = None if drr is None else float(drr[0])
            out.append({
                "distance_m": float(d),
                "direct_gain_db": float(self.direct_law.gain_db(np.array([d]), clamp=True)[0]),
                "reverberant_gain_db": (None if self.room_law is None else float(
                    self.room_law.gain_db(np.array([d]), clamp=True)[0])),
                "drr_db": drr_v,
                "wet_fraction": None if drr_v is None else 1.0 / (1.0 + 10.0 ** (drr_v / 10.0)),
                "expected_lowpass_hz": expected_lowpass_hz(d - d_ref, f_lo, f_hi, **self.air)})
        return out

    def to_dict(self) -> dict[str, Any]:
        dists = sorted(p.distance_m for p in self.positions if p.distance_m is not None)
        grid = np.geomspace(max(dists[0] / 2, 0.25), dists[-1] * 2, 12) if dists else []
        return {
            "positions": [p.to_dict() for p in self.positions],
            "rolloff_factor": self.direct_law.rolloff_factor,
            "reference_distance_m": self.direct_law.reference_distance_m,
            "critical_distance_m": self.critical_distance_m,
            "direct_law": self.direct_law.to_dict(),
            "room_rolloff_factor": None if self.room_law is None else
            self.room_law.rolloff_factor,
            "room_law": None if self.room_law is None else self.room_law.to_dict(),
            "reverberant_db_per_doubling": self.reverberant_db_per_doubling,
            "drr_line": None if self.drr_line is None else
            {"db_at_1m": self.drr_line[0], "db_per_decade": self.drr_line[1]},
            "curves": {"at_measured": self.curves(dists), "regular": self.curves(list(grid))},
            "air": dict(self.air),
            "notes": list(self.notes),
        }


def _reference_index(values: Sequence[float], reference: float | None, what: str) -> int:
    if reference is None:
        return int(np.argmin(np.abs(np.asarray(values))))
    hits = [i for i, v in enumerate(values) if abs(v - reference) <= 1e-6 * max(1.0, abs(v))]
    if not hits:
        raise ParameterError(
            f"the reference {what} {reference:g} is not one of the series "
            f"({', '.join(f'{v:g}' for v in values)}); name one of them")
    return hits[0]


def distance_series(responses: Sequence[np.ndarray], fs: int, distances_m: Sequence[float], *,
                    reference_m: float | None = None, labels: Sequence[str] | None = None,
                    window_s: float | None = DEFAULT_WINDOW_S,
                    fraction: int | None = DEFAULT_FRACTION,
                    band_hz: tuple[float, float] | None = None, temperature_c: float = 20.0,
                    humidity_percent: float = 50.0, pressure_kpa: float = P_REF_KPA
                    ) -> DistanceSeries:
    """The distance curves of responses measured at ``distances_m`` (module notes).

    Raises
    ------
    ParameterError
        For fewer than two positions, a distance that is not positive, a count that does not
        match, or a reference not in the series.
    """
    fs = check_fs(fs)
    d = [float(v) for v in distances_m]
    if len(responses) != len(d):
        raise ParameterError(f"{len(responses)} responses but {len(d)} distances; give one "
                             "distance per response")
    if len(d) < 2:
        raise ParameterError("a distance series needs at least two positions; measure at "
                             "several distances (e.g. 1, 2, 4, 8 m)")
    if not all(v > 0 and math.isfinite(v) for v in d):
        raise ParameterError(f"distances {d} must all be positive, in metres")
    if len(set(d)) < 2:
        raise ParameterError("every position is at the same distance: a distance series needs "
                             "at least two different distances")
    i_ref = _reference_index(d, reference_m, "distance") if reference_m is not None \
        else int(np.argmin(d))
    labels = list(labels) if labels is not None else [f"{v:g} m" for v in d]
    h_ref = responses[i_ref]
    positions = tuple(position_transfer(h, h_ref, fs, label=lab, distance_m=dist,
                                        window_s=window_s, fraction=fraction, band_hz=band_hz)
                      for h, dist, lab in zip(responses, d, labels, strict=True))
    ref = positions[i_ref]
    d_ref = d[i_ref]
    direct = fit_distance_law(d, [p.transfer.gain_db for p in positions], d_ref)
    notes = []
    roomy = [p for p in positions if p.room_in_window_db is not None
             and p.room_in_window_db > ROOM_IN_WINDOW_NOTE_DB]
    if roomy:
        notes.append("room sound inside the direct window may raise the gain by up to " + ", ".join(
            f"{p.room_in_window_db:.1f} dB at {p.distance_m:g} m" for p in roomy)
            + " (beyond the critical distance the early room sound rivals the direct sound); "
            "a shorter --window lowers it, at the cost of the lowest frequencies")
    rev = [(p.distance_m, p.reverberant_db) for p in positions if p.reverberant_db is not None]
    room_law = slope = None
    if len(rev) >= 2 and ref.reverberant_db is not None:
        dd = np.array([a for a, _ in rev])
        lv = np.array([b for _, b in rev]) - ref.reverberant_db
        room_law = fit_distance_law(dd, lv, d_ref)
        x = np.log10(dd)
        slope = float(np.polyfit(x, lv, 1)[0] * math.log10(2.0)) if np.ptp(x) > 0 else None
    else:
        notes.append("the reverberant level could not be measured at two positions or more")
    line = critical = None
    drr = [(p.distance_m, p.drr_db) for p in positions if p.drr_db is not None]
    if len(drr) >= 2:
        x = np.log10([a for a, _ in drr])
        y = np.array([b for _, b in drr])
        b1, a0 = np.polyfit(x, y, 1)
        line = (float(a0), float(b1))
        lo, hi = min(a for a, _ in drr), max(a for a, _ in drr)
        lg_rc = -a0 / b1 if b1 < 0 else math.inf
        if b1 < 0 and math.log10(lo) - 2.0 <= lg_rc <= math.log10(hi) + 2.0:
            critical = float(10.0 ** lg_rc)
            if not lo / 4 <= critical <= hi * 4:
                notes.append(f"the critical distance {critical:.2g} m lies far outside the "
                             f"measured {lo:g}-{hi:g} m: extrapolated")
        elif b1 < 0:
            notes.append(f"the direct-to-reverberant ratio falls too little over {lo:g}-{hi:g} m "
                         "to place the critical distance within a hundredfold of the series; "
                         "none is given")
        else:
            notes.append("the direct-to-reverberant ratio does not fall with distance here, so "
                         "no critical distance is given")
    air = {"temperature_c": temperature_c, "humidity_percent": humidity_percent,
           "pressure_kpa": pressure_kpa}
    exp_lp = {p.distance_m: expected_lowpass_hz(p.distance_m - d_ref, p.transfer.f_lo_hz,
                                                p.transfer.f_hi_hz, **air)
              for p in positions}
    return DistanceSeries(positions, ref, direct, room_law, slope, line, critical, exp_lp, air,
                          tuple(notes))


# ---------------------------------------------------------------------------------------------
# Direction

@dataclass(frozen=True, slots=True)
class AngleSeries:
    """The muffling of an angle series and the source's directivity (module notes)."""

    positions: tuple[Position, ...]
    reference: Position
    directivity_index_db: dict[str, float | None]
    relative_db: dict[str, dict[float, float]]
    notes: tuple[str, ...] = ()

    def table(self) -> list[dict[str, Any]]:
        """Per angle, ascending: gain, low-pass corner and the high-shelf alternative, with the
        model that fits better: what a game interpolates."""
        rows = []
        for p in sorted(self.positions, key=lambda q: q.angle_deg):
            shelf = p.shelf
            use_shelf = shelf is not None and shelf.rms_db < p.transfer.rms_db - 0.1
            rows.append({"angle_deg": p.angle_deg, "gain_db": p.transfer.gain_db,
                         "lowpass_hz": p.transfer.lowpass_hz,
                         "shelf_db": None if shelf is None else shelf.shelf_db,
                         "shelf_hz": None if shelf is None else shelf.corner_hz,
                         "better": "high shelf" if use_shelf else "low-pass"})
        return rows

    def to_dict(self) -> dict[str, Any]:
        return {"angles": self.table(), "positions": [p.to_dict() for p in self.positions],
                "directivity_index_db": dict(self.directivity_index_db),
                "relative_octave_db": {k: {f"{a:g}": v for a, v in d.items()}
                                       for k, d in self.relative_db.items()},
                "notes": list(self.notes)}


def directivity_index_db(angles_deg: Sequence[float], relative_db: Sequence[float]
                         ) -> float | None:
    """DI = 10·lg(2 / ∫₀^π (I(θ)/I(0))·sin θ dθ) from levels re on-axis at ``angles_deg`` (the
    source taken as symmetric about its axis; |angle| used; trapezoidal in θ, the last level
    held to 180°). None when the series does not reach 90°."""
    a = np.abs(np.asarray(angles_deg, dtype=np.float64))
    r = np.asarray(relative_db, dtype=np.float64)
    order = np.argsort(a)
    a, r = a[order], r[order]
    if a[0] > 1e-9 or a[-1] < 90.0:
        return None
    if a[-1] < 180.0:
        a, r = np.append(a, 180.0), np.append(r, r[-1])
    th = np.radians(a)
    fine = np.linspace(0.0, math.pi, 721)
    i = 10.0 ** (np.interp(fine, th, r) / 10.0)
    integral = float(np.trapezoid(i * np.sin(fine), fine))
    return 10.0 * math.log10(2.0 / integral)


def angle_series(responses: Sequence[np.ndarray], fs: int, angles_deg: Sequence[float], *,
                 reference_deg: float | None = None, labels: Sequence[str] | None = None,
                 window_s: float | None = DEFAULT_WINDOW_S,
                 fraction: int | None = DEFAULT_FRACTION,
                 band_hz: tuple[float, float] | None = None) -> AngleSeries:
    """The muffling per angle and the directivity index per octave (module notes).

    Raises
    ------
    ParameterError
        For fewer than two positions, a count that does not match, or a reference not in it.
    """
    fs = check_fs(fs)
    a = [float(v) for v in angles_deg]
    if len(responses) != len(a):
        raise ParameterError(f"{len(responses)} responses but {len(a)} angles; give one angle "
                             "per response")
    if len(a) < 2 or len(set(a)) < 2:
        raise ParameterError("an angle series needs at least two different angles (e.g. 0, 45, "
                             "90, 135, 180 degrees)")
    i_ref = _reference_index(a, reference_deg, "angle") if reference_deg is not None \
        else int(np.argmin(np.abs(a)))
    labels = list(labels) if labels is not None else [f"{v:g}°" for v in a]
    h_ref = responses[i_ref]
    positions = tuple(position_transfer(h, h_ref, fs, label=lab, angle_deg=ang,
                                        window_s=window_s, fraction=fraction, band_hz=band_hz,
                                        with_shelf=True)
                      for h, ang, lab in zip(responses, a, labels, strict=True))
    ref = positions[i_ref]
    rel: dict[str, dict[float, float]] = {}
    di: dict[str, float | None] = {}
    notes = []
    for lab, _ in _OCTAVES:
        if lab not in ref.octave_direct_db:
            continue
        rel[lab] = {p.angle_deg: p.octave_direct_db[lab] - ref.octave_direct_db[lab]
                    for p in positions if lab in p.octave_direct_db}
        angs = [x - a[i_ref] for x in rel[lab]]
        di[lab] = directivity_index_db(angs, list(rel[lab].values()))
    if any(v is None for v in di.values()):
        notes.append("directivity index: the series must run from the axis to 90° or beyond")
    roomy = [p for p in positions if p.room_in_window_db is not None
             and p.room_in_window_db > ROOM_IN_WINDOW_NOTE_DB]
    if roomy:
        notes.append("room sound inside the direct window may raise the level by up to "
                     + ", ".join(f"{p.room_in_window_db:.1f} dB at {p.angle_deg:g}°"
                                 for p in roomy)
                     + ", flattening the directivity; measure it closer to the source (well "
                     "inside the critical distance) or with a shorter --window")
    return AngleSeries(positions, ref, di, rel, tuple(notes))


# ---------------------------------------------------------------------------------------------
# A set of positions: which series it holds, and what a game needs from them

def position_filters(p: Position, rate: int) -> dict[str, Any]:
    """The gain and the digital first-order filters of position ``p`` at ``rate`` Hz
    (:func:`first_order_ba`); a corner at or above Nyquist of ``rate`` has no filter."""
    out: dict[str, Any] = {"rate_hz": rate, "gain": 10.0 ** (p.transfer.gain_db / 20.0)}
    for kind, fc in (("lowpass", p.transfer.lowpass_hz), ("highpass", p.transfer.highpass_hz)):
        if fc is None or not fc < rate / 2:
            out[kind] = None
        else:
            b, a = first_order_ba(fc, rate, kind)
            out[kind] = {"corner_hz": fc, "b": [float(v) for v in b], "a": [float(v) for v in a]}
    return out


@dataclass(frozen=True, slots=True)
class Attenuation:
    """What a set of positions shows: a distance series, an angle series, or both."""

    fs: int
    distance: DistanceSeries | None
    direction: AngleSeries | None
    notes: tuple[str, ...] = ()

    def to_dict(self, *, rate: int | None = None) -> dict[str, Any]:
        """The JSON document of ``measure attenuation --json`` (the scripting contract:
        ``positions`` with ``distance_m``, ``gain_db``, ``lowpass_hz``, ``highpass_hz``,
        ``drr_db``; ``rolloff_factor``, ``reference_distance_m``, ``critical_distance_m``)."""
        rate = self.fs if rate is None else rate
        doc: dict[str, Any] = {"sample_rate": self.fs}
        if self.distance is not None:
            doc.update(self.distance.to_dict())
            doc["filters"] = [dict(position_filters(p, rate), label=p.label,
                                   distance_m=p.distance_m) for p in self.distance.positions]
        else:
            doc.update(positions=[p.to_dict() for p in self.direction.positions],
                       rolloff_factor=None, reference_distance_m=None, critical_distance_m=None)
        if self.direction is not None:
            doc["direction"] = self.direction.to_dict()
            doc["direction"]["filters"] = [
                dict(position_filters(p, rate), label=p.label, angle_deg=p.angle_deg)
                for p in self.direction.positions]
        doc["notes"] = list(self.notes) + list(doc.get("notes", []))
        return doc


def analyze_series(responses: Sequence[np.ndarray], fs: int, *,
                   distances_m: Sequence[float | None], angles_deg: Sequence[float | None],
                   labels: Sequence[str] | None = None, reference_m: float | None = None,
                   reference_deg: float | None = None, window_s: float | None = DEFAULT_WINDOW_S,
                   fraction: int | None = DEFAULT_FRACTION,
                   band_hz: tuple[float, float] | None = None, temperature_c: float = 20.0,
                   humidity_percent: float = 50.0, pressure_kpa: float = P_REF_KPA
                   ) -> Attenuation:
    """Sort the positions into a distance series (two or more distances at one angle: the
    reference angle, else 0°, else the commonest) and an angle series (two or more angles at the
    commonest distance), and analyse each (:func:`distance_series`, :func:`angle_series`).

    Raises
    ------
    ParameterError
        If a position carries neither a distance nor an angle, if there is only one position, or
        if the positions form neither series.
    """
    n = len(responses)
    labels = list(labels) if labels is not None else [f"position {i + 1}" for i in range(n)]
    if not (len(distances_m) == len(angles_deg) == len(labels) == n):
        raise ParameterError("give a distance and an angle (or None) for every response")
    if n < 2:
        raise ParameterError("one position shows no distance law or directivity; measure at "
                             "two positions or more (several distances, or several angles)")
    bare = [lab for lab, d, a in zip(labels, distances_m, angles_deg, strict=True)
            if d is None and a is None]
    if bare:
        raise ParameterError(
            f"{', '.join(bare)} carr{'ies' if len(bare) == 1 else 'y'} neither a distance nor an "
            "angle; give --distances or --angles (or record with --distance/--angle)")
    kw = dict(window_s=window_s, fraction=fraction, band_hz=band_hz)
    angles = [0.0 if a is None else float(a) for a in angles_deg]
    known = [a for a, d in zip(angles, distances_m, strict=True) if d is not None]
    if reference_deg is not None:
        at = reference_deg
    elif 0.0 in known:
        at = 0.0
    else:
        at = max(set(known), key=known.count) if known else 0.0
    di = [i for i in range(n) if distances_m[i] is not None and angles[i] == at]
    dist = None
    if len({distances_m[i] for i in di}) >= 2:
        dist = distance_series([responses[i] for i in di], fs, [distances_m[i] for i in di],
                               reference_m=reference_m, labels=[labels[i] for i in di],
                               temperature_c=temperature_c, humidity_percent=humidity_percent,
                               pressure_kpa=pressure_kpa, **kw)
    elif reference_m is not None:
        raise ParameterError(f"--reference {reference_m:g} m names a distance, but the positions "
                             "hold no distance series (two or more distances at one angle)")
    with_angle = [i for i in range(n) if angles_deg[i] is not None]
    ds = [distances_m[i] for i in with_angle]
    common = max(set(ds), key=ds.count) if ds else None
    ai = [i for i in with_angle if distances_m[i] == common]
    direction = None
    if len({angles[i] for i in ai}) >= 2:
        direction = angle_series([responses[i] for i in ai], fs, [angles[i] for i in ai],
                                 reference_deg=reference_deg, labels=[labels[i] for i in ai],
                                 **kw)
    if dist is None and direction is None:
        raise ParameterError(
            "the positions form neither a distance series (two or more distances at one angle) "
            "nor an angle series (two or more angles at one distance); check the distances and "
            "angles given")
    notes = []
    if dist is not None and direction is not None:
        notes.append(f"distance series at {at:g}°, angle series at {common:g} m")
    return Attenuation(int(fs), dist, direction, tuple(notes))
