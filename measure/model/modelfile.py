"""The room model as a versioned, documented JSON file: build, write out, read back, validate.

A model is a few hundred numbers at most, and enough to re-render it at any sample rate:

    h(t) = C * [ g·δ(t − t0) + Σ_k g·a_k·δ(t − t0 − t_k) ]  +  late(t − t0)

where ``C`` is the coloration filter (:mod:`measure.model.coloration`), ``t0`` the arrival of
the direct sound, ``(t_k, a_k)`` the discrete echoes (:mod:`measure.model.echoes`) and ``late``
the per-band delay network of :mod:`measure.model.late`.

File layout (format ``measure.room-model``, version 1)
------------------------------------------------------
``format`` : str
    Always ``"measure.room-model"``.
``version`` : int
    1. A reader refuses other versions with a message rather than guessing.
``tool_version`` : str
    Version of the package that wrote the file.
``about`` : str
    One sentence saying what the file is (for a reader who opens it by eye).
``fit_fs`` : int, Hz
    Sample rate of the measured response the model was fitted to (rendering works at any rate;
    the late part is rendered at this rate, to which its envelope was fitted, and resampled).
``direct`` : object
    ``delay_s`` (arrival of the direct sound in the measured response, s) and ``gain`` (its
    amplitude factor applied before the coloration filter; 1 when the filter carries the level).
``coloration`` : object or null
    The filter as written by :meth:`measure.model.coloration.Coloration.to_dict` (zeros, poles,
    gain and second-order sections at its own rate; remapped for other rates); null: no filter.
``echoes`` : list of object
    ``delay_s`` after the direct sound (s, > 0) and ``gain`` relative to the direct sound.
``late`` : object
    ``band_centers_hz``; ``t60_s`` (decay time of the network per band, s); ``level_db`` (energy
    of the late part in each band re a unit impulse, dB); ``start_s`` and ``fade_s`` (start
    after the direct sound and half-Hann fade-in, s); ``delays_s`` (nominal delay-line lengths,
    s; made distinct primes at the rendering rate); ``envelope_edges_s`` and ``envelope_db``
    (per band, segment edges re the direct sound and one gain per segment: the correction that
    makes the early energy follow the measurement; see
    :func:`measure.model.late.envelope_gain`); ``diffuse_from_s`` (start of the early diffuse
    part, band-shaped noise that carries the diffuse energy up to the network's start and
    cross-fades into it, s re the direct sound; null or absent: none).
``mixing_time_s`` : float or null
    Mixing time of the measured response after the direct sound (normalised echo density),
    for information.
``source`` : object
    Where the model came from (e.g. file name, its SHA-256, the options of the fit).
``i3dl2`` : object or null
    The I3DL2 listener reverb parameters estimated for the room (:mod:`measure.model.i3dl2`).

Reading a file (:func:`model_from_dict`) refuses any key not listed here (naming it, the known
keys and a likely intended spelling) and any number that is not finite or lies outside the
bounds below (:data:`MAX_T60_S`, :data:`MAX_RENDER_S`, ...), each named with its range in the
message: a model that loads renders by default within ``measure render``'s 120 s.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any

from measure._validate import check_fs
from measure._version import __version__
from measure.errors import MeasureError, ParameterError
from measure.model.late import LateReverb

__all__ = [
    "MODEL_FORMAT",
    "MODEL_VERSION",
    "RoomModel",
    "model_from_dict",
    "count_numbers",
    "MAX_NUMBERS",
]

MODEL_FORMAT = "measure.room-model"
MODEL_VERSION = 1
#: The issue's budget: "a few hundred numbers at most".
MAX_NUMBERS = 400
ABOUT = ("Compact room model: coloration filter x (direct sound + discrete echoes) + a per-band "
         "feedback-delay-network late reverberation; render it with `measure render`.")


@dataclass(frozen=True, slots=True, eq=False)
class RoomModel:
    """A fitted compact room model (see the module notes for every field's meaning).

    Attributes
    ----------
    fit_fs : int, Hz
    direct_delay_s : float, >= 0, s
    direct_gain : float
    coloration : Coloration or None
    echoes : tuple of (delay_s, gain)
    late : LateReverb
    mixing_time_s : float or None
    source : dict
    i3dl2 : dict or None
    """

    fit_fs: int
    direct_delay_s: float
    direct_gain: float
    coloration: Any
    echoes: tuple[tuple[float, float], ...]
    late: LateReverb
    mixing_time_s: float | None = None
    source: dict = field(default_factory=dict)
    i3dl2: dict | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "fit_fs", check_fs(self.fit_fs))  # 48000.0 -> 48000
        if not (self.direct_delay_s >= 0) or not math.isfinite(self.direct_delay_s):
            raise ParameterError(f"direct delay {self.direct_delay_s!r} s must be >= 0 and finite")
        if not math.isfinite(self.direct_gain):
            raise ParameterError(f"direct gain {self.direct_gain!r} must be finite")
        for d, g in self.echoes:
            if not (d > 0) or not math.isfinite(d) or not math.isfinite(g):
                raise ParameterError(
                    f"echo (delay {d!r} s, gain {g!r}) needs a finite delay > 0 after the direct "
                    "sound and a finite gain; fix or re-fit the model")
        if self.mixing_time_s is not None and not (self.mixing_time_s >= 0):
            raise ParameterError(f"mixing time {self.mixing_time_s!r} s must be >= 0 or null")

    def replace(self, **changes: Any) -> RoomModel:
        """A copy with some fields changed (validated again)."""
        return dataclasses.replace(self, **changes)

    def with_room_rolloff(self, rolloff: float) -> RoomModel:
        """A copy whose I3DL2 set carries a measured RoomRolloffFactor (the rolloff of the
        reverberant level over a distance series, measure.attenuation), clamped to the
        guideline's 0..10 with the wanted value noted when it had to be."""
        from measure.model.i3dl2 import I3DL2_RANGES

        if self.i3dl2 is None:
            raise ParameterError("the model holds no I3DL2 set to carry a RoomRolloffFactor; "
                                 "fit it again with `measure fit`")
        lo, hi, _ = I3DL2_RANGES["RoomRolloffFactor"]
        doc = {k: (dict(v) if isinstance(v, dict) else list(v) if isinstance(v, list) else v)
               for k, v in self.i3dl2.items()}
        value = min(max(float(rolloff), lo), hi)
        doc.setdefault("values", {})["RoomRolloffFactor"] = value
        clamped = doc.setdefault("clamped", {})
        clamped.pop("RoomRolloffFactor", None)
        if value != rolloff:
            clamped["RoomRolloffFactor"] = float(rolloff)
        notes = [n for n in doc.get("notes", []) if not n.startswith("RoomRolloffFactor")]
        doc["notes"] = [f"RoomRolloffFactor {value:.3f}: the reverberant level's rolloff "
                        "measured over a distance series"] + notes
        return self.replace(i3dl2=doc)

    def to_dict(self) -> dict[str, Any]:
        """The JSON object of the model file (module notes)."""
        return {
            "format": MODEL_FORMAT,
            "version": MODEL_VERSION,
            "tool_version": __version__,
            "about": ABOUT,
            "fit_fs": int(self.fit_fs),
            "direct": {"delay_s": float(self.direct_delay_s), "gain": float(self.direct_gain)},
            "coloration": None if self.coloration is None else self.coloration.to_dict(),
            "echoes": [{"delay_s": float(d), "gain": float(g)} for d, g in self.echoes],
            "late": self.late.to_dict(),
            "mixing_time_s": None if self.mixing_time_s is None else float(self.mixing_time_s),
            "source": dict(self.source),
            "i3dl2": None if self.i3dl2 is None else dict(self.i3dl2),
        }


#: Bounds a model file is held to (module notes). ``measure render`` makes at most this many
#: seconds of response, so a time beyond it can never be heard.
MAX_RENDER_S = 120.0
#: Sample rates ``measure render`` accepts (and a fit's rate must lie among them), Hz.
FS_RANGE_HZ = (8000, 384000)
#: Longest decay time of the late part, s. The longest reverberation times of buildings are
#: about 10 s (large cathedrals, from memory), of sealed tanks a few tens of seconds; 60 s keeps
#: the default rendering (direct delay + late start + 1.2 × T60, render.default_seconds) within
#: MAX_RENDER_S together with the two bounds below (30 + 10 + 72 = 112 s).
MAX_T60_S = 60.0
#: Latest direct sound in the measured response, s (the recording's pre-delay).
MAX_DIRECT_DELAY_S = 30.0
#: Latest start (and longest fade-in) of the late part after the direct sound, s.
MAX_LATE_START_S = 10.0
#: Largest |gain| of the direct sound (120 dB above full scale: beyond any recording).
MAX_DIRECT_GAIN = 1e6
#: Largest |gain| of an echo re the direct sound (+40 dB: a "reflection" that much louder than
#: the direct sound is a misplaced direct sound, not an echo).
MAX_ECHO_GAIN = 100.0
#: Most echoes: the candidates measure.model.echoes examines.
MAX_ECHOES = 400
#: Coloration orders: those measure.model.coloration.fit_coloration makes.
ORDER_RANGE = (1, 64)
#: Most bands of the late part: the third-octave bands from 20 Hz to 20 kHz.
MAX_BANDS = 31
#: Delay lines of the network: a power of two (a Hadamard matrix) from 2 to this.
MAX_LINES = 64
#: Longest delay line, s: twice the longest line the fit makes for a decay of MAX_T60_S
#: (measure.model.late.nominal_delays_s(60) peaks at 1.74 s).
MAX_LINE_S = 3.5
#: Most envelope segments per band (the fit makes about 20).
MAX_SEGMENTS = 100
#: Late levels re a unit impulse, dB: the fit's floor is 1e-300 of energy (-3000 dB); +200 dB
#: is an amplitude of 1e10, beyond any recording.
LEVEL_RANGE_DB = (-3100.0, 200.0)
#: The keys of each object of the file (module notes).
TOP_KEYS = ("format", "version", "tool_version", "about", "fit_fs", "direct", "coloration",
            "echoes", "late", "mixing_time_s", "source", "i3dl2")
DIRECT_KEYS = ("delay_s", "gain")
ECHO_KEYS = ("delay_s", "gain")
LATE_KEYS = ("band_centers_hz", "t60_s", "level_db", "start_s", "fade_s", "delays_s",
             "envelope_edges_s", "envelope_db", "diffuse_from_s")
COLORATION_KEYS = ("format", "fs", "order", "method", "lsd_db", "f_lo_hz", "f_hi_hz",
                   "smoothing_fraction", "gain", "zeros", "poles", "sos")
I3DL2_KEYS = ("standard", "units", "values", "clamped", "notes", "calibration_residual")
COLORATION_METHODS = ("lm", "warped_lp", "remap")

_FIX = "correct it or re-fit the model with `measure fit`"
_WHY_FS = "the rates `measure render` accepts"
_WHY_RENDER = "`measure render` makes at most 120 s"
_WHY_DEFAULT = "so that the default rendering stays within `measure render`'s 120 s"
_WHY_T60 = ("beyond any room: the largest cathedrals decay in about 10 s, and the default "
            "rendering, 1.2 × T60, must stay within `measure render`'s 120 s")


def _refuse_unknown(d: dict, known: tuple[str, ...], where: str) -> None:
    """One line naming the first unknown key, the known ones and a likely intended spelling."""
    import difflib

    for key in d:
        if key not in known:
            near = difflib.get_close_matches(str(key), known, n=1)
            hint = f" (a typo for {near[0]!r}?)" if near else ""
            raise ParameterError(
                f"unknown key {key!r} in {where} of the model file{hint}; the known keys are "
                f"{', '.join(known)}: remove or rename it")


def _show(v: Any) -> str:
    """``repr(v)``, shortened to one readable piece for a message."""
    r = repr(v)
    return r if len(r) <= 40 else r[:30] + "…" + r[-6:]


def _number(v: Any, name: str) -> float:
    """``v`` as a finite float, or a ParameterError naming ``name`` (bools and text refused)."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise ParameterError(f"{name}={_show(v)} in the model file is not a number; {_FIX}")
    try:
        f = float(v)
    except OverflowError:  # a JSON integer beyond float range
        f = math.inf
    if not math.isfinite(f):
        raise ParameterError(f"{name}={_show(v)} in the model file is not a finite number; "
                             f"{_FIX}")
    return f


def _bounded(v: Any, name: str, lo: float, hi: float, unit: str = "", *,
             lo_open: bool = False, why: str = "") -> float:
    """A finite number within lo … hi (lo excluded when ``lo_open``), else one line naming it."""
    f = _number(v, name)
    if f > hi or f < lo or (lo_open and f == lo):
        u = f" {unit}" if unit else ""
        rule = f"> {lo:g}{u} and <= {hi:g}{u}" if lo_open else f"within {lo:g} … {hi:g}{u}"
        why = f" ({why})" if why else ""
        raise ParameterError(f"{name}={_show(v)}{u} in the model file must be {rule}{why}; "
                             f"{_FIX}")
    return f


def _whole(v: Any, name: str, lo: int, hi: int, unit: str = "", *, why: str = "") -> int:
    """A whole number within lo … hi (1e9 and 3.5 refused; 48000.0 taken as 48000)."""
    f = _bounded(v, name, lo, hi, unit, why=why)
    if f != int(f):
        raise ParameterError(f"{name}={_show(v)} in the model file must be a whole number; "
                             f"{_FIX}")
    return int(f)


def _key(d: dict, key: str, where: str) -> Any:
    if key not in d:
        raise ParameterError(f"the model file lacks {where}.{key}; re-fit the model")
    return d[key]


def _list(v: Any, name: str, *, min_len: int = 1, max_len: int) -> list:
    if not isinstance(v, list) or not min_len <= len(v) <= max_len:
        n = f"{len(v)} entries" if isinstance(v, list) else _show(v)
        raise ParameterError(f"{name} in the model file must be a list of {min_len} to {max_len} "
                             f"entries, not {n}; {_FIX}")
    return v


def _bounded_list(d: dict, key: str, where: str, lo: float, hi: float, unit: str = "", *,
                  lo_open: bool = False, max_len: int, why: str = "") -> tuple[float, ...]:
    v = _list(_key(d, key, where), f"{where}.{key}", max_len=max_len)
    return tuple(_bounded(x, f"{where}.{key}[{i}]", lo, hi, unit, lo_open=lo_open, why=why)
                 for i, x in enumerate(v))


def _rows(d: dict, key: str, lo: float, hi: float, unit: str) -> tuple[tuple[float, ...], ...]:
    v = d.get(key, [])
    if not isinstance(v, list) or not all(isinstance(r, list) for r in v):
        raise ParameterError(f"late.{key} in the model file must be a list of lists of numbers; "
                             "re-fit the model")
    _list(v, f"late.{key}", min_len=0, max_len=MAX_BANDS)
    return tuple(tuple(_bounded(x, f"late.{key}[{b}][{i}]", lo, hi, unit)
                       for i, x in enumerate(_list(r, f"late.{key}[{b}]",
                                                   max_len=MAX_SEGMENTS + 1)))
                 for b, r in enumerate(v))


def _object(v: Any, name: str, *, optional: bool) -> dict | None:
    if v is None and optional:
        return None
    if not isinstance(v, dict):
        kind = "an object or null" if optional else "an object"
        raise ParameterError(f"{name} in the model file must be {kind}, not {_show(v)}; "
                             f"{_FIX}")
    return v


def _late_from_dict(late_d: dict, fit_fs: int) -> LateReverb:
    from measure.model.fit import ENVELOPE_LIMITS_DB

    _refuse_unknown(late_d, LATE_KEYS, "late")
    nyq = fit_fs / 2.0
    diffuse = late_d.get("diffuse_from_s")
    n_lines = len(_list(_key(late_d, "delays_s", "late"), "late.delays_s", min_len=2,
                        max_len=MAX_LINES))
    if n_lines & (n_lines - 1):
        raise ParameterError(f"late.delays_s holds {n_lines} delay lines; the network needs a "
                             f"power of two from 2 to {MAX_LINES} (the fit makes 16); {_FIX}")
    return LateReverb(
        band_centers_hz=_bounded_list(late_d, "band_centers_hz", "late", 1.0, nyq, "Hz",
                                      max_len=MAX_BANDS, why="below the fitting rate's Nyquist"),
        t60_s=_bounded_list(late_d, "t60_s", "late", 0.0, MAX_T60_S, "s", lo_open=True,
                            max_len=MAX_BANDS, why=_WHY_T60),
        level_db=_bounded_list(late_d, "level_db", "late", *LEVEL_RANGE_DB, "dB",
                               max_len=MAX_BANDS),
        start_s=_bounded(_key(late_d, "start_s", "late"), "late.start_s", 0.0,
                         MAX_LATE_START_S, "s", why=_WHY_DEFAULT),
        fade_s=_bounded(_key(late_d, "fade_s", "late"), "late.fade_s", 0.0, MAX_LATE_START_S,
                        "s"),
        delays_s=_bounded_list(late_d, "delays_s", "late", 0.0, MAX_LINE_S, "s", lo_open=True,
                               max_len=MAX_LINES),
        envelope_edges_s=_rows(late_d, "envelope_edges_s", 0.0, MAX_RENDER_S, "s"),
        envelope_db=_rows(late_d, "envelope_db", *ENVELOPE_LIMITS_DB, "dB"),
        diffuse_from_s=(None if diffuse is None else
                        _bounded(diffuse, "late.diffuse_from_s", 0.0, MAX_LATE_START_S, "s")))


def _coloration_from_dict(col: dict) -> Any:
    from measure.model.coloration import coloration_from_dict

    _refuse_unknown(col, COLORATION_KEYS, "coloration")
    for key in COLORATION_KEYS:
        _key(col, key, "coloration")
    fs = _whole(col["fs"], "coloration.fs", *FS_RANGE_HZ, "Hz", why=_WHY_FS)
    order = _whole(col["order"], "coloration.order", *ORDER_RANGE,
                   why="the orders `measure fit` makes")
    if col["method"] not in COLORATION_METHODS:
        raise ParameterError(f"coloration.method={col['method']!r} in the model file is not one "
                             f"of {', '.join(COLORATION_METHODS)}; {_FIX}")
    _bounded(col["lsd_db"], "coloration.lsd_db", 0.0, 1000.0, "dB")
    f_lo = _bounded(col["f_lo_hz"], "coloration.f_lo_hz", 0.0, fs / 2.0, "Hz", lo_open=True)
    _bounded(col["f_hi_hz"], "coloration.f_hi_hz", f_lo, fs / 2.0, "Hz", lo_open=True)
    frac = col["smoothing_fraction"]
    if frac is not None:
        _whole(frac, "coloration.smoothing_fraction", 1, 1000)
    _bounded(col["gain"], "coloration.gain", 0.0, MAX_DIRECT_GAIN, lo_open=True)
    for key in ("zeros", "poles"):
        roots = _list(col[key], f"coloration.{key}", max_len=ORDER_RANGE[1])
        if len(roots) != order:
            raise ParameterError(f"coloration.{key} holds {len(roots)} roots for order {order}; "
                                 f"the two must agree; {_FIX}")
        for i, r in enumerate(roots):
            pair = _list(r, f"coloration.{key}[{i}]", min_len=2, max_len=2)
            radius = math.hypot(*(_number(x, f"coloration.{key}[{i}]") for x in pair))
            if key == "poles" and radius >= 1.0:
                raise ParameterError(f"coloration.poles[{i}]={r!r} lies on or outside the unit "
                                     f"circle, so the filter is unstable; {_FIX}")
            if radius > 1.0:
                raise ParameterError(f"coloration.zeros[{i}]={r!r} lies outside the unit circle "
                                     f"(the fit keeps every root inside it); {_FIX}")
    n_sec = (order + 1) // 2
    sos = _list(col["sos"], "coloration.sos", min_len=n_sec, max_len=n_sec)
    for i, row in enumerate(sos):
        vals = [_number(x, f"coloration.sos[{i}]")
                for x in _list(row, f"coloration.sos[{i}]", min_len=6, max_len=6)]
        if vals[3] != 1.0:
            raise ParameterError(f"coloration.sos[{i}][3]={row[3]!r} must be 1 (a normalised "
                                 f"second-order section); {_FIX}")
    return coloration_from_dict(col)


def _i3dl2_from_dict(doc: dict) -> dict:
    from measure.model.i3dl2 import I3DL2_RANGES

    _refuse_unknown(doc, I3DL2_KEYS, "i3dl2")
    values = _object(doc.get("values"), "i3dl2.values", optional=False)
    _refuse_unknown(values, tuple(I3DL2_RANGES), "i3dl2.values")
    for k, (lo, hi, unit) in I3DL2_RANGES.items():
        _bounded(_key(values, k, "i3dl2.values"), f"i3dl2.values.{k}", lo, hi, unit)
    for key in ("clamped", "calibration_residual"):
        part = _object(doc.get(key), f"i3dl2.{key}", optional=True) or {}
        _refuse_unknown(part, tuple(I3DL2_RANGES), f"i3dl2.{key}")
        for k, v in part.items():
            _number(v, f"i3dl2.{key}.{k}")
    notes = doc.get("notes", [])
    if not isinstance(notes, list) or not all(isinstance(n, str) for n in notes):
        raise ParameterError(f"i3dl2.notes in the model file must be a list of texts; {_FIX}")
    for key in ("standard",):
        if key in doc and not isinstance(doc[key], str):
            raise ParameterError(f"i3dl2.{key}={doc[key]!r} in the model file must be a text; "
                                 f"{_FIX}")
    units = _object(doc.get("units", {}), "i3dl2.units", optional=False)
    if not all(isinstance(u, str) for u in units.values()):
        raise ParameterError(f"i3dl2.units in the model file must map names to texts; {_FIX}")
    return dict(doc)


def model_from_dict(d: Any) -> RoomModel:
    """Rebuild and validate a :class:`RoomModel` from the JSON object of a model file.

    Every key must be one the format knows and every number finite and within the bounds
    above (:data:`MAX_T60_S`, :data:`MAX_RENDER_S`, ...), so that a model that loads renders
    within ``measure render``'s limits by default.

    Raises
    ------
    ParameterError
        If the object is not a model file of this format and version, a key is unknown, or a
        value is missing, of the wrong type or out of range; the message names the field and
        the allowed range.
    """
    if not isinstance(d, dict):
        raise ParameterError("the model file is not a JSON object; give a file written by "
                             "`measure fit`")
    if d.get("format") != MODEL_FORMAT:
        raise ParameterError(f"format={d.get('format')!r} is not {MODEL_FORMAT!r}: this is not a "
                             "room model file; give one written by `measure fit`")
    if d.get("version") != MODEL_VERSION or isinstance(d.get("version"), bool):
        raise ParameterError(f"model file version {d.get('version')!r} is not supported (this "
                             f"version reads {MODEL_VERSION}); re-fit the model with this version")
    _refuse_unknown(d, TOP_KEYS, "the top level")
    direct = d.get("direct")
    late_d = d.get("late")
    echoes = d.get("echoes", [])
    if not isinstance(direct, dict) or not isinstance(late_d, dict) or not isinstance(echoes, list):
        raise ParameterError("the model file needs objects 'direct' and 'late' and a list "
                             "'echoes'; re-fit the model")
    for key in ("tool_version", "about"):
        if key in d and not isinstance(d[key], str):
            raise ParameterError(f"{key}={d[key]!r} in the model file must be a text; {_FIX}")
    try:
        fit_fs = _whole(_key(d, "fit_fs", "model"), "fit_fs", *FS_RANGE_HZ, "Hz", why=_WHY_FS)
        col = _object(d.get("coloration"), "coloration", optional=True)
        coloration = None if col is None else _coloration_from_dict(col)
        late = _late_from_dict(late_d, fit_fs)
        _refuse_unknown(direct, DIRECT_KEYS, "direct")
        _list(echoes, "echoes", min_len=0, max_len=MAX_ECHOES)
        ech = []
        for i, e in enumerate(echoes):
            if not isinstance(e, dict):
                raise ParameterError(f"echoes[{i}] in the model file is not an object with "
                                     "delay_s and gain; correct it or re-fit the model")
            _refuse_unknown(e, ECHO_KEYS, f"echoes[{i}]")
            ech.append((
                _bounded(_key(e, "delay_s", f"echoes[{i}]"), f"echoes[{i}].delay_s", 0.0,
                         MAX_RENDER_S, "s", lo_open=True, why=_WHY_RENDER),
                _bounded(_key(e, "gain", f"echoes[{i}]"), f"echoes[{i}].gain", -MAX_ECHO_GAIN,
                         MAX_ECHO_GAIN, why="+40 dB re the direct sound")))
        mix = d.get("mixing_time_s")
        source = _object(d.get("source"), "source", optional=True)
        i3dl2 = _object(d.get("i3dl2"), "i3dl2", optional=True)
        return RoomModel(
            fit_fs=fit_fs,
            direct_delay_s=_bounded(_key(direct, "delay_s", "direct"), "direct.delay_s", 0.0,
                                    MAX_DIRECT_DELAY_S, "s", why=_WHY_DEFAULT),
            direct_gain=_bounded(_key(direct, "gain", "direct"), "direct.gain",
                                 -MAX_DIRECT_GAIN, MAX_DIRECT_GAIN),
            coloration=coloration, echoes=tuple(ech), late=late,
            mixing_time_s=(None if mix is None else
                           _bounded(mix, "mixing_time_s", 0.0, MAX_RENDER_S, "s")),
            source=dict(source or {}),
            i3dl2=None if i3dl2 is None else _i3dl2_from_dict(i3dl2))
    except MeasureError as err:
        if isinstance(err, ParameterError):
            raise
        raise ParameterError(str(err)) from err


def count_numbers(obj: Any) -> int:
    """How many numbers a JSON object holds (the model's size, against :data:`MAX_NUMBERS`)."""
    if isinstance(obj, bool):
        return 0
    if isinstance(obj, (int, float)):
        return 1
    if isinstance(obj, dict):
        return sum(count_numbers(v) for v in obj.values())
    if isinstance(obj, (list, tuple)):
        return sum(count_numbers(v) for v in obj)
    return 0
