"""Recording → impulse response: locate, drift, window, noise and length, read back and average.

:func:`recover_ir` runs the stages in this order; each is a function of its own:

0. :func:`deconvolve_rows`: the whole recording is divided by the sweep once
   (:func:`measure.sweep.inverse_spectrum`, a Kirkeby-regularised inverse that equals the ideal
   in-band inverse inside [f1, f2] and does not amplify the noise outside it; its design is in
   :mod:`measure.sweep`). Every sweep in the recording turns into an impulse response at its own
   position; its harmonic-distortion responses land L·ln N earlier [1]_.
1. **Locate** (:func:`locate_sweeps`): the strongest peak, then its neighbours one sweep period
   apart (with room for up to ±300 ppm of drift); a recording with no peak well above its own
   noise (:data:`DETECTION_DB`) has no sweep.
2. **Drift** (:func:`estimate_timing`): with several sweeps ε follows from their spacing
   (sub-sample cross-correlation of consecutive responses); with one, from the direct sound's
   group delay, which a drifting clock makes grow as τ(f) = τ0 + ε·L·ln(f/f1) (measurement.md
   §1.6). The result also fixes each repeat's direct sound to a fraction of a sample.
3. **Window** (:func:`plan_window`): from a little before the direct sound to the next sweep's
   earliest harmonic response, or to the end of the recording.
4. **Noise and length** (:func:`response_length`), decided on the repeats read straight from
   the window (integer-aligned; 20 ms frames need no more): in every octave band inside the
   sweep and broadband, the decay's crossing with the noise is found by the method of Lundeby
   et al. (:func:`measure.decay.lundeby`); the response is kept until the latest crossing and
   as much noise after it, never cut before. When the window ends before a band's decay
   reaches the noise, the response keeps the whole window and says so, with the gap the room
   would need.
5. **Read back and average** (:func:`aligned_spectra`, :func:`select_repeats`,
   :func:`read_back`), for the part kept: each repeat's window is advanced by its fractional
   start with a linear phase; repeats that an impulsive disturbance (a door, a cough) made
   differ from the others are found band by band and left out; the rest are averaged as
   spectra; the drift's dispersion is undone in closed form (:func:`_dispersion_correction`)
   and the stretch of the room response by reading the window's spectrum back on a scaled
   frequency grid (a chirp-z transform). Only the windows are processed, so the whole
   recording is transformed once.

References
----------
.. [1] A. Farina, "Simultaneous measurement of impulse response and distortion with a
   swept-sine technique", AES 108th Convention, 2000, preprint 5093.
.. [2] S. Müller, P. Massarani, "Transfer-function measurement with sweeps", J. Audio Eng. Soc.
   49(6), 443–471, 2001.
.. [3] A. Lundeby, T. E. Vigran, H. Bietz, M. Vorländer, "Uncertainties of measurements in room
   acoustics", Acustica 81, 344–355, 1995.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from measure._dsp import parabolic_peak
from measure._validate import check_nonnegative, check_positive
from measure.errors import AudioFileError, ParameterError
from measure.sweep import Sweep, SweepSpec, inverse_spectrum

__all__ = [
    "HarmonicDistortion",
    "ImpulseResponse",
    "ResponseContext",
    "Timing",
    "Window",
    "Length",
    "recover_ir",
    "deconvolve_rows",
    "locate_sweeps",
    "estimate_timing",
    "plan_window",
    "aligned_spectra",
    "select_repeats",
    "read_back",
    "response_length",
    "predicted_noise_power",
    "length_bands_hz",
    "band_power_frames",
    "sweep_recording_evidence",
    "default_pre_s",
    "IR_FORMAT",
]

IR_FORMAT = "measure.ir/1"
#: Largest clock drift searched for when locating repeated sweeps.
MAX_DRIFT_PPM = 300.0
#: A sweep is "found" when its response peak stands this far above the deconvolved noise
#: (robust RMS). The noise is judged over the lags at which a whole sweep lies inside the
#: recording: only there is deconvolved noise stationary (at later lags the inverse filter
#: overlaps the recording only in part and the noise is weaker). There, white noise alone peaks
#: 12-14 dB above its RMS (measured, 4 seeds, 2-10 s sweeps in 3-20 s recordings; the maximum
#: of ~1e5 Gaussian samples). Judged over all lags, as before, it reached 23-24 dB when the
#: recording was twice the sweep's length, 29-32 dB at 1.5 times (a 5 s sweep with the default
#: 2 s gap) and 42-44 dB when barely longer: noise-only takes were "found" against the 30 dB
#: then required. 24 dB keeps a 10 dB margin over noise alone and finds a weak take about as
#: the old biased rule did (a 5 s sweep whose IR reaches 26 dB peak-to-noise; measured).
DETECTION_DB = 24.0
#: The noise is judged over at least this many seconds of lags (when the recording is barely
#: longer than the sweep, the first lags miss only the sweep's last 0.1 s).
MIN_NOISE_LAGS_S = 0.1
#: How far (s) another channel's direct sound is looked for around the timing channel's.
ARRIVAL_SEARCH_S = 0.1
#: A sample at or beyond this magnitude counts as clipped: the largest positive 16-bit PCM code,
#: 32767/32768 (derived: a 16-bit converter at full scale delivers exactly this value, a 24-bit
#: or float one delivers more). Anything that reaches it has used up the converter's range.
#: The one definition: measure.capture judges takes and the level check with it too.
CLIP_LEVEL = 32767.0 / 32768.0
#: Longest time kept before the direct sound, s (two periods of f1 need 0.2 s at 10 Hz).
MAX_PRE_S = 10.0
#: Most harmonic responses analysed (orders 2..MAX_HARMONICS + 1): beyond about the 17th
#: order the harmonic windows of an exponential sweep crowd into a few milliseconds.
MAX_HARMONICS = 16
#: Time kept before the direct sound of each harmonic response.
HARMONIC_PRE_S = 0.005
#: Group-delay fit band for the single-sweep drift estimate (measurement.md §1.6).
DRIFT_FIT_BAND_HZ = (1500.0, 14000.0)
#: Noise kept after the latest crossing of a band's decay with the noise: at least this long,
#: and at least as long as the decay before it, so that the analysis's own noise estimate
#: (Lundeby et al. [3]_: from 10 dB of decay past the crossing to the end, at least the last
#: 10 % of the response) rests on a long stretch of noise (common practice).
NOISE_KEEP_MIN_S = 0.5
#: A repeat differs from the others in a band and time block when its residual (its difference
#: from the median of the repeats, or from the other repeat when there are two) stands this far
#: above both the band's residual noise and :data:`DISTURBANCE_SIGNAL_DB` below the block's
#: signal. Residual noise in blocks of at least 8 degrees of freedom (see select_repeats)
#: exceeds its median by 15 dB with a probability below 1e-12 (χ² with 8 degrees of freedom,
#: derived), so 15 dB is no false alarm; a disturbance that stays below it changes the average
#: by less than the noise does (common practice for the margin).
DISTURBANCE_DB = 15.0
#: ... and a residual less than 15 dB below the block's own signal (10 dB over this bound) is
#: needed: a clean repeat differs from the others by the time variance of the room and by a
#: sub-sample misalignment of its direct sound, which grows with frequency (measured on a
#: drift-corrected take at -120 ppm, 3 repeats: 19 dB below the direct sound in the 8 kHz
#: octave, 43 dB at 1 kHz; so the margin is 4 dB in the top octave); a disturbance that weak
#: moves a figure by less than 0.2 dB (derived: 10 lg(1 + 10^(-15/10)) for one repeat).
DISTURBANCE_SIGNAL_DB = -25.0
#: Octave bands the length stage follows (nominal centres; those inside the sweep are used).
LENGTH_OCTAVES_HZ: tuple[float, ...] = (63.0, 125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0,
                                        8000.0)


@dataclass(frozen=True, slots=True, eq=False)
class HarmonicDistortion:
    """Level of one harmonic's response relative to the linear response.

    Attributes
    ----------
    order : int
        2 for the second harmonic, ...
    advance_s : float
        How far before the linear response it landed (L·ln order).
    level_db : float or None
        Energy ratio harmonic / fundamental over the excited band, in dB, with the noise's
        share removed; None when the harmonic is not above the noise in its own window.
    percent : float or None
        The same as an amplitude ratio in percent (harmonic distortion at the sweep's level);
        None when not above the noise.
    above_noise : bool
        The harmonic's window holds at least twice (3 dB more than) the energy the noise alone
        puts there.
    noise_percent : float or None
        The level, in percent, that the noise alone reads as in this window: a harmonic below
        the noise is below this (None when the noise could not be judged).
    """

    order: int
    advance_s: float
    level_db: float | None
    percent: float | None
    above_noise: bool = True
    noise_percent: float | None = None

    def describe(self) -> str:
        """``H2 0.81 %`` or ``H3 below the noise (< 4.7 %)``."""
        if self.above_noise and self.percent is not None:
            return f"H{self.order} {self.percent:.2f} %"
        if self.noise_percent is not None:
            return f"H{self.order} below the noise (< {self.noise_percent:.2g} %)"
        return f"H{self.order} not measurable"

    def to_dict(self) -> dict[str, Any]:
        return {"order": self.order, "advance_s": self.advance_s, "level_db": self.level_db,
                "percent": self.percent, "above_noise": self.above_noise,
                "noise_percent": self.noise_percent}


@dataclass(frozen=True, slots=True)
class ResponseContext:
    """What the measurement excited and kept: read by the analysis to judge every band.

    Attributes
    ----------
    f1_hz, f2_hz : float or None
        The sweep's range; a band not inside it was not excited (None: unknown, e.g. an IR file
        without a sidecar).
    cut_s : float or None
        The response ends this long after its direct sound because the recording did (the next
        sweep, the end of the file, a length cap) before the decay reached the noise in some
        band; None when every band's decay reached the noise, or when unknown.
    cut_by : str
        What ended it, in words ("the next sweep's distortion products", ...).
    gap_needed_s : float or None
        The silence after each sweep (``measure sweep --gap``) the room needs for its decay to
        reach the noise in every band, when it could be estimated.
    """

    f1_hz: float | None = None
    f2_hz: float | None = None
    cut_s: float | None = None
    cut_by: str = ""
    gap_needed_s: float | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"f1_hz": self.f1_hz, "f2_hz": self.f2_hz, "cut_s": self.cut_s,
                "cut_by": self.cut_by, "gap_needed_s": self.gap_needed_s}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> ResponseContext:
        def num(k: str) -> float | None:
            v = d.get(k)
            return float(v) if isinstance(v, (int, float)) and math.isfinite(v) else None

        return cls(f1_hz=num("f1_hz"), f2_hz=num("f2_hz"), cut_s=num("cut_s"),
                   cut_by=str(d.get("cut_by") or ""), gap_needed_s=num("gap_needed_s"))


@dataclass(frozen=True, slots=True, eq=False)
class ImpulseResponse:
    """Impulse responses recovered from one recording.

    Attributes
    ----------
    h : ndarray, (channels, n), float64
        Linear impulse responses on the player's clock; the direct sound of the timing channel
        is at ``onset_index``.
    fs : int
        Sample rate (the sweep's).
    channels : tuple of int
        Recording channel (0-based) of each row of ``h``.
    onset_index : int
        Index of the timing channel's direct sound in ``h``.
    latency_s : tuple of float
        Per channel: arrival of the direct sound after the start of the first sweep in the file
        (playback plus recording latency plus the acoustic path); with a reference channel,
        after the reference's arrival instead.
    drift_ppm : float
        Recorder clock against player clock, parts per million (positive: recorder fast).
    peak_to_noise_db : tuple of float
        Per channel: peak power over the mean power of the broadband noise after the decay
        (a lower bound when ``noise_reached`` is False for that channel).
    noise_dbfs : tuple of float
        Per channel: RMS noise level of the response, dB re full scale (an upper bound when the
        decay did not reach the noise).
    harmonics : tuple of tuple of HarmonicDistortion
        Per channel, orders 2 … n_harmonics + 1.
    harmonic_h : ndarray, (channels, n_harmonics, m)
        The harmonic responses themselves, each starting like ``h`` (onset at ``onset_index``).
    n_averaged : int
        Sweeps averaged.
    n_clipped : int
        Samples at or beyond full scale in the recording (of the channels used).
    reference_channel : int or None
        The loopback channel the timing came from, if any.
    reference_latency_s : float or None
        The reference channel's own latency (the interface's round trip), if any.
    warnings : tuple of str
    f1_hz, f2_hz : float
        The sweep's range (the band that was excited).
    available_s : float
        How long after the direct sound the recording allowed the response to run.
    limited_by : str
        What set ``available_s``, in words.
    noise_reached : tuple of bool
        Per channel: every followed band's decay reached the noise within the response.
    unreached_bands : tuple of tuple of str
        Per channel: the bands (nominal labels, "broadband") whose decay did not.
    gap_needed_s : float or None
        When some band's decay did not reach the noise: the gap after each sweep that the room
        needs (``measure sweep --gap``), when it could be estimated.
    repeats_found : int
        Sweeps found in the recording.
    repeats_left_out : tuple of (int, str)
        1-based repeat numbers left out of the average and why.
    origins : ndarray, (n_averaged,), float64
        Where each averaged window starts in the nominal deconvolution of the recording (read
        by :func:`read_back` to process another signal exactly as this one).
    """

    h: np.ndarray
    fs: int
    channels: tuple[int, ...]
    onset_index: int
    latency_s: tuple[float, ...]
    drift_ppm: float
    peak_to_noise_db: tuple[float, ...]
    noise_dbfs: tuple[float, ...]
    harmonics: tuple[tuple[HarmonicDistortion, ...], ...]
    harmonic_h: np.ndarray = field(repr=False)
    n_averaged: int = 1
    n_clipped: int = 0
    reference_channel: int | None = None
    reference_latency_s: float | None = None
    warnings: tuple[str, ...] = ()
    f1_hz: float | None = None
    f2_hz: float | None = None
    available_s: float | None = None
    limited_by: str = ""
    noise_reached: tuple[bool, ...] = ()
    unreached_bands: tuple[tuple[str, ...], ...] = ()
    gap_needed_s: float | None = None
    repeats_found: int = 1
    repeats_left_out: tuple[tuple[int, str], ...] = ()
    origins: np.ndarray = field(default_factory=lambda: np.zeros(1), repr=False)

    def __post_init__(self) -> None:
        self.h.setflags(write=False)
        self.harmonic_h.setflags(write=False)
        self.origins.setflags(write=False)

    @property
    def n_channels(self) -> int:
        return int(self.h.shape[0])

    def context(self, row: int = 0) -> ResponseContext:
        """What the analysis of row ``row`` of ``h`` needs to know about the measurement."""
        reached = self.noise_reached[row] if self.noise_reached else True
        cut = None if reached else (self.h.shape[1] - self.onset_index) / self.fs
        return ResponseContext(f1_hz=self.f1_hz, f2_hz=self.f2_hz, cut_s=cut,
                               cut_by="" if reached else self.limited_by,
                               gap_needed_s=None if reached else self.gap_needed_s)

    def to_dict(self) -> dict[str, Any]:
        """The figures of the recovery (no samples), as written to IR.json."""
        per_channel = [
            {"capture_channel": c + 1, "latency_s": lat, "peak_to_noise_db": pnr,
             "noise_dbfs": nz, "harmonic_distortion": [hd.to_dict() for hd in hds],
             "noise_reached": (self.noise_reached[i] if self.noise_reached else None),
             "bands_not_reaching_the_noise": (list(self.unreached_bands[i])
                                              if self.unreached_bands else []),
             "context": self.context(i).to_dict()}
            for i, (c, lat, pnr, nz, hds) in enumerate(zip(
                self.channels, self.latency_s, self.peak_to_noise_db, self.noise_dbfs,
                self.harmonics, strict=True))
        ]
        return {
            "sample_rate": self.fs,
            "n_samples": int(self.h.shape[1]),
            "onset_s": self.onset_index / self.fs,
            "latency_s": self.latency_s[0],
            "drift_ppm": self.drift_ppm,
            "peak_to_noise_db": self.peak_to_noise_db[0],
            "harmonic_distortion": [hd.to_dict() for hd in self.harmonics[0]],
            "n_sweeps_averaged": self.n_averaged,
            "n_sweeps_found": self.repeats_found,
            "sweeps_left_out": [{"sweep": k, "reason": why} for k, why in self.repeats_left_out],
            "n_clipped_samples": self.n_clipped,
            "reference_channel": (None if self.reference_channel is None
                                  else self.reference_channel + 1),
            "reference_latency_s": self.reference_latency_s,
            "response": {"available_s": self.available_s, "limited_by": self.limited_by,
                         "gap_needed_s": self.gap_needed_s},
            "context": self.context(0).to_dict(),
            "channels": per_channel,
            "warnings": list(self.warnings),
        }


# ---------------------------------------------------------------------------------------------
# 0. The whole recording, deconvolved once

def _fft_len(n: int) -> int:
    from scipy.fft import next_fast_len

    return next_fast_len(n, real=True)


def deconvolve_rows(y: np.ndarray, sweep: Sweep, rows: Sequence[int], *, first: int | None = None
                    ) -> dict[int, np.ndarray]:
    """The nominal deconvolution of each recording row in ``rows`` (linear, no wrap).

    Parameters
    ----------
    y : ndarray, (channels, samples)
    sweep : Sweep
    rows : sequence of int
        The rows of ``y`` to deconvolve; ``first`` (default ``rows[0]``) is transformed first.

    Returns
    -------
    dict of int to ndarray
        Row → its deconvolution, of length ``n_fft >= samples + n_sweep``: the linear response of
        a sweep starting at sample s of the recording is at index s; harmonic responses at
        negative lags wrap to the end.
    """
    from scipy.fft import irfft, rfft

    rows = list(dict.fromkeys(rows))
    if first is not None and first in rows:
        rows.remove(first)
        rows.insert(0, first)
    n_fft = _fft_len(y.shape[1] + sweep.spec.n_sweep + 1)
    inv = inverse_spectrum(sweep.spec, n_fft, x=sweep.x)
    out = {}
    for r in rows:  # one row's spectrum at a time keeps the peak memory low
        Y = rfft(y[r], n_fft)
        Y *= inv
        out[r] = irfft(Y, n_fft)
        del Y
    return out


# ---------------------------------------------------------------------------------------------
# 1. Locate

def _noise_rms(d: np.ndarray) -> float:
    """Robust RMS of a deconvolved recording (median absolute deviation of Gaussian noise).

    Every 7th sample is enough for the median and keeps this cheap on long recordings.
    """
    return float(np.median(np.abs(d[::7]))) / 0.6745 + 1e-300


def locate_sweeps(d: np.ndarray, sweep: Sweep, n_recorded: int) -> np.ndarray:
    """Integer positions of the linear responses of the sweeps in ``d``, in order.

    Parameters
    ----------
    d : ndarray
        Nominal deconvolution of the timing row (:func:`deconvolve_rows`).
    sweep : Sweep
    n_recorded : int
        Length of the recording: linear responses lie at lags 0 … n_recorded − 1.

    Raises
    ------
    AudioFileError
        If no response stands :data:`DETECTION_DB` above the deconvolved noise.
    """
    spec = sweep.spec
    env = np.abs(d[:n_recorded])
    p = int(np.argmax(env))
    peak = float(env[p])
    # the lags at which a whole sweep was recorded, and at least MIN_NOISE_LAGS_S of them
    n_noise = min(max(n_recorded - spec.n_sweep + 1, int(MIN_NOISE_LAGS_S * spec.fs)), n_recorded)
    noise = _noise_rms(d[:n_noise])
    advice = ("check that the microphone is connected and the right input is chosen, the "
              "loudspeaker is on, and the recording matches this sweep file")
    if not peak > noise * 10.0 ** (DETECTION_DB / 20.0):
        raise AudioFileError(
            f"no sweep found in the recording (its strongest response is only "
            f"{round(20 * math.log10(max(peak, 1e-300) / noise), 1) + 0.0:.1f} dB above the "
            "noise, "
            f"{DETECTION_DB:g} dB needed); {advice}")
    # A recording of another sweep deconvolves to a chirp, whose peak can stand far above the
    # noise of a quiet room; its octaves arrive at different times (:func:`_octaves_meeting_peak`)
    met = _octaves_meeting_peak(d, p, n_recorded, spec)
    if met is not None and met[0] < 0.5 * met[1]:
        raise AudioFileError(
            "no sweep found in the recording (what it holds deconvolves to a chirp, not an "
            f"impulse response: only {met[0]} of its {met[1]} octaves arrive together, as in a "
            f"recording of another sweep); {advice}")
    P = spec.n_period
    R = spec.repeats
    present: dict[int, int] = {0: p}
    for j in range(-(R - 1), R):
        if j == 0:
            continue
        centre = p + j * P
        tol = int(abs(j) * P * MAX_DRIFT_PPM * 1e-6) + 3
        lo, hi = max(centre - tol, 0), min(centre + tol + 1, n_recorded)
        if hi <= lo:
            continue
        k = lo + int(np.argmax(env[lo:hi]))
        if env[k] >= peak * 10.0 ** (-12.0 / 20.0):
            present[j] = k
    # the run of consecutive repeats that holds the strongest one
    j_lo = 0
    while j_lo - 1 in present:
        j_lo -= 1
    j_hi = 0
    while j_hi + 1 in present:
        j_hi += 1
    found = [present[j] for j in range(j_lo, j_hi + 1)]
    if len(found) > R:  # more candidates than sweeps: keep the strongest run of R
        sums = [sum(env[found[i:i + R]]) for i in range(len(found) - R + 1)]
        i0 = int(np.argmax(sums))
        found = found[i0:i0 + R]
    return np.asarray(found, dtype=np.int64)


#: The octaves of a response arrive together. At its strongest moment (the direct sound, or a
#: reflection milliseconds after it) every octave the source excites carries energy within
#: 20 dB of its own maximum (a small loudspeaker's weak lows peak in their reverberation, a few
#: dB above their direct sound; a clipped take's distortion products, before it, come close to
#: it); a recording of another sweep deconvolves to a chirp whose octaves arrive
#: (L_b − L_a)·ln(f/f1) apart (the difference of the two sweeps' group delays, derived),
#: seconds for sweeps of different lengths or ranges, so at its peak only the octaves that
#: meet there do. Fewer than half of the octaves that stand out of their noise meeting the
#: peak: a chirp (common practice for the bounds; measured on the tests' mismatched sweeps).
#: A sweep within a few percent of this one's length passes (its response is then only
#: dispersed).
ARRIVAL_WITHIN_DB = 20.0
#: An octave counts for the arrival check when its strongest 20 ms frame stands this far above
#: its median frame (the noise): below, its peak is where the noise happened to be.
ARRIVAL_PROMINENCE_DB = 20.0


def _octaves_meeting_peak(d: np.ndarray, p: int, n_recorded: int, spec: SweepSpec
                          ) -> tuple[int, int] | None:
    """(octaves that meet the peak ``p`` of ``d``, octaves that stand out of their noise) within
    ±2 s of it (octave power envelopes in 20 ms frames, :func:`band_power_frames`), or None
    when fewer than three stand out."""
    fs = spec.fs
    # negative lags wrap to the end of d (n_recorded … d.size − 1): a mismatched sweep's
    # octaves may arrive there; the window never wraps onto itself
    lo = max(p - 2 * fs, n_recorded - d.size)
    seg = d.take(np.arange(lo, min(p + 2 * fs, n_recorded)), mode="wrap")
    bands = length_bands_hz(spec.f1_hz, spec.f2_hz, fs)
    if len(bands) < 3 or seg.size < int(0.1 * fs):
        return None
    rate, power = band_power_frames(seg, fs, bands)
    j = int(round((p - lo) / fs * rate))
    near = slice(max(j - 2, 0), j + 3)  # ±40 ms
    standing = meeting = 0
    for e in power:
        top = float(e.max())
        if top > float(np.median(e)) * 10.0 ** (ARRIVAL_PROMINENCE_DB / 10.0):
            standing += 1
            meeting += float(e[near].max()) >= top * 10.0 ** (-ARRIVAL_WITHIN_DB / 10.0)
    return (meeting, standing) if standing >= 3 else None


# ---------------------------------------------------------------------------------------------
# 2. Drift and the direct sound's fine position

@dataclass(frozen=True, slots=True, eq=False)
class Timing:
    """The clock drift and where each found sweep's direct sound lies.

    Attributes
    ----------
    eps : float
        Drift ε (recorder fast by this fraction).
    fine : ndarray
        Fractional position of each found sweep's direct sound in the nominal deconvolution of
        the timing row (on the recorder's clock).
    window_start : int
        Start of the short drift-corrected window ``window`` around the first direct sound.
    window : ndarray
        That window (drift-corrected, recorder clock): ``window_start + direct_in_window`` is
        the first direct sound's integer position.
    direct_in_window : int
    """

    eps: float
    fine: np.ndarray
    window_start: int
    window: np.ndarray = field(repr=False)
    direct_in_window: int = 0


def _drift_from_spacing(d: np.ndarray, starts: np.ndarray, P: int, fs: int) -> float:
    """ε from the spacing of repeated responses: sub-sample lag of each against the first."""
    half = int(0.05 * fs)  # 50 ms around each direct sound
    ref_lo = starts[0] - half
    lags = [0.0]
    n_fft = _fft_len(4 * half)
    ref = d[max(ref_lo, 0):starts[0] + half]
    R0 = np.fft.rfft(ref, n_fft)
    for s in starts[1:]:
        seg = d[max(s - half, 0):s + half]
        c = np.fft.irfft(np.fft.rfft(seg, n_fft) * np.conj(R0), n_fft)
        c = np.roll(c, n_fft // 2)
        i = int(np.argmax(c))
        frac = parabolic_peak(c, i) - n_fft // 2
        lags.append((s - half) - max(ref_lo, 0) + frac)
    k = np.arange(len(lags), dtype=np.float64)
    slope = np.polyfit(k, np.asarray(lags), 1)[0]
    return slope / P - 1.0


def _direct_index(env: np.ndarray, p: int, fs: int) -> int:
    """The direct sound: the earliest peak within 6 dB of the maximum, at most 20 ms before it."""
    lo = max(p - int(0.02 * fs), 1)
    thresh = env[p] * 10.0 ** (-6.0 / 20.0)
    seg = env[lo:p + 1]
    cand = np.nonzero((seg[1:-1] >= thresh) & (seg[1:-1] >= seg[:-2]) & (seg[1:-1] >= seg[2:]))[0]
    return lo + 1 + int(cand[0]) if cand.size else p


def _relocate(env: np.ndarray, approx: int, sweep: Sweep, fs: int) -> int:
    """The direct sound near ``approx`` (found before drift removal, which moves it)."""
    radius = _search_radius(sweep, fs)
    lo, hi = max(approx - radius, 0), min(approx + radius + 1, env.size)
    p = lo + int(np.argmax(env[lo:hi]))
    return _direct_index(env, p, fs)


def _fine_position(d: np.ndarray, p: int) -> float:
    env = np.abs(d)
    return parabolic_peak(env, p)


def _drift_from_phase(d: np.ndarray, p: int, sweep: Sweep, eps: float, *,
                      symmetric: bool = False) -> float:
    """Residual ε from the group delay of the direct sound at index ``p`` of ``d``.

    ``d`` is a deconvolution already corrected for drift ``eps``; a residual δε leaves the
    group delay τ(f) = τ0 + δε·L·ln(f/f1) (measurement.md §1.6), fitted to the unwrapped phase
    of a tight, tapered window over 1.5–14 kHz by weighted least squares. The window reaches
    −0.5 ms … +1.2 ms, room for the dispersion of an uncorrected drift; once the drift is
    mostly removed a ``symmetric`` ±0.6 ms window is used, which cuts the band-limited
    impulse's tails evenly and so adds no phase of its own (the uneven cut biased a perfect
    loopback by 0.1–0.2 ppm).
    """
    spec = sweep.spec
    fs = spec.fs
    if symmetric:
        pre = post = int(round(0.0006 * fs))
    else:
        pre, post = int(round(0.0005 * fs)), int(round(0.0012 * fs))
    if p - pre < 0 or p + post > d.size:
        return 0.0
    seg = d[p - pre:p + post].copy()
    taper = np.ones(seg.size)
    nt = max(pre // 2, 2)
    taper[:nt] = 0.5 - 0.5 * np.cos(np.pi * np.arange(nt) / nt)
    taper[-nt:] = taper[:nt][::-1]
    seg *= taper
    n_fft = 4096
    buf = np.zeros(n_fft)
    buf[:seg.size - pre] = seg[pre:]
    buf[n_fft - pre:] = seg[:pre]  # the peak at index 0: a slowly turning phase
    H = np.fft.rfft(buf)
    f = np.fft.rfftfreq(n_fft, 1.0 / fs)
    lo_hz, hi_hz = DRIFT_FIT_BAND_HZ
    hi_hz = min(hi_hz, 0.9 * spec.f2_hz, 0.45 * fs)
    m = (f >= max(lo_hz, 2 * spec.f1_hz)) & (f <= hi_hz)
    if np.count_nonzero(m) < 8:
        return 0.0
    phase = np.unwrap(np.angle(H[m]))
    sw = np.abs(H[m])
    sw = sw / sw.max()
    fm = f[m]
    L = spec.rate_constant_s * (1.0 + eps)
    # phase = c − 2π f τ0 − 2π f · L·ln(f/f1) · δε
    A = np.column_stack([np.ones_like(fm), -2 * np.pi * fm,
                         -2 * np.pi * fm * L * np.log(fm / spec.f1_hz)])
    coef, *_ = np.linalg.lstsq(A * sw[:, None], phase * sw, rcond=None)
    return float(coef[2])


def estimate_timing(d: np.ndarray, starts: np.ndarray, sweep: Sweep, *,
                    correct_drift: bool = True) -> Timing:
    """Drift ε and the fine position of every found sweep's direct sound (stage 2).

    With two or more sweeps ε comes from their spacing; with one, from the group delay of the
    direct sound, refined until it moves by less than 0.05 ppm (at most three passes). The
    first sweep's direct sound is then found to a fraction of a sample on a drift-corrected
    window and the others placed one (stretched) period apart.
    """
    spec = sweep.spec
    fs = spec.fs
    eps = 0.0
    if correct_drift:
        if starts.size >= 2:
            eps = _drift_from_spacing(d, starts, spec.n_period, fs)
        else:
            eps = _drift_from_phase(d, _relocate(np.abs(d), int(starts[0]), sweep, fs),
                                    sweep, 0.0)
    radius = _search_radius(sweep, fs)
    lo = int(starts[0]) - 2 * radius
    for attempt in range(3):  # w always belongs to the final eps
        w = read_back(d, np.array([float(lo)]), 4 * radius, sweep, eps, unstretch=False)
        p_w = _relocate(np.abs(w), 2 * radius, sweep, fs)
        if not (correct_drift and starts.size == 1):
            break
        resid = _drift_from_phase(w, p_w, sweep, eps, symmetric=True)
        if abs(resid) < 0.05e-6 or attempt == 2:
            break
        eps += resid
    stretch = 1.0 + eps
    p0_fine = lo + _fine_position(w, p_w)
    k_idx = np.round((starts - starts[0]) / (spec.n_period * stretch)).astype(int)
    fine = p0_fine + k_idx * spec.n_period * stretch
    return Timing(eps=eps, fine=np.asarray(fine, dtype=np.float64), window_start=lo, window=w,
                  direct_in_window=p_w)


# ---------------------------------------------------------------------------------------------
# 3. Window

@dataclass(frozen=True, slots=True, eq=False)
class Window:
    """Where the responses are read from the nominal deconvolution (stage 3).

    Attributes
    ----------
    origins : ndarray
        Fractional start of each found sweep's window (``pre`` before its direct sound).
    pre : int
        Samples kept before the direct sound.
    n_after : int
        Samples the recording allows after the direct sound (player's clock).
    limited_by : str
        What sets ``n_after``, in words.
    """

    origins: np.ndarray
    pre: int
    n_after: int
    limited_by: str

    @property
    def n_len(self) -> int:
        return self.pre + self.n_after


def plan_window(timing: Timing, sweep: Sweep, n_recorded: int, *, pre: int, n_harmonics: int,
                max_length_s: float | None = None) -> Window:
    """The response window: ``pre`` before the direct sound to the next sweep's earliest
    harmonic response (repeats), or to where the recording ends, or to ``max_length_s``.

    Raises
    ------
    AudioFileError
        If fewer than 50 ms remain after the direct sound.
    """
    spec = sweep.spec
    fs = spec.fs
    stretch = 1.0 + timing.eps
    n_h = max(n_harmonics, 1)
    # the next sweep's harmonic of order n_h + 1 lands L·ln(n_h + 1) before its linear
    # response; the window stops 10 ms short of it and of that harmonic's own pre-time
    gap_inner = spec.n_period - spec.rate_constant_s * fs * math.log(n_h + 1) - pre - 0.01 * fs
    after_last = (n_recorded - timing.fine[-1]) / stretch - spec.n_sweep - 0.001 * fs
    limits = [(after_last, "the end of the recording")]
    if spec.repeats > 1:
        limits.append((gap_inner, "the next sweep's distortion products"))
    if max_length_s is not None:
        limits.append((max_length_s * fs, f"the length limit of {max_length_s:g} s"))
    n_after_f, why = min(limits, key=lambda t: t[0])
    n_after = int(n_after_f)
    if n_after < int(0.05 * fs):
        raise AudioFileError(
            f"the recording keeps only {max(n_after, 0) / fs * 1000:.0f} ms after the last sweep; "
            "record the whole file including the silence after the sweep (use a longer --gap)")
    return Window(origins=timing.fine - pre * stretch, pre=pre, n_after=n_after, limited_by=why)


# ---------------------------------------------------------------------------------------------
# 5. Read back and average

def _search_radius(sweep: Sweep, fs: int) -> int:
    """How far drift can move the direct sound in a response deconvolved without correction."""
    spec = sweep.spec
    return int(0.002 * fs + MAX_DRIFT_PPM * 1e-6 * spec.rate_constant_s * fs
               * (math.log(spec.f2_hz / spec.f1_hz) + 1.0))


def _dispersion_correction(n_fft: int, sweep: Sweep, eps: float) -> np.ndarray:
    """See :func:`_dispersion_factor`; cached (the same window length recurs in a recovery)."""
    return _dispersion_factor(n_fft, sweep.spec, eps)


@functools.lru_cache(maxsize=8)
def _dispersion_factor(n_fft: int, spec: SweepSpec, eps: float) -> np.ndarray:
    """rfft-domain factor X/X_s that turns a nominal deconvolution into a drift-free one.

    A recorder running ε fast records the sweep with rate constant L(1+ε) samples and start
    frequency f1/(1+ε). By stationary phase the spectrum of an exponential sweep has phase
    ψ(ν) = 2πL(ν − ν1 − ν·ln(ν/ν1)) (ν in cycles per sample, L in samples) [1]_, so dividing
    the recording by the nominal sweep instead of the stretched one leaves the factor
    X_s/X = √(1+ε)·exp(jΔψ), Δψ(ν) = 2πLν[ε − ε·ln(ν/ν1) − (1+ε)·ln(1+ε)] (derived), whose
    group delay is the ε·L·(ln(ν/ν1)+1) of measurement.md §1.6. This returns its inverse.
    """
    L = spec.rate_constant_s * spec.fs
    nu1 = spec.f1_hz / spec.fs
    nu = np.arange(n_fft // 2 + 1) / n_fft
    with np.errstate(divide="ignore"):
        lnr = np.log(np.maximum(nu, 1e-12) / nu1)
    dpsi = 2 * np.pi * L * nu * (eps - eps * lnr - (1 + eps) * math.log1p(eps))
    out = np.exp(-1j * dpsi) / math.sqrt(1.0 + eps)
    out.setflags(write=False)
    return out


@dataclass(frozen=True, slots=True, eq=False)
class _Spectra:
    """Aligned window spectra of one row: ``spectra[k]`` is window k, advanced by its fraction."""

    spectra: list
    n_fft: int
    margin: int
    n_out: int


def aligned_spectra(row: np.ndarray, origins: np.ndarray, n_out: int, sweep: Sweep,
                    eps: float) -> _Spectra:
    """The spectrum of each window of ``row`` starting at fractional ``origins``, aligned.

    Each window is advanced by its fractional start with a linear phase (exact at every
    frequency), so the windows can be compared and averaged sample for sample. A margin on both
    sides leaves room for the drift's dispersion; negative positions wrap to the end of ``row``
    (negative lags).
    """
    from scipy.fft import next_fast_len, rfft

    stretch = 1.0 + eps
    margin = int(_search_radius(sweep, sweep.fs)) + 64
    n_seg = int(math.ceil(n_out * stretch)) + 2 * margin
    n_fft = next_fast_len(n_seg + margin, real=True)
    k = np.arange(n_fft // 2 + 1)
    out = []
    for o in origins:
        base = int(math.floor(o))
        frac = o - base
        a = base - margin
        seg = (row[a:a + n_seg] if 0 <= a and a + n_seg <= row.size
               else row.take(np.arange(a, a + n_seg), mode="wrap"))
        S = rfft(seg, n_fft)
        if frac:
            S *= np.exp(2j * np.pi * k * frac / n_fft)
        out.append(S)
    return _Spectra(out, n_fft, margin, n_out)


def select_repeats(per_channel: Sequence[_Spectra], fs: int, *, pre: int,
                   bands_hz: Sequence[float]) -> tuple[list[int], list[tuple[int, str]]]:
    """Leave out the repeats that a disturbance made differ from the others (robust averaging).

    For every channel, octave band (complementary masks over ``bands_hz``; broadband when empty)
    and block of time (at least 20 ms and 4/B, i.e. at least 8 degrees of freedom for a band of
    width B), the residual of each repeat is its difference from the sample-wise median of the
    repeats (with two repeats, from the other one, halved). A repeat is disturbed where its
    residual energy exceeds :data:`DISTURBANCE_DB` above both the band's median residual (its
    noise) and :data:`DISTURBANCE_SIGNAL_DB` below the block's median signal energy. With two
    repeats the one with more energy in the disturbed blocks is left out.

    Returns
    -------
    keep : list of int
        0-based repeats averaged (never empty).
    left_out : list of (int, str)
        1-based repeat numbers and why each was left out.
    """
    from scipy.fft import irfft


    n_rep = len(per_channel[0].spectra) if per_channel else 0
    if n_rep < 2:
        return list(range(n_rep)), []
    sp0 = per_channel[0]
    f = np.fft.rfftfreq(sp0.n_fft, 1.0 / fs)
    centres = list(bands_hz)
    masks = (_band_masks(centres, f) if centres else np.ones((1, f.size)))
    widths = [c * (2 ** 0.5 - 2 ** -0.5) for c in centres] or [fs / 2]
    score = np.zeros(n_rep)
    where: list[list[str]] = [[] for _ in range(n_rep)]
    for sp in per_channel:
        for b, mask in enumerate(masks):
            x = np.array([irfft(S * mask, sp.n_fft)[sp.margin:sp.margin + sp.n_out]
                          for S in sp.spectra])
            block = max(int(0.02 * fs), int(math.ceil(4.0 * fs / widths[b])))
            nb = x.shape[1] // block
            if nb < 2:
                continue
            x = x[:, :nb * block]
            if n_rep >= 3:
                res = x - np.median(x, axis=0)
            else:
                half = 0.5 * (x[0] - x[1])
                res = np.array([half, -half])
            r_e = np.mean(res.reshape(n_rep, nb, block) ** 2, axis=2)
            s_e = np.median(np.mean(x.reshape(n_rep, nb, block) ** 2, axis=2), axis=0)
            noise = float(np.median(r_e)) + 1e-300
            limit = (np.maximum(noise, s_e * 10.0 ** (DISTURBANCE_SIGNAL_DB / 10.0))
                     * 10.0 ** (DISTURBANCE_DB / 10.0))
            hit = r_e > limit[np.newaxis, :]
            if not hit.any():
                continue
            if n_rep == 2:
                cells = hit[0]
                e_k = np.mean(x.reshape(2, nb, block) ** 2, axis=2)[:, cells].sum(axis=1)
                who = [int(np.argmax(e_k))]
            else:
                who = [int(k) for k in np.nonzero(hit.any(axis=1))[0]]
            label = f"{centres[b]:g} Hz" if centres else "broadband"
            for k in who:
                worst = int(np.argmax(np.where(hit[k] if n_rep > 2 else hit[0], r_e[k], 0.0)))
                t_s = (worst * block + block / 2 - pre) / fs
                score[k] += 1
                where[k].append(f"{label} at {t_s:.2f} s")
    keep = [k for k in range(n_rep) if score[k] == 0]
    if not keep:  # every repeat disturbed somewhere: keep the least disturbed ones
        least = score.min()
        keep = [k for k in range(n_rep) if score[k] == least]
    left_out = [(k + 1, "it differs from the other sweeps by more than the noise allows ("
                 + ", ".join(where[k][:3]) + (" ..." if len(where[k]) > 3 else "")
                 + "): an impulsive disturbance (a door, a cough, a step)?")
                for k in range(n_rep) if k not in keep]
    return keep, left_out


def _band_masks(centres_hz: Sequence[float], f_hz: np.ndarray) -> np.ndarray:
    """Octave masks that add up to one between the outer band edges and fall to zero outside
    them (a raised cosine over 1/6 octave): complementary masks
    (:func:`measure.bands.complementary_masks`) whose lowest and highest bands stop at their
    own edges rather than at DC and Nyquist."""
    from measure.bands import complementary_masks

    masks = complementary_masks(list(centres_hz), f_hz, transition_octaves=1.0 / 3.0)
    lf = np.log2(np.maximum(f_hz, 1e-6))
    lo, hi = math.log2(centres_hz[0]) - 0.5, math.log2(centres_hz[-1]) + 0.5
    w = 1.0 / 6.0
    span = (np.clip((lf - lo) / w + 0.5, 0.0, 1.0) * np.clip((hi - lf) / w + 0.5, 0.0, 1.0))
    masks *= np.sin(0.5 * np.pi * span) ** 2
    return masks


def _finish(acc: np.ndarray, sp: _Spectra, sweep: Sweep, eps: float, n_out: int, *,
            unstretch: bool, dispersed: bool = False) -> np.ndarray:
    """An averaged window spectrum → the response on the player's clock (or the recorder's).

    The drift's dispersion is undone (:func:`_dispersion_correction`) and, with ``unstretch``,
    the window is read back at steps of 1+ε samples by a chirp-z transform (the DFT evaluated on
    a scaled frequency grid), which undoes the stretch of the room response without the
    high-frequency loss of an interpolator.
    """
    from scipy.fft import irfft

    n_fft, margin = sp.n_fft, sp.margin
    if eps and not dispersed:
        acc = acc * _dispersion_correction(n_fft, sweep, eps)
    if not unstretch:
        return irfft(acc, n_fft)[margin:margin + n_out]
    # u[m] = (1/N)·Re Σ_k c_k·exp(j2πk(margin + m·stretch)/N), c_k = 2·S_k (1 at DC and Nyquist)
    k = np.arange(n_fft // 2 + 1)
    c = acc * np.exp(2j * np.pi * k * margin / n_fft)
    c[1:] *= 2.0
    if n_fft % 2 == 0:
        c[-1] *= 0.5
    return _chirp_sum(c, n_out, 2 * np.pi * (1.0 + eps) / n_fft).real / n_fft


def _mean_of(sp: _Spectra, keep: Sequence[int]) -> np.ndarray:
    acc = np.zeros_like(sp.spectra[0])
    for k in keep:
        acc += sp.spectra[k]
    acc /= len(keep)
    return acc


def read_back(row: np.ndarray, origins: np.ndarray, n_out: int, sweep: Sweep, eps: float, *,
              keep: Sequence[int] | None = None, unstretch: bool = True) -> np.ndarray:
    """The average of the windows of ``row`` at ``origins`` (those in ``keep``), drift removed.

    This is stage 5 for one row with the repeats already chosen; :func:`recover_ir` uses it
    through its parts. Given the ``origins`` and ``drift_ppm`` of an :class:`ImpulseResponse`,
    it processes any other deconvolved signal (e.g. the noise part of a virtual take) exactly as
    that response was processed.
    """
    sp = aligned_spectra(row, origins, n_out, sweep, eps)
    keep = range(len(origins)) if keep is None else keep
    return _finish(_mean_of(sp, keep), sp, sweep, eps, n_out, unstretch=unstretch)


def _chirp_sum(c: np.ndarray, m: int, alpha: float) -> np.ndarray:
    """X_j = Σ_k c_k·exp(i·alpha·k·j), j = 0 … m−1, by Bluestein's chirp-z algorithm.

    The chirp's phase is computed in float64 and reduced mod 2π before the exponential, which
    keeps it exact to ~1e-10 rad even for k² ~ 1e11.
    """
    from scipy.fft import fft, ifft, next_fast_len

    K = c.size
    n = next_fast_len(K + m - 1)
    kk = np.arange(max(K, m), dtype=np.float64)
    chirp = np.exp(1j * np.mod(0.5 * alpha * kk * kk, 2 * np.pi))
    a = np.zeros(n, dtype=np.complex128)
    a[:K] = c * chirp[:K]
    b = np.zeros(n, dtype=np.complex128)
    b[:m] = np.conj(chirp[:m])
    b[n - K + 1:] = np.conj(chirp[1:K][::-1])
    a = fft(a, overwrite_x=True)
    a *= fft(b, overwrite_x=True)
    del b
    out = ifft(a, overwrite_x=True)[:m]
    out *= chirp[:m]
    return out


# ---------------------------------------------------------------------------------------------
# 4. Noise and length (decided before the read-back, see recover_ir)

def length_bands_hz(f1_hz: float, f2_hz: float, fs: int) -> tuple[float, ...]:
    """Exact mid-band frequencies of the octaves in :data:`LENGTH_OCTAVES_HZ` that lie inside
    [f1, f2] and below Nyquist (IEC 61260-1 base-10 octaves)."""
    out = []
    for nom in LENGTH_OCTAVES_HZ:
        fc = 1000.0 * 10.0 ** (0.3 * round(10.0 * math.log10(nom / 1000.0) / 3.0))
        if fc / 2 ** 0.5 >= f1_hz * 0.999 and fc * 2 ** 0.5 <= min(f2_hz, 0.5 * fs) * 1.001:
            out.append(fc)
    return tuple(out)


@dataclass(frozen=True, slots=True, eq=False)
class Length:
    """Result of the noise-and-length stage (4) for every channel.

    Attributes
    ----------
    end : int
        Samples to keep (from the window's start).
    noise_reached : tuple of bool
    unreached : tuple of tuple of str
        Per channel: labels of the bands whose decay did not reach the noise.
    crossing_s : tuple of float or None
        Per channel: the latest crossing, s after the direct sound (None when some band did
        not cross).
    late_fits : tuple of dict
        Per channel: label → (late decay line's level at the window's end, dB re full scale
        per sample, and its slope, dB/s) of the bands that did not reach the noise (for the
        gap estimate).
    """

    end: int
    noise_reached: tuple[bool, ...]
    unreached: tuple[tuple[str, ...], ...]
    crossing_s: tuple[float | None, ...]
    late_fits: tuple[dict[str, tuple[float, float]], ...]


def _band_label(fc: float) -> str:
    nominal = min(LENGTH_OCTAVES_HZ, key=lambda n: abs(math.log(n / fc)))
    return f"{nominal / 1000:g}k" if nominal >= 1000 else f"{nominal:g}"


def band_power_frames(x: np.ndarray, fs: int, centres_hz: Sequence[float]
                      ) -> tuple[int, np.ndarray]:
    """The power of ``x`` in each octave (edges fc/√2 … fc·√2), frame by frame.

    Hann frames of about 40 ms (a power of two: 2048 samples at 44.1/48 kHz, enough bins for the
    63 Hz octave) advance by the hop of a frame rate that divides ``fs`` (50 Hz, else 25, 20,
    ...): 20 ms, finer than the decisions made on them need (the length keeps twice the
    crossing time; the arrival check judges 0.25 s); frame j is centred on sample j·hop. A band's power is (2/(N·Σw²))·Σ|X_k|² over its
    bins, the mean square of its part of ``x`` (Parseval). Computed in blocks of frames, so
    the memory stays at a few frames' worth.

    Returns
    -------
    (rate_hz, power)
        The frame rate (an integer number of frames per second) and an array
        (len(centres_hz), frames).
    """
    from scipy.fft import rfft

    rate = next((r for r in (50, 25, 20, 10, 5, 4, 2, 1) if fs % r == 0), 1)
    hop = fs // rate
    n_w = 1 << int(math.ceil(math.log2(max(0.04 * fs, 2 * hop, 16))))
    w = np.hanning(n_w)
    scale = 2.0 / (n_w * float(np.sum(w * w)))
    xp = np.pad(np.asarray(x, dtype=np.float64), (n_w // 2, n_w // 2))
    n_frames = max((xp.size - n_w) // hop + 1, 0)
    f = np.fft.rfftfreq(n_w, 1.0 / fs)
    sel = [(f >= fc / math.sqrt(2.0)) & (f < fc * math.sqrt(2.0)) for fc in centres_hz]
    out = np.zeros((len(centres_hz), n_frames))
    for j0 in range(0, n_frames, 128):
        j = np.arange(j0, min(j0 + 128, n_frames))
        frames = xp[j[:, None] * hop + np.arange(n_w)[None, :]] * w
        p = np.abs(rfft(frames, axis=1)) ** 2
        for b, m in enumerate(sel):
            out[b, j] = scale * p[:, m].sum(axis=1)
    return rate, out


def response_length(h: np.ndarray, fs: int, pre: int, *, bands_hz: Sequence[float]) -> Length:
    """Where each band's decay meets the noise, and how much of the window to keep (stage 4).

    Each row of ``h`` (direct sound at ``pre``) is analysed broadband and in the octave bands
    ``bands_hz`` (their power envelopes in 20 ms frames, :func:`band_power_frames`):
    in each, Lundeby's method (:func:`measure.decay.lundeby`) finds the crossing of the decay
    with the noise. The response is kept to the latest crossing plus as much noise again (at
    least :data:`NOISE_KEEP_MIN_S`), within the window. A band whose decay is still falling at
    the end of the window, or crosses the noise with less than a tenth of the window left for
    the noise, has not reached it: the whole window is kept.
    """
    from measure.decay import lundeby

    n = h.shape[1]
    n_body = n - pre
    labels = [_band_label(fc) for fc in bands_hz] + ["broadband"]
    latest = 0
    reached_all, unreached_all, cross_all, fits_all = [], [], [], []
    for row in h:
        envelopes: list[tuple[np.ndarray, int, int]] = []  # (signal, its rate, samples/unit)
        if bands_hz:
            rate, power = band_power_frames(row[pre:], fs, bands_hz)
            envelopes += [(np.sqrt(p), rate, fs // rate) for p in power]
        envelopes.append((row[pre:], fs, 1))
        unreached: list[str] = []
        fits: dict[str, tuple[float, float]] = {}
        row_latest = 0
        for lab, (x, rate, step) in zip(labels, envelopes, strict=True):
            nf = lundeby(x, rate)
            tc = nf.truncation_index * step  # in samples of h
            if nf.continues_s is not None:  # misled, but the decay's end is visible
                tc = min(tc + int(nf.continues_s * fs), n_body)
                nf = dataclasses.replace(nf, ok=True)
            room = n_body - tc
            ok = (nf.ok and nf.noise_floor_found and tc < n_body
                  and room >= max(int(0.1 * n_body), int(0.05 * fs)))
            if ok:
                row_latest = max(row_latest, tc)
            elif nf.late_fit_db is not None or not nf.ok:
                unreached.append(lab)
                if nf.late_fit_db is not None:
                    a_db, b_db = nf.late_fit_db  # power per sample, absolute
                    fits[lab] = (a_db + b_db * n_body / fs, b_db)
        reached_all.append(not unreached)
        unreached_all.append(tuple(unreached))
        cross_all.append(None if unreached else row_latest / fs)
        fits_all.append(fits)
        if unreached:
            latest = n_body
        else:
            keep = max(2 * row_latest, row_latest + int(NOISE_KEEP_MIN_S * fs))
            latest = max(latest, keep)
    end = min(n, pre + latest)
    return Length(end=int(end), noise_reached=tuple(reached_all),
                  unreached=tuple(unreached_all), crossing_s=tuple(cross_all),
                  late_fits=tuple(fits_all))


def predicted_noise_power(noise: np.ndarray, fs: int, spec: SweepSpec,
                          weights: dict[float, np.ndarray] | None = None
                          ) -> tuple[float, dict[float, float], np.ndarray]:
    """Noise power per sample in the impulse response that sweep ``spec`` would give.

    For stationary noise of one-sided density S(f), the deconvolved noise h_n = n * f_inv has
    variance (fs / N) · Σ_k S(f_k) |INV_k|² over the N/2+1 rfft bins of an N-point inverse
    (Parseval; derived). S(f) is estimated from ``noise`` by Welch's method
    (scipy.signal.welch), so the prediction holds for any sweep length, not only for lengths the
    noise recording covers. ``weights`` maps band centres to |B(f)|⁴ on the returned bins (the
    band filter applied forward and backward, or any band weighting).

    Returns
    -------
    (total, per_band, f_hz)
        Broadband noise power, noise power per band of ``weights``, and the bins' frequencies.
    """
    from scipy.signal import welch

    n_fft = 1 << int(math.ceil(math.log2(spec.n_sweep + 1)))
    f = np.fft.rfftfreq(n_fft, 1.0 / fs)
    inv2 = np.abs(inverse_spectrum(spec, n_fft)) ** 2
    nper = int(min(noise.size, 4096))
    fw, s = welch(noise, fs=fs, nperseg=nper, detrend=False)
    s_f = np.interp(f, fw, s)
    total = float(fs / n_fft * np.sum(s_f * inv2))
    bands = {fc: float(fs / n_fft * np.sum(s_f * inv2 * w)) for fc, w in (weights or {}).items()}
    return total, bands, f


def _gap_needed_s(length: Length, leadin: Sequence[np.ndarray | None], sweep: Sweep,
                  window: Window, n_used: int, n_harmonics: int, arrival_s: float,
                  bands_hz: Sequence[float]) -> float | None:
    """The ``--gap`` a room needs for every band's decay to reach the noise, or None.

    For each band that did not reach the noise, its late decay line is continued from the
    window's end down to the band's noise, predicted from the recording's quiet lead-in
    (:func:`predicted_noise_power` with the band's mask, divided by the sweeps averaged), plus
    :data:`NOISE_KEEP_MIN_S` of noise; without a lead-in of 0.1 s, 1.5 times the band's decay
    time (the common rule for the gap). The gap is what gives the window that length, for a
    single sweep (the arrival after the sweep's start adds to it) and between repeats (the next
    sweep's distortion products end it, see :func:`plan_window`), rounded up to 0.5 s.
    """
    from measure.bands import complementary_masks

    spec = sweep.spec
    fs = spec.fs
    need_s = 0.0
    for ci, fits in enumerate(length.late_fits):
        if not fits:
            continue
        pred: dict[str, float] = {}
        seg = leadin[ci] if ci < len(leadin) else None
        if seg is not None and seg.size >= int(0.1 * fs):
            n_fft = 1 << int(math.ceil(math.log2(spec.n_sweep + 1)))
            f = np.fft.rfftfreq(n_fft, 1.0 / fs)
            masks = (complementary_masks(list(bands_hz), f, transition_octaves=1.0 / 3.0)
                     if bands_hz else np.zeros((0, f.size)))
            weights = {fc: m * m for fc, m in zip(bands_hz, masks, strict=True)}
            total, per, _ = predicted_noise_power(seg, fs, spec, weights)
            pred = {_band_label(fc): v / n_used for fc, v in per.items()}
            pred["broadband"] = total / n_used
        for lab, (end_db, slope) in fits.items():
            if not slope < 0:
                continue
            if pred.get(lab, 0.0) > 0:
                fall_db = max(0.0, end_db - 10.0 * math.log10(pred[lab]))
                t = window.n_after / fs + fall_db / -slope + NOISE_KEEP_MIN_S
            else:
                t = 1.5 * (-60.0 / slope)
            need_s = max(need_s, t)
    if not need_s > 0:
        return None
    gap = need_s + arrival_s + 0.01
    if spec.repeats > 1:
        gap = max(gap, need_s + spec.rate_constant_s * math.log(max(n_harmonics, 1) + 1)
                  + window.pre / fs + 0.01 - spec.duration_s)
    return math.ceil(2.0 * max(gap, spec.gap_s + 0.5)) / 2.0


# ---------------------------------------------------------------------------------------------
# Harmonic distortion, judged against the noise in its own window

def _noise_psd(x: np.ndarray, n_seg: int) -> tuple[np.ndarray, np.ndarray]:
    """(normalised frequencies, per-sample density S) of the noise ``x`` from the mean |rfft|²
    of up to 16 pieces of ``n_seg`` samples (fewer when ``x`` is shorter): for stationary noise
    a piece of n samples has E|X_k|² = n·S(f_k), so one estimate serves every window length."""
    m = max(min(n_seg, x.size), 1)
    k = min(max(x.size // m, 1), 16)
    pieces = x[x.size - k * m:].reshape(k, m)
    return np.fft.rfftfreq(m), np.mean(np.abs(np.fft.rfft(pieces, axis=1)) ** 2, axis=0) / m


def _harmonic_level(h1: np.ndarray, hn: np.ndarray, order: int, sweep: Sweep, *, pre: int,
                    pre_h: int, post: int,
                    noise: tuple[np.ndarray, np.ndarray] | None) -> HarmonicDistortion:
    """Energy of harmonic ``order`` at N·f over the fundamental's at f, over the excited band.

    ``h1`` and ``hn`` have their direct sounds at index ``pre``; ``hn`` holds data from
    ``pre − pre_h`` on. Both are compared up to ``post`` samples (at most 0.5 s) after their
    direct sounds, so a room's reverberation weighs equally in both; ``h1`` keeps all its time
    before the direct sound, where its band limit at f1 rings. ``noise`` (the density of the
    response's noise, :func:`_noise_psd`) gives the energy the noise alone puts in a window as
    long as the harmonic's: the harmonic counts only when its window holds at least twice that
    (3 dB above), and then with the noise's share subtracted.
    """
    spec = sweep.spec
    fs = spec.fs
    post = max(min(post, int(0.5 * fs), h1.size - pre), 1)
    H1 = np.abs(np.fft.rfft(h1[:pre + post])) ** 2
    n_h = pre_h + post
    HN = np.abs(np.fft.rfft(hn[pre - pre_h:pre + post])) ** 2
    f1_grid = np.fft.rfftfreq(pre + post, 1.0 / fs)
    f = np.fft.rfftfreq(n_h, 1.0 / fs)
    top = min(spec.f2_hz, 0.95 * fs / 2) / order
    lo = 2.0 * spec.f1_hz
    grid = np.geomspace(lo, top, 200) if top > lo * 1.5 else np.array([])
    adv = spec.harmonic_advance_s(order)
    if grid.size == 0:
        return HarmonicDistortion(order, adv, None, None, False, None)
    p1 = float(np.sum(np.interp(grid, f1_grid, H1))) + 1e-300
    pn = float(np.sum(np.interp(order * grid, f, HN)))
    pz = 0.0
    if noise is not None:
        f_n, psd = noise
        pz = n_h * float(np.sum(np.interp(order * grid / fs, f_n, psd)))
    if pz > 0 and not pn > 2.0 * pz:
        return HarmonicDistortion(order, adv, None, None, False, 100.0 * math.sqrt(pz / p1))
    ratio = max(pn - pz, 0.0) / p1
    return HarmonicDistortion(order, adv, 10 * math.log10(ratio + 1e-300),
                              100.0 * math.sqrt(ratio), True,
                              100.0 * math.sqrt(pz / p1) if pz > 0 else None)


# ---------------------------------------------------------------------------------------------
# Is this a recording of a sweep rather than an impulse response?

#: A sweep recording stays within 20 dB of its loudest frame for at least this long while its
#: strongest frequency rises steadily; an impulse response is loud for its direct sound and
#: first reflections only, and its strongest frequency wanders and falls as the highs decay
#: first (common practice for telling the two apart; thresholds measured on this project's
#: virtual takes and rooms, see tests/test_cli_analyze.py).
SWEEP_LOUD_S = 0.5
SWEEP_MIN_OCTAVES = 3.0
SWEEP_MIN_CORRELATION = 0.9


def sweep_recording_evidence(x: np.ndarray, fs: int) -> str | None:
    """Why ``x`` looks like a recording of a sweep (a rising chirp), or None if it does not.

    Frames of about 40 ms (half overlapping) are reduced to their energy and strongest
    frequency; in the longest run of frames within 20 dB of the loudest, a sweep's strongest
    frequency rises (log frequency against time: correlation at least
    :data:`SWEEP_MIN_CORRELATION`) over at least :data:`SWEEP_MIN_OCTAVES` octaves, for at
    least :data:`SWEEP_LOUD_S`.
    """
    x = np.asarray(x, dtype=np.float64)
    n_fr = 1 << int(round(math.log2(max(0.04 * fs, 64))))
    hop = max(n_fr // 2, (x.size - n_fr) // 6000 + 1)  # at most ~6000 frames
    if x.size < n_fr * 4:
        return None
    starts = np.arange(0, x.size - n_fr, hop)
    win = np.hanning(n_fr)
    f = np.fft.rfftfreq(n_fr, 1.0 / fs)
    use = (f >= 20.0) & (f <= 0.45 * fs)
    energy = np.empty(starts.size)
    peak_hz = np.empty(starts.size)
    for i0 in range(0, starts.size, 256):  # frames in blocks: bounded memory
        idx = starts[i0:i0 + 256]
        frames = x[idx[:, None] + np.arange(n_fr)] * win
        spec = np.abs(np.fft.rfft(frames, axis=1)) ** 2
        energy[i0:i0 + idx.size] = spec.sum(axis=1)
        peak_hz[i0:i0 + idx.size] = f[use][np.argmax(spec[:, use], axis=1)]
    if not energy.max() > 0:
        return None
    loud = energy >= energy.max() * 0.01
    # the longest run of loud frames
    best = (0, 0)
    i = 0
    while i < loud.size:
        if loud[i]:
            j = i
            while j + 1 < loud.size and loud[j + 1]:
                j += 1
            if j - i > best[1] - best[0]:
                best = (i, j)
            i = j + 1
        else:
            i += 1
    a, b = best
    dur_s = (b - a + 1) * hop / fs
    if dur_s < SWEEP_LOUD_S or b - a < 8:
        return None
    t = starts[a:b + 1] / fs
    lf = np.log2(np.maximum(peak_hz[a:b + 1], 1.0))
    if np.ptp(lf) < SWEEP_MIN_OCTAVES or np.std(t) == 0 or np.std(lf) == 0:
        return None
    r = float(np.corrcoef(t, lf)[0, 1])
    if r < SWEEP_MIN_CORRELATION:
        return None
    return (f"it stays loud for {dur_s:.1f} s while its strongest frequency rises from "
            f"{2 ** lf.min():.0f} Hz to {2 ** lf.max():.0f} Hz")


# ---------------------------------------------------------------------------------------------
# The pipeline

def default_pre_s(f1_hz: float) -> float:
    """Time kept before the direct sound by default: two periods of f1, at least 5 ms."""
    return max(0.005, 2.0 / f1_hz)


def recover_ir(y: np.ndarray, sweep: Sweep, *, channels: Sequence[int] | None = None,
               reference_channel: int | None = None, n_harmonics: int = 4,
               pre_s: float | None = None, correct_drift: bool = True,
               max_length_s: float | None = None) -> ImpulseResponse:
    """Recover impulse responses from a recording of ``sweep`` (stages in the module notes).

    Parameters
    ----------
    y : ndarray, (channels, samples) or (samples,)
        The recording, full scale = 1, at the sweep's sample rate.
    sweep : Sweep
        The sweep that was played (rebuilt from its sidecar).
    channels : sequence of int, optional
        0-based recording channels to return (default: all but the reference).
    reference_channel : int, optional
        0-based loopback channel: the timing (latency, drift, alignment) comes from it exactly,
        and latencies are reported relative to its arrival.
    n_harmonics : int, >= 0
        Harmonic responses kept (orders 2 … n_harmonics + 1).
    pre_s : float, >= 0, s, optional
        Time kept before the direct sound. The default, two periods of f1 (at least 5 ms),
        keeps the ringing of the zero-phase band limit at f1, which reaches as far before the
        direct sound as after it; cutting it off would bend the magnitude response near f1 by
        about a decibel.
    correct_drift : bool
        Estimate and remove clock drift (turn off only to see its effect).
    max_length_s : float, optional
        Cap on the response length after the direct sound.

    Returns
    -------
    ImpulseResponse

    Raises
    ------
    AudioFileError
        If the recording is shorter than one sweep, holds NaN/Inf, or no sweep is found in it.
    ParameterError
        If a channel number is out of range, or ``pre_s``, ``max_length_s`` or ``n_harmonics``
        is out of its range.
    """
    spec = sweep.spec
    fs = spec.fs
    y2 = np.asarray(y, dtype=np.float64)
    if y2.ndim == 1:
        y2 = y2[np.newaxis, :]
    if y2.ndim != 2 or y2.shape[1] == 0:
        raise AudioFileError("the recording is empty; record again")
    if not np.all(np.isfinite(y2)):
        raise AudioFileError("the recording holds NaN or Inf samples; re-export it from the recorder")
    n_ch, n_rec = y2.shape
    if n_rec < spec.n_sweep:
        raise AudioFileError(
            f"the recording ({n_rec / fs:.2f} s) is shorter than one sweep "
            f"({spec.duration_s:g} s); record the whole sweep file and its tail")
    if pre_s is None:
        pre_s = default_pre_s(spec.f1_hz)
    check_nonnegative(pre_s, "pre", unit="s")
    if pre_s > MAX_PRE_S:
        raise ParameterError(f"pre={pre_s:g} s: at most {MAX_PRE_S:g} s can be kept before the "
                             "direct sound (the default keeps two periods of f1); give less")
    if max_length_s is not None:
        check_positive(max_length_s, "max_length", unit="s")
    if not (isinstance(n_harmonics, int) and 0 <= n_harmonics <= MAX_HARMONICS):
        raise ParameterError(
            f"n_harmonics={n_harmonics!r} must be a whole number from 0 to {MAX_HARMONICS}; give "
            "e.g. 4 (orders 2-5) or 0 for none")
    for c in ([] if channels is None else list(channels)) + (
            [] if reference_channel is None else [reference_channel]):
        if not 0 <= c < n_ch:
            raise ParameterError(
                f"channel {c + 1} does not exist: the recording has {n_ch} channel(s); "
                f"choose one of 1..{n_ch}")
    if not np.any(y2):
        raise AudioFileError(
            "no sweep found in the recording: it is digital silence (every sample is zero), "
            "so nothing reached the input; check that the microphone is connected, the right "
            "input is chosen and its gain is up, then record again")
    if channels is None:
        channels = [c for c in range(n_ch) if c != reference_channel] or [0]
    channels = list(channels)
    warnings: list[str] = []
    n_clipped = int(np.count_nonzero(np.abs(y2[channels]) >= CLIP_LEVEL))
    if n_clipped:
        warnings.append(
            f"{n_clipped} recorded samples are at or beyond full scale (clipped); lower the "
            "playback level or the input gain and record again")
    if reference_channel is not None:
        timing_row = reference_channel
    else:
        energy = np.sum(y2[channels] ** 2, axis=-1)
        timing_row = channels[int(np.argmax(energy))]

    # 0-2: deconvolve, locate the sweeps, the drift and the direct sounds
    d = deconvolve_rows(y2, sweep, channels + ([] if reference_channel is None
                                               else [reference_channel]), first=timing_row)
    d_t = d[timing_row]
    starts = locate_sweeps(d_t, sweep, n_rec)
    if starts.size < spec.repeats:
        warnings.append(
            f"only {starts.size} of the {spec.repeats} sweeps were found in the recording; "
            "the response is the average of those")
    tm = estimate_timing(d_t, starts, sweep, correct_drift=correct_drift)
    eps = tm.eps
    stretch = 1.0 + eps

    # 3: the window
    pre = int(round(pre_s * fs))
    win = plan_window(tm, sweep, n_rec, pre=pre, n_harmonics=n_harmonics,
                      max_length_s=max_length_s)
    n_len = win.n_len
    # Drift below this leaves every sample of the window within 0.02 samples of its place.
    unstretch = abs(eps) * n_len >= 0.02

    # 4: where each band's decay meets the noise. Its 20 ms frames need no
    # sub-sample alignment nor drift correction (the drift disperses by milliseconds), so it
    # reads the repeats straight from the nominal deconvolution, integer-aligned (their
    # sample-wise median from three repeats on, so that a disturbed one cannot stretch it),
    # and the precise read-back below then processes only what is kept.
    bands = length_bands_hz(spec.f1_hz, spec.f2_hz, fs)
    n_rec_len = int(math.ceil(n_len * stretch))

    def rough(row: np.ndarray) -> np.ndarray:
        rows = [row.take(np.arange(int(round(o)), int(round(o)) + n_rec_len), mode="wrap")
                for o in win.origins]
        return np.median(rows, axis=0) if len(rows) >= 3 else np.mean(rows, axis=0)

    length = response_length(np.array([rough(d[c]) for c in channels]), fs, pre,
                             bands_hz=bands)
    n_out = min(n_len, int(length.end / stretch) + 1)

    # 5: read back each channel's kept part, leave out disturbed repeats, average
    spectra = [aligned_spectra(d[c], win.origins, n_out, sweep, eps) for c in channels]
    keep, left_out = select_repeats(spectra, fs, pre=pre, bands_hz=bands)
    for k, why in left_out:
        warnings.append(f"sweep {k} of {starts.size} was left out of the average: {why}")
    h = np.array([_finish(_mean_of(sp, keep), sp, sweep, eps, n_out, unstretch=unstretch)
                  for sp in spectra])
    del spectra

    # each channel's own direct sound (it may be far from the timing channel's); harmonics
    origins = win.origins[keep]
    radius = _search_radius(sweep, fs)
    pre_h = min(pre, int(round(HARMONIC_PRE_S * fs)))  # harmonics sit closer than pre allows
    harm_rows, arrivals, keep_h = [], [], []
    for c in channels:
        row = d[c]
        if c == timing_row:
            lo_c, wc, pc = tm.window_start, tm.window, tm.direct_in_window
        else:
            reach = int(ARRIVAL_SEARCH_S * fs)
            a = max(int(starts[0]) - reach, 0)
            p_nom = a + int(np.argmax(np.abs(row[a:int(starts[0]) + reach])))
            lo_c = p_nom - 2 * radius
            wc = read_back(row, np.array([float(lo_c)]), 4 * radius, sweep, eps,
                               unstretch=False)
            pc = _relocate(np.abs(wc), 2 * radius, sweep, fs)
        arrivals.append(lo_c + _fine_position(wc, pc))
        hh = []
        for order in range(2, n_harmonics + 2):
            adv = spec.rate_constant_s * fs * math.log(order) * stretch
            # from pre_h before its direct sound to where the next lower order begins, less
            # the pre-time over which that one's band limit rings (as long as the linear's)
            room = spec.rate_constant_s * fs * math.log(order / (order - 1)) - pre
            n_keep = min(n_out - (pre - pre_h), pre_h + max(int(room), 0))
            hn = np.zeros(n_out)
            # harmonic responses serve the distortion figures: left on the recorder's clock
            hn[pre - pre_h:pre - pre_h + n_keep] = read_back(
                row, origins + (pre - pre_h) * stretch - adv, n_keep, sweep, eps,
                unstretch=False)
            hh.append(hn)
            if c == channels[0]:
                keep_h.append(n_keep)
        harm_rows.append(hh)
    harm = (np.asarray(harm_rows) if n_harmonics else np.zeros((len(channels), 0, n_out)))

    # figures: latency, noise, peak-to-noise, harmonic levels
    from measure.decay import lundeby

    latency, pnr, noise_dbfs, harmonics = [], [], [], []
    ref_arrival = (tm.fine[0] / stretch - spec.n_lead) / fs
    for i in range(len(channels)):
        arrival = (arrivals[i] / stretch - spec.n_lead) / fs
        latency.append(arrival - ref_arrival if reference_channel is not None else arrival)
        # the noise of the averaged response itself (the length stage saw a rougher one)
        nf = lundeby(h[i, pre:], fs)
        noise_pow = (nf.noise_power if nf.ok and nf.noise_floor_found
                     else float(np.mean(h[i, -max(n_out // 10, 1):] ** 2))) + 1e-300
        peak_pow = float(np.max(h[i] ** 2))
        pnr.append(10 * math.log10(max(peak_pow, 1e-300) / noise_pow))
        noise_dbfs.append(10 * math.log10(noise_pow))
        tail = h[i, pre + (n_out - pre) // 2:]
        psd = _noise_psd(tail, max(keep_h, default=16)) if tail.size >= 16 else None
        harmonics.append(tuple(
            _harmonic_level(h[i], harm[i, j], j + 2, sweep, pre=pre, pre_h=pre_h,
                            post=keep_h[j] - pre_h, noise=psd)
            for j in range(harm.shape[1])))
    for i, val in enumerate(pnr):
        if val < 30.0:
            warnings.append(
                f"channel {channels[i] + 1}: the peak-to-noise ratio is only {val:.1f} dB; raise "
                "the level step by step, use a longer sweep or more repeats, or quieten the room")
    gap_needed = None
    if not all(length.noise_reached):
        lead_end = max(int(tm.fine[0]) - int(ARRIVAL_SEARCH_S * fs), 0)
        leadin = [y2[c, :lead_end] for c in channels]
        if win.limited_by.startswith("the length limit"):
            advice = "raise the length limit"
        else:
            gap_needed = _gap_needed_s(length, leadin, sweep, win, len(keep), n_harmonics,
                                       latency[0] if reference_channel is None else
                                       (arrivals[0] / stretch - spec.n_lead) / fs, bands)
            advice = ("make the sweep again with a longer gap"
                      + (f" (at least --gap {gap_needed:g})" if gap_needed else "")
                      + " so that the decay can reach the noise")
        for i, bad in enumerate(length.unreached):
            if bad:
                warnings.append(
                    f"channel {channels[i] + 1}: the response ends {win.n_after / fs:.2f} s "
                    f"after the direct sound, at {win.limited_by}, before its decay reaches "
                    f"the noise (in the {', '.join(bad)} band{'s' if len(bad) > 1 else ''}); "
                    f"the figures that need the rest are left out; {advice}")
    return ImpulseResponse(
        h=h, fs=fs, channels=tuple(channels), onset_index=pre, latency_s=tuple(latency),
        drift_ppm=eps * 1e6, peak_to_noise_db=tuple(pnr), noise_dbfs=tuple(noise_dbfs),
        harmonics=tuple(harmonics), harmonic_h=harm, n_averaged=len(keep),
        n_clipped=n_clipped, reference_channel=reference_channel,
        reference_latency_s=ref_arrival if reference_channel is not None else None,
        warnings=tuple(warnings), f1_hz=spec.f1_hz, f2_hz=spec.f2_hz,
        available_s=win.n_after / fs, limited_by=win.limited_by,
        noise_reached=length.noise_reached, unreached_bands=length.unreached,
        gap_needed_s=gap_needed, repeats_found=int(starts.size),
        repeats_left_out=tuple(left_out), origins=np.asarray(origins, dtype=np.float64))
