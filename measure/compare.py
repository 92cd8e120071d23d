"""Compare two rooms in just-noticeable differences: does the game room sound like the real one?

A side of a comparison (:class:`RoomSide`) is the ISO 3382-1 figures of one response, or the
average of several positions (ISO 3382-2), with the responses kept where there are any. Two
sides give, per octave band and parameter (:data:`PARAMETERS`): both values, their difference
in the parameter's unit and in JNDs, and a verdict (:func:`compare_sides`); beside them a
spectral distance per octave and an energy-decay-relief difference of the responses.

JNDs (ISO 3382-1:2009 Table A.1; measurement.md §2.3): EDT 5 % (relative), C80 1 dB, D50 0.05,
Ts 10 ms. The table has no entry for T20/T30; they borrow EDT's 5 % (common practice), C50
borrows C80's 1 dB (common practice), DRR 1 dB (no standard JND; common practice for a level
ratio), STI 0.03 (from memory: the difference usually quoted as just noticeable). A relative
difference is b/a − 1 of side A's value; an absolute one b − a.

Verdicts: "within N JND" when |Δ| ≤ N JNDs (N = 1 unless given), "audible difference"
otherwise; when either side is a position average, a difference no larger than the larger
standard deviation over its positions is "within the spread over positions" (a difference the
positions of one room already show is not called audible); a cell with a value missing on
either side is "not compared" with the reason.

Position averages (:func:`average_sides`, ISO 3382-2:2008 clause 7 and Table 1): per band and
parameter the arithmetic mean over source-receiver combinations whose figure exists, the
sample standard deviation and the number of combinations that entered; the grade the count
allows: survey (2 or more), engineering (6 or more), precision (12 or more). Table 1 also asks
for 2 source positions for engineering and precision, which the caller vouches for.

Spectral distance (modeling.md §7.3): per octave, the RMS over that octave of the dB difference
of the two 1/3-octave-smoothed power spectra, each normalised to its total energy (so a pure
gain does not count). Energy decay relief (modeling.md §7.2, Jot 1992): per octave, the mean
and largest |ΔEDR| in dB over the time-frequency cells within the top 60 dB of each side's
relief, both onset-aligned and each band normalised to its own start; for a position
average, of its first position.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from measure._validate import check_fs, check_signal
from measure.errors import ParameterError

__all__ = [
    "PARAMETERS",
    "STI_JND",
    "GRADES",
    "RoomSide",
    "side_from_figures",
    "side_from_dict",
    "average_sides",
    "measurement_grade",
    "Cell",
    "Comparison",
    "compare_sides",
    "spectral_distance_db",
    "edr_difference_db",
]

#: (key, name, kind, JND, source) of every compared parameter.
PARAMETERS: tuple[tuple[str, str, str, float, str], ...] = (
    ("edt_s", "EDT", "relative", 0.05, "ISO 3382-1 Table A.1"),
    ("t20_s", "T20", "relative", 0.05, "EDT's JND, common practice"),
    ("t30_s", "T30", "relative", 0.05, "EDT's JND, common practice"),
    ("c50_db", "C50", "absolute", 1.0, "C80's JND, common practice"),
    ("c80_db", "C80", "absolute", 1.0, "ISO 3382-1 Table A.1"),
    ("d50", "D50", "absolute", 0.05, "ISO 3382-1 Table A.1"),
    ("ts_s", "Ts", "absolute", 0.010, "ISO 3382-1 Table A.1"),
    ("drr_db", "DRR", "absolute", 1.0, "no standard JND; common practice for a level ratio"),
)
#: JND of the STI (from memory).
STI_JND = 0.03
#: ISO 3382-2:2008 Table 1: the least number of source-receiver combinations per grade.
GRADES: tuple[tuple[str, int], ...] = (("precision", 12), ("engineering", 6), ("survey", 2))

_KEYS = tuple(p[0] for p in PARAMETERS)


@dataclass(frozen=True, slots=True, eq=False)
class RoomSide:
    """One side of a comparison.

    Attributes
    ----------
    label : str
        What it is, for the report ("IR room.wav", "model hall.json", ...).
    kind : str
        "impulse response", "capture", "model", "reverb parameters", "room description" or
        "position average".
    bands : tuple of str
        Octave labels ("125", "1k", ...) in ascending order.
    values : dict
        (band, key) → value or None, keys of :data:`PARAMETERS`; ("", "sti") the STI.
    spread : dict
        (band, key) → standard deviation over positions (position averages only).
    count : dict
        (band, key) → number of positions that entered the mean (position averages only).
    reasons : dict
        (band, key) → why the value is missing.
    h : tuple of ndarray
        The responses behind it (one, or one per position); empty when none.
    fs : int
    grade : str or None
        The ISO 3382-2 grade the number of positions allows (position averages only).
    notes : tuple of str
    """

    label: str
    kind: str
    bands: tuple[str, ...]
    values: dict[tuple[str, str], float | None]
    fs: int
    spread: dict[tuple[str, str], float | None] = field(default_factory=dict)
    count: dict[tuple[str, str], int] = field(default_factory=dict)
    reasons: dict[tuple[str, str], str] = field(default_factory=dict)
    h: tuple[np.ndarray, ...] = ()
    grade: str | None = None
    notes: tuple[str, ...] = ()

    @property
    def is_average(self) -> bool:
        return self.kind == "position average"

    def to_dict(self) -> dict[str, Any]:
        bands = {}
        for b in self.bands:
            bands[b] = {k: self.values.get((b, k)) for k in _KEYS}
            if self.is_average:
                bands[b]["spread"] = {k: self.spread.get((b, k)) for k in _KEYS}
                bands[b]["count"] = {k: self.count.get((b, k), 0) for k in _KEYS}
        return {"label": self.label, "kind": self.kind, "sti": self.values.get(("", "sti")),
                "bands": bands, "n_positions": len(self.h) if self.is_average else None,
                "grade": self.grade, "notes": list(self.notes)}


def _reason(flags: Sequence[str], name: str) -> str:
    for f in flags:
        if name in f:
            return f
    return f"{name} could not be measured in this band"


def side_from_figures(figures: Any, *, label: str, kind: str, h: np.ndarray | None = None
                      ) -> RoomSide:
    """A side from the :class:`measure.parameters.RoomFigures` of one response (octave bands).

    Raises
    ------
    ParameterError
        If the figures are not in octave bands.
    """
    if figures.kind != "octave":
        raise ParameterError("a comparison is made in octave bands; analyse with bands='octave'")
    values: dict[tuple[str, str], float | None] = {}
    reasons: dict[tuple[str, str], str] = {}
    for bf in figures.bands:
        for key, name, *_ in PARAMETERS:
            v = getattr(bf, key)
            values[(bf.label, key)] = None if v is None else float(v)
            if v is None:
                reasons[(bf.label, key)] = _reason(bf.flags, name)
    values[("", "sti")] = None if figures.sti is None else float(figures.sti.sti)
    if figures.sti is None:
        reasons[("", "sti")] = "the STI could not be computed"
    hs = () if h is None else (np.array(check_signal(h, "h", ndim=(1,)), copy=True),)
    return RoomSide(label, kind, tuple(b.label for b in figures.bands), values,
                    check_fs(figures.fs), reasons=reasons, h=hs)


def side_from_dict(doc: dict[str, Any], *, label: str, kind: str, h: np.ndarray | None = None
                   ) -> RoomSide:
    """A side from the JSON document of :meth:`measure.parameters.RoomFigures.to_dict` (the
    ``measure analyze --json`` object), as :func:`side_from_figures` makes it from the figures.

    Raises
    ------
    ParameterError
        If the document holds no octave bands or no sample rate.
    """
    bands = doc.get("bands") if isinstance(doc, dict) else None
    if not isinstance(bands, list) or not bands or "sample_rate" not in doc:
        raise ParameterError("not a figures document of `measure analyze --json`; analyse the "
                             "response again")
    values: dict[tuple[str, str], float | None] = {}
    reasons: dict[tuple[str, str], str] = {}
    for b in bands:
        for key, name, *_ in PARAMETERS:
            v = b.get(key)
            values[(b["label"], key)] = None if v is None else float(v)
            if v is None:
                reasons[(b["label"], key)] = _reason(b.get("flags", []), name)
    sti = doc.get("sti")
    values[("", "sti")] = None if sti is None else float(sti)
    if sti is None:
        reasons[("", "sti")] = "the STI could not be computed"
    hs = () if h is None else (np.array(check_signal(h, "h", ndim=(1,)), copy=True),)
    return RoomSide(label, kind, tuple(b["label"] for b in bands), values,
                    check_fs(int(doc["sample_rate"])), reasons=reasons, h=hs)


def measurement_grade(n_combinations: int) -> str | None:
    """The ISO 3382-2:2008 Table 1 grade ``n_combinations`` source-receiver combinations allow
    (None below survey's 2).

    Examples
    --------
    >>> [measurement_grade(n) for n in (1, 2, 5, 6, 12)]
    [None, 'survey', 'survey', 'engineering', 'precision']
    """
    for name, n in GRADES:
        if n_combinations >= n:
            return name
    return None


def average_sides(sides: Sequence[RoomSide], *, label: str) -> RoomSide:
    """The ISO 3382-2 position average of single-position sides (module notes).

    Raises
    ------
    ParameterError
        For fewer than two sides, or sides at different rates or with different bands.
    """
    if len(sides) < 2:
        raise ParameterError("a position average needs two positions or more; measure at "
                             "least two source-receiver combinations (ISO 3382-2 Table 1)")
    bands, fs = sides[0].bands, sides[0].fs
    if any(s.bands != bands or s.fs != fs for s in sides):
        raise ParameterError("the positions were analysed in different bands or at different "
                             "rates; measure every position with the same sweep")
    values: dict[tuple[str, str], float | None] = {}
    spread: dict[tuple[str, str], float | None] = {}
    count: dict[tuple[str, str], int] = {}
    reasons: dict[tuple[str, str], str] = {}
    for cell in [(b, k) for b in bands for k in _KEYS] + [("", "sti")]:
        got = [s.values.get(cell) for s in sides]
        ok = [v for v in got if v is not None]
        count[cell] = len(ok)
        values[cell] = float(np.mean(ok)) if ok else None
        spread[cell] = float(np.std(ok, ddof=1)) if len(ok) >= 2 else None
        if not ok:
            reasons[cell] = "no position has this figure"
        elif len(ok) < len(got):
            reasons[cell] = (f"{len(got) - len(ok)} of {len(got)} positions have no value here "
                             "and are left out of the mean")
    grade = measurement_grade(len(sides))
    notes = [f"{len(sides)} positions: ISO 3382-2 {grade} grade by their number (Table 1 also "
             "asks for 2 source positions for engineering and precision)"]
    hs = tuple(h for s in sides for h in s.h)
    return RoomSide(label, "position average", bands, values, fs, spread, count, reasons, hs,
                    grade, tuple(notes))


@dataclass(frozen=True, slots=True)
class Cell:
    """One compared figure.

    Attributes
    ----------
    band_hz : str
        Octave label ("1k"), or "" for the STI.
    parameter : str
        "EDT", "T20", ..., "STI".
    a, b : float or None
    difference : float or None
        b − a in the parameter's unit (for relative parameters too).
    jnd : float or None
        The difference in JNDs (relative parameters: (b/a − 1)/JND).
    verdict : str
    spread : float or None
        The larger standard deviation over positions, in the parameter's unit.
    reason : str
    """

    band_hz: str
    parameter: str
    a: float | None
    b: float | None
    difference: float | None
    jnd: float | None
    verdict: str
    spread: float | None = None
    reason: str = ""

    def to_dict(self) -> dict[str, Any]:
        out = {"band_hz": self.band_hz, "parameter": self.parameter, "a": self.a, "b": self.b,
               "difference": self.difference, "jnd": self.jnd, "verdict": self.verdict}
        if self.spread is not None:
            out["spread"] = self.spread
        if self.reason:
            out["reason"] = self.reason
        return out


@dataclass(frozen=True, slots=True)
class Comparison:
    """What :func:`compare_sides` found."""

    a: RoomSide
    b: RoomSide
    cells: tuple[Cell, ...]
    threshold_jnd: float
    spectral_db: dict[str, float | None]
    edr_db: dict[str, dict[str, float] | None]

    def audible(self) -> tuple[Cell, ...]:
        return tuple(c for c in self.cells if c.verdict == "audible difference")

    def worst(self) -> Cell | None:
        cells = [c for c in self.cells if c.jnd is not None]
        return max(cells, key=lambda c: abs(c.jnd)) if cells else None

    def exceeds(self, n_jnd: float) -> bool:
        """Whether any compared cell differs by more than ``n_jnd`` JNDs and is not inside the
        spread over positions (the verdicts' rule, at ``n_jnd``)."""
        return any(c.jnd is not None and abs(c.jnd) > n_jnd
                   and not (c.spread is not None and abs(c.difference) <= c.spread)
                   for c in self.cells)

    def summary(self) -> dict[str, Any]:
        compared = [c for c in self.cells if c.jnd is not None]
        audible = self.audible()
        worst = self.worst()
        if not compared:
            line = "nothing could be compared: no figure exists on both sides"
        elif not audible:
            line = (f"no audible difference: all {len(compared)} compared figures within "
                    f"{self.threshold_jnd:g} JND" + (" or the spread over positions"
                                                     if self.a.is_average or self.b.is_average
                                                     else ""))
        else:
            where = ", ".join(f"{c.parameter} {c.band_hz} Hz" if c.band_hz else c.parameter
                              for c in audible[:6])
            more = f" and {len(audible) - 6} more" if len(audible) > 6 else ""
            line = (f"audible difference in {len(audible)} of {len(compared)} compared figures: "
                    f"{where}{more}")
        return {"verdict": line, "n_compared": len(compared), "n_audible": len(audible),
                "n_not_compared": len(self.cells) - len(compared),
                "threshold_jnd": self.threshold_jnd,
                "worst": None if worst is None else worst.to_dict()}

    def to_dict(self) -> dict[str, Any]:
        return {"a": self.a.to_dict(), "b": self.b.to_dict(),
                "cells": [c.to_dict() for c in self.cells], "summary": self.summary(),
                "spectral_distance_db": self.spectral_db, "edr_difference_db": self.edr_db,
                "jnd": {name: {"value": jnd, "kind": kind, "source": src}
                        for _, name, kind, jnd, src in PARAMETERS}
                | {"STI": {"value": STI_JND, "kind": "absolute", "source": "from memory"}}}


def _cell(band: str, name: str, kind: str, jnd: float, a: RoomSide, b: RoomSide, key: str,
          threshold: float) -> Cell:
    va, vb = a.values.get((band, key)), b.values.get((band, key))
    spreads = [s for s in (a.spread.get((band, key)), b.spread.get((band, key)))
               if s is not None]
    spread = max(spreads) if spreads else None
    if va is None or vb is None:
        why = [f"{side}: {s.reasons.get((band, key), 'no value')}"
               for side, s, v in (("A", a, va), ("B", b, vb)) if v is None]
        return Cell(band, name, va, vb, None, None, "not compared", spread, "; ".join(why))
    diff = vb - va
    if kind == "relative":
        if va <= 0:
            return Cell(band, name, va, vb, diff, None, "not compared", spread,
                        "A's value is not positive")
        n_jnd = (vb / va - 1.0) / jnd
    else:
        n_jnd = diff / jnd
    if abs(n_jnd) <= threshold:
        verdict = f"within {threshold:g} JND"
    elif spread is not None and abs(diff) <= spread:
        verdict = "within the spread over positions"
    else:
        verdict = "audible difference"
    return Cell(band, name, va, vb, diff, n_jnd, verdict, spread)


def compare_sides(a: RoomSide, b: RoomSide, *, threshold_jnd: float = 1.0) -> Comparison:
    """Compare two sides band by band (module notes).

    Raises
    ------
    ParameterError
        If ``threshold_jnd`` is not positive, or the sides share no octave band.
    """
    if not (threshold_jnd >= 0 and math.isfinite(threshold_jnd)):
        raise ParameterError(f"the JND threshold {threshold_jnd} must be a number >= 0")
    bands = [x for x in a.bands if x in b.bands]
    if not bands:
        raise ParameterError("the two sides share no octave band; compare responses at "
                             "sample rates that hold the same bands")
    cells = [_cell(band, name, kind, jnd, a, b, key, threshold_jnd)
             for band in bands for key, name, kind, jnd, _ in PARAMETERS]
    cells.append(_cell("", "STI", "absolute", STI_JND, a, b, "sti", threshold_jnd))
    spectral: dict[str, float | None] = dict.fromkeys(bands)
    edr: dict[str, dict[str, float] | None] = dict.fromkeys(bands)
    if a.h and b.h and a.fs == b.fs:
        spectral = spectral_distance_db(_from_onset(a.h), _from_onset(b.h),
                                        a.fs, bands)
        edr = edr_difference_db(a.h[0], b.h[0], a.fs, bands)
    return Comparison(a, b, tuple(cells), threshold_jnd, spectral, edr)


# ---------------------------------------------------------------------------------------------
# Distances between responses

_OCTAVE_CENTRES = {"31.5": 31.62, "63": 63.10, "125": 125.89, "250": 251.19, "500": 501.19,
                   "1k": 1000.0, "2k": 1995.26, "4k": 3981.07, "8k": 7943.28, "16k": 15848.9}


def _onset(h: np.ndarray) -> int:
    """ISO 3382-1 A.3.4 style onset: the first sample 20 dB below the peak of h²."""
    e = h * h
    return int(np.argmax(e >= 0.01 * float(np.max(e))))


def _from_onset(hs: Sequence[np.ndarray]) -> list[np.ndarray]:
    return [np.asarray(h, dtype=np.float64)[_onset(np.asarray(h)):] for h in hs]


def spectral_distance_db(ha: Sequence[np.ndarray], hb: Sequence[np.ndarray], fs: int,
                         bands: Sequence[str]) -> dict[str, float | None]:
    """Per octave, the RMS dB difference of the energy-normalised 1/3-octave-smoothed power
    spectra (the mean over positions of each side's spectra); None for a band above 0.45·fs."""
    from measure.model._smoothing import smooth_power

    n = max(max(h.size for h in ha), max(h.size for h in hb))
    m = 1 << int(math.ceil(math.log2(max(n, 1024))))
    f = np.fft.rfftfreq(m, 1.0 / fs)[1:]

    def level(hs: Sequence[np.ndarray]) -> np.ndarray:
        p = np.mean([np.abs(np.fft.rfft(h, m)[1:]) ** 2 for h in hs], axis=0)
        return p / np.sum(p)

    pa, pb = level(ha), level(hb)
    out: dict[str, float | None] = {}
    for band in bands:
        fc = _OCTAVE_CENTRES.get(band)
        if fc is None or fc * math.sqrt(2.0) > 0.45 * fs:
            out[band] = None
            continue
        grid = np.geomspace(fc / math.sqrt(2.0), fc * math.sqrt(2.0), 24)
        sa = smooth_power(f, pa, grid, fraction=3)
        sb = smooth_power(f, pb, grid, fraction=3)
        d = 10.0 * np.log10(np.maximum(sb, 1e-300) / np.maximum(sa, 1e-300))
        out[band] = float(np.sqrt(np.mean(d * d)))
    return out


def edr_difference_db(ha: np.ndarray, hb: np.ndarray, fs: int, bands: Sequence[str], *,
                      window_s: float = 0.032, hop_s: float = 0.008
                      ) -> dict[str, dict[str, float] | None]:
    """Per octave, the mean and largest |ΔEDR| (dB) over the cells within the top 60 dB of each
    side's energy decay relief (module notes)."""
    from scipy.signal import stft

    ha = check_signal(ha, "ha", ndim=(1,))
    hb = check_signal(hb, "hb", ndim=(1,))
    a, b = ha[_onset(ha):], hb[_onset(hb):]
    n = min(a.size, b.size)
    a, b = a[:n] / math.sqrt(float(np.sum(a[:n] ** 2))), b[:n] / math.sqrt(float(np.sum(b[:n] ** 2)))
    nper = max(int(round(window_s * fs)), 16)
    hop = max(int(round(hop_s * fs)), 1)
    f, _, za = stft(a, fs, window="hann", nperseg=nper, noverlap=nper - hop, boundary=None)
    _, _, zb = stft(b, fs, window="hann", nperseg=nper, noverlap=nper - hop, boundary=None)

    def relief(z: np.ndarray) -> np.ndarray:
        return np.cumsum((np.abs(z) ** 2)[:, ::-1], axis=1)[:, ::-1]

    ra, rb = relief(za), relief(zb)
    out: dict[str, dict[str, float] | None] = {}
    for band in bands:
        fc = _OCTAVE_CENTRES.get(band)
        sel = (f >= (fc or 0) / math.sqrt(2.0)) & (f < (fc or 0) * math.sqrt(2.0))
        if fc is None or not sel.any() or fc * math.sqrt(2.0) > 0.45 * fs:
            out[band] = None
            continue
        ea, eb = ra[sel].sum(axis=0), rb[sel].sum(axis=0)
        if ea[0] <= 0 or eb[0] <= 0:
            out[band] = None
            continue
        la, lb = 10.0 * np.log10(np.maximum(ea / ea[0], 1e-30)), \
            10.0 * np.log10(np.maximum(eb / eb[0], 1e-30))
        keep = (la > -60.0) & (lb > -60.0)
        d = np.abs(lb[keep] - la[keep]) if keep.any() else np.zeros(1)
        out[band] = {"mean": float(np.mean(d)), "max": float(np.max(d))}
    return out
