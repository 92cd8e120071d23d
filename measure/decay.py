"""Decay analysis of a band-filtered impulse response: Schroeder, Lundeby, EDT/T20/T30.

Pipeline for one band (see :func:`analyze_decay`):

1. The IR start is the ISO 3382-1:2009 A.3.4 onset of the *broadband* IR (:func:`onset_index`):
   the first sample whose energy comes within 20 dB of the maximum.
2. The noise floor, the truncation point and the tail compensation come from the iterative
   method of Lundeby, Vigran, Bietz & Vorländer (1995) (:func:`lundeby`).
3. The Schroeder backward integral runs from the onset to the truncation point, plus the
   compensation term (ISO 3382-1:2009 5.3.3, Eq. (3)), with the noise's mean power subtracted
   from every sample before summing (:func:`schroeder`). Truncation plus compensation alone
   left T20 about 3 % long at 38 dB of decay range (the noise between the −25 dB point and
   the crosspoint still counts); with the subtraction the bias is below 2 %.
4. EDT, T20 and T30 are least-squares fits over 0…−10, −5…−25 and −5…−35 dB
   (ISO 3382-1 A.2.2, ISO 3382-2 clause 6), extrapolated to 60 dB.
5. Honesty checks: each figure needs its fit range plus a margin above the noise
   (EDT 20 dB, T20 35 dB, T30 45 dB of decay above the noise, ISO 3382-1 5.3.3: the bottom of
   the evaluation range at least 10 dB above the noise); the band filter must not dominate
   (B·T > 4 for time-reversed filtering, B·T > 16 for causal, ISO 3382-2 7.3); the decay's
   non-linearity ξ and curvature C (ISO 3382-2 Annex B) are reported and flagged when large.
   A figure that fails a check is ``None`` and a flag says why.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from measure._validate import check_choice, check_fs, check_signal
from measure.errors import ParameterError

__all__ = [
    "DECAY_CONSTANT",
    "FIT_RANGES_DB",
    "REQUIRED_RANGE_DB",
    "ENERGY_RANGE_DB",
    "JND_DECAY_RELATIVE",
    "NOISE_SCATTER_LIMIT_JND",
    "noise_scatter",
    "CURVATURE_LIMIT_PERCENT",
    "XI_LIMIT_PERMILLE",
    "NoiseFloor",
    "DecayFigures",
    "onset_index",
    "schroeder",
    "lundeby",
    "decay_range_db",
    "range_text",
    "fit_range",
    "decay_line",
    "fit_decay",
    "analyze_decay",
]

#: 6·ln 10: the energy of an exponential decay with reverberation time T falls as
#: exp(-DECAY_CONSTANT·t/T) (60 dB in T; derived from the definition of T).
DECAY_CONSTANT: float = 6.0 * math.log(10.0)

#: Fit ranges on the Schroeder curve, dB (ISO 3382-1:2009 A.2.2; ISO 3382-2:2008 clause 6).
FIT_RANGES_DB: dict[str, tuple[float, float]] = {
    "edt": (0.0, -10.0),
    "t20": (-5.0, -25.0),
    "t30": (-5.0, -35.0),
}

#: Decay above the noise each figure needs, dB: the bottom of its fit range at least 10 dB
#: above the noise (ISO 3382-1:2009 5.3.3: 35 dB for T20, 45 dB for T30; EDT by the same rule).
REQUIRED_RANGE_DB: dict[str, float] = {"edt": 20.0, "t20": 35.0, "t30": 45.0}

#: Decay above the noise that the energy figures (C50, C80, D50, Ts, DRR) and the STI need, dB:
#: the same 20 dB as EDT, whose range is the first 10 dB of the same curve (the bottom of the
#: range 10 dB above the noise, as ISO 3382-1:2009 5.3.3 asks of the decay times). With less, the
#: band's reverberant decay stands only a few dB above the noise and the noise-floor search
#: reads the direct sound's fall as the decay (measured: a 1.5 s decay read as 0.11 s at 16 dB,
#: giving C50 +27 dB where the response's true C50 was +1 dB).
ENERGY_RANGE_DB: float = 20.0

#: The just-noticeable difference of a decay time: 5 % (ISO 3382-1:2009 Table A.1 gives it for
#: EDT; T20 and T30 borrow it by convention, measurement.md §2.3).
JND_DECAY_RELATIVE: float = 0.05

#: Noise scatter of a decay figure. In a band of width B the background noise left in the
#: response perturbs its Schroeder curve at the level −D dB (energy E(t_D) = E0·10^(−D/10))
#: by the cross term 2·Σ s·n of the decay and the noise, whose standard deviation is
#: 2·√(E(t_D)·N·fs/(2B)) for noise of power N per sample (derived: band-limited noise has
#: about 2B degrees of freedom per second). The relative level error ε_D = 2·√(N·fs·10^(D/10)
#: / (2B·E0)), i.e. 4.34·ε_D dB at the bottom of a fit range spanning S dB, moves the decay
#: time by about 4.34·ε_D / S (for a uniform decay; see _time_error). Checked by Monte Carlo:
#: for decaying noise in the 63 Hz and 1 kHz octaves (T 1-3 s, 25-40 dB above band noise, 14
#: realisations each) the observed scatter of EDT was 0.3-2 times the estimate and that of T20
#: and T30 below it; on three recovered matrix takes (12 noise realisations each) EDT's was
#: 0.4-0.5 times it. Wherever the observed scatter exceeded half a JND, so did the estimate.
#: A figure whose estimated scatter exceeds half its JND (NOISE_SCATTER_LIMIT_JND) is left out:
#: the ISO range rule does not see the bandwidth, and in the narrow low bands noise near that
#: rule leaves EDT uncertain by several percent (measured: a 63 Hz octave 22 dB above rumble
#: noise, EDT off by 3 % ± 7 % over 12 noise realisations).
NOISE_SCATTER_LIMIT_JND: float = 0.5
#: The level error δL = 4.34·ε at the bottom of a fit range moves the point where the curve
#: crosses it by δL/|slope| there, and the decay time by that over the time the range spans:
#: u = δL / (|slope_bottom|·(t_bottom − t_top)) (derived; δL/S for a uniform decay, much more
#: when a strong direct sound drops the curve at once onto a shallow reverberant slope).


def _time_error(curve_db: np.ndarray, fs: int, hi_db: float, lo_db: float, dl_db: float
                ) -> float:
    """Relative error of a decay time fitted between ``hi_db`` and ``lo_db`` on ``curve_db``
    when the curve's level at the bottom is off by ``dl_db`` (see the notes above)."""
    top = int(np.argmax(curve_db <= hi_db))
    below = np.nonzero(curve_db <= lo_db)[0]
    bottom = int(below[0]) if below.size else curve_db.shape[0] - 1
    w = max(int(0.005 * fs), (bottom - top) // 10, 1)  # a tenth of the range: smooth enough
    a, b = max(bottom - w, 0), min(bottom + w, curve_db.shape[0] - 1)
    slope = abs(float(curve_db[b] - curve_db[a])) / max((b - a) / fs, 1.0 / fs)
    span_s = (bottom - top) / fs
    if not (slope > 0 and span_s > 0):
        return math.inf
    return dl_db / (slope * span_s)


def noise_scatter(noise_power: float, energy: float, bandwidth_hz: float, fs: int,
                  level_db: float) -> float:
    """Relative error ε (1 σ) of a band's Schroeder curve at ``level_db`` (< 0, re its start)
    that its noise causes (see the notes above :data:`NOISE_SCATTER_LIMIT_JND`).

    ``noise_power`` is per sample, ``energy`` the band's (compensated) Σ h² from its start.
    """
    if not (energy > 0 and bandwidth_hz > 0) or noise_power <= 0:
        return 0.0
    return 2.0 * math.sqrt(noise_power * 10.0 ** (-level_db / 10.0) * fs
                           / (2.0 * bandwidth_hz * energy))


#: |C| above this is flagged as a non-exponential decay (ISO 3382-2:2008 Annex B: "above 10 %
#: the decay is suspect").
CURVATURE_LIMIT_PERCENT: float = 10.0

#: ξ above this is flagged (ISO 3382-2:2008 Annex B gives 0–5 ‰ as typical; twice that is
#: common practice for "look at this decay").
XI_LIMIT_PERMILLE: float = 10.0

#: Minimum B·T per filtering mode (ISO 3382-2:2008 7.3 and note).
BT_MIN: dict[str, float] = {"reversed": 4.0, "causal": 16.0}

_NAMES = {"edt": "EDT", "t20": "T20", "t30": "T30"}


def onset_index(h: np.ndarray, fs: int) -> int:
    """Index of the start of an impulse response by the ISO 3382-1 onset rule.

    ISO 3382-1:2009 A.3.4: the start is where the response first rises significantly above the
    background, and not less than 20 dB below the maximum. This returns the first sample whose
    energy ``h**2`` is within 20 dB of the maximum of ``h**2``.

    Parameters
    ----------
    h : ndarray, shape (n,)
        Broadband impulse response.
    fs : int, > 0, Hz

    Raises
    ------
    ParameterError
        If ``h`` is empty, not finite, or all zero.

    Examples
    --------
    >>> onset_index(np.array([0.0, 0.01, 0.2, 1.0, 0.5]), 48000)
    2
    """
    h = check_signal(h, "h", ndim=(1,))
    check_fs(fs)
    e = h * h
    peak = float(e.max())
    if not (peak > 0):
        raise ParameterError("the impulse response is all zero; record or recover it again")
    return int(np.argmax(e >= peak * 0.01))


def schroeder(h: np.ndarray, *, stop_index: int | None = None,
              compensation: float = 0.0, noise_power: float = 0.0) -> np.ndarray:
    """Schroeder backward integral in dB, normalised to 0 dB at the first sample.

    ``E[n] = sum(h[n:stop]**2 - noise_power) + compensation`` and ``L = 10 lg(E/E[0])`` for
    ``0 <= n < stop`` (Schroeder 1965; with truncation and compensation per ISO 3382-1:2009
    5.3.3 Eq. (3); subtracting the mean noise power before integrating is Chu's method,
    JASA 63 (1978), citation from memory, used here together with the truncation).

    Parameters
    ----------
    h : ndarray, shape (n,)
        (Band-filtered) IR starting at its onset.
    stop_index : int, optional
        Truncation point (exclusive); default ``len(h)``.
    compensation : float, >= 0
        Energy the decay would still carry after ``stop_index``, in the units of a sum of
        ``h**2`` over samples (see :attr:`NoiseFloor.compensation`).
    noise_power : float, >= 0
        Mean ``h**2`` of the background noise, subtracted from every sample before summing.

    Returns
    -------
    ndarray, shape (stop_index,)
        Decay level in dB (−inf where the energy is exactly zero).

    Examples
    --------
    >>> L = schroeder(np.sqrt(np.exp(-np.arange(10) * np.log(10.0))))  # 10 dB per sample
    >>> bool(abs(L[1] + 10.0) < 0.01)
    True
    """
    h = check_signal(h, "h", ndim=(1,))
    n = h.shape[-1] if stop_index is None else int(stop_index)
    if not 0 < n <= h.shape[-1]:
        raise ParameterError(f"stop_index={stop_index} must be in 1..{h.shape[-1]} (a sample "
                             "of h); give a truncation point inside the signal")
    if not (compensation >= 0) or not math.isfinite(compensation):
        raise ParameterError(f"compensation={compensation!r} must be finite and >= 0; give "
                             "the tail energy after stop_index, or 0 for none")
    if not (noise_power >= 0) or not math.isfinite(noise_power):
        raise ParameterError(f"noise_power={noise_power!r} must be finite and >= 0; give the "
                             "mean h**2 of the noise, or 0 to subtract nothing")
    e = h[:n] * h[:n]
    if noise_power:
        e = e - noise_power
    edc = np.cumsum(e[::-1])[::-1] + compensation
    if not (edc[0] > 0):
        raise ParameterError("the impulse response has no energy after its onset (or less "
                             "than the noise subtracted); check that the onset lies before "
                             "the direct sound and that the IR is not silent")
    # Noise subtraction can leave a few non-positive sums at the very end: rather than
    # produce NaN, the curve is made non-increasing (running minimum over the positive sums),
    # which holds the last positive value over them.
    if noise_power and np.any(edc <= 0):
        edc = np.minimum.accumulate(np.where(edc <= 0, np.inf, edc))
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(edc / edc[0])


@dataclass(frozen=True, slots=True, eq=False)
class NoiseFloor:
    """Result of the Lundeby et al. (1995) noise-floor analysis of one band.

    Attributes
    ----------
    ok : bool
        False when no decay could be told apart from the noise (then the other figures are
        only diagnostic and ``reason`` says why).
    truncation_index : int
        Crosspoint of the late decay line with the noise, samples from the start of the
        analysed signal; ``len(h)`` when the IR ends before reaching a noise floor.
    compensation : float
        Energy the fitted late decay would carry after the crosspoint, in units of a sum of
        ``h**2`` over samples: ``p2(t1) / (1 - 10**(B/(10 fs)))`` with the late line
        ``10 lg p2(t) = A + B t`` (the discrete form of ISO 3382-1 Eq. (3)'s C).
    noise_power : float
        Mean ``h**2`` of the noise (an upper bound when ``noise_floor_found`` is False).
    late_decay_s : float or None
        Reverberation time of the late fit line, ``-60/B`` in s.
    peak_to_noise_db : float or None
        ``10 lg(max h**2 / noise_power)`` (a lower bound when ``noise_floor_found`` is False).
    noise_floor_found : bool
        False when the IR is still decaying at its end (e.g. a synthetic or trimmed IR).
    converged : bool
        The crosspoint moved by less than one averaging interval within 5 iterations.
    n_iterations : int
    reason : str
        Why ``ok`` is False, else "".
    late_fit_db : (float, float) or None
        The late decay line ``(A, B)``: per-sample energy ``10**((A + B t)/10)``, t in s from
        the start of the analysed signal, B in dB/s.
    continues_s : float or None
        When the search was misled (``ok`` False for that reason): how long the decay visibly
        goes on past ``truncation_index``.
    """

    ok: bool
    truncation_index: int
    compensation: float
    noise_power: float
    late_decay_s: float | None
    peak_to_noise_db: float | None
    noise_floor_found: bool
    converged: bool
    n_iterations: int
    reason: str = ""
    late_fit_db: tuple[float, float] | None = None
    continues_s: float | None = None


def _blocks(e: np.ndarray, m: int) -> tuple[np.ndarray, np.ndarray]:
    """Mean of e over consecutive blocks of m samples and the block centres (sample units)."""
    nb = e.shape[0] // m
    if nb == 0:
        return np.array([float(e.mean())]), np.array([e.shape[0] / 2.0])
    avg = e[: nb * m].reshape(nb, m).mean(axis=1)
    centres = (np.arange(nb) + 0.5) * m
    return avg, centres


def _linfit(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Least squares y = a + b x; returns (a, b)."""
    n = x.shape[0]
    xm = x.mean()
    ym = y.mean()
    dx = x - xm
    sxx = float(dx @ dx)
    if n < 2 or sxx <= 0:
        return float(ym), 0.0
    b = float(dx @ (y - ym)) / sxx
    return float(ym) - b * float(xm), b


def _db(x: np.ndarray | float) -> np.ndarray | float:
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(np.maximum(x, 1e-300))


#: Energy below this fraction of the peak (−200 dB) is digital silence, not noise.
SILENCE_RE_PEAK = 1e-20


def lundeby(h: np.ndarray, fs: int, *, interval_s: float = 0.010, max_iterations: int = 5
            ) -> NoiseFloor:
    """Noise floor, truncation point and tail compensation (Lundeby et al. 1995).

    Steps (Lundeby, Vigran, Bietz & Vorländer, "Uncertainties of measurements in room
    acoustics", Acustica 81 (1995) 344–355):

    1. average ``h**2`` in intervals of ``interval_s`` (10–50 ms in the paper), doubled while
       the decay shows gaps (a sparse response: distinct echoes with silence between them,
       see :func:`_dense_interval`; the later intervals never get shorter than that);
    2. first noise estimate from the last 10 % of the IR;
    3. regression from the peak interval to the first interval 10 dB above the noise;
    4. preliminary crosspoint of that line with the noise;
    5. new interval length: 5 intervals per 10 dB of decay (paper: 3–10);
    6. average again;
    7. noise from the part starting 10 dB of decay after the crosspoint (at least the last 10 %);
    8. late decay fitted over up to 20 dB, starting 10 dB above the noise (paper: 10–20 dB
       starting 5–10 dB above);
    9. new crosspoint; repeat 7–9 until it moves by less than one interval (at most
       ``max_iterations`` times).

    When the last 10 % of the IR still decays at more than half the early rate, there is no
    noise floor in the file: the truncation point is the end and the compensation extrapolates
    the late decay fitted over the last 20 dB.

    Parameters
    ----------
    h : ndarray, shape (n,)
        Band-filtered IR from its onset.
    fs : int, > 0, Hz

    Returns
    -------
    NoiseFloor
    """
    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    e = h * h
    n = e.shape[0]
    peak_e = float(e.max())
    if not (peak_e > 0):
        return NoiseFloor(False, n, 0.0, 0.0, None, None, False, False, 0,
                          "the band holds no energy")
    # A response that ends in digital silence (zero-padded, or cut and padded by an editor)
    # has no noise after its end: the search runs over the part that holds sound, so that the
    # noise estimate is not zero (what lies below −200 dB re the peak is silence; a float
    # filter's ringing into such silence falls below it within milliseconds).
    sound = np.flatnonzero(e > SILENCE_RE_PEAK * peak_e)
    if sound[-1] + 1 < n:
        e = e[: sound[-1] + 1]
        n = e.shape[0]
    m0 = max(1, int(round(interval_s * fs)))
    tail_start = int(0.9 * n)
    noise = float(e[tail_start:].mean())
    noise_db = float(_db(noise))
    if n < 20 * m0:
        m0 = max(1, n // 20)
    # 1'. a sparse response (distinct echoes with silence between them) needs intervals
    # longer than its gaps, or the empty intervals read as a decay into the noise
    m0 = _dense_interval(e, m0, noise_db)
    m_min = m0 if m0 > int(round(interval_s * fs)) else max(1, int(0.001 * fs))
    avg, centres = _blocks(e, m0)
    lvl = _db(avg)
    ip = int(np.argmax(avg))
    if lvl[ip] - noise_db < 10.0:
        return NoiseFloor(False, n, 0.0, noise, None, float(_db(peak_e / noise)), True, False,
                          0, f"the band's decay rises only {lvl[ip] - noise_db:.0f} dB above "
                             "its noise")
    # 3. early regression from the peak to 10 dB above the noise
    below = np.nonzero(lvl[ip:] < noise_db + 10.0)[0]
    i_end = ip + (int(below[0]) if below.size else lvl.shape[0] - ip)
    if i_end - ip < 2:
        i_end = min(lvl.shape[0], ip + 2)
    a, b = _linfit(centres[ip:i_end] / fs, lvl[ip:i_end])
    if not (b < 0):
        return NoiseFloor(False, n, 0.0, noise, None, float(_db(peak_e / noise)), True, False,
                          0, "the band does not decay")

    # Is there a noise floor at all? Compare the tail's slope with the early slope; the tail
    # must fall by more than its own scatter allows (its slope three standard errors below
    # zero): band-limited noise in short intervals scatters by several dB (an octave at
    # 125 Hz in 10 ms intervals has about 2 degrees of freedom), and a chance run of low
    # intervals used to read as a decay still under way (measured: a 125 Hz octave 24 dB
    # above rumble noise, then analysed as decaying with T = 15 s).
    tail_blocks = centres >= tail_start
    b_tail, tail_drop_db, se_tail = 0.0, 0.0, math.inf
    k_tail = int(np.count_nonzero(tail_blocks))
    if k_tail >= 3:
        xt, yt = centres[tail_blocks] / fs, lvl[tail_blocks]
        a_t, b_tail = _linfit(xt, yt)
        tail_drop_db = -b_tail * (n - tail_start) / fs
        sxx = float(np.sum((xt - xt.mean()) ** 2))
        if k_tail > 3 and sxx > 0:
            resid = yt - (a_t + b_tail * xt)
            se_tail = math.sqrt(float(np.sum(resid ** 2)) / (k_tail - 2) / sxx)
        else:
            se_tail = 0.0
    if b_tail < 0.5 * b and tail_drop_db > 3.0 and -b_tail > 3.0 * se_tail:
        # Still decaying at the end: no floor. Extrapolate the last 20 dB of the decay.
        end_db = float(lvl[-1])
        sel = (np.arange(lvl.shape[0]) >= ip) & (lvl <= end_db + 20.0)
        a2, b2 = _linfit(centres[sel] / fs, lvl[sel]) if np.count_nonzero(sel) >= 3 else (a, b)
        if not (b2 < 0):
            a2, b2 = a, b
        comp = _tail_sum(a2, b2, n, fs)
        return NoiseFloor(True, n, comp, noise, -60.0 / b2, float(_db(peak_e / noise)), False,
                          True, 0, "", (float(a2), float(b2)))

    tc = (noise_db - a) / b  # s
    m = m0
    converged = False
    it = 0
    a_late, b_late = a, b
    for it in range(1, max_iterations + 1):  # noqa: B007 (reported after the loop)
        # 5./6. new interval: 5 per 10 dB of decay
        m = int(round(10.0 / -b_late / 5.0 * fs))
        m = min(max(m, m_min), max(1, n // 10))
        avg, centres = _blocks(e, m)
        lvl = _db(avg)
        # 7. noise from 10 dB of decay after the crosspoint, at least the last 10 %
        start = int(round((tc + 10.0 / -b_late) * fs))
        start = min(max(start, 0), tail_start)
        noise = float(e[start:].mean())
        noise_db = float(_db(noise))
        # 8. late decay: up to 20 dB starting 10 dB above the noise
        ip = int(np.argmax(avg))
        lo_db = noise_db + 10.0
        hi_db = min(lo_db + 20.0, float(lvl[ip]))
        idx = np.arange(lvl.shape[0])
        sel = (idx >= ip) & (lvl >= lo_db) & (lvl <= hi_db) & (centres <= max(tc * fs, 0) + m)
        if np.count_nonzero(sel) < 2 or hi_db - lo_db < 3.0:
            # Too little decay above the noise for a late fit: keep the previous line.
            break
        # fit the decay itself: the blocks' mean noise power removed
        a_new, b_new = _linfit(centres[sel] / fs, _db(avg[sel] - noise))
        if not (b_new < 0):
            break
        a_late, b_late = a_new, b_new
        tc_new = (noise_db - a_late) / b_late
        moved = abs(tc_new - tc)
        tc = tc_new
        if moved * fs < m:
            converged = True
            break

    n1 = int(round(tc * fs))
    n1 = min(max(n1, 1), n)
    comp = _tail_sum(a_late, b_late, n1, fs)
    # the misread test takes the noise of the last tenth: after a misread crossing the
    # iterated estimate averages the decay's remainder in and hides it
    misread = _decay_goes_on(e, n1, (a_late, b_late), m, tail_start, fs)
    if misread is not None:
        return NoiseFloor(False, n1, comp, noise, -60.0 / b_late, float(_db(peak_e / noise)),
                          True, converged, it,
                          f"the decay goes on about {misread:.1f} s past where the noise-floor search "
                          "put its end: its reverberant part stands too little above the noise "
                          "beside a strong direct sound to be told from it",
                          (float(a_late), float(b_late)), misread)
    return NoiseFloor(True, n1, comp, noise, -60.0 / b_late, float(_db(peak_e / noise)), True,
                      converged, it, "", (float(a_late), float(b_late)))


#: Past a crossing found correctly, what is left of the decay is the compensation (the fitted
#: line's own tail); a crossing put too early (the first regression ran down the direct
#: sound's fall, not the reverberant decay) leaves a decay that visibly goes on. Test, free of
#: any bias in the noise estimate: split the stretch from the crossing to the last tenth into
#: halves; stationary noise puts the same energy in both, so the first may exceed the second
#: only by what the fitted line predicts, plus six standard deviations of the noise's
#: fluctuation (common practice for a 6σ test). A misread must also go on for at least half
#: as long again as the crossing found (a crossing is only ever placed to within a few
#: intervals), and what goes on must hold at least 10^(-35/10) of the band's energy: less
#: cannot move the Schroeder curve within the deepest fit range, T30's −35 dB (measured: a
#: residue 100 dB below a dry room's peak went on for a second and moved nothing). Measured
#: on what it is for: a 5 s decay 16 dB above the noise beside a direct sound 23 dB above it,
#: read as ending at 0.23 s instead of about 1.3 s.
_MISREAD_SIGMAS = 6.0
_MISREAD_FRACTION = 0.5
_MISREAD_SHARE = 10.0 ** (-35.0 / 10.0)


def _decay_goes_on(e: np.ndarray, n1: int, line: tuple[float, float], m: int, tail_start: int,
                   fs: int) -> float | None:
    """How long (s) the decay visibly goes on past the crossing ``n1``, or None when what
    follows it is the fitted ``line``'s tail and stationary noise (see the notes above).

    The noise's level and fluctuation come from the last tenth (from ``tail_start``) in blocks
    of ``m`` samples.
    """
    kb = (tail_start - n1) // (2 * m) * 2
    n = e.shape[0]
    if kb < 4 or n - tail_start < 4 * m:
        return None
    blocks = e[n1:n1 + kb * m].reshape(kb, m).sum(axis=1)
    tail = e[tail_start:]
    k = tail.shape[0] // m
    tail_blocks = tail[: k * m].reshape(k, m).sum(axis=1)
    noise_m, sd_block = float(tail_blocks.mean()), float(np.std(tail_blocks))
    half = kb // 2
    a_db, b_db = line

    def on_line(k0: int, k1: int) -> float:
        return _tail_sum(a_db, b_db, k0, fs) - _tail_sum(a_db, b_db, k1, fs)

    d = float(blocks[:half].sum() - blocks[half:].sum())
    d_line = on_line(n1, n1 + half * m) - on_line(n1 + half * m, n1 + kb * m)
    if not d > 2.0 * max(d_line, 0.0) + _MISREAD_SIGMAS * sd_block * math.sqrt(kb):
        return None
    # where it runs out: the last run of 8 blocks whose mean still stands 3 standard errors
    # above the noise
    w = min(8, kb)
    run = np.convolve(blocks - noise_m, np.ones(w) / w, mode="valid")
    live = np.nonzero(run > 3.0 * sd_block / math.sqrt(w))[0]
    if not live.size:
        return None
    last = int(live[-1]) + w
    goes_on = float(last) * m
    held = float(np.sum(blocks[:last] - noise_m))
    if held < _MISREAD_SHARE * float(e[:n1].sum()):
        return None
    return goes_on / fs if goes_on >= max(_MISREAD_FRACTION * n1, 5 * m) else None


#: Rise between consecutive averaging intervals, dB, that marks a gap in a sparse response.
#: Within a decay an interval cannot be much weaker than the one after it; in band-filtered
#: noise of 10 ms intervals rises of a few dB are usual and 20 dB is far outside their spread
#: (common practice for the threshold; measured on the tests' decaying noise: largest rise
#: well below 20 dB), while an interval falling into the silence between two echoes lies
#: 30-500 dB below the next echo (measured on a feedback-comb IR at 1-8 kHz).
_GAP_RISE_DB = 20.0


def _dense_interval(e: np.ndarray, m: int, noise_db: float) -> int:
    """Shortest averaging interval (m, 2m, 4m ...) whose intervals show no gaps in the decay.

    Lundeby et al. (1995) average ``h**2`` over 10–50 ms assuming a dense, noise-like decay.
    For a sparse response (a few strong echoes, a flutter echo, a synthetic comb) an interval
    between two echoes holds almost nothing, and steps 3 and 4 would read it as the decay
    reaching the noise within milliseconds. Here the interval is doubled until, from the peak
    interval to the last interval 10 dB above the noise, no interval lies more than
    ``_GAP_RISE_DB`` below the next one (or until fewer than 20 intervals would be left).
    """
    n = e.shape[0]
    while 2 * m <= n // 20:
        avg, _ = _blocks(e, m)
        lvl = _db(avg)
        ip = int(np.argmax(avg))
        above = np.nonzero(lvl[ip:] >= noise_db + 10.0)[0]
        stop = ip + (int(above[-1]) + 1 if above.size else 1)
        seg = lvl[ip:stop]
        if seg.shape[0] < 2 or float(np.max(np.diff(seg))) <= _GAP_RISE_DB:
            return m
        m *= 2
    return m


def _tail_sum(a_db: float, b_db_per_s: float, n1: int, fs: int) -> float:
    """Sum over n >= n1 of 10**((a + b n/fs)/10): the energy of the extrapolated late decay."""
    r = 10.0 ** (b_db_per_s / (10.0 * fs))
    return float(10.0 ** ((a_db + b_db_per_s * n1 / fs) / 10.0) / (1.0 - r))


def fit_range(curve_db: np.ndarray, hi_db: float, lo_db: float, *,
              end_db: float | None = None) -> tuple[int, int] | None:
    """Sample range [i0, i1) of a Schroeder curve that a decay fit between two levels uses.

    From the first sample at or below ``hi_db`` to the last before the curve falls below
    ``lo_db``; a truncated curve whose compensated end level ``end_db`` is at or below
    ``lo_db`` counts as complete to its last sample. None when the range is not reached or
    holds fewer than 3 samples. See :func:`fit_decay`.
    """
    L = np.asarray(curve_db)
    if L.size == 0:
        return None
    i0 = int(np.argmax(L <= hi_db))
    if not L[i0] <= hi_db:
        return None
    below = L[i0:] < lo_db
    if below.any():
        i1 = i0 + int(np.argmax(below))
    elif end_db is not None and end_db <= lo_db + 1e-9:
        i1 = L.shape[0]
    else:
        return None
    if i1 - i0 < 3:
        return None
    return i0, i1


def decay_line(curve_db: np.ndarray, fs: int, hi_db: float, lo_db: float, *,
               end_db: float | None = None) -> tuple[int, int, float, float, float] | None:
    """The least-squares line of a decay fit between two levels (see :func:`fit_decay`).

    Returns
    -------
    (i0, i1, a_db, b_db_per_s, r2) or None
        The fitted samples ``[i0, i1)`` (:func:`fit_range`), the line
        ``L(t) = a_db + b_db_per_s·t`` with t in s from the curve's first sample, and the
        regression's r²; None when the range is not reached.
    """
    L = np.asarray(curve_db)
    span = fit_range(L, hi_db, lo_db, end_db=end_db)
    if span is None:
        return None
    i0, i1 = span
    b, r2, mean = _uniform_slope(L[i0:i1])
    b *= fs  # dB per sample -> dB per second
    return i0, i1, mean - b * 0.5 * (i0 + i1 - 1) / fs, b, r2


def fit_decay(curve_db: np.ndarray, fs: int, hi_db: float, lo_db: float, *,
              end_db: float | None = None) -> tuple[float, float] | None:
    """Least-squares decay fit of a Schroeder curve between two levels.

    Uses every sample from the first at or below ``hi_db`` to the last before the curve falls
    below ``lo_db`` (ISO 3382-1 A.2.2 / ISO 3382-2 clause 6).

    Parameters
    ----------
    curve_db : ndarray
        Schroeder curve in dB (0 dB at its start).
    fs : int, Hz
    hi_db, lo_db : float
        Fit range, e.g. -5 and -35 for T30.
    end_db : float, optional
        Level of the curve just after its last sample (for a truncated, compensated curve:
        ``10 lg(C/E0)``). When the curve itself stays above ``lo_db`` but ``end_db <= lo_db``,
        the range is complete up to the last sample.

    Returns
    -------
    (t_s, r2) or None
        ``t_s = -60/slope`` (s) and the regression's r²; None when the curve does not reach
        ``lo_db`` or fewer than 3 samples fall in the range.
    """
    line = decay_line(curve_db, fs, hi_db, lo_db, end_db=end_db)
    if line is None:
        return None
    _, _, _, b, r2 = line
    if not (b < 0):
        return None
    return -60.0 / b, r2


def _uniform_slope(y: np.ndarray) -> tuple[float, float, float]:
    """Least-squares slope (per sample), r² and mean of y against its index, in three passes."""
    n = y.shape[0]
    j = np.arange(n, dtype=np.float64)
    j -= (n - 1) / 2.0
    sjj = n * (n * n - 1.0) / 12.0  # Σ j² for centred indices (closed form)
    # einsum, not @: a BLAS dot may wake worker threads, which costs milliseconds per call on a
    # busy machine (measured: 23 ms instead of 0.05 ms for 120 000 samples)
    sjy = float(np.einsum("i,i->", j, y))
    ym = float(y.sum()) / n
    syy = float(np.einsum("i,i->", y, y)) - n * ym * ym
    b = sjy / sjj
    r2 = (sjy * sjy) / (sjj * syy) if syy > 0 else 1.0
    return b, min(r2, 1.0), ym


def range_text(v_db: float) -> str:
    """A decay range in dB for a message, rounded down to 0.1 dB, so that a comparison with a
    requirement reads true: "needs 35 dB, this band has 34.9 dB", never "... has 35 dB"."""
    return f"{math.floor(v_db * 10.0) / 10.0:.1f}" if v_db < 100 else f"{v_db:.0f}"


def decay_range_db(h: np.ndarray, nf: NoiseFloor) -> float:
    """Decay above the noise of a band-filtered IR, dB: the compensated Schroeder level at the
    truncation point, negated (ISO 3382-1:2009 5.3.3 compares it with each figure's need).

    ``h`` starts where ``nf`` (:func:`lundeby` of ``h``) does. 300 dB stands for "no noise
    and no tail": a response that decays to exact zero.
    """
    n1 = nf.truncation_index
    noise_sub = nf.noise_power if nf.noise_floor_found else 0.0
    e0 = float(np.sum(h[:n1] ** 2)) - noise_sub * n1 + nf.compensation
    if not (e0 > 0):
        return 0.0
    if nf.compensation > 0:
        return -10.0 * math.log10(nf.compensation / e0)
    last = float(h[n1 - 1] ** 2) - noise_sub
    return -10.0 * math.log10(last / e0) if last > 0 else 300.0


@dataclass(frozen=True, slots=True, eq=False)
class DecayFigures:
    """Decay figures of one band (or the broadband IR).

    Every time is in seconds and is ``None`` when it cannot be measured honestly; ``flags``
    then says why, one sentence per problem.

    Attributes
    ----------
    edt_s, t20_s, t30_s : float or None
        Early decay time and reverberation times (ISO 3382-1 A.2.2, ISO 3382-2 clause 6).
    peak_to_noise_db : float or None
        Band IR peak energy over the noise's mean energy (lower bound if no floor was found).
    decay_range_db : float or None
        Decay above the noise: the (compensated) Schroeder level at the truncation point,
        negated; the quantity the dynamic-range rules compare against.
    xi_edt_permille, xi_t20_permille, xi_t30_permille : float or None
        Non-linearity ξ = 1000 (1 − r²) of each regression (ISO 3382-2 Annex B).
    curvature_percent : float or None
        C = 100 (T30/T20 − 1) (ISO 3382-2 Annex B).
    truncation_s : float
        Lundeby crosspoint, s after the onset.
    noise_floor_found : bool
    flags : tuple of str
    edc_db : ndarray
        The compensated Schroeder curve from the onset to the truncation point (read-only).
    fs : int
    noise : NoiseFloor or None
        The noise-floor analysis the figures stand on (the energy figures of the same band
        share it, see :mod:`measure.parameters`).
    onset : int
        Index of ``h_band`` where the analysis (and ``edc_db``) starts.
    noise_scatter : dict of str to float
        Per figure ("edt", "t20", "t30") measured in a band with a noise floor: its estimated
        relative scatter (1 σ) due to the noise (see :data:`NOISE_SCATTER_LIMIT_JND`).
    """

    edt_s: float | None
    t20_s: float | None
    t30_s: float | None
    peak_to_noise_db: float | None
    decay_range_db: float | None
    xi_edt_permille: float | None
    xi_t20_permille: float | None
    xi_t30_permille: float | None
    curvature_percent: float | None
    truncation_s: float
    noise_floor_found: bool
    flags: tuple[str, ...]
    edc_db: np.ndarray = field(repr=False)
    fs: int
    noise: NoiseFloor | None = field(default=None, repr=False)
    onset: int = 0
    noise_scatter: dict[str, float] = field(default_factory=dict, repr=False)

    def __post_init__(self) -> None:
        self.edc_db.setflags(write=False)


def analyze_decay(h_band: np.ndarray, fs: int, *, onset: int | None = None,
                  bandwidth_hz: float | None = None,
                  filter_mode: Literal["causal", "reversed"] = "reversed",
                  label: str = "") -> DecayFigures:
    """EDT, T20, T30 and their validity for one band-filtered impulse response.

    Parameters
    ----------
    h_band : ndarray, shape (n,)
        Band-filtered IR (whole signal; the analysis starts at ``onset``).
    fs : int, > 0, Hz
    onset : int, optional
        Start index, normally :func:`onset_index` of the broadband IR (ISO 3382-1 A.3.4);
        default: the onset of ``h_band`` itself.
    bandwidth_hz : float, optional
        Bandwidth of the band filter for the B·T check (ISO 3382-2 7.3); None skips the check
        (broadband).
    filter_mode : {"reversed", "causal"}
        How ``h_band`` was filtered: sets the B·T limit to 4 or 16.
    label : str
        Band name used in flags (e.g. "125 Hz").

    Returns
    -------
    DecayFigures
    """
    h = check_signal(h_band, "h_band", ndim=(1,))
    fs = check_fs(fs)
    check_choice(filter_mode, "filter_mode", ("causal", "reversed"))
    i0 = onset_index(h, fs) if onset is None else int(onset)
    if not 0 <= i0 < h.shape[0] - 1:
        raise ParameterError(f"onset={onset} is outside the signal of {h.shape[0]} samples; "
                             f"give an index from 0 to {h.shape[0] - 2}, normally "
                             "onset_index() of the broadband IR")
    seg = h[i0:]
    where = f"{label}: " if label else ""
    nf = lundeby(seg, fs)
    flags: list[str] = []
    empty = np.zeros(0)
    if not nf.ok:
        flags.append(f"{where}no decay can be measured: {nf.reason}")
        return DecayFigures(None, None, None, nf.peak_to_noise_db, None, None, None, None, None,
                            nf.truncation_index / fs, nf.noise_floor_found, tuple(flags),
                            empty, fs, nf, i0)
    noise_sub = nf.noise_power if nf.noise_floor_found else 0.0
    curve = schroeder(seg, stop_index=nf.truncation_index, compensation=nf.compensation,
                      noise_power=noise_sub)
    decay_range = decay_range_db(seg, nf)
    n1 = nf.truncation_index
    e0 = float(np.sum(seg[:n1] ** 2)) - noise_sub * n1 + nf.compensation
    scatter: dict[str, float] = {}
    if not nf.converged:
        flags.append(f"{where}the noise-floor search (Lundeby) did not converge; the "
                     "truncation point may be off")
    values: dict[str, float | None] = {}
    xis: dict[str, float | None] = {}
    for key, (hi_db, lo_db) in FIT_RANGES_DB.items():
        need = REQUIRED_RANGE_DB[key]
        name = _NAMES[key]
        values[key] = None
        xis[key] = None
        if decay_range < need:
            flags.append(f"{where}{name} needs {need:.0f} dB of decay above the noise, this "
                         f"band has {range_text(decay_range)} dB")
            continue
        fit = fit_decay(curve, fs, hi_db, lo_db, end_db=-decay_range)
        if fit is None:
            flags.append(f"{where}{name}: the decay curve does not reach {lo_db:.0f} dB "
                         "before the truncation point")
            continue
        t_s, r2 = fit
        if bandwidth_hz is not None:
            bt = bandwidth_hz * t_s
            lim = BT_MIN[filter_mode]
            if not bt > lim:
                flags.append(
                    f"{where}{name} of {t_s:.3f} s is too short for this band's filter: "
                    f"B·T = {bt:.1f}, needs > {lim:g} (ISO 3382-2 7.3, {filter_mode} "
                    "filtering); the filter's own decay would be measured")
                continue
            if nf.noise_floor_found:
                eps = noise_scatter(nf.noise_power, e0, bandwidth_hz, fs, lo_db)
                u = _time_error(curve, fs, hi_db, lo_db, 4.343 * eps)
                scatter[key] = u
                if u > NOISE_SCATTER_LIMIT_JND * JND_DECAY_RELATIVE:
                    flags.append(
                        f"{where}{name} left out: the noise left in this band scatters it by "
                        f"±{u * 100:.1f} % (1 σ), more than half its {JND_DECAY_RELATIVE:.0%} "
                        "JND (a narrow band holds few independent samples of noise); a longer "
                        "sweep, more repeats or a quieter room narrows it")
                    continue
        values[key] = t_s
        xis[key] = 1000.0 * (1.0 - r2)
    curvature = None
    if values["t20"] is not None and values["t30"] is not None:
        curvature = 100.0 * (values["t30"] / values["t20"] - 1.0)
        if abs(curvature) > CURVATURE_LIMIT_PERCENT:
            flags.append(
                f"{where}the decay is not a single exponential: curvature C = "
                f"{curvature:.0f} % (ISO 3382-2 Annex B: above 10 % the decay is suspect); "
                "a double slope (coupled spaces) makes T20 and T30 describe different parts")
    for key in ("t30", "t20"):
        xi = xis[key]
        if xi is not None:
            if xi > XI_LIMIT_PERMILLE:
                flags.append(
                    f"{where}the decay curve is not straight over the {_NAMES[key]} range: "
                    f"ξ = {xi:.0f} ‰ (ISO 3382-2 Annex B: 0–5 ‰ is typical)")
            break
    return DecayFigures(
        edt_s=values["edt"], t20_s=values["t20"], t30_s=values["t30"],
        peak_to_noise_db=nf.peak_to_noise_db, decay_range_db=decay_range,
        xi_edt_permille=xis["edt"], xi_t20_permille=xis["t20"], xi_t30_permille=xis["t30"],
        curvature_percent=curvature, truncation_s=nf.truncation_index / fs,
        noise_floor_found=nf.noise_floor_found, flags=tuple(flags),
        edc_db=np.asarray(curve, dtype=np.float64), fs=fs, noise=nf, onset=i0,
        noise_scatter=scatter)
