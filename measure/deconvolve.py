"""Recording → impulse response: find the sweeps, remove clock drift, deconvolve, average.

Steps (all in :func:`recover_ir`):

1. Deconvolve the whole recording with the regularised inverse of one sweep
   (:func:`measure.sweep.inverse_spectrum`). Every sweep in the recording turns into an impulse
   response at its own position; its harmonic-distortion responses land L·ln N earlier [1]_.
2. Find the sweeps: the strongest peak, then its neighbours one sweep period apart (with room
   for up to ±300 ppm of drift); a recording with no peak well above its own noise (judged
   where a whole sweep fits in the recording, see :data:`DETECTION_DB`) has no sweep.
3. Estimate the drift ε between the player's and the recorder's clocks. With several sweeps it
   follows from their spacing (sub-sample cross-correlation of consecutive responses); with one
   it follows from the direct sound's group delay, which a drifting clock makes grow as
   τ(f) = τ0 + ε·L·ln(f/f1) (measurement.md §1.6, derived there and verified numerically).
4. Undo the drift in a window around each response: the dispersion that dividing by the nominal
   sweep leaves is an all-pass whose phase follows in closed form from the sweep's stationary
   phase (:func:`_dispersion_correction`); the stretch of the room response is undone by reading
   the window's spectrum back on a scaled frequency grid (a chirp-z transform); and every repeat
   is advanced by its fractional start with a linear phase, so the repeats are averaged
   coherently to a fraction of a sample. Only the windows are processed, so the whole recording
   is transformed once.
5. Estimate the noise floor from the end of the window, the peak-to-noise ratio, the level of
   each harmonic response relative to the linear one, and trim the response a little before the
   direct sound and well into the noise.

References
----------
.. [1] A. Farina, "Simultaneous measurement of impulse response and distortion with a
   swept-sine technique", AES 108th Convention, 2000, preprint 5093.
.. [2] S. Müller, P. Massarani, "Transfer-function measurement with sweeps", J. Audio Eng. Soc.
   49(6), 443–471, 2001.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from measure._dsp import parabolic_peak
from measure._validate import check_nonnegative, check_positive
from measure.errors import AudioFileError, ParameterError
from measure.sweep import Sweep, inverse_spectrum

__all__ = ["HarmonicDistortion", "ImpulseResponse", "recover_ir", "IR_FORMAT"]

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
#: Time kept before the direct sound of each harmonic response.
HARMONIC_PRE_S = 0.005
#: Group-delay fit band for the single-sweep drift estimate (measurement.md §1.6).
DRIFT_FIT_BAND_HZ = (1500.0, 14000.0)


@dataclass(frozen=True, slots=True, eq=False)
class HarmonicDistortion:
    """Level of one harmonic's response relative to the linear response.

    Attributes
    ----------
    order : int
        2 for the second harmonic, ...
    advance_s : float
        How far before the linear response it landed (L·ln order).
    level_db : float
        Energy ratio harmonic / fundamental over the excited band, in dB.
    percent : float
        The same as an amplitude ratio in percent (harmonic distortion at the sweep's level).
    """

    order: int
    advance_s: float
    level_db: float
    percent: float

    def to_dict(self) -> dict[str, Any]:
        return {"order": self.order, "advance_s": self.advance_s, "level_db": self.level_db,
                "percent": self.percent}


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
        Per channel: peak power over the mean noise power at the end of the window, in dB.
    noise_dbfs : tuple of float
        Per channel: RMS noise level of the response, dB re full scale.
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

    def __post_init__(self) -> None:
        self.h.setflags(write=False)
        self.harmonic_h.setflags(write=False)

    @property
    def n_channels(self) -> int:
        return int(self.h.shape[0])

    def to_dict(self) -> dict[str, Any]:
        """The figures of the recovery (no samples), as written to IR.json."""
        per_channel = [
            {"capture_channel": c + 1, "latency_s": lat, "peak_to_noise_db": pnr,
             "noise_dbfs": nz, "harmonic_distortion": [hd.to_dict() for hd in hds]}
            for c, lat, pnr, nz, hds in zip(self.channels, self.latency_s,
                                            self.peak_to_noise_db, self.noise_dbfs,
                                            self.harmonics, strict=True)
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
            "n_clipped_samples": self.n_clipped,
            "reference_channel": (None if self.reference_channel is None
                                  else self.reference_channel + 1),
            "reference_latency_s": self.reference_latency_s,
            "channels": per_channel,
            "warnings": list(self.warnings),
        }


def _fft_len(n: int) -> int:
    from scipy.fft import next_fast_len

    return next_fast_len(n, real=True)


def _noise_rms(d: np.ndarray) -> float:
    """Robust RMS of a deconvolved recording (median absolute deviation of Gaussian noise).

    Every 7th sample is enough for the median and keeps this cheap on long recordings.
    """
    return float(np.median(np.abs(d[::7]))) / 0.6745 + 1e-300


def _find_sweeps(d: np.ndarray, sweep: Sweep, n_recorded: int) -> np.ndarray:
    """Integer positions of the linear responses of the sweeps, in order; raises if none."""
    spec = sweep.spec
    env = np.abs(d[:n_recorded])  # linear responses lie at lags 0 … n_recorded − 1
    p = int(np.argmax(env))
    peak = float(env[p])
    # the lags at which a whole sweep was recorded, and at least MIN_NOISE_LAGS_S of them
    n_noise = min(max(n_recorded - spec.n_sweep + 1, int(MIN_NOISE_LAGS_S * spec.fs)), n_recorded)
    noise = _noise_rms(d[:n_noise])
    if not peak > noise * 10.0 ** (DETECTION_DB / 20.0):
        raise AudioFileError(
            f"no sweep found in the recording (its strongest response is only "
            f"{20 * math.log10(peak / noise):.1f} dB above the noise, {DETECTION_DB:g} dB needed); "
            "check that the microphone is connected and the right input is chosen, the "
            "loudspeaker is on, and the recording matches this sweep file")
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


def default_pre_s(f1_hz: float) -> float:
    """Time kept before the direct sound by default: two periods of f1, at least 5 ms."""
    return max(0.005, 2.0 / f1_hz)


def recover_ir(y: np.ndarray, sweep: Sweep, *, channels: Sequence[int] | None = None,
               reference_channel: int | None = None, n_harmonics: int = 4,
               pre_s: float | None = None, correct_drift: bool = True,
               max_length_s: float | None = None) -> ImpulseResponse:
    """Recover impulse responses from a recording of ``sweep``.

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
    if max_length_s is not None:
        check_positive(max_length_s, "max_length", unit="s")
    if not (isinstance(n_harmonics, int) and n_harmonics >= 0):
        raise ParameterError(
            f"n_harmonics={n_harmonics!r} must be a whole number >= 0; give e.g. 4 (orders 2-5) "
            "or 0 for none")
    for c in ([] if channels is None else list(channels)) + (
            [] if reference_channel is None else [reference_channel]):
        if not 0 <= c < n_ch:
            raise ParameterError(
                f"channel {c + 1} does not exist: the recording has {n_ch} channel(s); "
                f"choose one of 1..{n_ch}")
    if channels is None:
        channels = [c for c in range(n_ch) if c != reference_channel] or [0]
    channels = list(channels)
    warnings: list[str] = []
    used = sorted(set(channels) | ({reference_channel} if reference_channel is not None else set()))
    n_clipped = int(np.count_nonzero(np.abs(y2[channels]) >= CLIP_LEVEL))
    if n_clipped:
        warnings.append(
            f"{n_clipped} recorded samples are at or beyond full scale (clipped); lower the "
            "playback level or the input gain and record again")

    from scipy.fft import irfft, rfft

    n_fft = _fft_len(n_rec + spec.n_sweep + 1)
    rows = {c: i for i, c in enumerate(used)}
    Y = rfft(y2 if used == list(range(n_ch)) else y2[used], n_fft, axis=-1)
    if reference_channel is not None:
        timing = reference_channel
    else:
        energy = np.sum(y2[channels] ** 2, axis=-1)
        timing = channels[int(np.argmax(energy))]

    # 1–2: locate the sweeps with the nominal inverse
    inv = inverse_spectrum(spec, n_fft)
    Y[rows[timing]] *= inv  # each row is deconvolved once, in place
    d = {timing: irfft(Y[rows[timing]], n_fft)}
    d_t = d[timing]
    for c in channels:  # every channel deconvolved now, so the spectra can go
        if c not in d:
            Y[rows[c]] *= inv
            d[c] = irfft(Y[rows[c]], n_fft)
    del Y, inv
    starts = _find_sweeps(d_t, sweep, n_rec)
    if starts.size < spec.repeats:
        warnings.append(
            f"only {starts.size} of the {spec.repeats} sweeps were found in the recording; "
            "the response is the average of those")

    # 3: drift, then the direct sound's fine position on the drift-corrected response
    eps = 0.0
    if correct_drift:
        if starts.size >= 2:
            eps = _drift_from_spacing(d_t, starts, spec.n_period, fs)
        else:
            eps = _drift_from_phase(d_t, _relocate(np.abs(d_t), int(starts[0]), sweep, fs),
                                    sweep, 0.0)
    radius = _search_radius(sweep, fs)
    lo = int(starts[0]) - 2 * radius
    for attempt in range(3):  # w always belongs to the final eps
        w = _read_average(d_t, np.array([float(lo)]), 4 * radius, sweep, eps, unstretch=False)
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

    pre = int(round(pre_s * fs))
    # the window after the direct sound: to the next sweep's earliest harmonic, or the end
    n_h = max(n_harmonics, 1)
    gap_inner = spec.n_period - spec.rate_constant_s * fs * math.log(n_h + 1) - pre - 0.01 * fs
    after_last = (n_rec - fine[-1]) / stretch - spec.n_sweep - 0.001 * fs
    n_after = int(min(gap_inner if starts.size > 1 else np.inf, after_last))
    if max_length_s is not None:
        n_after = min(n_after, int(max_length_s * fs))
    if n_after < int(0.05 * fs):
        raise AudioFileError(
            f"the recording keeps only {max(n_after, 0) / fs * 1000:.0f} ms after the last sweep; "
            "record the whole file including the silence after the sweep (use a longer --gap)")
    n_len = pre + n_after
    # Drift below this leaves every sample of the window within 0.02 samples of its place.
    unstretch = abs(eps) * n_len >= 0.02

    # 4: read each channel's responses onto the player's clock and average the sweeps
    origins = fine - pre * stretch
    h_rows, harm_rows, arrivals = [], [], []
    # The harmonic responses sit closer together than the linear one's pre-time allows.
    pre_h = min(pre, int(round(HARMONIC_PRE_S * fs)))
    keep: list[int] = []
    for c in channels:
        row = d[c]
        h_rows.append(_read_average(row, origins, n_len, sweep, eps, unstretch=unstretch,
                                    trim_pre=pre))
        # the channel's own direct sound: it may be far from the timing channel's
        if c == timing:
            lo_c, wc, pc = lo, w, p_w
        else:
            reach = int(ARRIVAL_SEARCH_S * fs)
            a = max(int(starts[0]) - reach, 0)
            p_nom = a + int(np.argmax(np.abs(row[a:int(starts[0]) + reach])))
            lo_c = p_nom - 2 * radius
            wc = _read_average(row, np.array([float(lo_c)]), 4 * radius, sweep, eps,
                               unstretch=False)
            pc = _relocate(np.abs(wc), 2 * radius, sweep, fs)
        arrivals.append(lo_c + _fine_position(wc, pc))
        hh = []
        for order in range(2, n_harmonics + 2):
            adv = spec.rate_constant_s * fs * math.log(order) * stretch
            # from pre_h before its direct sound to where the next lower order begins, less
            # the pre-time over which that one's band limit rings (as long as the linear's)
            room = spec.rate_constant_s * fs * math.log(order / (order - 1)) - pre
            n_keep = min(n_len - (pre - pre_h), pre_h + max(int(room), 0))
            hn = np.zeros(n_len)
            # harmonic responses serve the distortion figures: left on the recorder's clock
            hn[pre - pre_h:pre - pre_h + n_keep] = _read_average(
                row, origins + (pre - pre_h) * stretch - adv, n_keep, sweep, eps,
                unstretch=False)
            hh.append(hn)
            keep.append(n_keep)
        harm_rows.append(hh)
    n_len = min(r.size for r in h_rows)
    h = np.asarray([r[:n_len] for r in h_rows])
    harm = (np.asarray(harm_rows)[:, :, :n_len] if n_harmonics
            else np.zeros((len(channels), 0, n_len)))

    # 5: noise, peak-to-noise, trimming, harmonic levels
    latency, pnr, noise_dbfs, harmonics = [], [], [], []
    ref_arrival = (p0_fine / stretch - spec.n_lead) / fs
    for i in range(len(channels)):
        arrival = (arrivals[i] / stretch - spec.n_lead) / fs
        latency.append(arrival - ref_arrival if reference_channel is not None else arrival)
        tail = h[i, -max(int(0.2 * (n_len - pre)), 1):]
        noise_pow = float(np.mean(tail**2)) + 1e-300
        peak_pow = float(np.max(h[i] ** 2))
        pnr.append(10 * math.log10(peak_pow / noise_pow))
        noise_dbfs.append(10 * math.log10(noise_pow))
        harmonics.append(tuple(
            _harmonic_level(h[i], harm[i, j], j + 2, sweep, pre=pre, pre_h=pre_h,
                            post=keep[j] - pre_h)
            for j in range(harm.shape[1])))
    end = _trim_end(h, pre, fs)
    h = h[:, :end]
    harm = harm[:, :, :end]
    for i, val in enumerate(pnr):
        if val < 30.0:
            warnings.append(
                f"channel {channels[i] + 1}: the peak-to-noise ratio is only {val:.1f} dB; raise "
                "the level step by step, use a longer sweep or more repeats, or quieten the room")
    return ImpulseResponse(
        h=h, fs=fs, channels=tuple(channels), onset_index=pre, latency_s=tuple(latency),
        drift_ppm=eps * 1e6, peak_to_noise_db=tuple(pnr), noise_dbfs=tuple(noise_dbfs),
        harmonics=tuple(harmonics), harmonic_h=harm, n_averaged=int(starts.size),
        n_clipped=n_clipped, reference_channel=reference_channel,
        reference_latency_s=ref_arrival if reference_channel is not None else None,
        warnings=tuple(warnings))


def _search_radius(sweep: Sweep, fs: int) -> int:
    """How far drift can move the direct sound in a response deconvolved without correction."""
    spec = sweep.spec
    return int(0.002 * fs + MAX_DRIFT_PPM * 1e-6 * spec.rate_constant_s * fs
               * (math.log(spec.f2_hz / spec.f1_hz) + 1.0))


def _dispersion_correction(n_fft: int, sweep: Sweep, eps: float) -> np.ndarray:
    """rfft-domain factor X/X_s that turns a nominal deconvolution into a drift-free one.

    A recorder running ε fast records the sweep with rate constant L(1+ε) samples and start
    frequency f1/(1+ε). By stationary phase the spectrum of an exponential sweep has phase
    ψ(ν) = 2πL(ν − ν1 − ν·ln(ν/ν1)) (ν in cycles per sample, L in samples) [1]_, so dividing
    the recording by the nominal sweep instead of the stretched one leaves the factor
    X_s/X = √(1+ε)·exp(jΔψ), Δψ(ν) = 2πLν[ε − ε·ln(ν/ν1) − (1+ε)·ln(1+ε)] (derived), whose
    group delay is the ε·L·(ln(ν/ν1)+1) of measurement.md §1.6. This returns its inverse.
    """
    spec = sweep.spec
    L = spec.rate_constant_s * spec.fs
    nu1 = spec.f1_hz / spec.fs
    nu = np.arange(n_fft // 2 + 1) / n_fft
    with np.errstate(divide="ignore"):
        lnr = np.log(np.maximum(nu, 1e-12) / nu1)
    dpsi = 2 * np.pi * L * nu * (eps - eps * lnr - (1 + eps) * math.log1p(eps))
    return np.exp(-1j * dpsi) / math.sqrt(1.0 + eps)


def _read_average(row: np.ndarray, origins: np.ndarray, n_out: int, sweep: Sweep, eps: float,
                  *, unstretch: bool, trim_pre: int | None = None) -> np.ndarray:
    """Average the windows of ``row`` that start at fractional ``origins``, drift removed.

    ``row`` is a nominal deconvolution. Each window is advanced by its fractional start with a
    linear phase (exact at every frequency), the windows are averaged as spectra, the drift's
    dispersion is undone (:func:`_dispersion_correction`) and, with ``unstretch``, the average is
    read back at steps of 1+ε samples by a chirp-z transform (the DFT evaluated on a scaled
    frequency grid), which undoes the stretch of the room response without the high-frequency
    loss of an interpolator. Negative positions wrap to the end of ``row`` (negative lags).
    With ``trim_pre`` (the samples before the direct sound) the result stops well into the noise
    (:func:`_trim_end`), judged before the costlier unstretching.
    """
    from scipy.fft import irfft, next_fast_len, rfft

    stretch = 1.0 + eps
    margin = int(_search_radius(sweep, sweep.fs)) + 64
    n_seg = int(math.ceil(n_out * stretch)) + 2 * margin
    n_fft = next_fast_len(n_seg + margin, real=True)
    k = np.arange(n_fft // 2 + 1)
    acc = np.zeros(k.size, dtype=np.complex128)
    for o in origins:
        base = int(math.floor(o))
        frac = o - base
        seg = row.take(np.arange(base - margin, base - margin + n_seg), mode="wrap")
        S = rfft(seg, n_fft)
        if frac:
            S *= np.exp(2j * np.pi * k * frac / n_fft)
        acc += S
    acc /= len(origins)
    if eps:
        acc *= _dispersion_correction(n_fft, sweep, eps)
    if trim_pre is not None or not unstretch:
        t_rec = irfft(acc, n_fft)[margin:margin + n_out]
        if trim_pre is not None:
            n_out = min(n_out, int(_trim_end(t_rec[np.newaxis, :], trim_pre, sweep.fs) / stretch) + 1)
        if not unstretch:
            return t_rec[:n_out]
    # u[m] = (1/N)·Re Σ_k c_k·exp(j2πk(margin + m·stretch)/N), c_k = 2·S_k (1 at DC and Nyquist)
    c = acc * np.exp(2j * np.pi * k * margin / n_fft)
    c[1:] *= 2.0
    if n_fft % 2 == 0:
        c[-1] *= 0.5
    return _chirp_sum(c, n_out, 2 * np.pi * stretch / n_fft).real / n_fft


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


def _trim_end(h: np.ndarray, pre: int, fs: int) -> int:
    """Keep the response until well into the noise: twice the time it takes to reach it."""
    block = max(int(0.01 * fs), 1)
    n = h.shape[1]
    ends = []
    for row in h:
        body = row[pre:]
        nb = body.size // block
        if nb < 10:
            return n
        levels = 10 * np.log10(np.mean(body[:nb * block].reshape(nb, block) ** 2, axis=1) + 1e-300)
        noise = float(np.mean(levels[-max(nb // 5, 1):]))
        i_peak = int(np.argmax(levels))
        below = np.nonzero(levels[i_peak:] <= noise + 3.0)[0]
        if below.size == 0:
            return n
        cross = (i_peak + int(below[0])) * block
        ends.append(pre + max(2 * cross, cross + int(0.2 * fs)))
    return int(min(n, max(ends)))


def _harmonic_level(h1: np.ndarray, hn: np.ndarray, order: int, sweep: Sweep, *, pre: int,
                    pre_h: int, post: int) -> HarmonicDistortion:
    """Energy of harmonic ``order`` at N·f over the fundamental's at f, over the excited band.

    ``h1`` and ``hn`` have their direct sounds at index ``pre``; ``hn`` holds data from
    ``pre − pre_h`` on. Both are compared up to ``post`` samples (at most 0.5 s) after their
    direct sounds, so a room's reverberation weighs equally in both; ``h1`` keeps all its time
    before the direct sound, where its band limit at f1 rings.
    """
    spec = sweep.spec
    fs = spec.fs
    post = max(min(post, int(0.5 * fs), h1.size - pre), 1)
    H1 = np.abs(np.fft.rfft(h1[:pre + post])) ** 2
    HN = np.abs(np.fft.rfft(hn[pre - pre_h:pre + post])) ** 2
    f1_grid = np.fft.rfftfreq(pre + post, 1.0 / fs)
    f = np.fft.rfftfreq(pre_h + post, 1.0 / fs)
    top = min(spec.f2_hz, 0.95 * fs / 2) / order
    lo = 2.0 * spec.f1_hz
    grid = np.geomspace(lo, top, 200) if top > lo * 1.5 else np.array([])
    adv = spec.harmonic_advance_s(order)
    if grid.size == 0:
        return HarmonicDistortion(order, adv, float("nan"), float("nan"))
    p1 = np.interp(grid, f1_grid, H1)
    pn = np.interp(order * grid, f, HN)
    ratio = float(np.sum(pn)) / (float(np.sum(p1)) + 1e-300)
    level_db = 10 * math.log10(ratio + 1e-300)
    return HarmonicDistortion(order, adv, level_db, 100.0 * math.sqrt(ratio))
