"""IEC 61260-1:2014 fractional-octave filter bank (octaves and third octaves).

Frequencies
-----------
Mid-band frequencies are the exact base-10 values of IEC 61260-1:2014, 5.2–5.4: with the octave
ratio ``G = 10**(3/10)`` and the reference ``fr = 1000 Hz``, third-octave bands sit at
``fr * G**(x/3) = 1000 * 10**(x/10)`` and octave bands at ``fr * G**k``; band edges are
``fm * G**(∓1/(2b))``. Labels are the nominal values of IEC 61260-1 Annex E (the R10
preferred numbers: 25, 31.5, 40, 50, 63, 80, 100, 125, ... 12.5k, 16k, 20k).

Filters
-------
Each band is a Butterworth band-pass made by ``scipy.signal.butter(N, [f1, f2], 'bandpass',
fs=fs, output='sos')`` (−3 dB exactly at the band edges). ``N = 3`` (a 6th-order band-pass) is
the usual choice; this module does not assume it is good enough: for every band at the sample
rate in use it checks the magnitude response against the class 1 acceptance limits of
IEC 61260-1:2014 Table 1 (Formula 9 breakpoints for third octaves, Formula 11 interpolation in
between) and raises the order until the band passes (bilinear warping near Nyquist is what makes
``N = 3`` fail for the top bands). A band that no order up to :data:`MAX_ORDER` can make
compliant at that sample rate is refused.

Which filtering for which figure
--------------------------------
Two modes are offered by :func:`filter_bands`, and the analysis uses them as follows:

* **Decay analysis (EDT, T20, T30, Lundeby) uses ``mode="reversed"``**: the IR is reversed in
  time, filtered causally with the compliant filter, and reversed back. The magnitude response is
  the same class 1 response (a single pass, not the squared response of ``sosfiltfilt``, whose
  −6 dB edges fail class 1), but the filter's own ringing now precedes the room's decay instead
  of being added to it. ISO 3382-2:2008, 7.3 and its note: a causal filter leaves the decay
  unbiased only when ``B·T > 16``; time-reversed filtering relaxes this to ``B·T > 4``. That
  quadruples the shortest reverberation time that can be measured in each band (for the 125 Hz
  octave: 0.045 s instead of 0.18 s).
* **Energy ratios (C50, C80, D50, Ts, DRR) and the STI use ``mode="causal"``**: reversed
  filtering smears band energy to *before* the direct sound, where the ISO 3382-1 onset (taken
  once on the broadband IR) would cut it off, so the early/late split would depend on the
  filter. A causal filter delays energy only a little (its group delay) and treats every band's
  onset consistently; the sums then start at the same broadband onset in every band.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from measure._validate import check_choice, check_fs, check_positive, check_signal
from measure.errors import ParameterError

__all__ = [
    "G",
    "complementary_masks",
    "MAX_ORDER",
    "BASE_ORDER",
    "DEFAULT_RANGES_HZ",
    "Band",
    "band_centers",
    "make_bands",
    "band_filter_sos",
    "filter_order",
    "filter_bands",
    "class1_deviation_db",
    "class1_limits_db",
]

BandKind = Literal["octave", "third"]
FilterMode = Literal["causal", "reversed"]

#: Octave frequency ratio, base 10 (IEC 61260-1:2014, 3.4 / 5.2).
G: float = 10.0 ** (3.0 / 10.0)
#: Reference frequency (IEC 61260-1:2014, 5.2).
F_REF_HZ: float = 1000.0
#: Butterworth order tried first (scipy ``butter`` N; the band-pass has order 2N).
BASE_ORDER: int = 3
#: Highest Butterworth order tried before a band is refused at a given sample rate.
MAX_ORDER: int = 8
#: Default analysis ranges by nominal frequency: octaves 63 Hz–8 kHz, third octaves 50 Hz–10 kHz
#: (ISO 3382-1 5.1 asks for at least 125 Hz–4 kHz; the wider range is common practice).
DEFAULT_RANGES_HZ: dict[str, tuple[float, float]] = {"octave": (63.0, 8000.0),
                                                     "third": (50.0, 10000.0)}

# R10 preferred numbers: the mantissas of the nominal third-octave frequencies
# (IEC 61260-1:2014 Annex E, Table E.1: 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, ...).
_R10 = (1.0, 1.25, 1.6, 2.0, 2.5, 3.15, 4.0, 5.0, 6.3, 8.0)

# IEC 61260-1:2014 Table 1, class 1, octave band: (exponent e of Omega = G**e, min dB, max dB).
# Two entries at e = 1/2: "just inside" the edge (max +5.3) and "just outside" (min +1.2).
_CLASS1_TABLE: tuple[tuple[float, float, float], ...] = (
    (0.0, -0.4, 0.4),
    (1 / 8, -0.4, 0.5),
    (1 / 4, -0.4, 0.7),
    (3 / 8, -0.4, 1.4),
    (1 / 2, -0.4, 5.3),   # just inside the band edge
    (1 / 2, 1.2, math.inf),  # just outside the band edge
    (1.0, 16.6, math.inf),
    (2.0, 40.5, math.inf),
    (3.0, 60.0, math.inf),
    (4.0, 70.0, math.inf),
)


@dataclass(frozen=True, slots=True, eq=False)
class Band:
    """One fractional-octave band.

    Attributes
    ----------
    kind : {"octave", "third"}
        Bandwidth designator: 1/1 or 1/3 octave.
    index : int
        Band number x: ``center_hz = 1000 * G**(x/b)`` with b = 1 (octave) or 3 (third).
    center_hz : float
        Exact base-10 mid-band frequency, Hz (e.g. 1995.262... for the "2k" octave).
    label : str
        Nominal frequency as printed: "63", "125", "1k", "2k", "12.5k".
    f_lo_hz, f_hi_hz : float
        Band edges ``center_hz * G**(∓1/(2b))``, Hz.
    """

    kind: str
    index: int
    center_hz: float
    label: str
    f_lo_hz: float
    f_hi_hz: float

    @property
    def nominal_hz(self) -> float:
        """Nominal mid-band frequency in Hz (e.g. 63.0 for the band at 63.096 Hz)."""
        return _nominal_hz(self.kind, self.index)

    @property
    def name(self) -> str:
        """Readable name with unit: "125 Hz", "1 kHz", "12.5 kHz"."""
        return f"{self.label[:-1]} kHz" if self.label.endswith("k") else f"{self.label} Hz"

    @property
    def bandwidth_hz(self) -> float:
        """Bandwidth ``f_hi_hz - f_lo_hz`` in Hz (0.7046·fm octave, 0.2308·fm third)."""
        return self.f_hi_hz - self.f_lo_hz

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Band):
            return NotImplemented
        return self.kind == other.kind and self.index == other.index

    def __hash__(self) -> int:
        return hash((self.kind, self.index))

    def __repr__(self) -> str:
        return f"Band({self.kind} {self.label}: {self.center_hz:.3f} Hz)"


def _b(kind: str) -> int:
    return 1 if kind == "octave" else 3


def _third_index(kind: str, index: int) -> int:
    return 3 * index if kind == "octave" else index


def _nominal_hz(kind: str, index: int) -> float:
    x = _third_index(kind, index)
    return _R10[x % 10] * 10.0 ** (x // 10 + 3)


def _label(nominal_hz: float) -> str:
    if nominal_hz >= 1000.0:
        return f"{nominal_hz / 1000.0:g}k"
    return f"{nominal_hz:g}"


def _make_band(kind: str, index: int) -> Band:
    b = _b(kind)
    fm = F_REF_HZ * G ** (index / b)
    half = G ** (1.0 / (2 * b))
    return Band(kind=kind, index=index, center_hz=fm, label=_label(_nominal_hz(kind, index)),
                f_lo_hz=fm / half, f_hi_hz=fm * half)


def band_centers(kind: BandKind, f_lo_hz: float, f_hi_hz: float) -> tuple[Band, ...]:
    """All bands of one kind whose mid-band frequency lies in [f_lo_hz, f_hi_hz].

    A band is included when its nominal or exact mid-band frequency is within the range, with a
    tolerance of a quarter band, so ``band_centers("octave", 63, 8000)`` gives the nine octaves
    63 Hz … 8 kHz although 63.096 > 63 and 7943 < 8000. No sample-rate check is made here; see
    :func:`make_bands`.

    Parameters
    ----------
    kind : {"octave", "third"}
    f_lo_hz, f_hi_hz : float, > 0, Hz, f_lo_hz <= f_hi_hz

    Returns
    -------
    tuple of Band
        In ascending order; ``[b.center_hz for b in ...]`` gives the exact centres.

    Raises
    ------
    ParameterError
        If ``kind`` is not one of the choices, or the range is empty or inverted.

    Examples
    --------
    >>> [b.label for b in band_centers("octave", 125, 4000)]
    ['125', '250', '500', '1k', '2k', '4k']
    """
    check_choice(kind, "kind", ("octave", "third"))
    lo = check_positive(f_lo_hz, "f_lo_hz", unit="Hz")
    hi = check_positive(f_hi_hz, "f_hi_hz", unit="Hz")
    if lo > hi:
        raise ParameterError(f"f_lo_hz={lo:g} Hz is above f_hi_hz={hi:g} Hz; swap them")
    b = _b(kind)
    tol = G ** (1.0 / (4 * b))
    x_lo = math.floor(b * math.log(lo / tol / F_REF_HZ, G)) - 1
    x_hi = math.ceil(b * math.log(hi * tol / F_REF_HZ, G)) + 1
    out = []
    for x in range(x_lo, x_hi + 1):
        band = _make_band(kind, x)
        if lo / tol <= band.center_hz <= hi * tol:
            out.append(band)
    if not out:
        raise ParameterError(
            f"no {kind} band has its mid-band frequency in {lo:g}–{hi:g} Hz; widen the range")
    return tuple(out)


def _formula9(kind: str, om_oct: np.ndarray) -> np.ndarray:
    """Octave breakpoints Ω_oct moved to a 1/b-octave band (IEC 61260-1:2014 Formula 9)."""
    b = _b(kind)
    r = (G ** (1.0 / (2 * b)) - 1.0) / (G ** 0.5 - 1.0)
    return 1.0 + r * (np.asarray(om_oct, dtype=float) - 1.0)


def class1_limits_db(band: Band, f_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Class 1 acceptance limits on relative attenuation at frequencies ``f_hz``.

    IEC 61260-1:2014 Table 1 (octave), converted to the band's bandwidth by Formula 9 (the
    breakpoints of a 1/b-octave filter are ``1 + (G**(1/(2b)) - 1)/(G**(1/2) - 1)·(Ω_oct - 1)``,
    lower side the reciprocal, Formula 10) and interpolated linearly in lg Ω between breakpoints
    (Formula 11). Exactly at a band edge the looser "just inside" maximum and the "just outside"
    minimum both apply.

    Returns
    -------
    (min_db, max_db) : arrays shaped like ``f_hz``
        Allowed range of ``A(f) - A(fm)`` in dB (positive = more attenuation); max may be inf.
    """
    lg_b = np.log10(_formula9(band.kind, np.array([G ** e for e, _, _ in _CLASS1_TABLE])))
    mins = np.array([lo for _, lo, _ in _CLASS1_TABLE])
    maxs = np.array([hi for _, _, hi in _CLASS1_TABLE])
    lg = np.abs(np.log10(np.asarray(f_hz, dtype=float) / band.center_hz))
    lg_edge = lg_b[4]
    eps = 1e-12
    lo_out = np.empty_like(lg)
    hi_out = np.empty_like(lg)
    inside = lg <= lg_edge + eps
    # inside the band: breakpoints 0..4 (max finite)
    lo_out[inside] = np.interp(lg[inside], lg_b[:5], mins[:5])
    hi_out[inside] = np.interp(lg[inside], lg_b[:5], maxs[:5])
    out = ~inside
    last = lg_b[-1]
    lo_out[out] = np.interp(np.minimum(lg[out], last), lg_b[5:], mins[5:])
    hi_out[out] = np.inf
    at_edge = np.abs(lg - lg_edge) <= 1e-9
    lo_out[at_edge] = mins[5]
    return lo_out, hi_out


def _tabulated_freqs(band: Band) -> np.ndarray:
    """The tabulated normalised frequencies of Table 1 (Formula 9 for b = 3), both sides."""
    exps = sorted({e for e, _, _ in _CLASS1_TABLE})
    om = _formula9(band.kind, np.array([G ** e for e in exps]))
    return band.center_hz * np.concatenate([1.0 / om[::-1], om[1:]])


def class1_deviation_db(band: Band, fs: int, sos: np.ndarray, *, dense: bool = True
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Relative attenuation of a filter and the class 1 limits at the check frequencies.

    The check frequencies are the tabulated normalised frequencies (both sides, Formula 9 for
    third octaves) and, with ``dense=True``, 400 more log-spaced points between fm·G**-4 and
    fm·G**4 where the limits are interpolated (Formula 11). Frequencies at or above Nyquist are
    left out (the filter has no response there to test).

    Returns
    -------
    f_hz, delta_db, min_db, max_db : ndarray
        ``delta_db = A(f) - A(fm)`` with ``A = -20 lg |H|``.
    """
    f = _tabulated_freqs(band)
    if dense:
        f = np.concatenate([f, band.center_hz * G ** np.linspace(-4.0, 4.0, 401)])
    f = np.unique(f[f < fs / 2.0])
    mag = np.maximum(_sos_magnitude(sos, np.concatenate([[band.center_hz], f]), fs), 1e-300)
    a = -20.0 * np.log10(mag)
    delta = a[1:] - a[0]
    lo, hi = class1_limits_db(band, f)
    return f, delta, lo, hi


def _sos_response(sos: np.ndarray, f_hz: np.ndarray, fs: int) -> np.ndarray:
    """H(e^{jω}) of second-order sections at ``f_hz`` (as scipy.signal.sosfreqz, vectorised
    over all frequencies at once: the class 1 check evaluates it for every order tried)."""
    z1 = np.exp(-2j * np.pi * np.asarray(f_hz, dtype=float) / fs)
    z2 = z1 * z1
    s = np.asarray(sos)
    num = s[:, 0:1] + s[:, 1:2] * z1 + s[:, 2:3] * z2
    den = s[:, 3:4] + s[:, 4:5] * z1 + s[:, 5:6] * z2
    return np.prod(num / den, axis=0)


def _sos_magnitude(sos: np.ndarray, f_hz: np.ndarray, fs: int) -> np.ndarray:
    """|H(e^{jω})| of second-order sections (see :func:`_sos_response`)."""
    return np.abs(_sos_response(sos, f_hz, fs))


def _design(band: Band, fs: int, order: int) -> np.ndarray:
    from scipy.signal import butter

    return butter(order, [band.f_lo_hz, band.f_hi_hz], btype="bandpass", fs=fs, output="sos")


@functools.lru_cache(maxsize=512)
def _compliant_design(kind: str, index: int, fs: int) -> tuple[int, np.ndarray] | None:
    band = _make_band(kind, index)
    if band.f_hi_hz >= fs / 2.0:
        return None
    for order in range(BASE_ORDER, MAX_ORDER + 1):
        sos = _design(band, fs, order)
        if not np.all(np.isfinite(sos)):
            continue
        _, d, lo, hi = class1_deviation_db(band, fs, sos, dense=True)
        if np.all(d >= lo - 1e-9) and np.all(d <= hi + 1e-9):
            sos.setflags(write=False)
            return order, sos
    return None


def _refusal(band: Band, fs: int) -> str:
    if band.f_hi_hz >= fs / 2.0:
        return (f"the {band.name} {band.kind} band reaches {band.f_hi_hz:.0f} Hz, above the "
                f"Nyquist frequency {fs / 2:.0f} Hz at fs={fs}")
    return (f"no Butterworth band-pass of order up to {2 * MAX_ORDER} meets the IEC 61260-1 "
            f"class 1 limits for the {band.name} {band.kind} band at fs={fs}")


def make_bands(fs: int, kind: BandKind = "octave", f_lo_hz: float | None = None,
               f_hi_hz: float | None = None) -> tuple[Band, ...]:
    """The analysis bands for a sample rate: defaults, or a range within what ``fs`` allows.

    Parameters
    ----------
    fs : int, > 0, Hz
        Sample rate of the signals that will be filtered.
    kind : {"octave", "third"}
    f_lo_hz, f_hi_hz : float, Hz, optional
        Nominal range. Defaults: octaves 63 Hz–8 kHz, third octaves 50 Hz–10 kHz; a default
        range is cut silently at the top to the bands that ``fs`` allows.

    Returns
    -------
    tuple of Band
        Every band has a class 1 compliant filter at ``fs`` (see :func:`filter_order`).

    Raises
    ------
    ParameterError
        If a band inside an explicitly requested range cannot be made class 1 compliant at
        ``fs`` (e.g. its upper edge is above Nyquist); the message says which and what to do.

    Examples
    --------
    >>> [b.label for b in make_bands(48000, "octave")]
    ['63', '125', '250', '500', '1k', '2k', '4k', '8k']
    >>> [b.label for b in make_bands(16000, "octave")]
    ['63', '125', '250', '500', '1k', '2k', '4k']
    """
    fs = check_fs(fs)
    check_choice(kind, "kind", ("octave", "third"))
    d_lo, d_hi = DEFAULT_RANGES_HZ[kind]
    explicit_hi = f_hi_hz is not None
    explicit_lo = f_lo_hz is not None
    bands = band_centers(kind, d_lo if f_lo_hz is None else f_lo_hz,
                         d_hi if f_hi_hz is None else f_hi_hz)
    keep = []
    for band in bands:
        if _compliant_design(band.kind, band.index, fs) is not None:
            keep.append(band)
            continue
        if explicit_hi or explicit_lo:
            raise ParameterError(
                f"{_refusal(band, fs)}, so its figures could not be trusted; ask for a range "
                f"that ends lower (e.g. f_hi_hz={_highest_ok(kind, fs):g}) or use a higher "
                "sample rate")
    if not keep:
        raise ParameterError(
            f"no {kind} band in the default range can be filtered at fs={fs}; use a higher "
            "sample rate")
    return tuple(keep)


def _highest_ok(kind: str, fs: int) -> float:
    x = math.floor(_b(kind) * math.log(fs / 2.0 / F_REF_HZ, G))
    while x > -40:
        if _compliant_design(kind, x, fs) is not None:
            return _make_band(kind, x).nominal_hz
        x -= 1
    return 0.0


def filter_order(band: Band, fs: int) -> int:
    """The Butterworth N used for ``band`` at ``fs`` (>= 3; the band-pass has order 2N).

    Raises
    ------
    ParameterError
        If no order up to :data:`MAX_ORDER` meets class 1 for this band at ``fs``.
    """
    return _checked(band, fs)[0]


def band_filter_sos(band: Band, fs: int) -> np.ndarray:
    """Second-order sections of the class 1 compliant band-pass for ``band`` at ``fs``.

    The lowest Butterworth order N >= 3 whose magnitude response lies within the
    IEC 61260-1:2014 class 1 limits at every tabulated normalised frequency and on a dense grid
    in between. The returned array is read-only (it is cached).

    Raises
    ------
    ParameterError
        If no order up to :data:`MAX_ORDER` meets class 1 for this band at ``fs``.
    """
    return _checked(band, fs)[1]


def _checked(band: Band, fs: int) -> tuple[int, np.ndarray]:
    fs = check_fs(fs)
    if not isinstance(band, Band):
        raise ParameterError(f"band={band!r} is not a Band; make bands with make_bands()")
    design = _compliant_design(band.kind, band.index, fs)
    if design is None:
        raise ParameterError(f"{_refusal(band, fs)}; leave this band out or record faster")
    return design


def filter_bands(h: np.ndarray, fs: int, bands: tuple[Band, ...] | list[Band], *,
                 mode: FilterMode) -> np.ndarray:
    """Filter a 1-D signal through each band's class 1 filter.

    Parameters
    ----------
    h : ndarray, shape (n,)
        Signal (usually an impulse response), time on the last axis.
    fs : int, > 0, Hz
    bands : sequence of Band
    mode : {"causal", "reversed"}
        ``"causal"``: ordinary forward filtering (``sosfilt``). ``"reversed"``: reverse in time,
        filter forward, reverse back; same magnitude response, the filter's ringing placed
        before the signal (for decay analysis, ISO 3382-2 7.3 note). See the module notes.

    Returns
    -------
    ndarray, shape (n_bands, n), float64

    Raises
    ------
    ParameterError
        If ``h`` is not a finite 1-D signal, ``mode`` is unknown, or a band is not allowed at fs.
    """
    from scipy.signal import sosfilt

    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    check_choice(mode, "mode", ("causal", "reversed"))
    out = np.empty((len(bands), h.shape[-1]), dtype=np.float64)
    src = h[::-1] if mode == "reversed" else h
    for i, band in enumerate(bands):
        # np.array: a writable copy of the cached design; sosfilt refuses read-only arrays
        y = sosfilt(np.array(band_filter_sos(band, fs)), src)
        out[i] = y[::-1] if mode == "reversed" else y
    return out


def complementary_masks(band_centers_hz: Sequence[float], freqs_hz: np.ndarray, *,
                        transition_octaves: float) -> np.ndarray:
    """Amplitude-complementary band masks: ``Σ_b W_b(f) = 1`` at every frequency.

    Used to split a spectrum into bands that add back up exactly (the virtual room's per-band
    decays, the model's per-band delay networks); not an IEC 61260-1 analysis filter.

    Between neighbouring centres ``f_b`` and ``f_{b+1}`` the masks cross with a raised cosine
    (``cos²``/``sin²``) of width ``transition_octaves`` centred on the geometric mean of the two
    centres; the lowest band extends to DC and the highest to Nyquist.

    Returns
    -------
    ndarray, shape (bands, len(freqs_hz))
    """
    fc = np.asarray(band_centers_hz, dtype=np.float64)
    n_b = fc.size
    f = np.maximum(np.asarray(freqs_hz, dtype=np.float64), 1e-6)
    lf = np.log2(f)
    # up[b](f): share of the bands above the crossover between b and b+1
    up = np.empty((max(n_b - 1, 0), f.size))
    for j in range(n_b - 1):
        edge = 0.5 * (np.log2(fc[j]) + np.log2(fc[j + 1]))
        width = min(transition_octaves, np.log2(fc[j + 1] / fc[j]))
        u = np.clip((lf - edge) / width + 0.5, 0.0, 1.0)
        up[j] = np.sin(0.5 * np.pi * u) ** 2
    # W_b = up[b−1]·(1 − up[b]): the sum telescopes to one. Transition b spans at most
    # [log2 f_b, log2 f_b+1] (width <= the spacing, centred on the midpoint), so transitions
    # never overlap and this equals the product form W_b = (1 − up[b])·Π_{k<b} up[k].
    masks = np.ones((n_b, f.size))
    if n_b > 1:
        masks[:-1] -= up
        masks[1:] *= up
    return masks
