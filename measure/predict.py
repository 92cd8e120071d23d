"""Predictions from a room's plan: Sabine, Eyring, image sources, a diffuse tail, and the inverse.

A rectangular room is described by its dimensions, the material of each of its six surfaces,
optional extra absorption (furniture, people, openings), a source and a receiver position and
the air's temperature and humidity (:class:`RoomDescription`, usually read from a small TOML
file with :func:`load_room`). :func:`predict` gives per octave band 63 Hz–8 kHz the Sabine and
Eyring reverberation times (with ISO 9613-1 air absorption) and an impulse response: image
sources (Allen & Berkley 1979) up to an order, per octave band, followed by a statistical
diffuse tail that decays at each octave's Eyring rate. :func:`fit_absorption` is the inverse
use: from measured reverberation times, the mean absorption coefficient (or the area of one
material) per octave that makes Eyring agree.

Room description file (TOML)
----------------------------
All lengths in metres, coordinates in a frame with the room spanning [0, Lx]×[0, Ly]×[0, Lz]
(z up). Absorption coefficients are random-incidence energy absorption coefficients 0..1, given
either for the six octaves 125 Hz–4 kHz (6 values; the 63 Hz octave then holds the 125 Hz
value and the 8 kHz octave the 4 kHz value) or for the eight octaves 63 Hz–8 kHz (8 values).
Every key is checked; an unknown key is refused with its name. A complete example::

    name = "meeting room"                  # free text, used in reports
    description = "second floor, east"     # optional free text
    dimensions_m = [6.0, 4.5, 2.8]         # Lx, Ly, Lz in m
    source_m = [1.2, 2.0, 1.5]             # source position (x, y, z) in m, inside the room
    receiver_m = [4.6, 2.6, 1.2]           # receiver (microphone) position in m
    temperature_c = 21.0                   # optional, default 20 °C
    humidity_percent = 45.0                # optional, default 50 % relative humidity

    [surfaces]                             # each: a material key or a list of coefficients
    floor = "carpet_heavy_on_concrete"     # z = 0
    ceiling = "ceiling_tile_mineral_fibre" # z = Lz
    walls = "plasterboard_on_studs"        # shorthand: all four walls (optional)
    wall_x1 = "glass_window"               # x = Lx; overrides "walls" for this wall
    wall_y0 = [0.2, 0.5, 0.8, 0.9, 0.9, 0.85]  # y = 0, explicit coefficients

    [materials]                            # optional: extends or overrides the built-in table
    acoustic_panel = [0.2, 0.5, 0.8, 0.9, 0.9, 0.85]

    [[extra]]                              # optional, repeatable: absorption not on a surface
    name = "table and chairs"
    area_m2 = [0.5, 1.0, 1.5, 2.0, 2.0, 2.0]   # equivalent absorption area per octave, m²

    [[extra]]
    name = "six people"
    material = "audience_seated"           # a material key ...
    surface_m2 = 3.0                       # ... and the area it covers: A = α·area per octave

The six surfaces are ``floor`` (z = 0), ``ceiling`` (z = Lz), ``wall_x0`` (x = 0, area Ly·Lz),
``wall_x1`` (x = Lx), ``wall_y0`` (y = 0, area Lx·Lz) and ``wall_y1`` (y = Ly); each must be
given, directly or through ``walls``. The built-in materials are :data:`MATERIALS`.

Notes
-----
* Sabine [1]_: T = 0.161·V/(A + 4mV), A = Σ S_i·α_i + A_extra. Eyring [2]_:
  T = 0.161·V/(−S·ln(1 − ᾱ) + 4mV), ᾱ = (Σ S_i·α_i + A_extra)/S, S the room's boundary area.
  The constant 0.161 s/m is 24·ln 10/c at c ≈ 343 m/s (the ISO 354 form 55.3·V/(c·(A+4mV)) at
  20 °C, measurement.md §7); it is used at every temperature, so the worked example of
  measurement.md §7 holds exactly. m = α_air/(10·lg e) in 1/m, α_air in dB/m from ISO 9613-1
  at the exact octave mid-band frequency (:func:`measure.attenuation.air_absorption_db_per_m`).
* Image sources (Allen & Berkley [3]_, modeling.md §6): for q ∈ {0, 1}³ and m ∈ ℤ³ an image at
  x = (1 − 2q_x)·x_s + 2m_x·Lx (and so in y, z), with amplitude Π β_{a0}^|m_a−q_a|·β_{a1}^|m_a|
  /(4πd)·exp(−m_air·d/2) and delay d/c, c from the temperature
  (:func:`measure.attenuation.speed_of_sound_m_s`). The sum is done per octave band with that
  band's pressure reflection coefficients β = √(1 − α); extra absorption is spread evenly over
  the six surfaces for the images (α_i + A_extra/S, at most 1), so that their mean equals
  Eyring's ᾱ. Each arrival is a Kaiser-windowed sinc centred on its fractional delay
  (:mod:`measure._dsp`); each band's image train is band-limited with a zero-phase
  complementary octave mask (:func:`measure.bands.complementary_masks`, the masks sum to one)
  and the bands are summed. The sum (tail included) is high-passed (causal 4th-order
  Butterworth at :data:`HIGHPASS_HZ`, scipy.signal) to remove the DC artefact of all-positive
  images (modeling.md §6); a causal filter puts no sound before the direct arrival.
* Diffuse tail: the image set of order ≤ N is complete up to the arrival of the nearest image
  of order N + 1; there, or earlier once the band's diffuse decay has fallen 5 dB (T/12 after
  the direct sound, where T30's range begins), the images fade out and per octave a band of
  Gaussian noise fades in (energy-complementary, :data:`CROSSFADE_S`), its short-time power
  flattened so that it decays as the exponential and not as one noise draw, decaying at that
  octave's Eyring rate (air included). Its level is the statistical reverberant power c/(4πV)·exp(−13.82·t/T) scaled by
  the ratio of the image energy actually arriving in the second half of the time before the
  junction to that formula's energy over the same interval, so the level is continuous with the
  image sources'. So T30 of the response follows Eyring (a pure specular shoebox decays more
  slowly than Eyring, modeling.md §6).
* Limits (also in each prediction's ``notes``): the formulas assume a diffuse field, which
  non-uniform absorption (an absorbent floor or ceiling with hard walls), flutter between
  parallel hard walls and coupled volumes break; below the Schroeder frequency 2000·√(T/V)
  (Schroeder 1996) single modes dominate and band values are not statistical. The table's
  coefficients are typical values: check product data (ISO 354 measurements) for a design.

References
----------
.. [1] ISO 354:2003, Acoustics — Measurement of sound absorption in a reverberation room,
   8.1.2 (Sabine's formula with the air term 4mV; measurement.md §7).
.. [2] IEC 60050-801, IEV 801-31-09 (Eyring); measurement.md §7, modeling.md §6.
.. [3] J. B. Allen and D. A. Berkley, "Image method for efficiently simulating small-room
   acoustics", J. Acoust. Soc. Am. 65(4), 943–950, 1979.
.. [4] ISO 9613-1:1993, Acoustics — Attenuation of sound during propagation outdoors — Part 1:
   Calculation of the absorption of sound by the atmosphere.
.. [5] M. R. Schroeder, "The 'Schroeder frequency' revisited", J. Acoust. Soc. Am. 99(5),
   3240–3241, 1996.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np
from scipy.signal import butter, sosfilt

from measure._dsp import HALF_WIDTH, _kaiser_sinc
from measure._validate import check_fs, check_nonnegative, check_positive
from measure.attenuation import air_absorption_db_per_m, speed_of_sound_m_s
from measure.bands import complementary_masks
from measure.errors import ParameterError
from measure.virtual import CROSSFADE_OCTAVES, DECAY_60DB, OCTAVE_CENTERS_HZ

__all__ = [
    "Material",
    "MATERIALS",
    "SURFACE_NAMES",
    "BAND_LABELS",
    "ExtraAbsorption",
    "RoomDescription",
    "load_room",
    "room_from_dict",
    "example_room_paths",
    "sabine_s",
    "eyring_s",
    "air_m_per_m",
    "BandPrediction",
    "RoomPrediction",
    "predict",
    "FittedBand",
    "AbsorptionFit",
    "fit_absorption",
    "HIGHPASS_HZ",
    "CROSSFADE_S",
    "DEFAULT_MAX_ORDER",
]

#: Labels of the eight octaves 63 Hz–8 kHz (nominal frequencies, as measure.bands prints them).
BAND_LABELS: tuple[str, ...] = ("63", "125", "250", "500", "1k", "2k", "4k", "8k")
#: The six surfaces of a rectangular room [0, Lx]×[0, Ly]×[0, Lz], z up.
SURFACE_NAMES: tuple[str, ...] = ("floor", "ceiling", "wall_x0", "wall_x1", "wall_y0", "wall_y1")
#: Sabine's constant 24·ln 10/c in s/m at c ≈ 343 m/s (ISO 354 form at 20 °C, measurement.md §7).
SABINE_S_PER_M = 0.161
#: 10·lg e: dB per neper of energy (m = α_dB/(10·lg e), ISO 354 8.1.2.1; measurement.md §7).
_DB_PER_NEPER = 10.0 * math.log10(math.e)
#: Corner of the causal high-pass that removes the image sum's DC artefact, Hz: half the
#: lowest octave centre, so the 63 Hz octave's centre is untouched to 0.02 dB (Allen & Berkley used
#: about 100 Hz for speech, modeling.md §6, from memory; we keep the 63 Hz octave).
HIGHPASS_HZ = OCTAVE_CENTERS_HZ[0] / 2.0
_HIGHPASS_ORDER = 4
#: Length of the energy-complementary crossfade from the image sources to the diffuse tail, s
#: (a few ms: short against any decay, long against a sample; common practice).
CROSSFADE_S = 0.005
#: Default image-source order (modeling.md §6 uses orders of this size for shoeboxes).
DEFAULT_MAX_ORDER = 10
#: Longest response :func:`predict` makes by default, s.
_MAX_DEFAULT_LENGTH_S = 12.0
#: The tail takes over at the latest once a band's diffuse decay has fallen 5 dB: T·5/60 after
#: the direct sound (where T30's evaluation range begins, ISO 3382-1; measurement.md §2.1).
_TAIL_AFTER_DECAY = 5.0 / 60.0
#: The tail's noise is flattened over this many periods of the band's width, at least
#: _FLATTEN_MIN_S (a few periods smooth the power without shaping the band; common practice).
_FLATTEN_PERIODS = 4.0
_FLATTEN_MIN_S = 0.005
#: Fewest images in the level window below which the tail takes the statistical level as is.
_MIN_LEVEL_IMAGES = 10


# ---------------------------------------------------------------------------------------------
# Materials

@dataclass(frozen=True, slots=True, eq=False)
class Material:
    """A surface material: energy absorption coefficient per octave 63 Hz–8 kHz.

    Attributes
    ----------
    key : str
        Short snake_case name used in room files.
    description : str
    alpha : tuple of 8 float, 0..1
        Octaves 63 Hz–8 kHz. Tables give 125 Hz–4 kHz; the 63 Hz value holds the 125 Hz one and
        the 8 kHz value the 4 kHz one (nearest tabulated octave).
    source : str
        Where the values come from.
    """

    key: str
    description: str
    alpha: tuple[float, ...]
    source: str

    def to_dict(self) -> dict[str, Any]:
        return {"key": self.key, "description": self.description,
                "alpha": dict(zip(BAND_LABELS, self.alpha, strict=True)), "source": self.source}


_HANDBOOK = ("typical values, check product data: handbook table 'Sound absorption coefficients "
             "of general building materials and furnishings' (e.g. Barron, Industrial Noise "
             "Control and Acoustics, 2003, App. D), as measurement.md §7 gives it")


def _eight(values: Sequence[float]) -> tuple[float, ...]:
    """Six octave values 125 Hz–4 kHz -> eight 63 Hz–8 kHz, holding the nearest at the ends."""
    v = [float(x) for x in values]
    if len(v) == 6:
        v = [v[0], *v, v[-1]]
    return tuple(v)


def _m(key: str, description: str, alpha: Sequence[float], source: str = _HANDBOOK
       ) -> tuple[str, Material]:
    return key, Material(key, description, _eight(alpha), source)


#: Built-in typical absorption coefficients (measurement.md §7 table, octaves 125 Hz–4 kHz;
#: 63 Hz and 8 kHz hold the nearest value). Typical values, check product data.
MATERIALS: Mapping[str, Material] = MappingProxyType(dict([
    _m("concrete_block_painted", "concrete block, painted",
       (0.10, 0.05, 0.06, 0.07, 0.09, 0.08)),
    _m("concrete_painted", "poured concrete, painted", (0.01, 0.01, 0.01, 0.02, 0.02, 0.02)),
    _m("plasterboard_on_studs", "plasterboard 12 mm on studs",
       (0.29, 0.10, 0.06, 0.05, 0.04, 0.04)),
    _m("glass_window", "glass, ordinary window", (0.35, 0.25, 0.18, 0.12, 0.07, 0.04)),
    _m("glass_plate_heavy", "glass, large heavy plate", (0.18, 0.06, 0.04, 0.03, 0.02, 0.02)),
    _m("carpet_heavy_on_concrete", "carpet, heavy, on concrete",
       (0.02, 0.06, 0.14, 0.37, 0.60, 0.65)),
    _m("wood_floor_on_joists", "wood floor on joists", (0.15, 0.11, 0.10, 0.07, 0.06, 0.07)),
    _m("curtain_velour_draped", "heavy velour curtain, 18 oz/yd², draped to half area",
       (0.14, 0.35, 0.55, 0.72, 0.70, 0.65)),
    _m("seats_upholstered_empty", "upholstered seats, empty",
       (0.49, 0.66, 0.80, 0.88, 0.82, 0.70)),
    _m("audience_seated", "upholstered seats, occupied (audience)",
       (0.60, 0.74, 0.88, 0.96, 0.93, 0.85)),
    # measurement.md §7 gives ranges ≈0.3–0.7, 0.3–0.8, 0.5–0.8, 0.7–0.9, 0.7–0.9, 0.7–0.9;
    # the mid value of each range is taken.
    _m("ceiling_tile_mineral_fibre", "mineral-fibre lay-in ceiling tile with plenum",
       (0.50, 0.55, 0.65, 0.80, 0.80, 0.80),
       "from memory; product-dependent (mid values of the ranges in measurement.md §7)"),
]))


# ---------------------------------------------------------------------------------------------
# Room description

def _coefficients(value: Any, what: str) -> tuple[float, ...]:
    """Validate a list of 6 or 8 absorption coefficients; return eight."""
    if isinstance(value, (str, bytes)) or not isinstance(value, Sequence):
        raise ParameterError(f"{what}={value!r} is not a list of coefficients; give 6 values "
                             "(125 Hz–4 kHz) or 8 values (63 Hz–8 kHz)")
    if len(value) not in (6, 8):
        raise ParameterError(f"{what} has {len(value)} coefficients; give 6 values (125 Hz–4 kHz) "
                             "or 8 values (63 Hz–8 kHz)")
    out = []
    for i, v in enumerate(value):
        f = _as_float(v)
        if f is None:
            raise ParameterError(f"{what}[{i}]={_short(v)} is not a number; give coefficients "
                                 "0..1")
        if not (0.0 <= f <= 1.0):
            raise ParameterError(f"{what}[{i}]={_short(v)} is outside 0..1; an absorption "
                                 "coefficient lies between 0 (reflecting) and 1 (absorbing), so "
                                 "correct it")
        out.append(f)
    return _eight(out)


#: Room dimensions accepted, m: below 0.1 m a box is no room (a 1:10 scale model of a small
#: room is still 0.3 m), above 1000 m none was ever built (the largest halls are a few hundred
#: metres long), and the image sources and the tail would describe nothing real.
DIMENSION_RANGE_M = (0.1, 1000.0)


def _as_float(v: Any) -> float | None:
    """``v`` as a float (an integer beyond float range as inf); None for bools and non-numbers."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return None
    try:
        return float(v)
    except OverflowError:  # an integer of hundreds of digits
        return math.inf


def _real(v: Any, what: str, unit: str) -> float:
    """``v`` as a finite float; bools and text are not numbers (TOML "3" is a string)."""
    f = _as_float(v)
    if f is None or not math.isfinite(f):
        raise ParameterError(f"{what}={_short(v)} is not a finite number; give it in {unit}")
    return f


def _short(v: Any) -> str:
    """``repr(v)`` shortened for a one-line message."""
    r = repr(v)
    return r if len(r) <= 40 else r[:30] + "…" + r[-6:]


def _triple(value: Any, what: str) -> tuple[float, float, float]:
    if isinstance(value, (str, bytes)) or not isinstance(value, Sequence) or len(value) != 3:
        raise ParameterError(f"{what}={_short(value)} is not three numbers; give [x, y, z] in "
                             "metres")
    out = []
    for v in value:
        f = _as_float(v)
        if f is None or not math.isfinite(f):
            raise ParameterError(f"{what}={_short(value)} holds a non-number; give [x, y, z] in "
                                 "metres")
        out.append(f)
    return out[0], out[1], out[2]


@dataclass(frozen=True, slots=True, eq=False)
class ExtraAbsorption:
    """Absorption that is not one of the six surfaces: furniture, people, an opening.

    Give either ``area_m2`` (the equivalent absorption area per octave, m²) or ``material`` and
    ``surface_m2`` (the area that material covers; its absorption is α·surface_m2 per octave).

    Attributes
    ----------
    name : str
    area_m2 : tuple of 6 or 8 float, >= 0, m², optional
    material : str, optional
        A key of the room's material table.
    surface_m2 : float, > 0, m², optional
    """

    name: str
    area_m2: tuple[float, ...] | None = None
    material: str | None = None
    surface_m2: float | None = None

    def __post_init__(self) -> None:
        by_area = self.area_m2 is not None
        by_material = self.material is not None or self.surface_m2 is not None
        if by_area == by_material:
            raise ParameterError(f"extra absorption {self.name!r} needs either area_m2 or "
                                 "material with surface_m2; give one of the two")
        if by_area:
            a = self.area_m2
            if isinstance(a, (str, bytes)) or not isinstance(a, Sequence) or len(a) not in (6, 8):
                raise ParameterError(f"extra absorption {self.name!r}: area_m2={a!r} is not 6 or "
                                     "8 numbers; give m² per octave")
            vals = tuple(check_nonnegative(_real(v, f"extra absorption {self.name!r} area_m2",
                                                 "m²"),
                                           f"extra absorption {self.name!r} area_m2", unit="m²")
                         for v in a)
            object.__setattr__(self, "area_m2", _eight(vals))
        else:
            if self.material is None or self.surface_m2 is None:
                raise ParameterError(f"extra absorption {self.name!r} gives only one of material "
                                     "and surface_m2; give both")
            what = f"extra absorption {self.name!r} surface_m2"
            object.__setattr__(self, "surface_m2", check_positive(
                _real(self.surface_m2, what, "m²"), what, unit="m²"))


@dataclass(frozen=True, slots=True, eq=False)
class RoomDescription:
    """A rectangular room: geometry, surface materials, extra absorption, positions, air.

    Attributes
    ----------
    name : str
    dimensions_m : (float, float, float), > 0, m
        Lx, Ly, Lz; the room is [0, Lx]×[0, Ly]×[0, Lz], z up.
    surfaces : mapping of str to (str or tuple of float)
        Each of :data:`SURFACE_NAMES` to a material key or explicit coefficients (6 values
        125 Hz–4 kHz or 8 values 63 Hz–8 kHz, 0..1).
    source_m, receiver_m : (float, float, float), m
        Positions strictly inside the room, not coincident.
    temperature_c : float, °C
    humidity_percent : float, 0..100, %
    extra : tuple of ExtraAbsorption
    materials : mapping of str to tuple of float
        User materials (6 or 8 coefficients); they extend or override :data:`MATERIALS`.
    description : str

    Raises
    ------
    ParameterError
        On any invalid value (named in the message).
    """

    name: str
    dimensions_m: tuple[float, float, float]
    surfaces: Mapping[str, str | tuple[float, ...]]
    source_m: tuple[float, float, float]
    receiver_m: tuple[float, float, float]
    temperature_c: float = 20.0
    humidity_percent: float = 50.0
    extra: tuple[ExtraAbsorption, ...] = ()
    materials: Mapping[str, tuple[float, ...]] = field(default_factory=dict)
    description: str = ""

    def __post_init__(self) -> None:
        dims = _triple(self.dimensions_m, "dimensions_m")
        lo, hi = DIMENSION_RANGE_M
        for axis, v in zip("xyz", dims, strict=True):
            check_positive(v, f"room dimension L{axis}", unit="m")
            if not lo <= v <= hi:
                raise ParameterError(
                    f"room dimension L{axis}={v:g} m is outside {lo:g}..{hi:g} m (smaller is no "
                    "room, larger was never built); give the room's size in metres")
        object.__setattr__(self, "dimensions_m", dims)
        user = {}
        for key, vals in dict(self.materials).items():
            user[str(key)] = _coefficients(vals, f"material {key!r}")
        object.__setattr__(self, "materials", MappingProxyType(user))
        known = self.material_keys()
        surf: dict[str, str | tuple[float, ...]] = {}
        given = dict(self.surfaces)
        for key in given:
            if key not in SURFACE_NAMES:
                raise ParameterError(f"unknown surface {key!r}; use one of "
                                     f"{', '.join(SURFACE_NAMES)}")
        for name in SURFACE_NAMES:
            if name not in given:
                raise ParameterError(f"surface {name!r} has no material; give a material key or "
                                     "coefficients for each of " + ", ".join(SURFACE_NAMES))
            v = given[name]
            if isinstance(v, str):
                if v not in known:
                    raise ParameterError(f"unknown material {v!r} on surface {name!r}; use one of "
                                         f"{', '.join(known)} or define it under [materials]")
                surf[name] = v
            else:
                surf[name] = _coefficients(v, f"surface {name!r}")
        object.__setattr__(self, "surfaces", MappingProxyType(surf))
        extra = tuple(self.extra)
        for e in extra:
            if not isinstance(e, ExtraAbsorption):
                raise ParameterError(f"extra absorption {e!r} is not an ExtraAbsorption; build "
                                     "one with area_m2 or material and surface_m2")
            if e.material is not None and e.material not in known:
                raise ParameterError(f"unknown material {e.material!r} in extra absorption "
                                     f"{e.name!r}; use one of {', '.join(known)}")
            s_total = 2.0 * (dims[0] * dims[1] + dims[1] * dims[2] + dims[0] * dims[2])
            biggest = max(e.area_m2) if e.area_m2 is not None else e.surface_m2
            if biggest > s_total:
                what = "area_m2" if e.area_m2 is not None else "surface_m2"
                raise ParameterError(
                    f"extra absorption {e.name!r}: {what} {biggest:g} m² exceeds the room's whole "
                    f"surface ({s_total:g} m²); nothing inside a room absorbs like more than all "
                    "its walls, so check the unit (m², per octave) and the value")
        object.__setattr__(self, "extra", extra)
        for what in ("source_m", "receiver_m"):
            p = _triple(getattr(self, what), what)
            for axis, v, lim in zip("xyz", p, dims, strict=True):
                if not (0.0 < v < lim):
                    raise ParameterError(
                        f"{what}={list(p)} lies outside the room: {axis}={v:g} m is not inside "
                        f"0..{lim:g} m; move it inside the room")
            object.__setattr__(self, what, p)
        if math.dist(self.source_m, self.receiver_m) < 1e-3:
            raise ParameterError("source_m and receiver_m coincide; put the receiver at least "
                                 "a few centimetres from the source")
        if isinstance(self.temperature_c, bool) or not isinstance(
                self.temperature_c, (int, float)) or not (
                -50.0 <= self.temperature_c <= 60.0):
            raise ParameterError(f"temperature_c={self.temperature_c!r} is outside -50..60 °C; "
                                 "give the room's air temperature in °C")
        if isinstance(self.humidity_percent, bool) or not isinstance(
                self.humidity_percent, (int, float)) or not (
                0.0 <= self.humidity_percent <= 100.0):
            raise ParameterError(f"humidity_percent={self.humidity_percent!r} is outside "
                                 "0..100 %; give the relative humidity in %")
        object.__setattr__(self, "temperature_c", float(self.temperature_c))
        object.__setattr__(self, "humidity_percent", float(self.humidity_percent))

    # -- derived quantities ------------------------------------------------------------------

    def material_keys(self) -> tuple[str, ...]:
        """Known material keys: the built-in table and the user's, sorted."""
        return tuple(sorted(set(MATERIALS) | set(self.materials)))

    def material_alpha(self, key: str) -> tuple[float, ...]:
        """Eight coefficients 63 Hz–8 kHz of material ``key`` (user table first)."""
        if key in self.materials:
            return self.materials[key]
        if key in MATERIALS:
            return MATERIALS[key].alpha
        raise ParameterError(f"unknown material {key!r}; use one of "
                             f"{', '.join(self.material_keys())}")

    @property
    def volume_m3(self) -> float:
        lx, ly, lz = self.dimensions_m
        return lx * ly * lz

    def surface_areas_m2(self) -> np.ndarray:
        """Areas of :data:`SURFACE_NAMES` in order, m²."""
        lx, ly, lz = self.dimensions_m
        return np.array([lx * ly, lx * ly, ly * lz, ly * lz, lx * lz, lx * lz])

    @property
    def surface_m2(self) -> float:
        return float(np.sum(self.surface_areas_m2()))

    def surface_alpha(self) -> np.ndarray:
        """Coefficients, shape (6 surfaces, 8 octaves), in :data:`SURFACE_NAMES` order."""
        rows = []
        for name in SURFACE_NAMES:
            v = self.surfaces[name]
            rows.append(self.material_alpha(v) if isinstance(v, str) else v)
        return np.array(rows, dtype=np.float64)

    def extra_area_m2(self) -> np.ndarray:
        """Total extra equivalent absorption area per octave 63 Hz–8 kHz, m², shape (8,)."""
        total = np.zeros(len(BAND_LABELS))
        for e in self.extra:
            if e.area_m2 is not None:
                total += np.asarray(e.area_m2)
            else:
                assert e.material is not None and e.surface_m2 is not None  # __post_init__
                total += np.asarray(self.material_alpha(e.material)) * e.surface_m2
        return total

    def absorption_area_m2(self) -> np.ndarray:
        """Equivalent absorption area A = Σ S_i·α_i + A_extra per octave, m², shape (8,)."""
        return self.surface_areas_m2() @ self.surface_alpha() + self.extra_area_m2()

    def mean_alpha(self) -> np.ndarray:
        """Eyring's ᾱ = A/S per octave (extra absorption included), shape (8,)."""
        return self.absorption_area_m2() / self.surface_m2

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name, "description": self.description,
            "dimensions_m": list(self.dimensions_m),
            "surfaces": {k: (v if isinstance(v, str) else list(v))
                         for k, v in self.surfaces.items()},
            "source_m": list(self.source_m), "receiver_m": list(self.receiver_m),
            "temperature_c": self.temperature_c, "humidity_percent": self.humidity_percent,
            "extra": [{"name": e.name, "area_m2": None if e.area_m2 is None else list(e.area_m2),
                       "material": e.material, "surface_m2": e.surface_m2} for e in self.extra],
            "materials": {k: list(v) for k, v in self.materials.items()},
            "volume_m3": self.volume_m3, "surface_m2": self.surface_m2,
        }


_TOP_KEYS = ("name", "description", "dimensions_m", "source_m", "receiver_m", "temperature_c",
             "humidity_percent", "surfaces", "materials", "extra")
_EXTRA_KEYS = ("name", "area_m2", "material", "surface_m2")


def _refuse_unknown(doc: Mapping[str, Any], allowed: tuple[str, ...], where: str) -> None:
    for key in doc:
        if key not in allowed:
            raise ParameterError(f"unknown key {key!r} in {where}; use only "
                                 f"{', '.join(allowed)}")


def room_from_dict(doc: Mapping[str, Any]) -> RoomDescription:
    """Build a :class:`RoomDescription` from a parsed room file (the TOML format above).

    Parameters
    ----------
    doc : mapping
        The document as :func:`tomllib.loads` returns it.

    Returns
    -------
    RoomDescription

    Raises
    ------
    ParameterError
        For an unknown key (named), a missing key, an unknown material (with the known ones),
        a coefficient outside 0..1 or a position outside the room.

    Examples
    --------
    >>> doc = {"name": "box", "dimensions_m": [5, 4, 3], "source_m": [1, 1, 1.5],
    ...        "receiver_m": [4, 3, 1.5], "surfaces": {"floor": "wood_floor_on_joists",
    ...        "ceiling": "plasterboard_on_studs", "walls": "concrete_block_painted"}}
    >>> room = room_from_dict(doc)
    >>> room.volume_m3, room.surfaces["wall_x0"]
    (60.0, 'concrete_block_painted')
    """
    if not isinstance(doc, Mapping):
        raise ParameterError("a room description must be a table of keys; see the format in "
                             "measure.predict's documentation")
    _refuse_unknown(doc, _TOP_KEYS, "the room description")
    for key in ("name", "dimensions_m", "source_m", "receiver_m", "surfaces"):
        if key not in doc:
            raise ParameterError(f"the room description has no {key!r}; add it (see the format "
                                 "in measure.predict's documentation)")
    name = doc["name"]
    if not isinstance(name, str) or not name.strip():
        raise ParameterError(f"name={name!r} is not a text; give the room a name")
    surfaces_doc = doc["surfaces"]
    if not isinstance(surfaces_doc, Mapping):
        raise ParameterError("surfaces must be a table [surfaces] of surface = material; "
                             "see the format in measure.predict's documentation")
    _refuse_unknown(surfaces_doc, (*SURFACE_NAMES, "walls"), "[surfaces]")
    surfaces: dict[str, Any] = {}
    if "walls" in surfaces_doc:
        for w in SURFACE_NAMES[2:]:
            surfaces[w] = surfaces_doc["walls"]
    for k, v in surfaces_doc.items():
        if k != "walls":
            surfaces[k] = v
    materials = doc.get("materials", {})
    if not isinstance(materials, Mapping):
        raise ParameterError("materials must be a table [materials] of key = [coefficients]; "
                             "see the format in measure.predict's documentation")
    extras_doc = doc.get("extra", [])
    if not isinstance(extras_doc, list):
        raise ParameterError("extra must be an array of tables [[extra]]; see the format in "
                             "measure.predict's documentation")
    extras = []
    for i, e in enumerate(extras_doc):
        if not isinstance(e, Mapping):
            raise ParameterError(f"extra #{i + 1} is not a table; write it as [[extra]]")
        _refuse_unknown(e, _EXTRA_KEYS, f"[[extra]] #{i + 1}")
        ename = e.get("name", f"extra #{i + 1}")
        if not isinstance(ename, str):
            raise ParameterError(f"[[extra]] #{i + 1}: name = {ename!r} is not a text; give it "
                                 "a name in quotes")
        area = e.get("area_m2")
        if area is not None and not isinstance(area, (list, tuple)):
            raise ParameterError(f"[[extra]] {ename!r}: area_m2 = {area!r} is not a list; give "
                                 "6 or 8 equivalent absorption areas in m², one per octave")
        extras.append(ExtraAbsorption(
            str(ename), area_m2=None if area is None else tuple(area),
            material=e.get("material"), surface_m2=e.get("surface_m2")))
    description = doc.get("description", "")
    if not isinstance(description, str):
        raise ParameterError(f"description={description!r} is not a text; give free text")
    return RoomDescription(
        name=name, dimensions_m=doc["dimensions_m"], surfaces=surfaces,
        source_m=doc["source_m"], receiver_m=doc["receiver_m"],
        temperature_c=doc.get("temperature_c", 20.0),
        humidity_percent=doc.get("humidity_percent", 50.0),
        extra=tuple(extras), materials=dict(materials), description=description)


def load_room(path: str | Path) -> RoomDescription:
    """Read a room description file (TOML, see the module documentation).

    Raises
    ------
    AudioFileError
        If the file cannot be read.
    ParameterError
        If it is not valid TOML or describes an invalid room.
    """
    p = Path(path)
    from measure.audio_io import read_text

    text = read_text(p, what="room description", kind="TOML")
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ParameterError(f"{str(p)!r} is not valid TOML ({err}); fix the file") from err
    try:
        return room_from_dict(doc)
    except ParameterError as err:
        raise ParameterError(f"{p.name}: {err}") from err


def example_room_paths() -> tuple[Path, ...]:
    """The example room descriptions shipped in ``measure/data/rooms``, sorted by name."""
    return tuple(sorted((Path(__file__).parent / "data" / "rooms").glob("*.toml")))


# ---------------------------------------------------------------------------------------------
# Classical formulas

def air_m_per_m(f_hz: float | np.ndarray, *, temperature_c: float = 20.0,
                humidity_percent: float = 50.0) -> np.ndarray:
    """Energy attenuation coefficient of air m = α/(10·lg e), 1/m (ISO 9613-1; ISO 354 8.1.2.1).

    Examples
    --------
    >>> round(float(air_m_per_m(1000.0)) * 1e3, 2)  # measurement.md §5: 1.07e-3 1/m
    1.07
    """
    return air_absorption_db_per_m(f_hz, temperature_c=temperature_c,
                                   humidity_percent=humidity_percent) / _DB_PER_NEPER


def sabine_s(volume_m3: float, absorption_area_m2: float, *, air_m_per_m: float = 0.0) -> float:
    """Sabine's reverberation time T = 0.161·V/(A + 4mV), s.

    Parameters
    ----------
    volume_m3 : float, > 0, m³
    absorption_area_m2 : float, >= 0, m²
        Equivalent absorption area A = Σ S_i·α_i.
    air_m_per_m : float, >= 0, 1/m
        Energy attenuation coefficient of air (see :func:`air_m_per_m`).

    Raises
    ------
    ParameterError
        For a non-positive volume, negative areas, or no absorption at all.

    Examples
    --------
    >>> round(sabine_s(240.0, 53.6), 4)  # measurement.md §7 worked example
    0.7209
    """
    v = check_positive(volume_m3, "volume_m3", unit="m³")
    a = check_nonnegative(absorption_area_m2, "absorption_area_m2", unit="m²")
    m = check_nonnegative(air_m_per_m, "air_m_per_m", unit="1/m")
    total = a + 4.0 * m * v
    if not (total > 0):
        raise ParameterError("there is no absorption at all (A = 0 and no air term), so the "
                             "reverberation time is infinite; give some absorption")
    return SABINE_S_PER_M * v / total


def eyring_s(volume_m3: float, surface_m2: float, mean_alpha: float, *,
             air_m_per_m: float = 0.0) -> float:
    """Eyring's reverberation time T = 0.161·V/(−S·ln(1 − ᾱ) + 4mV), s.

    Parameters
    ----------
    volume_m3 : float, > 0, m³
    surface_m2 : float, > 0, m²
    mean_alpha : float, 0..1
        Mean absorption coefficient ᾱ = Σ S_i·α_i/S; 1 gives T = 0.
    air_m_per_m : float, >= 0, 1/m

    Examples
    --------
    >>> round(eyring_s(240.0, 268.0, 0.20), 4)  # measurement.md §7 worked example
    0.6461
    """
    v = check_positive(volume_m3, "volume_m3", unit="m³")
    s = check_positive(surface_m2, "surface_m2", unit="m²")
    m = check_nonnegative(air_m_per_m, "air_m_per_m", unit="1/m")
    try:
        a = float(mean_alpha)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"mean_alpha={mean_alpha!r} is not a number; give 0..1") from err
    if not (0.0 <= a <= 1.0):
        raise ParameterError(f"mean_alpha={mean_alpha!r} is outside 0..1; give a mean "
                             "absorption coefficient between 0 and 1")
    if a >= 1.0:
        return 0.0
    total = -s * math.log1p(-a) + 4.0 * m * v
    if not (total > 0):
        raise ParameterError("there is no absorption at all (ᾱ = 0 and no air term), so the "
                             "reverberation time is infinite; give some absorption")
    return SABINE_S_PER_M * v / total


# ---------------------------------------------------------------------------------------------
# Prediction

@dataclass(frozen=True, slots=True, eq=False)
class BandPrediction:
    """The classical figures of one octave band.

    Attributes
    ----------
    label : str
        "63" … "8k".
    center_hz : float
        Exact base-10 mid-band frequency.
    mean_alpha : float
        ᾱ = A/S (extra absorption included).
    absorption_area_m2 : float
        A = Σ S_i·α_i + A_extra.
    air_m_per_m : float
        m at ``center_hz`` (ISO 9613-1).
    sabine_s, eyring_s : float
        With the air term 4mV.
    tail_start_s : float or None
        Time after emission where the diffuse tail has taken over from the image sources in this
        band (the end of the crossfade); None without a tail.
    """

    label: str
    center_hz: float
    mean_alpha: float
    absorption_area_m2: float
    air_m_per_m: float
    sabine_s: float
    eyring_s: float
    tail_start_s: float | None

    def to_dict(self) -> dict[str, Any]:
        return {"label": self.label, "center_hz": self.center_hz, "mean_alpha": self.mean_alpha,
                "absorption_area_m2": self.absorption_area_m2, "air_m_per_m": self.air_m_per_m,
                "sabine_s": self.sabine_s, "eyring_s": self.eyring_s,
                "tail_start_s": self.tail_start_s}


@dataclass(frozen=True, slots=True, eq=False)
class RoomPrediction:
    """What :func:`predict` gives.

    Attributes
    ----------
    room : RoomDescription
    fs : int, Hz
    h : ndarray, (n,), float64
        Predicted impulse response (pressure re a source giving 1/(4π·1 m) at 1 m), time zero
        at the source's emission.
    bands : tuple of BandPrediction
        Octaves 63 Hz–8 kHz.
    volume_m3, surface_m2 : float
    distance_m : float
        Source–receiver distance.
    direct_delay_s, direct_amplitude : float
        d/c and 1/(4πd).
    speed_of_sound_m_s : float
    max_order : int
    n_images : int
        Image sources of order 1..max_order placed (the direct sound not counted).
    complete_s : float
        Time after emission up to which the image set is complete (arrival of the nearest image
        of order max_order + 1).
    schroeder_hz : float
        2000·√(T/V) with T the mean Eyring time of the 500 Hz and 1 kHz octaves.
    notes : tuple of str
        The known limits of the prediction, in words.
    """

    room: RoomDescription
    fs: int
    h: np.ndarray = field(repr=False)
    bands: tuple[BandPrediction, ...]
    volume_m3: float
    surface_m2: float
    distance_m: float
    direct_delay_s: float
    direct_amplitude: float
    speed_of_sound_m_s: float
    max_order: int
    n_images: int
    complete_s: float
    schroeder_hz: float
    notes: tuple[str, ...]

    def __post_init__(self) -> None:
        self.h.setflags(write=False)

    def band(self, label: str) -> BandPrediction:
        """The band with ``label`` ("63" … "8k")."""
        for b in self.bands:
            if b.label == label:
                return b
        raise ParameterError(f"no band {label!r}; use one of {', '.join(BAND_LABELS)}")

    def to_dict(self) -> dict[str, Any]:
        """Everything except the samples (``n_samples`` and ``length_s`` describe them)."""
        return {
            "room": self.room.to_dict(), "fs": self.fs, "n_samples": int(self.h.size),
            "length_s": self.h.size / self.fs,
            "bands": [b.to_dict() for b in self.bands],
            "volume_m3": self.volume_m3, "surface_m2": self.surface_m2,
            "distance_m": self.distance_m, "direct_delay_s": self.direct_delay_s,
            "direct_amplitude": self.direct_amplitude,
            "speed_of_sound_m_s": self.speed_of_sound_m_s, "max_order": self.max_order,
            "n_images": self.n_images, "complete_s": self.complete_s,
            "schroeder_hz": self.schroeder_hz,
            "notes": list(self.notes),
        }


def _axis_images(n_max: int, s: float, r: float, length: float
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One axis of the image lattice: offset image − receiver, reflections at wall 0 and 1."""
    m = np.arange(-n_max - 1, n_max + 2)
    m = np.concatenate([m, m])
    q = np.repeat([0, 1], m.size // 2)
    n0 = np.abs(m - q)
    n1 = np.abs(m)
    keep = n0 + n1 <= n_max
    m, q, n0, n1 = m[keep], q[keep], n0[keep], n1[keep]
    return (1 - 2 * q) * s + 2 * m * length - r, n0, n1


def _images(room: RoomDescription, n_max: int
            ) -> tuple[np.ndarray, np.ndarray, list[tuple[np.ndarray, np.ndarray]]]:
    """All images of order <= n_max: distances, orders, and per axis the reflection counts."""
    offs, counts, idx = [], [], []
    for a in range(3):
        o, n0, n1 = _axis_images(n_max, room.source_m[a], room.receiver_m[a],
                                 room.dimensions_m[a])
        offs.append(o)
        counts.append((n0, n1))
    ox = counts[0][0] + counts[0][1]
    oy = counts[1][0] + counts[1][1]
    oz = counts[2][0] + counts[2][1]
    order = ox[:, None, None] + oy[None, :, None] + oz[None, None, :]
    ix, iy, iz = np.nonzero(order <= n_max)
    idx = [ix, iy, iz]
    d = np.sqrt(offs[0][ix] ** 2 + offs[1][iy] ** 2 + offs[2][iz] ** 2)
    per_axis = [(counts[a][0][idx[a]], counts[a][1][idx[a]]) for a in range(3)]
    return d, order[ix, iy, iz], per_axis


def _notes(room: RoomDescription, bands: Sequence[BandPrediction], schroeder_hz: float,
           tail: bool) -> tuple[str, ...]:
    notes = [
        "Sabine and Eyring assume a diffuse sound field with absorption spread evenly; an "
        "absorbent floor or ceiling with hard walls, or one absorbent wall, makes the real "
        "decay longer and often double-sloped.",
        "Flutter echoes between parallel hard walls are not diffuse: the image sources contain "
        "them, but the statistical tail and the formulas do not.",
        "Coupled volumes (an open door to a corridor or a stairwell, a stage house) give a "
        "double-slope decay that a single room description cannot predict.",
        f"Below the Schroeder frequency of about {schroeder_hz:.0f} Hz (2000·√(T/V)) single "
        "room modes dominate and band values depend on the positions; treat them as rough.",
        "Absorption coefficients of the built-in table are typical values; check product data "
        "(ISO 354) for a design.",
    ]
    alpha = room.surface_alpha()[:, BAND_LABELS.index("1k")]
    if alpha.max() > 0 and alpha.max() > 4.0 * max(alpha.min(), 0.01):
        lo = SURFACE_NAMES[int(np.argmin(alpha))]
        hi = SURFACE_NAMES[int(np.argmax(alpha))]
        notes.append(f"Absorption is far from uniform at 1 kHz ({hi} α={alpha.max():.2f} against "
                     f"{lo} α={alpha.min():.2f}): expect a measured T longer than Eyring's.")
    if not tail:
        notes.append("No diffuse tail: the response holds the image sources only; a specular "
                     "shoebox decays more slowly than Eyring (modeling.md §6).")
    below = [b.label for b in bands if b.center_hz * math.sqrt(2.0) < schroeder_hz]
    if below:
        notes.append(f"Octaves below the Schroeder frequency: {', '.join(below)} Hz.")
    return tuple(notes)


def predict(room: RoomDescription, fs: int, *, max_order: int = DEFAULT_MAX_ORDER,
            length_s: float | None = None, seed: int = 0, diffuse_tail: bool = True
            ) -> RoomPrediction:
    """Predict the room's octave-band reverberation times and an impulse response.

    Parameters
    ----------
    room : RoomDescription
    fs : int, > 0, Hz
        At least 20 kHz (the 8 kHz octave must lie below Nyquist).
    max_order : int, >= 0
        Highest image-source reflection order.
    length_s : float, > 0, s, optional
        Length of the response; default the direct delay plus 1.25 × the longest Eyring time
        plus 50 ms (at most 12 s).
    seed : int
        Seed of the diffuse tail's noise.
    diffuse_tail : bool
        Add the statistical tail after the image sources (default). Without it the response
        holds the direct sound and the image sources of order ≤ ``max_order`` only.

    Returns
    -------
    RoomPrediction

    Raises
    ------
    ParameterError
        For a bad ``fs``, ``max_order`` or ``length_s``.

    Notes
    -----
    See the module documentation for the formulas, the image-source sum, the tail and their
    limits.

    Examples
    --------
    >>> doc = {"name": "box", "dimensions_m": [5, 4, 3], "source_m": [1, 1, 1.5],
    ...        "receiver_m": [4, 3, 1.5], "surfaces": {"floor": "wood_floor_on_joists",
    ...        "ceiling": "plasterboard_on_studs", "walls": "concrete_block_painted"}}
    >>> p = predict(room_from_dict(doc), 24000, max_order=3)
    >>> round(p.band("1k").eyring_s, 2), p.n_images
    (1.45, 62)
    """
    fs = check_fs(fs)
    if fs < 20000:
        raise ParameterError(f"fs={fs} Hz is too low for the 8 kHz octave (its upper edge is "
                             "11.3 kHz); predict at 20 kHz or more, e.g. 48000")
    if isinstance(max_order, bool) or not isinstance(max_order, (int, np.integer)) or not (
            0 <= max_order <= 30):
        raise ParameterError(f"max_order={max_order!r} must be a whole number 0..30; "
                             "10 is usual for a shoebox")
    max_order = int(max_order)
    if not isinstance(room, RoomDescription):
        raise ParameterError("room must be a RoomDescription; read one with load_room")

    v, s = room.volume_m3, room.surface_m2
    centers = np.asarray(OCTAVE_CENTERS_HZ)
    m_air = air_m_per_m(centers, temperature_c=room.temperature_c,
                        humidity_percent=room.humidity_percent)
    area = room.absorption_area_m2()
    mean_alpha = np.minimum(area / s, 1.0)
    t_sabine = np.array([sabine_s(v, area[b], air_m_per_m=m_air[b]) for b in range(area.size)])
    t_eyring = np.array([eyring_s(v, s, mean_alpha[b], air_m_per_m=m_air[b])
                         for b in range(area.size)])
    t_mid = 0.5 * (t_eyring[3] + t_eyring[4])
    schroeder_hz = 2000.0 * math.sqrt(t_mid / v)

    c = speed_of_sound_m_s(room.temperature_c)
    d_direct = math.dist(room.source_m, room.receiver_m)
    t_direct = d_direct / c
    if length_s is None:
        # at least 0.2 s, so that even a nearly anechoic room's response can be analysed
        length_s = min(max(t_direct + 1.25 * float(t_eyring.max()) + 0.05, 0.2),
                       _MAX_DEFAULT_LENGTH_S)
    length_s = check_positive(length_s, "length_s", unit="s")
    n = int(round(length_s * fs))

    # Image sources of order <= max_order + 1; the outer shell only sets the completeness time.
    d_all, order_all, axes_all = _images(room, max_order + 1)
    shell = order_all == max_order + 1
    complete_s = float(d_all[shell].min()) / c
    inner = ~shell
    d = d_all[inner]
    order = order_all[inner]
    tau = d / c
    # Per band β = √(1 − α_eff) of the six surfaces, extra absorption spread over them.
    alpha_eff = np.minimum(room.surface_alpha() + room.extra_area_m2()[None, :] / s, 1.0)
    beta = np.sqrt(1.0 - alpha_eff)  # (6 surfaces, 8 bands)
    # SURFACE_NAMES order: floor z0, ceiling z1, wall_x0, wall_x1, wall_y0, wall_y1
    wall_rows = ((2, 3), (4, 5), (0, 1))  # per axis x, y, z: (wall at 0, wall at L)
    amp = np.ones((len(BAND_LABELS), d.size))
    for a, (w0, w1) in enumerate(wall_rows):
        n0, n1 = axes_all[a][0][inner], axes_all[a][1][inner]
        amp *= beta[w0][:, None] ** n0[None, :] * beta[w1][:, None] ** n1[None, :]
    amp *= np.exp(-0.5 * m_air[:, None] * d[None, :]) / (4.0 * math.pi * d[None, :])

    # Per band the tail takes over at the completeness time, or earlier once the band's diffuse
    # decay has fallen by 5 dB (T/12 after the direct sound; T30 is read from -5 dB on).
    n_b = len(BAND_LABELS)
    use_tail = np.array([diffuse_tail and t_eyring[b] > 0 for b in range(n_b)])
    t_j = np.full(n_b, np.inf)
    fade = np.zeros(n_b)
    for b in range(n_b):
        if use_tail[b]:
            t_j[b] = min(complete_s, t_direct + max(t_eyring[b] * _TAIL_AFTER_DECAY,
                                                     2.0 * CROSSFADE_S))
            fade[b] = min(CROSSFADE_S, 0.5 * (t_j[b] - t_direct))
            u = np.clip((tau - (t_j[b] - fade[b])) / fade[b], 0.0, 1.0)
            amp[b] *= np.cos(0.5 * math.pi * u)

    # Place every arrival as a windowed sinc: per band a bincount over kernel taps.
    pos = tau * fs
    keep = (pos < n + HALF_WIDTH) & (tau < float(t_j.max()))
    pos, amp_k = pos[keep], amp[:, keep]
    base = np.floor(pos).astype(np.int64)
    taps = np.arange(-HALF_WIDTH + 1, HALF_WIDTH + 1)
    tap_idx = base[:, None] + taps[None, :]
    kern = _kaiser_sinc(tap_idx - pos[:, None], HALF_WIDTH)
    ok = (tap_idx >= 0) & (tap_idx < n)
    flat_idx = tap_idx[ok]

    pad = max(fs // 2, 4 * HALF_WIDTH)
    n_fft = 1 << int(math.ceil(math.log2(n + pad)))
    freqs = np.fft.rfftfreq(n_fft, 1.0 / fs)
    masks = complementary_masks(OCTAVE_CENTERS_HZ, freqs, transition_octaves=CROSSFADE_OCTAVES)
    spec = np.zeros(freqs.size, dtype=np.complex128)
    for b in range(n_b):
        x = np.bincount(flat_idx, weights=(amp_k[b][:, None] * kern)[ok], minlength=n)[:n]
        spec += np.fft.rfft(x, n_fft) * masks[b]
    h = np.fft.irfft(spec, n_fft)[:n]
    if np.any(use_tail):
        h = h + _diffuse_tail(n, n_fft, fs, masks, t_eyring, t_j, fade, use_tail, tau, order,
                              amp, t_direct, c / (4.0 * math.pi * v), seed)
    # Causal high-pass (as Allen & Berkley's): removes the DC of the all-positive image sum
    # and of the lowest band's noise without putting sound before the direct arrival.
    h = sosfilt(butter(_HIGHPASS_ORDER, HIGHPASS_HZ, btype="highpass", fs=fs, output="sos"), h)

    bands = tuple(BandPrediction(
        label=BAND_LABELS[b], center_hz=float(centers[b]), mean_alpha=float(mean_alpha[b]),
        absorption_area_m2=float(area[b]), air_m_per_m=float(m_air[b]),
        sabine_s=float(t_sabine[b]), eyring_s=float(t_eyring[b]),
        tail_start_s=float(t_j[b]) if use_tail[b] else None) for b in range(n_b))
    return RoomPrediction(
        room=room, fs=fs, h=np.ascontiguousarray(h), bands=bands, volume_m3=v, surface_m2=s,
        distance_m=d_direct, direct_delay_s=t_direct,
        direct_amplitude=1.0 / (4.0 * math.pi * d_direct), speed_of_sound_m_s=c,
        max_order=max_order, n_images=int(np.count_nonzero(order >= 1)), complete_s=complete_s,
        schroeder_hz=schroeder_hz, notes=_notes(room, bands, schroeder_hz, bool(use_tail.any())))


def _diffuse_tail(n: int, n_fft: int, fs: int, masks: np.ndarray, t_eyring: np.ndarray,
                  t_j: np.ndarray, fade: np.ndarray, use_tail: np.ndarray, tau: np.ndarray,
                  order: np.ndarray, amp: np.ndarray, t_direct: float, p0: float, seed: int
                  ) -> np.ndarray:
    """The statistical tail: per band envelope-flattened band noise decaying at Eyring's rate.

    ``p0`` = c/(4πV) is the statistical reverberant power (energy per second of the image
    arrivals, 1/m² per s) at t = 0 for a unit source (derived: 4πc³t²/V images per second,
    each of energy 1/(4πct)²); the level of each band is matched to the images' energy in the
    second half of the time before its junction.
    """
    rng = np.random.default_rng(seed)
    noise_spec = np.fft.rfft(rng.standard_normal(n_fft))
    t = np.arange(n) / fs
    out = np.zeros(n)
    # two-sided mean of |M_b|²: the energy a unit impulse (and the power white noise) keeps
    weight = np.full(masks.shape[1], 2.0)
    weight[0] = 1.0
    if n_fft % 2 == 0:
        weight[-1] = 1.0
    for b in np.nonzero(use_tail)[0]:
        k = DECAY_60DB / t_eyring[b]  # energy decay rate, 1/s
        t_start = t_j[b] - fade[b]
        lo = max(0.5 * t_start, t_direct)
        in_win = (tau >= lo) & (tau <= t_start) & (order >= 1)
        ratio = 1.0
        if np.count_nonzero(in_win) >= _MIN_LEVEL_IMAGES and t_start > lo:
            e_img = float(np.sum(amp[b, in_win] ** 2))
            e_stat = p0 * (math.exp(-k * lo) - math.exp(-k * t_start)) / k
            ratio = e_img / e_stat
        gain2 = float(np.sum(weight * masks[b] ** 2)) / n_fft
        band = np.fft.irfft(noise_spec * masks[b], n_fft)
        # flatten the noise's short-time power (over several periods of the band's width) so
        # that the band decays as its exponential and not as one noise draw's fluctuations
        bw_hz = OCTAVE_CENTERS_HZ[b] * (2.0 ** 0.5 - 2.0 ** -0.5)
        win = max(int(round(fs * max(_FLATTEN_PERIODS / bw_hz, _FLATTEN_MIN_S))), 3)
        w = np.zeros(n_fft)
        hann = np.hanning(win + 2)[1:-1]
        w[:win] = hann / hann.sum()
        w = np.roll(w, -(win // 2))
        env2 = np.fft.irfft(np.fft.rfft(band ** 2) * np.fft.rfft(w), n_fft)
        band = band[:n] / np.sqrt(np.maximum(env2[:n], 1e-30))
        w_in = np.sin(0.5 * math.pi * np.clip((t - t_start) / fade[b], 0.0, 1.0))
        power = ratio * p0 * math.exp(-k * t_start) * np.exp(-k * np.maximum(t - t_start, 0.0))
        out += band * np.sqrt(gain2 * power / fs) * w_in
    return out


# ---------------------------------------------------------------------------------------------
# Inverse: absorption from measured reverberation times

@dataclass(frozen=True, slots=True, eq=False)
class FittedBand:
    """The fit of one octave band.

    Attributes
    ----------
    label : str
    center_hz : float
    measured_t_s : float or None
    model_alpha : float
        The description's ᾱ in this band (before the fit).
    mean_alpha : float or None
        Fitted mean absorption coefficient ᾱ (None when the band cannot be fitted).
    material_area_m2 : float or None
        With a material: the fitted area of that material in the room, m².
    material_change_m2 : float or None
        With a material: fitted area minus the description's area of it, m².
    eyring_s : float or None
        Eyring's T of the fitted room (equals ``measured_t_s`` unless clamped).
    note : str or None
        Why the band is None, or how it was clamped.
    """

    label: str
    center_hz: float
    measured_t_s: float | None
    model_alpha: float
    mean_alpha: float | None
    material_area_m2: float | None
    material_change_m2: float | None
    eyring_s: float | None
    note: str | None

    def to_dict(self) -> dict[str, Any]:
        return {"label": self.label, "center_hz": self.center_hz,
                "measured_t_s": self.measured_t_s, "model_alpha": self.model_alpha,
                "mean_alpha": self.mean_alpha, "material_area_m2": self.material_area_m2,
                "material_change_m2": self.material_change_m2, "eyring_s": self.eyring_s,
                "note": self.note}


@dataclass(frozen=True, slots=True, eq=False)
class AbsorptionFit:
    """What :func:`fit_absorption` gives: per octave 63 Hz–8 kHz a :class:`FittedBand`.

    Attributes
    ----------
    room_name : str
    material : str or None
        The material whose area was fitted, or None for the mean coefficient.
    material_area_m2 : float or None
        The description's area of that material (surfaces using it), m².
    bands : tuple of FittedBand
    """

    room_name: str
    material: str | None
    material_area_m2: float | None
    bands: tuple[FittedBand, ...]

    def band(self, label: str) -> FittedBand:
        for b in self.bands:
            if b.label == label:
                return b
        raise ParameterError(f"no band {label!r}; use one of {', '.join(BAND_LABELS)}")

    def to_dict(self) -> dict[str, Any]:
        return {"room": self.room_name, "material": self.material,
                "material_area_m2": self.material_area_m2,
                "bands": [b.to_dict() for b in self.bands]}


def fit_absorption(room: RoomDescription, measured_t_s: Mapping[str, float | None], *,
                   material: str | None = None) -> AbsorptionFit:
    """Absorption that makes Eyring (with air) give the measured reverberation times.

    Parameters
    ----------
    room : RoomDescription
        Geometry, surfaces and air of the measured room.
    measured_t_s : mapping of band label to float or None, s
        Measured T per octave ("63" … "8k"); a band left out or None is not fitted.
    material : str, optional
        None: fit the uniform mean coefficient ᾱ per octave. A material key used by one of the
        room's surfaces: fit the area of that material instead (see Notes).

    Returns
    -------
    AbsorptionFit

    Raises
    ------
    ParameterError
        For an unknown band label, a non-positive time, or a material no surface uses.

    Notes
    -----
    Mean coefficient (closed form, inverting Eyring with air):
    ᾱ = 1 − exp(−(0.161·V/T − 4mV)/S), clamped to 0..1 with a note (a T longer than air alone
    allows gives ᾱ < 0).

    Area of material M (α_M per octave): the room's boundary S and volume stay as they are; the
    material's area X replaces (or gives back) area of the other surfaces, which keep their
    mean coefficient ᾱ_o = A_o/S_o (A_o, S_o: absorption area and area of the surfaces not of
    M; extra absorption A_x is held). With X_0 the description's area of M:
    S·ᾱ = A_o·(S − X)/S_o + X·α_M + A_x, so X = (S·ᾱ − A_o·S/S_o − A_x)/(α_M − ᾱ_o), with ᾱ
    the fitted mean coefficient above; X is clamped to 0..S with a note, and a band where
    α_M ≈ ᾱ_o (the material changes nothing) gives None.

    Examples
    --------
    >>> doc = {"name": "box", "dimensions_m": [10, 8, 3], "source_m": [1, 1, 1.5],
    ...        "receiver_m": [4, 3, 1.5], "surfaces": {"floor": [0.2] * 8,
    ...        "ceiling": [0.2] * 8, "walls": [0.2] * 8}}
    >>> fit = fit_absorption(room_from_dict(doc), {"1k": 0.6461})
    >>> round(fit.band("1k").mean_alpha, 3)  # air included: a little below 0.20
    0.197
    """
    if not isinstance(room, RoomDescription):
        raise ParameterError("room must be a RoomDescription; read one with load_room")
    if not isinstance(measured_t_s, Mapping):
        raise ParameterError("measured_t_s must map band labels ('63' … '8k') to seconds")
    for key, val in measured_t_s.items():
        if key not in BAND_LABELS:
            raise ParameterError(f"unknown band {key!r} in the measured times; use "
                                 f"{', '.join(BAND_LABELS)}")
        if val is not None:
            check_positive(val, f"measured T of the {key} band", unit="s")
    areas = room.surface_areas_m2()
    alpha = room.surface_alpha()
    extra = room.extra_area_m2()
    v, s = room.volume_m3, room.surface_m2
    model_alpha = room.mean_alpha()
    m_air = air_m_per_m(np.asarray(OCTAVE_CENTERS_HZ), temperature_c=room.temperature_c,
                        humidity_percent=room.humidity_percent)
    is_m = None
    x0 = None
    if material is not None:
        used = sorted({val for val in room.surfaces.values() if isinstance(val, str)})
        if material not in used:
            raise ParameterError(f"material {material!r} is on none of the room's surfaces; use "
                                 f"one of {', '.join(used) or '(none: all surfaces are explicit)'}")
        is_m = np.array([room.surfaces[nm] == material for nm in SURFACE_NAMES])
        x0 = float(areas[is_m].sum())
        if np.all(is_m):
            raise ParameterError(f"material {material!r} covers every surface, so its area "
                                 "cannot change; fit the mean coefficient (material=None)")
        alpha_m = np.asarray(room.material_alpha(material))
    out = []
    for b, label in enumerate(BAND_LABELS):
        t = measured_t_s.get(label)
        common = dict(label=label, center_hz=float(OCTAVE_CENTERS_HZ[b]), measured_t_s=t,
                      model_alpha=float(model_alpha[b]))
        if t is None:
            out.append(FittedBand(**common, mean_alpha=None, material_area_m2=None,
                                  material_change_m2=None, eyring_s=None,
                                  note="no measured T in this band"))
            continue
        t = float(t)
        arg = (SABINE_S_PER_M * v / t - 4.0 * m_air[b] * v) / s
        note = None
        if arg < 0:
            a_fit = 0.0
            note = ("the measured T is longer than air absorption alone allows; mean "
                    "absorption clamped to 0")
        else:
            a_fit = float(-math.expm1(-arg))
        if material is None:
            out.append(FittedBand(**common, mean_alpha=a_fit, material_area_m2=None,
                                  material_change_m2=None,
                                  eyring_s=eyring_s(v, s, a_fit, air_m_per_m=m_air[b]),
                                  note=note))
            continue
        assert is_m is not None and x0 is not None
        s_o = float(areas[~is_m].sum())
        a_o = float(areas[~is_m] @ alpha[~is_m, b])
        abar_o = a_o / s_o
        den = alpha_m[b] - abar_o
        if abs(den) < 1e-3:
            out.append(FittedBand(**common, mean_alpha=None, material_area_m2=None,
                                  material_change_m2=None, eyring_s=None,
                                  note=f"{material} absorbs like the other surfaces in this band "
                                       f"(α {alpha_m[b]:.2f} against {abar_o:.2f}), so its area "
                                       "cannot set T"))
            continue
        x = (s * a_fit - abar_o * s - extra[b]) / den
        if x < 0 or x > s:
            x_c = min(max(x, 0.0), s)
            note = (f"{material} would need {x:.1f} m² (outside 0..{s:.0f} m² of boundary); "
                    f"clamped to {x_c:.1f} m²")
            x = x_c
        a_room = min(max((abar_o * (s - x) + alpha_m[b] * x + extra[b]) / s, 0.0), 1.0)
        out.append(FittedBand(**common, mean_alpha=a_room, material_area_m2=float(x),
                              material_change_m2=float(x - x0),
                              eyring_s=eyring_s(v, s, a_room, air_m_per_m=m_air[b]), note=note))
    return AbsorptionFit(room_name=room.name, material=material, material_area_m2=x0,
                         bands=tuple(out))
