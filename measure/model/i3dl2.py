"""The fitted room as the open IA-SIG I3DL2 listener reverb parameter set.

The Interactive 3D Audio Rendering Guidelines, Level 2.0 [1]_ define a listener reverb by
twelve properties (modeling.md §5.1): levels in millibels (mB, 1/100 dB), times in seconds.
This module estimates them from a fitted room model as modeling.md §5.2 proposes:

* t0 direct sound, t1 = t0 + the first echo's delay (ITDG), tm = t0 + the mixing time;
* band energies in an LF band (the 250 Hz–1 kHz octaves) and an HF band (one octave around
  HFReference), each split into E_D (direct sound, up to 2.5 ms after t0), E_E (early, to tm)
  and E_L (late, after tm);
* ReflectionsDelay = t1 − t0, ReverbDelay = tm − t1;
* DecayTime = the late part's decay time in the LF band, DecayHFRatio = T(HFReference)/DecayTime;
* Room = 1000·log10((E_E + E_L)/E_D), Reflections = 1000·log10(E_E/(E_E + E_L)),
  Reverb = 1000·log10(E_L/(E_E + E_L)) (LF band); RoomHF = 1000·[log10(E_room,HF/E_D,HF) −
  log10(E_room,LF/E_D,LF)], at most 0;
* Diffusion = 100 × the mean normalised echo density between t1 and tm (a heuristic: the
  guideline links Diffusion to echo density but gives no measurement); Density = 100 (no
  volume model); RoomRolloffFactor = 0 (one position cannot show a distance law;
  ``measure attenuation --model`` sets it from a distance series, measure.attenuation).

The guideline does not say whether Reverb is an initial level or an energy, nor how DecayTime
at "low frequencies" turns into a decay per band; :func:`render_i3dl2` fixes one reading
(documented there), and :func:`estimate_i3dl2` calibrates the set by rendering it, re-analysing
the result with the same estimator and correcting the set until the two agree (modeling.md
§5.2's calibration loop). Every value is kept within the guideline's range; a value that had to
be clamped is listed in ``clamped`` with the value it wanted.

When the room effect is louder than the direct sound (a reverberant room beyond the critical
distance), Room would exceed its maximum of 0 mB. Room is then set to 0 and the excess is moved
into Reflections and Reverb, which are relative to Room and may be positive, so the energies
stay right; this is reported as a clamp of Room.

References
----------
.. [1] IA-SIG 3D Working Group, *Interactive 3D Audio Rendering Guidelines, Level 2.0*,
   v1.0a, 1999 (listener properties, ranges and defaults; example C headers).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from measure._validate import check_fs
from measure.model.late import (
    LateReverb,
    analysis_octaves,
    half_spectrum_weights,
    nominal_delays_s,
    render_late,
    white_levels_db,
)
from measure.model.modelfile import RoomModel

__all__ = ["I3DL2_RANGES", "I3dl2Set", "estimate_i3dl2", "render_i3dl2", "measure_i3dl2"]

#: Name: (minimum, maximum, unit) after the guideline's header (modeling.md §5.1).
I3DL2_RANGES: dict[str, tuple[float, float, str]] = {
    "Room": (-10000.0, 0.0, "mB"),
    "RoomHF": (-10000.0, 0.0, "mB"),
    "RoomRolloffFactor": (0.0, 10.0, ""),
    "DecayTime": (0.1, 20.0, "s"),
    "DecayHFRatio": (0.1, 2.0, ""),
    "Reflections": (-10000.0, 1000.0, "mB"),
    "ReflectionsDelay": (0.0, 0.3, "s"),
    "Reverb": (-10000.0, 2000.0, "mB"),
    "ReverbDelay": (0.0, 0.1, "s"),
    "Diffusion": (0.0, 100.0, "%"),
    "Density": (0.0, 100.0, "%"),
    "HFReference": (20.0, 20000.0, "Hz"),
}
#: Octave centres of the LF band (modeling.md §5.2: "e.g. the 250–1000 Hz octaves").
LF_OCTAVES_HZ = (250.0, 500.0, 1000.0)
#: Direct-sound window after t0, s (as measure.parameters' DRR window, common practice).
DIRECT_WINDOW_S = 0.0025
#: Reflection taps of the rendering: positions as fractions of the span from ReflectionsDelay
#: to the start of the reverb (a fixed, irregular pattern; signs alternate).
TAP_FRACTIONS = (0.0, 0.13, 0.29, 0.45, 0.63, 0.82)
#: Calibration passes of estimate_i3dl2.
N_CALIBRATION_PASSES = 4
#: Band centres of the late part of the rendering (octaves 63 Hz–16 kHz).
RENDER_BANDS_HZ = tuple(1000.0 * 2.0 ** k for k in range(-4, 5))
#: The guideline's default HFReference, Hz.
DEFAULT_HF_REFERENCE_HZ = 5000.0
#: ReverbDelay used when the room shows no mixing time (a response too sparse), s.
FALLBACK_REVERB_DELAY_S = 0.04


@dataclass(frozen=True, slots=True, eq=False)
class I3dl2Set:
    """An I3DL2 listener reverb parameter set.

    Attributes
    ----------
    values : dict
        Property name → value, within :data:`I3DL2_RANGES`.
    clamped : dict
        Property name → the value it would have had before clamping to the range.
    notes : tuple of str
        How values were obtained where the guideline gives no measurement.
    residual : dict
        After calibration: re-estimated minus target for the estimated properties.
    """

    values: dict
    clamped: dict
    notes: tuple[str, ...] = ()
    residual: dict | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"standard": "IA-SIG I3DL2 listener reverb (Interactive 3D Audio Rendering "
                            "Guidelines Level 2.0)",
                "units": {k: u for k, (_, _, u) in I3DL2_RANGES.items()},
                "values": {k: float(v) for k, v in self.values.items()},
                "clamped": {k: float(v) for k, v in self.clamped.items()},
                "notes": list(self.notes),
                "calibration_residual": None if self.residual is None else
                {k: float(v) for k, v in self.residual.items()}}

    def to_text(self) -> str:
        lines = ["I3DL2 listener reverb:"]
        for k, (_, _, unit) in I3DL2_RANGES.items():
            v = self.values[k]
            txt = f"{v:.0f}" if unit in ("mB", "%", "Hz") else f"{v:.3f}"
            extra = (f"   (clamped: wanted {self.clamped[k]:.4g})" if k in self.clamped else "")
            lines.append(f"  {k:<18} {txt:>8} {unit}{extra}")
        return "\n".join(lines)


def _band_energies(parts: list[np.ndarray], fs: int, f_lo: float, f_hi: float) -> list[float]:
    """Energy of each part within [f_lo, f_hi] (raised-cosine edges of 1/6 octave), by
    Parseval on its spectrum. The parts are cut from the broadband IR before this band
    weighting, so no band filter's ringing moves energy from one part into another (the same
    choice as measure.parameters makes for the direct-to-reverberant ratio)."""
    from scipy.fft import next_fast_len, rfft

    n_fft = next_fast_len(max(p.size for p in parts), real=True)
    f = np.arange(n_fft // 2 + 1) * fs / n_fft
    lf = np.log2(np.maximum(f, 1e-3))
    edge = 1.0 / 6.0  # octaves of raised-cosine edge each side
    m = np.clip((lf - (math.log2(f_lo) - edge / 2)) / edge, 0, 1) * np.clip(
        ((math.log2(f_hi) + edge / 2) - lf) / edge, 0, 1)
    m2 = np.sin(0.5 * np.pi * m) ** 4
    w = half_spectrum_weights(n_fft)
    return [float(np.sum(w * m2 * np.abs(rfft(p, n_fft)) ** 2) / n_fft) for p in parts]


def measure_i3dl2(h: np.ndarray, fs: int, *, t0_s: float, t1_s: float | None,
                  tm_s: float | None, t60_lf_s: float, t60_hf_s: float,
                  hf_reference_hz: float = DEFAULT_HF_REFERENCE_HZ) -> tuple[dict, dict]:
    """The §5.2 estimates from an impulse response whose key times are known.

    Returns
    -------
    values, clamped : dict, dict
        See :class:`I3dl2Set`.
    """
    fs = check_fs(fs)
    h = np.asarray(h, dtype=np.float64)
    n = h.size
    i0 = int(round(t0_s * fs))
    i_d = i0 + int(round(DIRECT_WINDOW_S * fs))
    t1 = t1_s if t1_s is not None else t0_s + DIRECT_WINDOW_S
    tm = tm_s if tm_s is not None and tm_s > t1 else t1 + FALLBACK_REVERB_DELAY_S
    i_m = max(i_d + 1, int(round(tm * fs)))
    parts = []
    for a, b in ((0, i_d), (i_d, i_m), (i_m, n)):
        p = np.zeros(n)
        p[a:b] = h[a:b]
        parts.append(p)
    lf = _band_energies(parts, fs, LF_OCTAVES_HZ[0] / math.sqrt(2),
                        LF_OCTAVES_HZ[-1] * math.sqrt(2))
    f_hi = min(hf_reference_hz * math.sqrt(2), 0.49 * fs)
    hf = _band_energies(parts, fs, hf_reference_hz / math.sqrt(2), f_hi)
    tiny = 1e-30
    e_d, e_e, e_l = (max(v, tiny) for v in lf)
    room = 1000.0 * math.log10((e_e + e_l) / e_d)
    refl = 1000.0 * math.log10(e_e / (e_e + e_l))
    rev = 1000.0 * math.log10(e_l / (e_e + e_l))
    e_dh, e_eh, e_lh = (max(v, tiny) for v in hf)
    room_hf = 1000.0 * (math.log10((e_eh + e_lh) / e_dh) - math.log10((e_e + e_l) / e_d))
    want = {
        "Room": room, "RoomHF": room_hf, "RoomRolloffFactor": 0.0,
        "DecayTime": t60_lf_s, "DecayHFRatio": t60_hf_s / t60_lf_s,
        "Reflections": refl, "ReflectionsDelay": t1 - t0_s,
        "Reverb": rev, "ReverbDelay": tm - t1, "Diffusion": 100.0, "Density": 100.0,
        "HFReference": hf_reference_hz,
    }
    return _clamp(want)


def _clamp(want: dict) -> tuple[dict, dict]:
    values, clamped = {}, {}
    w = dict(want)
    if w["Room"] > 0.0:  # move the excess into the levels relative to Room (module notes)
        w["Reflections"] += w["Room"]
        w["Reverb"] += w["Room"]
    for k, (lo, hi, _) in I3DL2_RANGES.items():
        v = float(np.clip(w[k], lo, hi))
        values[k] = v
        if v != want[k] and not (k in ("Reflections", "Reverb") and v == w[k]):
            clamped[k] = float(want[k])
    return values, clamped


def _t_of_f(f_hz: np.ndarray, decay_s: float, hf_ratio: float, hf_reference_hz: float
            ) -> np.ndarray:
    """Decay time per frequency of the rendering: DecayTime up to the LF band's centre
    (500 Hz, log middle of 250–1000 Hz), then geometric in log-frequency to
    DecayTime·DecayHFRatio at HFReference, continued with the same slope above (bounded to
    the guideline's ratio range)."""
    f_lf = math.sqrt(LF_OCTAVES_HZ[0] * LF_OCTAVES_HZ[-1])
    x = np.clip(np.log(np.asarray(f_hz) / f_lf) / math.log(hf_reference_hz / f_lf), 0.0, None)
    ratio = np.clip(hf_ratio ** x, 0.1, 2.0)
    return decay_s * ratio


def render_i3dl2(values: dict, fs: int, seconds: float) -> np.ndarray:
    """An impulse response of an I3DL2 set, as this package reads the guideline.

    * Direct sound: a unit impulse at t = 0.
    * Room effect: Room enters the two energies below (it is their common level at low
      frequencies); a first-order low-pass whose gain at HFReference is 10^(RoomHF/2000) gives
      RoomHF (applied to reflections and reverb).
    * Reflections: energy 10^((Room + Reflections)/1000) in six taps of equal energy and
      alternating sign, spread over [ReflectionsDelay, ReflectionsDelay + ReverbDelay).
    * Reverb: energy 10^((Room + Reverb)/1000), white at its start, from
      ReflectionsDelay + ReverbDelay on, decaying per octave as :func:`_t_of_f` (DecayTime,
      DecayHFRatio, HFReference), rendered by the per-band delay network of
      :mod:`measure.model.late`.
    * Diffusion and Density are not rendered (the network is always dense).
    """
    from scipy.signal import lfilter

    from measure._dsp import fractional_impulse

    fs = check_fs(fs)
    n = int(round(seconds * fs))
    v = values
    h = np.zeros(n)
    h[0] = 1.0
    t_ref = v["ReflectionsDelay"]
    t_rev = t_ref + v["ReverbDelay"]
    span = max(v["ReverbDelay"], 1.0 / fs)
    refl = np.zeros(n)
    e_refl = 10.0 ** ((v["Room"] + v["Reflections"]) / 1000.0)
    tap = math.sqrt(e_refl / len(TAP_FRACTIONS))
    for k, frac in enumerate(TAP_FRACTIONS):
        pos = (t_ref + frac * span) * fs
        if 0 < pos < n:
            refl += (-1.0) ** k * tap * fractional_impulse(n, pos)
    fc = np.array([f for f in RENDER_BANDS_HZ if f < 0.45 * fs])
    t60 = _t_of_f(fc, v["DecayTime"], v["DecayHFRatio"], v["HFReference"])
    e_rev = 10.0 ** ((v["Room"] + v["Reverb"]) / 1000.0)
    late = LateReverb(tuple(fc), tuple(float(t) for t in t60),
                      white_levels_db(fc, fs, 10.0 * math.log10(e_rev)), t_rev, 0.001,
                      nominal_delays_s(float(t60.max())))
    room = refl + render_late(late, fs, n)
    g_hf = 10.0 ** (v["RoomHF"] / 2000.0)
    if g_hf < 0.999:
        # |H(f)| = 1/sqrt(1 + (f/fc)²) = g at HFReference; prewarped first-order low-pass
        f_c = v["HFReference"] / math.sqrt(1.0 / g_hf**2 - 1.0)
        k = math.tan(math.pi * min(f_c, 0.45 * fs) / fs)
        b = np.array([k, k]) / (1 + k)
        a = np.array([1.0, (k - 1) / (k + 1)])
        room = lfilter(b, a, room)
    return h + room


def _key_times(model: RoomModel) -> tuple[float, float | None, float | None]:
    t0 = model.direct_delay_s
    t1 = t0 + min(d for d, _ in model.echoes) if model.echoes else None
    tm = None if model.mixing_time_s is None else t0 + model.mixing_time_s
    return t0, t1, tm


def _late_t60(model: RoomModel, f_hz: float) -> float:
    fc = np.log(np.asarray(model.late.band_centers_hz))
    return float(np.exp(np.interp(math.log(f_hz), fc, np.log(np.asarray(model.late.t60_s)))))


def _diffusion(h: np.ndarray, fs: int, t_a: float, t_b: float) -> float | None:
    from measure.errors import MeasureError
    from measure.model.mixing import echo_density

    try:
        ed = echo_density(h, fs)
    except MeasureError:
        return None
    sel = (ed.times_s >= t_a) & (ed.times_s <= max(t_b, t_a + 0.005))
    if not np.any(sel):
        return None
    return float(100.0 * np.clip(np.mean(ed.eta[sel]), 0.0, 1.0))


def _t30_at(h: np.ndarray, fs: int, bands, f_hz: float) -> float | None:
    """T30 at ``f_hz``: log-log interpolation between the octaves around it (as the model's
    late decay is read at HFReference)."""
    from measure.model.late import octave_t30_s

    lower = [b for b in bands if b.center_hz <= f_hz * 1.02]
    upper = [b for b in bands if b.center_hz >= f_hz / 1.02]
    pick = list({b.center_hz: b for b in lower[-1:] + upper[:1]}.values())
    t = octave_t30_s(h, fs, pick)
    pts = [(math.log(b.center_hz), math.log(v)) for b, v in zip(pick, t, strict=True)
           if v is not None]
    if not pts:
        return None
    if len(pts) == 1:
        return math.exp(pts[0][1])
    (x0, y0), (x1, y1) = pts
    return math.exp(y0 + (y1 - y0) * (math.log(f_hz) - x0) / (x1 - x0))


def estimate_i3dl2(h: np.ndarray, fs: int, model: RoomModel, *,
                   hf_reference_hz: float | None = None) -> I3dl2Set:
    """The room of a fitted model as an I3DL2 set, calibrated by rendering and re-analysing.

    Parameters
    ----------
    h : ndarray, shape (n,)
        The measured impulse response the model was fitted to (for the echo density only).
    fs : int, > 0, Hz
    model : RoomModel
    hf_reference_hz : float, Hz, optional
        HFReference; must lie below 0.45·fs. Default: the guideline's 5000 Hz, or at a rate
        too low for it the highest octave centre below 0.45·fs (and a note says so).

    Returns
    -------
    I3dl2Set

    Notes
    -----
    The targets are the §5.2 estimates on the model rendered at ``fs`` (noise-free, the fitted
    room). The set is then rendered by :func:`render_i3dl2`, re-estimated with the same code,
    and its levels (mB) moved by target − re-estimate and its decay values scaled by
    target / re-estimate; :data:`N_CALIBRATION_PASSES` renderings, the last only to measure the
    residual of the set returned.
    """
    from measure.errors import ParameterError
    from measure.model.late import octave_t30_s
    from measure.model.render import default_seconds, render_model

    fs = check_fs(fs)
    notes = ["RoomRolloffFactor 0: one position cannot show a distance law (`measure "
             "attenuation --model` measures it over a distance series)",
             "Density 100 %: no room-volume model"]
    if hf_reference_hz is None:
        hf_reference_hz = DEFAULT_HF_REFERENCE_HZ
        if hf_reference_hz >= 0.45 * fs:
            hf_reference_hz = max(f for f in RENDER_BANDS_HZ if f < 0.45 * fs)
            notes.append(f"HFReference {hf_reference_hz:g} Hz: {DEFAULT_HF_REFERENCE_HZ:g} Hz "
                         f"is above what {fs} Hz carries")
    if not (20.0 <= hf_reference_hz < 0.45 * fs):
        raise ParameterError(f"HFReference {hf_reference_hz:g} Hz must lie in 20 Hz..0.45·fs "
                             f"({0.45 * fs:g} Hz at {fs} Hz)")
    seconds = default_seconds(model)
    hm = render_model(model, fs, seconds)
    t0, t1, tm = _key_times(model)
    t_lf = float(np.mean([_late_t60(model, f) for f in LF_OCTAVES_HZ]))
    t_hf = _late_t60(model, hf_reference_hz)
    target, clamped = measure_i3dl2(hm, fs, t0_s=t0, t1_s=t1, tm_s=tm, t60_lf_s=t_lf,
                                    t60_hf_s=t_hf, hf_reference_hz=hf_reference_hz)
    diff = _diffusion(np.asarray(h, dtype=np.float64), fs,
                      t1 if t1 is not None else t0 + DIRECT_WINDOW_S,
                      tm if tm is not None else t0 + 0.08)
    if diff is None:
        notes.append("Diffusion 100 %: the echo density could not be measured")
    else:
        target["Diffusion"] = diff
        notes.append("Diffusion: 100 × mean normalised echo density between the first echo "
                      "and the mixing time (heuristic)")
    if tm is None:
        notes.append(f"no mixing time: ReverbDelay set to {FALLBACK_REVERB_DELAY_S * 1000:g} ms")

    # calibration: render the set, re-estimate it the same way, correct
    from measure.bands import make_bands

    bands = make_bands(fs, "octave")
    lf_bands = [b for b in analysis_octaves(LF_OCTAVES_HZ, fs) if b is not None]
    values = dict(target)
    residual: dict[str, float] = {}
    n_sec = seconds - t0
    for i_pass in range(N_CALIBRATION_PASSES):
        hr = render_i3dl2(values, fs, n_sec)
        t_lf_r = [t for t in octave_t30_s(hr, fs, lf_bands) if t is not None]
        t_hf_r = _t30_at(hr, fs, bands, hf_reference_hz)
        d = values["ReflectionsDelay"]
        got, _ = measure_i3dl2(hr, fs, t0_s=0.0, t1_s=d, tm_s=d + values["ReverbDelay"],
                               t60_lf_s=float(np.mean(t_lf_r)) if t_lf_r else values["DecayTime"],
                               t60_hf_s=(t_hf_r if t_hf_r is not None else
                                         values["DecayTime"] * values["DecayHFRatio"]),
                               hf_reference_hz=hf_reference_hz)
        residual = {k: got[k] - target[k] for k in
                    ("Room", "RoomHF", "Reflections", "Reverb", "DecayTime", "DecayHFRatio")}
        if i_pass == N_CALIBRATION_PASSES - 1:
            break  # the residual is that of the values returned
        for k in ("Room", "RoomHF", "Reflections", "Reverb"):
            values[k] = values[k] - residual[k]
        for k in ("DecayTime", "DecayHFRatio"):
            values[k] = values[k] * target[k] / got[k]
        values, more = _clamp(values)
        for k, v in more.items():
            clamped.setdefault(k, v)
    return I3dl2Set(values=values, clamped=clamped, notes=tuple(notes), residual=residual)
