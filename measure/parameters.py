"""ISO 3382-1 room figures of an impulse response: the per-band table and the single numbers.

:func:`analyze_ir` is the one call: it takes a broadband IR and returns :class:`RoomFigures`
with, per band and for the broadband IR,

* EDT, T20, T30 (:mod:`measure.decay`, time-reversed band filtering) with the measurement
  uncertainty of T20 and T30 from bandwidth and decay time (ISO 3382-2:2008 Annex A, formula
  from memory: see :func:`t20_uncertainty_s`);
* C50, C80, D50, centre time Ts (ISO 3382-1:2009 A.2.3–A.2.4) and the direct-to-reverberant
  ratio, from causally filtered bands;
* the peak-to-noise ratio and flags saying why a figure is missing;

plus the single-number averages over the 500 Hz and 1 kHz octaves (ISO 3382-1:2009 Table A.1)
and the STI (:mod:`measure.intelligibility`). ``RoomFigures.to_dict()`` is the JSON scripting
contract of ``measure analyze --json``.

Energy sums
-----------
All sums start at the ISO 3382-1 onset of the broadband IR. In a band the start is moved later
by the band filter's group delay at mid-band, so that the 50/80 ms split falls at the same
acoustic time in every band (a causal filter delays the whole band response by about that
much; without the shift C80 in the 250 Hz octave would be biased by about 0.3 dB for
T = 1.2 s — derived: group delay 3.6 ms times dC80/dte = 83 dB/s of an exponential decay). The late sums end at the band's Lundeby crosspoint, the mean
noise power is subtracted and the fitted exponential tail is added analytically, exactly as for
the decay curve, so background noise in the IR does not lower C80 or raise Ts.

Plausibility guard
------------------
After the ISO checks, a figure outside a physically plausible range is set to null with a flag
(:func:`_plausibility`): |C50|, |C80|, |DRR| above 60 dB, D50 outside 0…1, Ts before the sums
start, EDT/T20/T30 below 20 ms or below five time constants of the band filter, and T20/T30
whose fit has ξ above 100 ‰. It guards against a stage misreading an unusual response (as the
noise-floor search once misread the silent gaps of a sparse comb response, giving C80 of
2400 dB); it is not a substitute for finding such a cause.

Direct-to-reverberant ratio
---------------------------
The direct sound is the broadband IR up to 2.5 ms after the direct-sound peak (common practice;
a 0.5 ms half-Hann taper ends the window). The window is cut on the broadband IR and the two
parts are filtered separately (filtering is linear), so the band DRR is not blurred by the band
filter's ringing, which at low frequencies lasts far longer than 2.5 ms.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from measure._validate import check_fs, check_signal
from measure.bands import (
    Band,
    band_centers,
    band_filter_sos,
    filter_bands,
    filter_order,
    make_bands,
)
from measure.decay import (
    DECAY_CONSTANT,
    ENERGY_RANGE_DB,
    NOISE_SCATTER_LIMIT_JND,
    DecayFigures,
    NoiseFloor,
    analyze_decay,
    lundeby,
    noise_scatter,
    onset_index,
    range_text,
)
from measure.deconvolve import ResponseContext
from measure.errors import ParameterError
from measure.intelligibility import StiResult, check_noise_levels, sti_from_ir

__all__ = [
    "JND_EDT_RELATIVE",
    "JND_T_RELATIVE",
    "JND_C80_DB",
    "JND_C50_DB",
    "JND_D50",
    "JND_TS_S",
    "JND_G_DB",
    "DIRECT_WINDOW_S",
    "PLAUSIBLE_ENERGY_RATIO_DB",
    "MIN_DECAY_TIME_S",
    "MIN_FILTER_TIME_CONSTANTS",
    "MAX_XI_PERMILLE",
    "CONTRACT_KEYS",
    "t20_uncertainty_s",
    "t30_uncertainty_s",
    "filter_group_delay_s",
    "EnergyFigures",
    "energy_figures",
    "BandFigures",
    "SingleNumbers",
    "RoomFigures",
    "analyze_ir",
]

# Just-noticeable differences, ISO 3382-1:2009 Table A.1.
#: EDT: 5 % relative (ISO 3382-1 Table A.1).
JND_EDT_RELATIVE: float = 0.05
#: T20/T30: no entry of their own in Table A.1; the 5 % of EDT is the usual convention.
JND_T_RELATIVE: float = 0.05
#: C80: 1 dB (ISO 3382-1 Table A.1); C50 borrows it by convention.
JND_C80_DB: float = 1.0
JND_C50_DB: float = 1.0
#: D50: 0.05 (ISO 3382-1 Table A.1).
JND_D50: float = 0.05
#: Ts: 10 ms (ISO 3382-1 Table A.1).
JND_TS_S: float = 0.010
#: G: 1 dB (ISO 3382-1 Table A.1).
JND_G_DB: float = 1.0

#: Length of the direct sound after its peak for the DRR (common practice).
DIRECT_WINDOW_S: float = 0.0025
_DIRECT_TAPER_S = 0.0005

#: Keys of every band object (and the broadband object) in the JSON contract.
CONTRACT_KEYS: tuple[str, ...] = (
    "center_hz", "label", "edt_s", "t20_s", "t30_s", "c50_db", "c80_db", "d50", "ts_s",
    "drr_db", "peak_to_noise_db", "flags")

# Integrated-impulse-response method counted as an ensemble of n = 10 decays, one position
# (ISO 3382-2:2008 Annex A, from memory; the spread of T20/T30 over 40 noise realisations in
# tests/test_parameters.py agrees with these formulas within 40 %). Searched 2026-12-02 (docs,
# pages, code, issues corpora): no public source quoting the formulas was found; one vendor
# page (placidinstruments.com/blog/reverberation-time-rt60-measurement) confirms only that
# ISO 3382-2 gives the standard deviation of T20 and T30 from the number of averages and the
# bandwidth, and calls the annex "B". No source gave an EDT uncertainty, so none is reported.
_N_DECAYS = 10
_N_POSITIONS = 1


def t20_uncertainty_s(t20_s: float, bandwidth_hz: float, *, n_decays: int = _N_DECAYS,
                      n_positions: int = _N_POSITIONS) -> float:
    """Standard uncertainty of T20 (ISO 3382-2:2008 Annex A, formula from memory).

    ``σ(T20) = 0.88 T20 √((1 + 1.90/n) / (N B T20))`` with B the filter bandwidth in Hz, n the
    number of decays averaged (10 for the integrated impulse response) and N the positions.

    Notes
    -----
    Not confirmed from a public source (searched docs, pages, code and issue corpora; see the
    note above ``_N_DECAYS``): the coefficients are from memory, their scale is checked by a
    Monte-Carlo test (tests/test_parameters.py, ±40 %). There is no EDT counterpart: no source
    found gives one.
    """
    return 0.88 * t20_s * math.sqrt((1.0 + 1.90 / n_decays) / (n_positions * bandwidth_hz * t20_s))


def t30_uncertainty_s(t30_s: float, bandwidth_hz: float, *, n_decays: int = _N_DECAYS,
                      n_positions: int = _N_POSITIONS) -> float:
    """Standard uncertainty of T30 (ISO 3382-2:2008 Annex A, formula from memory).

    ``σ(T30) = 0.55 T30 √((1 + 1.52/n) / (N B T30))``; see :func:`t20_uncertainty_s`.
    """
    return 0.55 * t30_s * math.sqrt((1.0 + 1.52 / n_decays) / (n_positions * bandwidth_hz * t30_s))


@functools.lru_cache(maxsize=512)
def _filter_timing(kind: str, index: int, fs: int) -> tuple[float, float]:
    """(group delay at mid-band, 5–95 % energy spread of the impulse response), seconds."""
    from scipy.signal import sosfilt

    from measure.bands import _make_band, _sos_response

    band = _make_band(kind, index)
    sos = np.array(band_filter_sos(band, fs))  # a writable copy: sosfilt refuses read-only
    # group delay: -dφ/dω at fm by a central difference of the unwrapped phase
    f = band.center_hz * np.array([1 - 1e-4, 1 + 1e-4])
    hf = _sos_response(sos, f, fs)
    dphi = np.angle(hf[1] / hf[0])
    gd = -dphi / (2 * np.pi * (f[1] - f[0]))
    n = int(min(4 * fs, max(fs * 0.05, 10 * fs / band.bandwidth_hz)))
    imp = np.zeros(n)
    imp[0] = 1.0
    y = sosfilt(sos, imp)
    c = np.cumsum(y * y)
    c /= c[-1]
    spread = (np.searchsorted(c, 0.95) - np.searchsorted(c, 0.05)) / fs
    return float(gd), float(spread)


def filter_group_delay_s(band: Band, fs: int) -> float:
    """Group delay of ``band``'s class 1 filter at its mid-band frequency, s.

    The energy sums of a causally filtered band start this much after the broadband onset.
    """
    return _filter_timing(band.kind, band.index, check_fs(fs))[0]


@dataclass(frozen=True, slots=True, eq=False)
class EnergyFigures:
    """Energy parameters of one band (ISO 3382-1:2009 A.2.3–A.2.4) and the DRR.

    Attributes
    ----------
    c50_db, c80_db : float or None
        Clarity, 10 lg(E(0…te)/E(te…∞)), te = 50 / 80 ms.
    d50 : float or None
        Definition, E(0…50 ms)/E(0…∞).
    ts_s : float or None
        Centre time Σ t h² / Σ h², s.
    drr_db : float or None
        Direct-to-reverberant ratio, dB (direct: up to 2.5 ms after the direct peak).
    start_index : int
        Sample where the sums start (onset plus the band filter's group delay).
    flags : tuple of str
    total_energy : float or None
        The band's noise-corrected, compensated energy Σ h² (for the source-level check).
    """

    c50_db: float | None
    c80_db: float | None
    d50: float | None
    ts_s: float | None
    drr_db: float | None
    start_index: int
    flags: tuple[str, ...] = ()
    total_energy: float | None = None


#: At most this share of the energy after a split time (of the first moment, for Ts; of the
#: reverberant energy, for the DRR) may come from extrapolating the band's late decay past the
#: point where it meets the noise (Lundeby's compensation). Beyond it the figure rests more on
#: the fitted slope than on the response: a slope 2× wrong then moves C50 by about 1 dB
#: (derived: 10 lg(1 + 0.25) = 0.97 dB for a tail half as long), so the figure is left out
#: (common practice for the bound).
MAX_EXTRAPOLATED_SHARE: float = 0.25


#: The energy figures' noise scatter, measured against the estimate: over 12 noise
#: realisations of a 63 Hz octave 20-23 dB above rumble noise, C80 scattered by 0.60 dB where
#: the estimate gave 0.40-0.49 dB (and its errors leaned +0.4 dB); the estimate for C50, C80,
#: D50 and Ts is taken 1.5 times (measured factor, rounded up).
ENERGY_SCATTER_FACTOR: float = 1.5


def _clarity_scatter_db(noise_power: float, early: float, late: float,
                        bandwidth_hz: float | None, fs: int) -> float:
    """1 σ scatter (dB) of C = 10 lg(early/late) from the noise left in the band: each sum
    carries the decay-noise cross term of :func:`measure.decay.noise_scatter`, taken as
    independent (derived as for the decay times), times ENERGY_SCATTER_FACTOR."""
    if bandwidth_hz is None or not noise_power > 0:
        return 0.0
    e_e = noise_scatter(noise_power, early, bandwidth_hz, fs, 0.0)
    e_l = noise_scatter(noise_power, late, bandwidth_hz, fs, 0.0)
    return ENERGY_SCATTER_FACTOR * 10.0 / math.log(10.0) * math.hypot(e_e, e_l)


def _line_energy(a_db: float, b_db: float, k: int, fs: int) -> float:
    """Σ_{n >= k} 10**((a + b n/fs)/10): energy of the late decay line from sample k on."""
    if not (b_db < 0):
        return 0.0
    r = 10.0 ** (b_db / (10.0 * fs))
    return float(10.0 ** ((a_db + b_db * k / fs) / 10.0) / (1.0 - r))


def _line_moment(a_db: float, b_db: float, k: int, fs: int) -> float:
    """Σ_{n >= k} (n/fs)·10**((a + b n/fs)/10): first moment of the late line from k on."""
    if not (b_db < 0):
        return 0.0
    r = 10.0 ** (b_db / (10.0 * fs))
    a1 = 10.0 ** ((a_db + b_db * k / fs) / 10.0)
    return float(a1 * ((k / fs) / (1.0 - r) + (r / (1.0 - r) ** 2) / fs))


def energy_figures(y: np.ndarray, fs: int, *, start: int, y_direct: np.ndarray | None = None,
                   label: str = "", first: int | None = None, noise: NoiseFloor | None = None,
                   noise_origin: int | None = None, decay_range_db: float | None = None,
                   bandwidth_hz: float | None = None) -> EnergyFigures:
    """C50, C80, D50, Ts (and DRR when the direct part is given) of one filtered IR.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Causally band-filtered IR (or the broadband IR).
    fs : int, > 0, Hz
    start : int
        First sample of the sums: the broadband onset, plus the band filter's group delay.
    y_direct : ndarray, shape (m,), optional
        The direct-sound window of the broadband IR passed through the same filter (m <= n);
        the DRR is ``Σ y_direct² / Σ (y − y_direct)²`` with the reverberant sum noise-corrected
        and tail-compensated like the others.
    label : str
        Band name for flags.
    first : int, optional
        First sample counted as early energy (default ``start``). A causal band filter starts
        to answer the direct sound at the broadband onset and peaks about its group delay
        later; the sums must include that rise, or the band's direct sound is partly lost
        and depends on where between two samples it fell (measured: up to 0.7 dB of C80 at
        8 kHz between a true response and the same response shifted by half a sample).
        Times (the te split, Ts) still count from ``start``.
    noise : NoiseFloor, optional
        The band's noise-floor analysis from its decay figures (:func:`analyze_decay` of the
        same band), whose index 0 is sample ``noise_origin`` of ``y``: the energy figures then
        use the same noise power, truncation point and late decay line as the decay times, so
        the two can never tell different stories. Without it, :func:`measure.decay.lundeby`
        runs on ``y`` from ``first``.
    noise_origin : int, optional
        See ``noise``.
    decay_range_db : float, optional
        The band's decay above the noise (:attr:`DecayFigures.decay_range_db`): below
        :data:`measure.decay.ENERGY_RANGE_DB` every figure here is None.
    bandwidth_hz : float, optional
        The band's width: Ts is None when the noise left in the band scatters it by more than
        half its 10 ms JND (σ_Ts = √2·(T/13.8155)·ε₀ with ε₀ of
        :func:`measure.decay.noise_scatter` at 0 dB: the decay-noise cross term of the first
        moment of an exponential decay of time T, derived as for the decay times, times
        ENERGY_SCATTER_FACTOR); so are C50, C80 and D50 when theirs exceeds half of 1 dB.

    Notes
    -----
    ISO 3382-1:2009 A.2.3–A.2.4: ``C_te = 10 lg(∫_0^te p² / ∫_te^∞ p²)``,
    ``D50 = ∫_0^0.05 p² / ∫_0^∞ p²``, ``Ts = ∫ t p² / ∫ p²``. Sums split at sample
    ``round(te·fs)`` after ``start``. The late sums end at the truncation point, the noise's
    mean power is subtracted, and the late decay line continues them analytically (ISO 3382-1
    5.3.3 Eq. (3)); a figure whose late energy would be more than
    :data:`MAX_EXTRAPOLATED_SHARE` extrapolated is None.
    """
    y = check_signal(y, "y", ndim=(1,))
    fs = check_fs(fs)
    where = f"{label}: " if label else ""
    first = start if first is None else min(max(int(first), 0), start)
    lead = start - first
    seg = y[first:]
    none = dict(c50_db=None, c80_db=None, d50=None, ts_s=None, drr_db=None)
    if decay_range_db is not None and decay_range_db < ENERGY_RANGE_DB:
        return EnergyFigures(**none, start_index=start, flags=(
            f"{where}C50, C80, D50, Ts and DRR need the decay measured over "
            f"{ENERGY_RANGE_DB:.0f} dB above the noise; this band has only "
            f"{range_text(decay_range_db)} dB, so its late energy is mostly noise",))
    if noise is None:
        nf = lundeby(seg, fs)
        n1 = nf.truncation_index
        line = nf.late_fit_db
    else:
        nf = noise
        origin = first if noise_origin is None else int(noise_origin)
        n1 = min(max(nf.truncation_index + origin - first, 1), seg.shape[0])
        line = None
        if nf.late_fit_db is not None:  # the same line, on this signal's clock
            a_db, b_db = nf.late_fit_db
            line = (a_db + b_db * (first - origin) / fs, b_db)
    if not nf.ok:
        return EnergyFigures(**none, start_index=start, flags=(
            f"{where}C50, C80, D50, Ts and DRR cannot be measured: {nf.reason}",))
    e = seg * seg
    noise_p = nf.noise_power if nf.noise_floor_found else 0.0
    if noise_p:
        e = e - noise_p
    csum = np.concatenate([np.cumsum(e[:n1][::-1])[::-1], [0.0]])  # Σ e[k:n1]
    comp = _line_energy(*line, n1, fs) if line is not None else 0.0

    def late(k: int) -> float:  # energy from sample k on
        if k < n1:
            return float(csum[k]) + comp
        return _line_energy(*line, k, fs) if line is not None else 0.0

    def extrapolated(k: int) -> float:  # the part of late(k) that comes from the line
        return comp if k < n1 else late(k)

    total = late(0)
    flags: list[str] = []
    if not (total > 0):
        return EnergyFigures(**none, start_index=start, flags=(
            f"{where}no energy left after removing the noise",))
    t1_ms = (n1 - lead) / fs * 1000.0
    out: dict[str, float | None] = {}
    for te_s, key in ((0.050, "c50_db"), (0.080, "c80_db")):
        k = lead + int(round(te_s * fs))
        lt = late(k)
        early = total - lt
        name = key[:3].upper()
        out[key] = None
        if not (early > 0 and lt > 0):
            flags.append(f"{where}{name} undefined: no energy on one side of "
                         f"{te_s * 1000:.0f} ms")
        elif extrapolated(k) > MAX_EXTRAPOLATED_SHARE * lt:
            flags.append(
                f"{where}{name}{' and D50' if key == 'c50_db' else ''} left out: the decay "
                f"meets the noise {t1_ms:.0f} ms after the direct sound, so "
                f"{extrapolated(k) / lt:.0%} of the energy after {te_s * 1000:.0f} ms would be "
                f"extrapolated (at most {MAX_EXTRAPOLATED_SHARE:.0%} is taken)")
        else:
            out[key] = 10.0 * math.log10(early / lt)
            sd_c = _clarity_scatter_db(noise_p, early, lt, bandwidth_hz, fs)
            if sd_c > NOISE_SCATTER_LIMIT_JND * JND_C80_DB:
                flags.append(
                    f"{where}{name}{' and D50' if key == 'c50_db' else ''} left out: the noise "
                    f"left in this band scatters it by ±{sd_c:.1f} dB (1 σ), more than half its "
                    f"{JND_C80_DB:g} dB JND; a longer sweep, more repeats or a quieter room "
                    "narrows it")
                out[key] = None
    k50 = lead + int(round(0.050 * fs))
    d50 = (total - late(k50)) / total if out["c50_db"] is not None else None
    # Ts: Σ t e over the measured part plus the line's analytic moment
    t = np.arange(n1) / fs
    mom_meas = float(np.einsum("i,i->", t, e[:n1]))  # not @: see decay._uniform_slope
    mom_tail = _line_moment(*line, n1, fs) if line is not None else 0.0
    ts: float | None = (mom_meas + mom_tail) / total - lead / fs  # times count from start
    if mom_tail > MAX_EXTRAPOLATED_SHARE * (mom_meas + mom_tail):
        flags.append(f"{where}Ts left out: the decay meets the noise {t1_ms:.0f} ms after the "
                     f"direct sound, so {mom_tail / (mom_meas + mom_tail):.0%} of its moment "
                     f"would be extrapolated (at most {MAX_EXTRAPOLATED_SHARE:.0%} is taken)")
        ts = None
    elif bandwidth_hz is not None and noise_p and line is not None and line[1] < 0:
        t_late = -60.0 / line[1]
        sd_ts = (ENERGY_SCATTER_FACTOR * math.sqrt(2.0) * t_late / DECAY_CONSTANT
                 * noise_scatter(noise_p, total, bandwidth_hz, fs, 0.0))
        if sd_ts > NOISE_SCATTER_LIMIT_JND * JND_TS_S:
            flags.append(f"{where}Ts left out: the noise left in this band scatters it by "
                         f"±{sd_ts * 1000:.0f} ms (1 σ), more than half its "
                         f"{JND_TS_S * 1000:.0f} ms JND; a longer sweep, more repeats or a "
                         "quieter room narrows it")
            ts = None
    drr = None
    if y_direct is not None:
        m = min(y_direct.shape[0], y.shape[0])
        e_d = float(np.sum(y_direct[:m] ** 2))
        # reverberant energy: everything minus the direct part, from sample 0 to the
        # crosspoint (noise-corrected), plus the tail
        stop = first + n1
        rest = y[:stop].copy()
        mm = min(m, stop)
        rest[:mm] -= y_direct[:mm]
        e_r = float(np.sum(rest * rest)) - noise_p * stop + comp
        if not (e_d > 0 and e_r > 0):
            flags.append(f"{where}DRR undefined: no reverberant energy above the noise")
        elif comp > MAX_EXTRAPOLATED_SHARE * e_r:
            flags.append(f"{where}DRR left out: {comp / e_r:.0%} of the reverberant energy "
                         f"would be extrapolated (at most {MAX_EXTRAPOLATED_SHARE:.0%} is taken)")
        else:
            drr = 10.0 * math.log10(e_d / e_r)
    return EnergyFigures(out["c50_db"], out["c80_db"], None if d50 is None else float(d50),
                         None if ts is None else float(ts), drr, start, tuple(flags),
                         total_energy=float(total))


@dataclass(frozen=True, slots=True, eq=False)
class BandFigures:
    """All figures of one band (``band`` is None for the broadband IR).

    The contract fields (see :data:`CONTRACT_KEYS`) are ``None`` when not honestly measurable;
    ``flags`` says why. ``decay`` and ``energy`` hold the details (ξ, curvature, decay curve).
    """

    band: Band | None
    edt_s: float | None
    t20_s: float | None
    t30_s: float | None
    c50_db: float | None
    c80_db: float | None
    d50: float | None
    ts_s: float | None
    drr_db: float | None
    peak_to_noise_db: float | None
    flags: tuple[str, ...]
    t20_uncertainty_s: float | None
    t30_uncertainty_s: float | None
    decay: DecayFigures = field(repr=False)
    energy: EnergyFigures = field(repr=False)
    filter_order: int | None = None

    @property
    def label(self) -> str:
        return self.band.label if self.band is not None else "broadband"

    def to_dict(self) -> dict[str, Any]:
        """The contract object: exactly :data:`CONTRACT_KEYS`."""
        return {
            "center_hz": None if self.band is None else self.band.center_hz,
            "label": self.label,
            "edt_s": self.edt_s,
            "t20_s": self.t20_s,
            "t30_s": self.t30_s,
            "c50_db": self.c50_db,
            "c80_db": self.c80_db,
            "d50": self.d50,
            "ts_s": self.ts_s,
            "drr_db": self.drr_db,
            "peak_to_noise_db": self.peak_to_noise_db,
            "flags": list(self.flags),
        }

    def details(self) -> dict[str, Any]:
        """Extra figures for the report (outside the contract objects)."""
        d = self.decay
        return {
            "label": self.label,
            "f_lo_hz": None if self.band is None else self.band.f_lo_hz,
            "f_hi_hz": None if self.band is None else self.band.f_hi_hz,
            "filter_order": self.filter_order,
            "t20_uncertainty_s": self.t20_uncertainty_s,
            "t30_uncertainty_s": self.t30_uncertainty_s,
            "xi_edt_permille": d.xi_edt_permille,
            "xi_t20_permille": d.xi_t20_permille,
            "xi_t30_permille": d.xi_t30_permille,
            "curvature_percent": d.curvature_percent,
            "decay_range_db": d.decay_range_db,
            "noise_scatter_percent": {k: 100.0 * v for k, v in d.noise_scatter.items()},
            "truncation_s": d.truncation_s,
            "noise_floor_found": d.noise_floor_found,
        }


@dataclass(frozen=True, slots=True, eq=False)
class SingleNumbers:
    """Single-number averages over the 500 Hz and 1 kHz octaves (ISO 3382-1:2009 Table A.1).

    Table A.1 gives these octaves for EDT and T_mid; that C50, C80, D50 and Ts use the same two
    is from memory (measurement.md §2.3). Each is the arithmetic mean of the two octave
    values, None when either is missing.
    ``t_mid_s`` is T30 averaged when both T30 values exist, else T20 (``t_mid_from`` says
    which).
    """

    t_mid_s: float | None
    t_mid_from: str | None
    t20_mid_s: float | None
    t30_mid_s: float | None
    edt_mid_s: float | None
    c50_mid_db: float | None
    c80_mid_db: float | None
    d50_mid: float | None
    ts_mid_s: float | None
    flags: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {
            "t_mid_s": self.t_mid_s,
            "t_mid_from": self.t_mid_from,
            "t20_mid_s": self.t20_mid_s,
            "t30_mid_s": self.t30_mid_s,
            "edt_mid_s": self.edt_mid_s,
            "c50_mid_db": self.c50_mid_db,
            "c80_mid_db": self.c80_mid_db,
            "d50_mid": self.d50_mid,
            "ts_mid_s": self.ts_mid_s,
            "octaves": ["500", "1k"],
            "flags": list(self.flags),
        }


@dataclass(frozen=True, slots=True, eq=False)
class RoomFigures:
    """Everything :func:`analyze_ir` found.

    Attributes
    ----------
    fs : int
    kind : str
        "octave", "third" or "custom".
    bands : tuple of BandFigures
    broadband : BandFigures
    single_numbers : SingleNumbers
    sti : measure.intelligibility.StiResult or None
        None when it could not be computed (``flags`` says why).
    onset_index : int
        ISO 3382-1 onset of the broadband IR.
    flags : tuple of str
        Problems not tied to one band.
    """

    fs: int
    kind: str
    bands: tuple[BandFigures, ...]
    broadband: BandFigures
    single_numbers: SingleNumbers
    sti: StiResult | None
    onset_index: int
    flags: tuple[str, ...] = ()

    def band(self, label: str) -> BandFigures:
        """The figures of the band with this nominal label ("1k")."""
        for b in self.bands:
            if b.label == label:
                return b
        raise KeyError(f"no band labelled {label!r}; have {[b.label for b in self.bands]}")

    def to_dict(self) -> dict[str, Any]:
        """The JSON scripting contract of ``measure analyze --json`` (plus ``details``)."""
        return {
            "sample_rate": self.fs,
            "bands": [b.to_dict() for b in self.bands],
            "broadband": self.broadband.to_dict(),
            "single_numbers": self.single_numbers.to_dict(),
            "sti": None if self.sti is None else self.sti.sti,
            "details": {
                "band_kind": self.kind,
                "onset_s": self.onset_index / self.fs,
                "filtering": {"decay": "time-reversed (ISO 3382-2 7.3 note)",
                              "energy": "causal, onset shifted by the filter group delay"},
                "bands": [b.details() for b in self.bands],
                "broadband": self.broadband.details(),
                "sti": None if self.sti is None else self.sti.to_dict(),
                "flags": list(self.flags),
            },
        }


def _direct_part(h: np.ndarray, fs: int, onset: int) -> tuple[np.ndarray, int]:
    """The direct-sound window of the broadband IR (see module notes) and its end index."""
    search_end = min(h.shape[0], onset + max(1, int(round(0.001 * fs))) + 1)
    peak = onset + int(np.argmax(np.abs(h[onset:search_end])))
    end = min(h.shape[0], peak + int(round(DIRECT_WINDOW_S * fs)))
    n_taper = max(1, int(round(_DIRECT_TAPER_S * fs)))
    stop = min(h.shape[0], end + n_taper)
    d = h[:stop].copy()
    m = stop - end
    if m > 0:
        d[end:stop] *= 0.5 * (1.0 + np.cos(np.pi * (np.arange(m) + 1) / (n_taper + 1)))
    return d, stop


def _reversed_band_onset(y_rev: np.ndarray, onset: int, gd_s: float, fs: int) -> int:
    """Start of a time-reversed-filtered band for the decay analysis.

    Reversing, filtering and reversing back moves a band's envelope *earlier* by about the
    filter's group delay (the mirror image of causal filtering), and spreads the band's share
    of the direct sound ahead of the broadband onset. Cutting the band at the broadband onset
    would keep an arbitrary part of that (at 63 Hz the band's peak lies 14 ms before the
    broadband onset; at 2 kHz a shift of the onset by two samples changed EDT by 7 % in a room
    whose direct sound dominates the first 10 dB). So the ISO 3382-1 A.3.4 rule is applied to
    the band itself: the first sample within 20 dB of the band's maximum, searched from two
    group delays plus 0.5 ms before the broadband onset up to the onset. (Measured on the demo
    rooms and on decaying noise: EDT moves by < 1 % between a true IR and the IR recovered from
    a capture; a window of three group delays biased the 63 Hz EDT of decaying noise by 3 %.)
    """
    lo = max(0, onset - int(math.ceil((2.0 * gd_s + 0.0005) * fs)))
    e = y_rev[lo: onset + 1] ** 2
    peak = float(np.max(y_rev * y_rev))
    if not (peak > 0):
        return onset
    hits = np.nonzero(e >= 0.01 * peak)[0]
    return lo + int(hits[0]) if hits.size else onset


#: Largest |C50|, |C80| and |DRR| taken as a measurement, dB. A room's early and late parts
#: differ by a few dB up to about 20 dB even close to the source (ISO 3382-1:2009 Table A.1
#: lists C80 from −5 to +5 dB as the typical range for halls, from memory); beyond 60 dB the
#: late sum is numerically empty, not measured (common practice for the bound).
PLAUSIBLE_ENERGY_RATIO_DB: float = 60.0
#: Shortest decay time (EDT, T20, T30) taken as a room's, s: a 60 dB decay within 20 ms is
#: the loudspeaker or the analysis, not a room (the smallest enclosed spaces measured, car
#: cabins, have T around 0.05 s; common practice).
MIN_DECAY_TIME_S: float = 0.020
#: A band's decay time must also span this many time constants of its band filter's slowest
#: pole, 1/(πB sin(π/2N)) for the order-2N Butterworth band-pass (narrow-band transform of the
#: prototype's poles, derived): a shorter decay is the filter ringing.
MIN_FILTER_TIME_CONSTANTS: float = 5.0
#: Largest non-linearity ξ of a decay fit taken as a decay rate, ‰: ξ = 1000 (1 − r²), so
#: beyond 100 ‰ the line explains less than 90 % of the curve's variance (ISO 3382-2:2008
#: Annex B calls 0–5 ‰ typical; :mod:`measure.decay` flags above 10 ‰; the bound for dropping
#: the figure is common practice).
MAX_XI_PERMILLE: float = 100.0
#: Ts may start up to the 1 ms lead of the early sums before the onset, s.
_TS_LEAD_S = 0.001
#: How the flags name each figure.
_FIGURE_NAMES = {"edt_s": "EDT", "t20_s": "T20", "t30_s": "T30", "c50_db": "C50",
                 "c80_db": "C80", "drr_db": "DRR", "d50": "D50", "ts_s": "Ts"}


def _plausibility(band: Band | None, fs: int, values: dict[str, float | None], label: str,
                  xi_permille: dict[str, float | None] | None = None) -> list[str]:
    """Set implausible figures in ``values`` to None; return one flag per figure removed.

    The checks guard against a stage misreading an unusual response (they do not replace the
    ISO checks in :mod:`measure.decay`): |C50|, |C80|, |DRR| at most
    :data:`PLAUSIBLE_ENERGY_RATIO_DB`; 0 <= D50 <= 1; Ts not before the early sums start;
    EDT, T20 and T30 at least :data:`MIN_DECAY_TIME_S` and, in a band, at least
    :data:`MIN_FILTER_TIME_CONSTANTS` time constants of the band filter, and fitted with
    ξ <= :data:`MAX_XI_PERMILLE` where ``xi_permille`` gives ξ (by the same keys).
    """
    flags: list[str] = []
    t_min = MIN_DECAY_TIME_S
    why_t = f"below {MIN_DECAY_TIME_S * 1000:.0f} ms, shorter than any room's decay"
    if band is not None:
        n = filter_order(band, fs)
        tau = 1.0 / (math.pi * band.bandwidth_hz * math.sin(math.pi / (2 * n)))
        if MIN_FILTER_TIME_CONSTANTS * tau > t_min:
            t_min = MIN_FILTER_TIME_CONSTANTS * tau
            why_t = (f"below {MIN_FILTER_TIME_CONSTANTS:g} time constants of the band filter "
                     f"({t_min * 1000:.1f} ms), so the filter's own ringing")
    for key, v in values.items():
        if v is None:
            continue
        why = None
        if key in ("edt_s", "t20_s", "t30_s"):
            xi = (xi_permille or {}).get(key)
            if not (v >= t_min):
                why = f"{v * 1000:.1f} ms is {why_t}"
            elif xi is not None and not (xi <= MAX_XI_PERMILLE):
                why = (f"its decay fit has ξ = {xi:.0f} ‰ (over {MAX_XI_PERMILLE:.0f} ‰), "
                       "the curve is not a decay line")
        elif key in ("c50_db", "c80_db", "drr_db"):
            if not (abs(v) <= PLAUSIBLE_ENERGY_RATIO_DB):
                why = (f"{v:.0f} dB is beyond ±{PLAUSIBLE_ENERGY_RATIO_DB:.0f} dB, "
                       "a ratio no room gives")
        elif key == "d50":
            if not (0.0 <= v <= 1.0):
                why = f"{v:.3f} is outside 0…1"
        elif key == "ts_s":
            if not (v >= -_TS_LEAD_S):
                why = f"{v * 1000:.1f} ms lies before the sums start"
        if why is not None:
            values[key] = None
            flags.append(f"{label}: {_FIGURE_NAMES[key]} set to null: {why}; the response is unusual "
                         "or was misread (please report it)")
    return flags


#: Tie of C50 and C80 to the band's own decay curve (see :func:`_tie_flags`): the causal sums
#: may differ from the values read off the time-reversed decay curve by this much plus
#: :data:`TIE_DB_PER_MS` per millisecond of the band filter's spread (its 5–95 % energy time),
#: which is what separates the two filterings. Measured on six noise-free virtual rooms
#: (T 0.3–3.4 s, DRR +6 to −12 dB): at most 4.9 dB at 63 Hz (spread 20.7 ms), 1.45 dB at
#: 125 Hz (10.4 ms), 0.35 dB from 250 Hz up; the bound leaves 1.8–2.6 dB to spare.
TIE_DB: float = 1.5
TIE_DB_PER_MS: float = 0.25
#: A band whose energy per hertz lies this far below the median of the 500 Hz–2 kHz octaves is
#: flagged: the source hardly radiates there (a small loudspeaker without lows; common
#: practice for the margin: a room's own colouring stays within about ±10 dB between octaves).
SOURCE_WEAK_DB: float = 15.0


def _tie_flags(band: Band, values: dict[str, float | None], decay: DecayFigures, onset: int,
               gd_s: float, spread_s: float, fs: int, label: str) -> list[str]:
    """Null C50 (with D50) and C80 when they contradict the band's own decay curve.

    The decay curve of the time-reversed band (the one EDT and T are fitted on) gives at the
    split time te, counted like the sums from the band's arrival, its level L(te) = 10 lg
    (E(te)/E(0)), hence C_te = 10 lg(1/10^(L/10) − 1). The causal sums and this must agree
    within :data:`TIE_DB` + :data:`TIE_DB_PER_MS`·spread; a gap wider than that means the late
    energy was misread (a C50 of +56 dB beside a 1.5 s decay cannot pass).
    """
    flags: list[str] = []
    curve = decay.edc_db
    tol = TIE_DB + TIE_DB_PER_MS * spread_s * 1000.0
    for te_s, key in ((0.050, "c50_db"), (0.080, "c80_db")):
        v = values.get(key)
        k = onset - int(round(gd_s * fs)) + int(round(te_s * fs)) - decay.onset
        if v is None or curve.size == 0 or not 0 < k < curve.size or not np.isfinite(curve[k]):
            continue
        e = 10.0 ** (float(curve[k]) / 10.0)
        if not 0 < e < 1:
            continue
        c_curve = 10.0 * math.log10(1.0 / e - 1.0)
        if abs(v - c_curve) > tol:
            name = _FIGURE_NAMES[key]
            values[key] = None
            if key == "c50_db":
                values["d50"] = None
            flags.append(f"{label}: {name}{' and D50' if key == 'c50_db' else ''} left out: "
                         f"{name} of {v:+.1f} dB contradicts the band's own decay curve, which "
                         f"gives {c_curve:+.1f} dB at {te_s * 1000:.0f} ms (more than "
                         f"{tol:.1f} dB apart): the late energy was misread")
    return flags


def _band_figures(band: Band | None, y_rev: np.ndarray, y_causal: np.ndarray,
                  y_direct: np.ndarray, fs: int, onset: int,
                  context: ResponseContext | None = None) -> BandFigures:
    if band is None:
        decay = analyze_decay(y_rev, fs, onset=onset, bandwidth_hz=None, label="broadband")
        start = onset
        order = None
        label = "broadband"
        gd = spread = 0.0
        origin = decay.onset  # the same signal: the same clock
    else:
        label = band.name
        gd, spread = _filter_timing(band.kind, band.index, fs)
        decay = analyze_decay(y_rev, fs, onset=_reversed_band_onset(y_rev, onset, gd, fs),
                              bandwidth_hz=band.bandwidth_hz, filter_mode="reversed",
                              label=label)
        start = min(onset + int(round(gd * fs)), y_causal.shape[0] - 2)
        order = filter_order(band, fs)
        # time-reversed filtering moves the band's envelope about gd earlier than the
        # broadband response, causal filtering gd later: the decay's clock on y_causal
        origin = decay.onset + int(round(2.0 * gd * fs))
    energy = energy_figures(y_causal, fs, start=start, y_direct=y_direct, label=label,
                            first=max(onset - int(round(0.001 * fs)), 0), noise=decay.noise,
                            noise_origin=origin, decay_range_db=decay.decay_range_db,
                            bandwidth_hz=None if band is None else band.bandwidth_hz)
    flags = list(decay.flags) + list(energy.flags)
    if spread > 0.025:
        flags.append(f"{label}: the band filter spreads a click over {spread * 1000:.0f} ms, "
                     "comparable to the 50 ms split; C50 and D50 blur here")
    v: dict[str, float | None] = {
        "edt_s": decay.edt_s, "t20_s": decay.t20_s, "t30_s": decay.t30_s,
        "c50_db": energy.c50_db, "c80_db": energy.c80_db, "d50": energy.d50,
        "ts_s": energy.ts_s, "drr_db": energy.drr_db}
    if band is not None:
        flags += _tie_flags(band, v, decay, onset, gd, spread, fs, label)
    # ξ guards T20/T30 only: the EDT range holds the direct sound and the first reflections,
    # whose bend is the point of EDT (measured: ξ = 138 ‰ for a real office IR at 250 Hz)
    flags += _plausibility(band, fs, v, label, {"t20_s": decay.xi_t20_permille,
                                                "t30_s": decay.xi_t30_permille})
    flags += _context_flags(band, v, decay, context, label)
    u20 = u30 = None
    if band is not None:  # ISO 3382-2 Annex A and the noise's scatter, in quadrature
        if v["t20_s"] is not None:
            u20 = math.hypot(t20_uncertainty_s(v["t20_s"], band.bandwidth_hz),
                             decay.noise_scatter.get("t20", 0.0) * v["t20_s"])
        if v["t30_s"] is not None:
            u30 = math.hypot(t30_uncertainty_s(v["t30_s"], band.bandwidth_hz),
                             decay.noise_scatter.get("t30", 0.0) * v["t30_s"])
    return BandFigures(
        band=band, edt_s=v["edt_s"], t20_s=v["t20_s"], t30_s=v["t30_s"],
        c50_db=v["c50_db"], c80_db=v["c80_db"], d50=v["d50"], ts_s=v["ts_s"],
        drr_db=v["drr_db"], peak_to_noise_db=decay.peak_to_noise_db, flags=tuple(flags),
        t20_uncertainty_s=u20, t30_uncertainty_s=u30, decay=decay, energy=energy,
        filter_order=order)


def _covered(band: Band, context: ResponseContext | None) -> bool:
    """Whether the sweep of ``context`` excited the whole band (edges within 0.1 %)."""
    if context is None or context.f1_hz is None or context.f2_hz is None:
        return True
    return band.f_lo_hz >= context.f1_hz * 0.999 and band.f_hi_hz <= context.f2_hz * 1.001


def _context_flags(band: Band | None, values: dict[str, float | None], decay: DecayFigures,
                   context: ResponseContext | None, label: str) -> list[str]:
    """Null every figure of a band the sweep did not excite; say why a cut response's band
    misses figures, and what gap the room needs."""
    if context is None:
        return []
    flags: list[str] = []
    if band is not None and not _covered(band, context):
        for key in values:
            values[key] = None
        flags.append(f"{label}: outside the sweep ({context.f1_hz:g}–{context.f2_hz:g} Hz): "
                     f"this band ({band.f_lo_hz:.0f}–{band.f_hi_hz:.0f} Hz) was not fully "
                     "excited, so its figures are left out; sweep from an octave below it")
        return flags
    if context.cut_s is not None and not decay.noise_floor_found:
        gap = (f" (at least --gap {context.gap_needed_s:g})"
               if context.gap_needed_s is not None else "")
        missing = [_FIGURE_NAMES[k] for k in ("edt_s", "t20_s", "t30_s", "c50_db", "c80_db",
                                              "d50", "ts_s", "drr_db") if values[k] is None]
        if missing:
            flags.append(
                f"{label}: the response ends {context.cut_s:.2f} s after the direct sound"
                f"{', at ' + context.cut_by if context.cut_by else ''}, before this band's "
                f"decay reaches the noise, so {', '.join(missing)} cannot be measured in full; "
                f"make the sweep with a longer gap{gap}")
    return flags


def _source_level_flags(figures: list[BandFigures]) -> list[BandFigures]:
    """Add to each band whose source level (energy per hertz) lies :data:`SOURCE_WEAK_DB` or
    more below the median of the 500 Hz–2 kHz octaves a flag that says by how much."""
    import dataclasses

    level = {}
    for bf in figures:
        e = bf.energy.total_energy
        if bf.band is not None and e is not None and e > 0:
            level[bf.band] = 10.0 * math.log10(e / bf.band.bandwidth_hz)
    mid = [v for b, v in level.items() if 450.0 <= b.center_hz <= 2300.0]
    if not mid:
        return figures
    ref = float(np.median(mid))
    out = []
    for bf in figures:
        lv = level.get(bf.band)
        if lv is not None and lv < ref - SOURCE_WEAK_DB:
            note = (f"{bf.band.name}: the source is {ref - lv:.0f} dB weaker in this band than "
                    "at 500 Hz–2 kHz (per hertz; a small loudspeaker?): its figures rest on the "
                    "little it radiates here, as far as its decay range allows")
            bf = dataclasses.replace(bf, flags=bf.flags + (note,))
        out.append(bf)
    return out


def _figures_for(h: np.ndarray, fs: int, bands: tuple[Band, ...], onset: int,
                 direct: np.ndarray, direct_stop: int, context: ResponseContext | None = None
                 ) -> tuple[list[BandFigures], dict[Band, np.ndarray]]:
    """The figures of each band, and each band's causally filtered IR (for the STI)."""
    if not bands:
        return [], {}
    yr = filter_bands(h, fs, bands, mode="reversed")
    yc = filter_bands(h, fs, bands, mode="causal")
    # Filter the direct window far enough for the slowest band filter to ring out: the
    # envelope of a Butterworth band-pass of bandwidth B decays as exp(-πB sin(π/2N) t)
    # (narrow-band transform of the prototype's poles, derived), so after 8/B s it is below
    # -109 dB for N = 3 and -84 dB for N = 4.
    b_min = min(b.bandwidth_hz for b in bands)
    head = min(h.shape[0], direct_stop + int(math.ceil(8.0 * fs / b_min)))
    d = np.zeros(head)
    d[: direct.shape[0]] = direct[:head]
    yd = filter_bands(d, fs, bands, mode="causal")
    figures = [_band_figures(b, yr[i], yc[i], yd[i], fs, onset, context)
               for i, b in enumerate(bands)]
    return _source_level_flags(figures), dict(zip(bands, yc, strict=True))


def _mean2(a: float | None, b: float | None) -> float | None:
    return None if a is None or b is None else 0.5 * (a + b)


def _single_numbers(b500: BandFigures | None, b1k: BandFigures | None) -> SingleNumbers:
    if b500 is None or b1k is None:
        return SingleNumbers(None, None, None, None, None, None, None, None, None,
                             ("single numbers need the 500 Hz and 1 kHz octaves, which this "
                              "sample rate or range does not give",))
    vals = {}
    flags = []
    for key in ("t20_s", "t30_s", "edt_s", "c50_db", "c80_db", "d50", "ts_s"):
        vals[key] = _mean2(getattr(b500, key), getattr(b1k, key))
        if vals[key] is None:
            flags.append(f"{_FIGURE_NAMES[key]} average missing: the 500 Hz or 1 kHz "
                         "value is null (see its band's flags)")
    if vals["t30_s"] is not None:
        t_mid, t_from = vals["t30_s"], "T30"
    elif vals["t20_s"] is not None:
        t_mid, t_from = vals["t20_s"], "T20"
    else:
        t_mid, t_from = None, None
    return SingleNumbers(t_mid, t_from, vals["t20_s"], vals["t30_s"], vals["edt_s"],
                         vals["c50_db"], vals["c80_db"], vals["d50"], vals["ts_s"],
                         tuple(flags))


def analyze_ir(h: np.ndarray, fs: int, *,
               bands: Literal["octave", "third"] | tuple[Band, ...] = "octave",
               f_lo_hz: float | None = None, f_hi_hz: float | None = None,
               snr_db: float | np.ndarray | None = None,
               speech_spl_db: float | np.ndarray | None = None,
               noise_spl_db: float | np.ndarray | None = None,
               sti: bool = True, context: ResponseContext | None = None) -> RoomFigures:
    """ISO 3382-1 figures per band, broadband, single numbers and STI of one impulse response.

    Parameters
    ----------
    h : ndarray, shape (n,)
        Broadband impulse response (one channel), with some silence before the direct sound
        and the decay's tail; background noise after the decay is fine (it is found and
        compensated).
    fs : int, > 0, Hz
    bands : {"octave", "third"} or tuple of Band
        Band set; a tuple from :func:`measure.bands.make_bands` is used as given.
    f_lo_hz, f_hi_hz : float, optional
        Nominal range for "octave"/"third" (defaults: 63 Hz–8 kHz / 50 Hz–10 kHz, cut to what
        ``fs`` allows); not allowed with an explicit tuple.
    snr_db : float or array_like (7,), optional
        Speech-to-noise ratio per octave 125 Hz–8 kHz for the STI, when known.
    speech_spl_db, noise_spl_db : float or array_like (7,), optional
        Alternatively, the speech and background-noise octave levels at the listener, dB SPL:
        the STI then applies the noise and the IEC 60268-16:2020 Annex A auditory masking and
        reception threshold (:func:`measure.intelligibility.auditory_factor`). Give both or
        neither, and not together with ``snr_db``.
    sti : bool
        Compute the STI (needs fs of about 32 kHz or more for the 8 kHz octave).
    context : ResponseContext, optional
        What the measurement excited and kept (:meth:`ImpulseResponse.context`, or the IR
        file's sidecar): bands outside the sweep are left out, and a response cut before its
        decay reached the noise says which figures that costs and what gap the room needs.

    Returns
    -------
    RoomFigures

    Raises
    ------
    ParameterError
        For a malformed IR, an unknown band kind, a range ``fs`` cannot carry, or conflicting
        noise arguments.

    Examples
    --------
    >>> fs = 16000
    >>> t = np.arange(fs) / fs
    >>> h = np.random.default_rng(0).standard_normal(fs) * np.exp(-6.9 * t)
    >>> figs = analyze_ir(h, fs, sti=False)
    >>> [b.label for b in figs.bands][:3]
    ['63', '125', '250']
    """
    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    if isinstance(bands, str):
        band_set = make_bands(fs, bands, f_lo_hz, f_hi_hz)  # checks the kind
        kind = bands
    else:
        if f_lo_hz is not None or f_hi_hz is not None:
            raise ParameterError("f_lo_hz/f_hi_hz only apply to bands='octave' or 'third'; "
                                 "leave them out when passing a tuple of Band")
        band_set = tuple(bands)
        if not band_set or not all(isinstance(b, Band) for b in band_set):
            raise ParameterError("bands must be 'octave', 'third' or a non-empty tuple of Band")
        kind = "custom"
    # the STI's noise arguments are checked before any work, so that a ParameterError from
    # the STI computation below can only mean "not computable for this IR" (a flag)
    check_noise_levels(snr_db, speech_spl_db, noise_spl_db)
    if h.shape[0] < int(0.1 * fs):
        raise ParameterError(f"the impulse response is only {h.shape[0] / fs * 1000:.0f} ms "
                             "long; give at least 100 ms (better: the whole decay)")
    onset = onset_index(h, fs)
    direct, direct_stop = _direct_part(h, fs, onset)
    per_band, causal = _figures_for(h, fs, band_set, onset, direct, direct_stop, context)
    # the STI's octaves are filtered already when they are among the analysed bands
    sti_octaves = band_centers("octave", 125.0, 8000.0)
    y_sti = (np.stack([causal[b] for b in sti_octaves])
             if sti and all(b in causal for b in sti_octaves) else None)
    del causal
    broadband = _band_figures(None, h, h, direct, fs, onset, context)

    def find(label: str) -> BandFigures | None:
        for bf in per_band:
            if bf.band is not None and bf.band.kind == "octave" and bf.label == label:
                return bf
        return None

    b500, b1k = find("500"), find("1k")
    if b500 is None or b1k is None:
        try:
            extra = make_bands(fs, "octave", 500.0, 1000.0)
        except ParameterError:
            extra = ()
        got, _ = _figures_for(h, fs, extra, onset, direct, direct_stop, context)
        if len(got) == 2:
            b500, b1k = got
    singles = _single_numbers(b500, b1k)

    flags: list[str] = []
    sti_res = None
    uncovered = [b.name for b in sti_octaves if not _covered(b, context)]
    if sti and uncovered:
        flags.append(f"STI not computed: it needs the octaves 125 Hz–8 kHz, and the sweep "
                     f"({context.f1_hz:g}–{context.f2_hz:g} Hz) does not cover "
                     f"{', '.join(uncovered)}")
    elif sti:
        try:
            sti_res = sti_from_ir(h, fs, onset=onset, snr_db=snr_db,
                                  speech_spl_db=speech_spl_db, noise_spl_db=noise_spl_db,
                                  y_bands=y_sti)
        except ParameterError as err:
            flags.append(f"STI not computed: {err}")
    return RoomFigures(fs=fs, kind=kind, bands=tuple(per_band), broadband=broadband,
                       single_numbers=singles, sti=sti_res, onset_index=onset,
                       flags=tuple(flags))
