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


def _num(d: dict, key: str, where: str) -> float:
    if key not in d:
        raise ParameterError(f"the model file lacks {where}.{key}; re-fit the model")
    v = d[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise ParameterError(f"{where}.{key}={v!r} in the model file is not a finite number; "
                             "re-fit the model or correct the value")
    return float(v)


def _nums(d: dict, key: str, where: str) -> tuple[float, ...]:
    v = d.get(key)
    if not isinstance(v, list) or not v:
        raise ParameterError(f"{where}.{key} in the model file must be a non-empty list of "
                             "numbers; re-fit the model")
    return tuple(_num({key: x}, key, where) for x in v)


def _rows(d: dict, key: str) -> tuple[tuple[float, ...], ...]:
    v = d.get(key, [])
    if not isinstance(v, list) or not all(isinstance(r, list) for r in v):
        raise ParameterError(f"late.{key} in the model file must be a list of lists of numbers; "
                             "re-fit the model")
    return tuple(tuple(_num({key: x}, key, "late") for x in r) for r in v)


def model_from_dict(d: Any) -> RoomModel:
    """Rebuild and validate a :class:`RoomModel` from the JSON object of a model file.

    Raises
    ------
    ParameterError
        If the object is not a model file of this format and version, or a value is missing,
        of the wrong type or out of range; the message names the field.
    """
    from measure.model.coloration import coloration_from_dict

    if not isinstance(d, dict):
        raise ParameterError("the model file is not a JSON object; give a file written by "
                             "`measure fit`")
    if d.get("format") != MODEL_FORMAT:
        raise ParameterError(f"format={d.get('format')!r} is not {MODEL_FORMAT!r}: this is not a "
                             "room model file; give one written by `measure fit`")
    if d.get("version") != MODEL_VERSION:
        raise ParameterError(f"model file version {d.get('version')!r} is not supported (this "
                             f"version reads {MODEL_VERSION}); re-fit the model with this version")
    direct = d.get("direct")
    late_d = d.get("late")
    echoes = d.get("echoes", [])
    if not isinstance(direct, dict) or not isinstance(late_d, dict) or not isinstance(echoes, list):
        raise ParameterError("the model file needs objects 'direct' and 'late' and a list "
                             "'echoes'; re-fit the model")
    col = d.get("coloration")
    try:
        coloration = None if col is None else coloration_from_dict(col)
        late = LateReverb(
            band_centers_hz=_nums(late_d, "band_centers_hz", "late"),
            t60_s=_nums(late_d, "t60_s", "late"),
            level_db=_nums(late_d, "level_db", "late"),
            start_s=_num(late_d, "start_s", "late"),
            fade_s=_num(late_d, "fade_s", "late"),
            delays_s=_nums(late_d, "delays_s", "late"),
            envelope_edges_s=_rows(late_d, "envelope_edges_s"),
            envelope_db=_rows(late_d, "envelope_db"),
            diffuse_from_s=(None if late_d.get("diffuse_from_s") is None
                            else _num(late_d, "diffuse_from_s", "late")))
        ech = []
        for i, e in enumerate(echoes):
            if not isinstance(e, dict):
                raise ParameterError(f"echoes[{i}] in the model file is not an object with "
                                     "delay_s and gain; correct it or re-fit the model")
            ech.append((_num(e, "delay_s", f"echoes[{i}]"), _num(e, "gain", f"echoes[{i}]")))
        mix = d.get("mixing_time_s")
        return RoomModel(
            fit_fs=_num(d, "fit_fs", "model"),  # a whole number of Hz: checked by RoomModel
            direct_delay_s=_num(direct, "delay_s", "direct"),
            direct_gain=_num(direct, "gain", "direct"),
            coloration=coloration, echoes=tuple(ech), late=late,
            mixing_time_s=None if mix is None else _num(d, "mixing_time_s", "model"),
            source=dict(d.get("source") or {}),
            i3dl2=None if d.get("i3dl2") is None else dict(d["i3dl2"]))
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
