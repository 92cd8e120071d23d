"""Speech transmission index from an impulse response (IEC 60268-16:2020, indirect method).

The modulation transfer function of each octave band is computed from the band-filtered IR by
Schroeder's (1981) relation, the complex Fourier transform of the squared IR normalised by its
energy (the same integral is ANSI S3.5 Eq. 20):

    m_k(F) = |Σ h_k²(t) exp(−j2πFt)| / Σ h_k²(t) · 1 / (1 + 10^(−SNR_k/10))

for the 14 modulation frequencies F = 10^((n−2)/10) Hz, n = 0…13 (0.63 … 12.5 Hz nominal), and
the 7 octave bands 125 Hz … 8 kHz. Each m is turned into a transmission index
TI = (SNR_app + 15)/30 with SNR_app = 10 lg(m/(1−m)) clipped to ±15 dB; MTI_k is the mean TI of
band k and STI = Σ α_k MTI_k − Σ β_k √(MTI_k MTI_k+1) with the male weights of
IEC 60268-16:2020 (α = 0.085, 0.127, 0.230, 0.233, 0.309, 0.224, 0.173;
β = 0.085, 0.078, 0.065, 0.011, 0.047, 0.095; as quoted in measurement.md §6 [S]).

Noise in the IR itself is handled like the decay analysis: each band is truncated at its
Lundeby crosspoint and the rest of the decay is added analytically (the transform of the
fitted exponential tail), so the IR's own measurement noise does not pass for background
noise. Real background noise enters only through ``snr_db`` (speech-to-noise ratio per octave,
when it is known). The noise factor 1/(1 + 10^(−SNR/10)) is given here from memory; it is the
standard form.

Auditory masking and reception threshold
----------------------------------------
When the absolute speech and noise octave levels at the listener are given (dB SPL), the
level-dependent auditory masking and the absolute reception threshold of IEC 60268-16:2020
Annex A are applied (:func:`auditory_factor`):

* ambient noise (A.2.3): ``m' = m · I_s,k / (I_s,k + I_n,k)`` (the same factor as ``snr_db``);
* masking slope from the speech level of the next-lower octave, L = L_s,k−1 (Table A.2):
  ``amdB = 0.5 L − 65`` (L < 63), ``1.8 L − 146.9`` (63 ≤ L < 67), ``0.5 L − 59.8``
  (67 ≤ L < 100), ``−10`` (L ≥ 100); ``amf = 10^(amdB/10)`` (A.4.2);
* masking intensity ``I_am,k = I_s,k−1 · amf`` (none in the 125 Hz octave) (A.4.2);
* reception threshold ``I_rt,k = 10^(ART_k/10)``, ART = 46, 27, 12, 6.5, 7.5, 8, 12 dB SPL
  for 125 Hz … 8 kHz (Table A.3, A.4.3);
* ``m'' = m' · I_k / (I_k + I_am,k + I_rt,k)`` with ``I_k = I_s,k + I_n,k`` (A.2.4).

Sources: the slope table and the ART values are quoted in the project reference
(measurement.md §6, [S]); the application (which intensities enter where) was checked against
public open-source code that quotes the 2020 edition's clause and page numbers for each step
(A.2.3, A.2.4, A.4.2, A.4.3, Tables A.2 and A.3) [S, secondary: not the standard's own text]. A
second public implementation (written to IEC 60268-16:2011) uses the same
``m · I_k/(I_k + I_am + I_rt)`` but takes the masker as speech plus noise of the lower octave;
here the 2020-referenced form (speech only) is used. With speech well above the noise the two
differ by less than 10 lg(1 + 10^(−SNR/10)) dB of masker level, i.e. negligibly for
SNR ≥ 10 dB. Without absolute levels (``snr_db`` only, or nothing) no masking or threshold
correction is applied, as in the reference check values.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from measure._validate import check_fs, check_signal
from measure.errors import ParameterError

__all__ = [
    "STI_BAND_LABELS",
    "MODULATION_FREQUENCIES_HZ",
    "ALPHA_MALE",
    "BETA_MALE",
    "RATING_BANDS",
    "StiResult",
    "transmission_index",
    "sti_from_mtf",
    "mtf_from_band",
    "mtf_from_ir",
    "sti_from_ir",
    "rating",
    "ART_DB",
    "masking_slope_db",
    "auditory_factor",
    "check_noise_levels",
]

#: Octave bands of the STI (IEC 60268-16:2020): 125 Hz … 8 kHz.
STI_BAND_LABELS: tuple[str, ...] = ("125", "250", "500", "1k", "2k", "4k", "8k")
#: Modulation frequencies F = 10**((n-2)/10), n = 0…13 (IEC 60268-16: one-third-octave steps
#: 0.63 … 12.5 Hz nominal).
MODULATION_FREQUENCIES_HZ: np.ndarray = 10.0 ** ((np.arange(14) - 2) / 10.0)
MODULATION_FREQUENCIES_HZ.setflags(write=False)
#: Male octave weighting factors α_k, 125 Hz … 8 kHz (IEC 60268-16:2020).
ALPHA_MALE: tuple[float, ...] = (0.085, 0.127, 0.230, 0.233, 0.309, 0.224, 0.173)
#: Male redundancy factors β_k between adjacent octaves (IEC 60268-16:2020).
BETA_MALE: tuple[float, ...] = (0.085, 0.078, 0.065, 0.011, 0.047, 0.095)
#: Absolute speech reception threshold per octave 125 Hz … 8 kHz, dB SPL (IEC 60268-16:2020
#: Table A.3; measurement.md §6 [S]).
ART_DB: tuple[float, ...] = (46.0, 27.0, 12.0, 6.5, 7.5, 8.0, 12.0)
#: Rating bands (ISO 9921 wording): lower limits of each qualification.
RATING_BANDS: tuple[tuple[float, str], ...] = (
    (0.75, "excellent"), (0.60, "good"), (0.45, "fair"), (0.30, "poor"), (0.0, "bad"))


def rating(sti: float) -> str:
    """Qualification of an STI value: bad < 0.30 ≤ poor < 0.45 ≤ fair < 0.60 ≤ good < 0.75 ≤
    excellent (ISO 9921 wording)."""
    for lower, name in RATING_BANDS:
        if sti >= lower:
            return name
    return "bad"


@dataclass(frozen=True, slots=True, eq=False)
class StiResult:
    """STI and its parts.

    Attributes
    ----------
    sti : float
        Speech transmission index, 0 … 1.
    rating : str
        Qualification band ("bad", "poor", "fair", "good", "excellent").
    mti : ndarray, shape (7,)
        Modulation transfer index per octave 125 Hz … 8 kHz.
    mtf : ndarray, shape (7, 14)
        Modulation transfer values m_k(F) after the noise factor.
    modulation_frequencies_hz : ndarray, shape (14,)
    snr_db : ndarray, shape (7,) or None
        Speech-to-noise ratio used per octave, None when no background noise was given.
    flags : tuple of str
    speech_spl_db, noise_spl_db : ndarray, shape (7,) or None
        Absolute octave levels at the listener when given; then the auditory masking and
        reception threshold corrections were applied (``masking_and_threshold``).
    """

    sti: float
    rating: str
    mti: np.ndarray
    mtf: np.ndarray
    modulation_frequencies_hz: np.ndarray
    snr_db: np.ndarray | None
    flags: tuple[str, ...] = ()
    speech_spl_db: np.ndarray | None = None
    noise_spl_db: np.ndarray | None = None

    @property
    def masking_and_threshold(self) -> bool:
        """True when the IEC 60268-16 Annex A masking and threshold corrections were applied
        (absolute speech and noise levels were given)."""
        return self.speech_spl_db is not None

    def __post_init__(self) -> None:
        for a in (self.mti, self.mtf, self.modulation_frequencies_hz, self.snr_db,
                  self.speech_spl_db, self.noise_spl_db):
            if a is not None:
                a.setflags(write=False)

    def to_dict(self) -> dict:
        return {
            "sti": self.sti,
            "rating": self.rating,
            "mti": {lab: float(v) for lab, v in zip(STI_BAND_LABELS, self.mti, strict=True)},
            "modulation_frequencies_hz": [float(f) for f in self.modulation_frequencies_hz],
            "mtf": {lab: [float(v) for v in row] for lab, row in zip(STI_BAND_LABELS, self.mtf, strict=True)},
            "snr_db": None if self.snr_db is None else [float(v) for v in self.snr_db],
            "masking_and_threshold": self.masking_and_threshold,
            "speech_spl_db": None if self.speech_spl_db is None
            else [float(v) for v in self.speech_spl_db],
            "noise_spl_db": None if self.noise_spl_db is None
            else [float(v) for v in self.noise_spl_db],
            "flags": list(self.flags),
        }


def transmission_index(m: np.ndarray) -> np.ndarray:
    """TI = (SNR_app + 15)/30 with SNR_app = 10 lg(m/(1−m)) clipped to [−15, 15] dB
    (IEC 60268-16:2020)."""
    m = np.asarray(m, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = 10.0 * np.log10(m / (1.0 - m))
    snr = np.where(m >= 1.0, 15.0, np.where(m <= 0.0, -15.0, snr))
    return (np.clip(snr, -15.0, 15.0) + 15.0) / 30.0


def masking_slope_db(level_db: np.ndarray) -> np.ndarray:
    """Auditory masking slope amdB from the octave level L of the masking band, dB.

    IEC 60268-16:2020 Table A.2 (measurement.md §6, [S]): 0.5 L − 65 below 63 dB,
    1.8 L − 146.9 from 63 to 67 dB, 0.5 L − 59.8 from 67 to 100 dB, −10 dB from 100 dB.
    """
    L = np.asarray(level_db, dtype=np.float64)
    return np.where(L < 63.0, 0.5 * L - 65.0,
                    np.where(L < 67.0, 1.8 * L - 146.9,
                             np.where(L < 100.0, 0.5 * L - 59.8, -10.0)))


def auditory_factor(speech_spl_db: np.ndarray, noise_spl_db: np.ndarray) -> np.ndarray:
    """Per-octave factor of the MTF for background noise, masking and reception threshold.

    ``Is/(Is + In) · I/(I + I_am + I_rt)`` with I = Is + In, ``I_am,k = I_s,k−1 · amf`` and
    ``I_rt,k = 10^(ART_k/10)`` (IEC 60268-16:2020 A.2.3, A.2.4, A.4.2, A.4.3; see the module
    notes for the sources).

    Parameters
    ----------
    speech_spl_db, noise_spl_db : array_like, shape (7,)
        Speech and background-noise octave levels 125 Hz … 8 kHz at the listener, dB SPL.

    Returns
    -------
    ndarray, shape (7,)
    """
    ls = np.asarray(speech_spl_db, dtype=np.float64)
    ln = np.asarray(noise_spl_db, dtype=np.float64)
    i_s = 10.0 ** (ls / 10.0)
    i_n = 10.0 ** (ln / 10.0)
    i_k = i_s + i_n
    i_am = np.zeros(7)
    i_am[1:] = i_s[:-1] * 10.0 ** (masking_slope_db(ls[:-1]) / 10.0)
    i_rt = 10.0 ** (np.asarray(ART_DB) / 10.0)
    return i_s / i_k * (i_k / (i_k + i_am + i_rt))


def sti_from_mtf(mtf: np.ndarray, *, snr_db: np.ndarray | None = None,
                 flags: tuple[str, ...] = ()) -> StiResult:
    """STI from a (7, 14) matrix of modulation transfer values.

    Parameters
    ----------
    mtf : array_like, shape (7, 14)
        m_k(F) for octaves 125 Hz … 8 kHz and the 14 modulation frequencies, in [0, 1].
    snr_db : array_like, shape (7,), optional
        Recorded with the result only (apply the noise factor before calling).

    Raises
    ------
    ParameterError
        If ``mtf`` is not (7, 14) or holds values outside [0, 1] or NaN.

    Examples
    --------
    >>> round(sti_from_mtf(np.full((7, 14), 0.5)).sti, 6)   # IEC 60268-16:2020 A.3.1.2
    0.5
    """
    m = np.asarray(mtf, dtype=np.float64)
    if m.shape != (7, 14):
        raise ParameterError(f"mtf has shape {m.shape}; give 7 octaves × 14 modulation "
                             "frequencies")
    if not np.all(np.isfinite(m)) or m.min() < 0 or m.max() > 1.0 + 1e-9:
        raise ParameterError("mtf values must lie in [0, 1]; check the impulse response")
    mti = transmission_index(m).mean(axis=1)
    alpha = np.asarray(ALPHA_MALE)
    beta = np.asarray(BETA_MALE)
    sti = float(alpha @ mti - beta @ np.sqrt(mti[:-1] * mti[1:]))
    sti = min(max(sti, 0.0), 1.0)
    return StiResult(sti=sti, rating=rating(sti), mti=mti, mtf=m.copy(),
                     modulation_frequencies_hz=np.array(MODULATION_FREQUENCIES_HZ),
                     snr_db=None if snr_db is None else np.array(snr_db, dtype=float),
                     flags=tuple(flags))


def mtf_from_band(h_band: np.ndarray, fs: int, *, stop_index: int | None = None,
                  tail_a_db: float | None = None, tail_b_db_per_s: float | None = None,
                  noise_power: float = 0.0) -> np.ndarray:
    """Modulation transfer function of one band-filtered IR (no noise factor).

    ``m(F) = |Σ e[n] e^{−j2πFn/fs}| / Σ e[n]`` with ``e = max(h² − noise_power, 0)`` over
    ``h[:stop_index]``, optionally plus an exponential tail continuing after ``stop_index``
    whose per-sample energy is ``10**((a + b t)/10)`` (t in s from the start of ``h_band``),
    summed analytically.

    Returns
    -------
    ndarray, shape (14,)
        m at :data:`MODULATION_FREQUENCIES_HZ`.
    """
    h = check_signal(h_band, "h_band", ndim=(1,))
    fs = check_fs(fs)
    n1 = h.shape[0] if stop_index is None else int(stop_index)
    e = h[:n1] ** 2
    if noise_power:
        e = np.maximum(e - noise_power, 0.0)  # the IR's own measurement noise removed
    # Decimate the energy envelope before the transform: F <= 12.6 Hz, so summing blocks of
    # q samples changes the result by < (πFq/fs)²/6 relative (q/fs <= 0.5 ms: < 7e-5).
    q = max(1, int(fs // 2000))
    nb = e.shape[0] // q
    t_b = (np.arange(nb) * q + (q - 1) / 2.0) / fs
    eb = e[: nb * q].reshape(nb, q).sum(axis=1)
    rest = e[nb * q:]
    w = 2.0 * np.pi * MODULATION_FREQUENCIES_HZ
    num = np.einsum("ij,j->i", np.exp(-1j * np.outer(w, t_b)), eb)  # no BLAS threads
    if rest.size:
        t_r = (nb * q + np.arange(rest.size)) / fs
        num = num + np.einsum("ij,j->i", np.exp(-1j * np.outer(w, t_r)), rest)
    den = float(e.sum())
    if tail_a_db is not None and tail_b_db_per_s is not None and tail_b_db_per_s < 0:
        t1 = n1 / fs
        a1 = 10.0 ** ((tail_a_db + tail_b_db_per_s * t1) / 10.0)
        r = 10.0 ** (tail_b_db_per_s / (10.0 * fs))
        num = num + a1 * np.exp(-1j * w * t1) / (1.0 - r * np.exp(-1j * w / fs))
        den += a1 / (1.0 - r)
    if not (den > 0):
        raise ParameterError("the band-filtered IR holds no energy, so its modulation transfer "
                             "is undefined; the STI needs an IR with sound in every octave "
                             "125 Hz–8 kHz")
    return np.minimum(np.abs(num) / den, 1.0)


def mtf_from_ir(h: np.ndarray, fs: int, *, onset: int | None = None,
                y_bands: np.ndarray | None = None) -> tuple[np.ndarray, tuple[str, ...]]:
    """MTF matrix (7, 14) of an IR, octave-filtered (causal, IEC 61260-1 class 1).

    Each band is truncated at its Lundeby crosspoint and continued by its fitted late decay
    (see the module notes). Returns the matrix and flags (e.g. a band without measurable
    decay).

    Parameters
    ----------
    h : ndarray, shape (n,)
        Broadband impulse response.
    fs : int, > 0, Hz
    onset : int, optional
        Start index (ISO 3382-1 onset of ``h`` by default).
    y_bands : ndarray, shape (7, n), optional
        ``h`` already filtered causally through the octaves 125 Hz … 8 kHz, i.e.
        ``filter_bands(h, fs, make_bands(fs, "octave", 125, 8000), mode="causal")``; given by
        a caller that has them (:func:`measure.parameters.analyze_ir`) so that they are not
        filtered twice.

    Raises
    ------
    ParameterError
        If ``fs`` cannot carry the 8 kHz octave with a class 1 filter, or ``y_bands`` is not
        shaped (7, n).
    """
    from measure.bands import filter_bands, make_bands
    from measure.decay import ENERGY_RANGE_DB, decay_range_db, lundeby, onset_index, range_text

    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    try:
        bands = make_bands(fs, "octave", 125.0, 8000.0)
    except ParameterError as err:
        raise ParameterError(f"the STI needs the octaves 125 Hz–8 kHz: {err}") from err
    i0 = onset_index(h, fs) if onset is None else int(onset)
    if y_bands is None:
        yb = filter_bands(h, fs, bands, mode="causal")
    else:
        yb = np.asarray(y_bands, dtype=np.float64)
        if yb.shape != (7, h.shape[0]):
            raise ParameterError(f"y_bands has shape {yb.shape}; give the 7 octave-band "
                                 f"signals 125 Hz–8 kHz of h, shape (7, {h.shape[0]})")
    out = np.empty((7, 14))
    flags = []
    short: list[str] = []
    for k, (band, y) in enumerate(zip(bands, yb, strict=True)):
        seg = y[i0:]
        nf = lundeby(seg, fs)
        rng = decay_range_db(seg, nf) if nf.ok else 0.0
        if not rng >= ENERGY_RANGE_DB:
            short.append(f"{band.label} ({range_text(rng)} dB)")
            continue
        if nf.late_fit_db is not None:
            a, b = nf.late_fit_db
            out[k] = mtf_from_band(seg, fs, stop_index=nf.truncation_index, tail_a_db=a,
                                   tail_b_db_per_s=b,
                                   noise_power=nf.noise_power if nf.noise_floor_found else 0.0)
        else:
            out[k] = mtf_from_band(seg, fs)
    if short:
        # the MTF weighs the late energy as the clarity figures do: the same requirement
        raise ParameterError(
            f"the STI needs every octave 125 Hz–8 kHz measured over {ENERGY_RANGE_DB:.0f} dB "
            f"above the noise, and the {', '.join(short)} octave"
            f"{'s have' if len(short) > 1 else ' has'} less; raise the level, lengthen the "
            "sweep or quieten the room")
    return out, tuple(flags)



def _octave_levels(v: float | np.ndarray, name: str) -> np.ndarray:
    out = np.broadcast_to(np.asarray(v, dtype=float), (7,)).copy() \
        if np.ndim(v) == 0 or np.shape(v) == (7,) else None
    if out is None or not np.all(np.isfinite(out)):
        raise ParameterError(f"{name}={v!r} must be one number or 7 numbers (octaves "
                             "125 Hz–8 kHz) in dB")
    return out


def check_noise_levels(snr_db: float | np.ndarray | None = None,
                       speech_spl_db: float | np.ndarray | None = None,
                       noise_spl_db: float | np.ndarray | None = None
                       ) -> tuple[np.ndarray | None, np.ndarray | None, np.ndarray | None]:
    """Check the STI's background-noise arguments (see :func:`sti_from_ir`).

    Returns
    -------
    (snr_db, speech_spl_db, noise_spl_db) : ndarray, shape (7,), or None
        ``snr_db`` is ``speech_spl_db - noise_spl_db`` when the levels are given.

    Raises
    ------
    ParameterError
        If ``snr_db`` comes with the levels, only one of the levels is given, or a value is
        not one finite number or seven.
    """
    if snr_db is not None and (speech_spl_db is not None or noise_spl_db is not None):
        raise ParameterError("give either snr_db or speech_spl_db with noise_spl_db, not both")
    if (speech_spl_db is None) != (noise_spl_db is None):
        raise ParameterError("the STI noise correction needs both speech_spl_db and "
                             "noise_spl_db (the speech-to-noise ratio is their difference); "
                             "give both, or snr_db")
    if speech_spl_db is not None:
        ls = _octave_levels(speech_spl_db, "speech_spl_db")
        ln = _octave_levels(noise_spl_db, "noise_spl_db")
        return ls - ln, ls, ln
    if snr_db is not None:
        return _octave_levels(snr_db, "snr_db"), None, None
    return None, None, None


def sti_from_ir(h: np.ndarray, fs: int, *, onset: int | None = None,
                snr_db: float | np.ndarray | None = None,
                speech_spl_db: float | np.ndarray | None = None,
                noise_spl_db: float | np.ndarray | None = None,
                y_bands: np.ndarray | None = None) -> StiResult:
    """Speech transmission index of an impulse response (IEC 60268-16:2020 indirect method).

    Parameters
    ----------
    h : ndarray, shape (n,)
        Broadband impulse response.
    fs : int, > 0, Hz
        Must carry the 8 kHz octave (at least about 32 kHz).
    onset : int, optional
        Start index (ISO 3382-1 onset of ``h`` by default). The MTF magnitude does not depend
        on it; it only keeps pre-onset noise out.
    snr_db : float or array_like (7,), optional
        Speech-to-background-noise ratio per octave 125 Hz … 8 kHz at the listener, dB, when
        known; applies the factor 1/(1 + 10^(−SNR/10)). None: no background noise.
    speech_spl_db, noise_spl_db : float or array_like (7,), optional
        Instead of ``snr_db``: the absolute speech and background-noise octave levels at the
        listener, dB SPL (one number for all octaves, or seven). Applies the noise factor and
        the IEC 60268-16:2020 Annex A auditory masking and reception threshold
        (:func:`auditory_factor`). Give both or neither, and not with ``snr_db``.
    y_bands : ndarray, shape (7, n), optional
        The octave-band signals of ``h`` when the caller has them (see :func:`mtf_from_ir`).

    Returns
    -------
    StiResult

    Raises
    ------
    ParameterError
        If ``h`` is not a finite 1-D signal, ``fs`` is too low, or ``snr_db`` is malformed.
    """
    snr, ls, ln = check_noise_levels(snr_db, speech_spl_db, noise_spl_db)
    m, flags = mtf_from_ir(h, fs, onset=onset, y_bands=y_bands)
    if ls is not None:
        m = m * auditory_factor(ls, ln)[:, None]
    elif snr is not None:
        m = m / (1.0 + 10.0 ** (-snr[:, None] / 10.0))
    res = sti_from_mtf(m, snr_db=snr, flags=flags)
    if ls is None:
        return res
    return dataclasses.replace(res, speech_spl_db=ls, noise_spl_db=ln)
