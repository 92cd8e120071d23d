"""Late reverberation: a feedback delay network whose decay follows a measured one band by band.

The network (Stautner & Puckette [1]_, Jot & Chaigne [2]_) has ``N`` delay lines of pairwise
coprime lengths ``m_i`` samples and an orthogonal feedback matrix ``A``:

    s_i(n + m_i) = Σ_j A_ij · g_j · s_j(n) + b_i · x(n),      y(n) = Σ_i c_i · s_i(n),

where ``s_i(n)`` is the sample leaving line ``i`` at time ``n``. With ``g_j = 1`` and ``A``
orthogonal, what leaves the lines each sample (``‖s(n)‖²``) is exactly what enters them
(``‖A·s(n)‖²``), so the stored energy is constant: the network is lossless. Absorption after Jot
& Chaigne makes every line lose the same number of decibels per second: a line of ``m_i``
samples gets the gain

    g_i = 10^(−3 · m_i / (fs · T60)),

so every recirculating path, whatever its lines, decays by 60 dB in ``T60`` seconds. This is
the comb-filter relation of Schroeder [3]_ applied line by line.

Per-band absorption
-------------------
A room's ``T60`` varies with frequency. Two ways were weighed:

* absorption filters in each line (a graphic-EQ cascade of peaking sections per line, designed
  so that ``20·log10|h_i(e^{jω})| = −60·m_i/(fs·T60(ω))``), run sample by sample or block by
  block with a filter state per line;
* one network per octave band with scalar gains ``g_i`` (exact ``T60`` in that band), the band
  outputs weighted by amplitude-complementary band masks (they sum to one at every frequency)
  and added.

This module does the second. Its decay per band is exact by construction (a scalar gain is the
Jot–Chaigne filter evaluated at one frequency, with no design error), it needs no filter design
that must stay stable for every line and band, all bands run vectorised in one pass of the
network (a ``(bands, lines, block)`` array per block of ``min(m_i)`` samples), and the
tone-correction filter becomes one gain per band (the level of each band's late energy) applied
with the band masks. With equal ``T60`` in every band the masks sum to one and the result is the
single network's output exactly. The price is that a frequency between two band centres decays
as a mix of the two neighbouring rates, which an octave-band analysis sees as a slight bend in
the decay curve; :func:`measure.model.fit.fit_model` calibrates the per-band ``T60`` by
rendering and re-analysing, which absorbs that bend.

Measured (``bench/bench_model.py``, 2 s at 48 kHz, octave T60 2.6 … 1.4 s from 63 Hz to
4 kHz, no calibration): the per-band networks render in ~20 ms with octave T30 within 3.3 %
of the targets (125 Hz–4 kHz); one network with a graphic-EQ absorption cascade per line (low
shelf, octave peaking sections, high shelf, gains solved at the octave centres) renders in
~75 ms with T30 within 4.7 %. Both meet 5 % here; the per-band form is chosen for its speed in
this vectorised offline renderer, its exact per-band decay and level, and the per-band
envelope correction it allows. (A real-time engine, which cannot afford one network per band,
would run the graphic-EQ form from the same ``t60_s``.)

References
----------
.. [1] J. Stautner, M. Puckette, "Designing multi-channel reverberators", Computer Music
   Journal 6(1):52–65, 1982.
.. [2] J.-M. Jot, A. Chaigne, "Digital delay networks for designing artificial reverberators",
   AES 90th Convention, Paris, 1991, preprint 3030.
.. [3] M. R. Schroeder, "Natural sounding artificial reverberation", J. Audio Eng. Soc. 10(3),
   1962.
.. [4] J. O. Smith III, *Physical Audio Signal Processing*, online book, chapters on feedback
   delay networks (lossless FDNs, delay-line lengths, tonal correction).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from measure._validate import check_fs, check_positive
from measure.errors import ParameterError

__all__ = [
    "DEFAULT_N_LINES",
    "LateReverb",
    "DelayNetwork",
    "NetworkState",
    "orthogonal_matrix",
    "coprime_delays",
    "nominal_delays_s",
    "line_gains",
    "run_network",
    "stored_energy",
    "band_masks",
    "half_spectrum_weights",
    "render_late",
    "min_total_delay",
    "white_levels_db",
    "calibrate_decay",
    "octave_t30_s",
    "analysis_octaves",
    "make_network",
    "render_late_bands",
    "kept_bands",
    "envelope_gain",
]

#: Number of delay lines. 16 is a power of two (a normalised Hadamard matrix exists) and gives a
#: dense tail within a few round trips (common practice: 8 to 16 lines).
DEFAULT_N_LINES = 16
#: Schroeder & Logan's modal-density rule: Σ m_i >= 0.15 · T60 · fs ([4], delay-line lengths).
MODAL_DENSITY_FACTOR = 0.15
#: Shortest mean delay of the network, s (a floor for very short decay times).
MIN_MEAN_DELAY_S = 0.006
#: Margin over the modal-density rule. Every mode of the network decays at the same rate, so an
#: octave band's decay curve only wobbles where modes lie closer than their bandwidth (2.2/T60
#: Hz); a total delay of about twice the rule's minimum (modal overlap ~0.7) gave the smallest
#: spread of octave-band T30 around its target in trials with T60 = 0.4-2 s (125 Hz-4 kHz);
#: larger totals raise the overlap and the spread at low frequencies.
MODAL_DENSITY_MARGIN = 2.0
#: Width of the raised-cosine crossover between neighbouring band masks, in octaves. In trials
#: 0.1, 0.25 and 0.5 changed octave T30 by under 1 % in most bands and 3 % at most (125 Hz, a
#: short decay): the analysis filters' own skirts, not the masks, decide how much of a
#: neighbouring band an octave sees. The widest spreads the masks' impulse responses least.
MASK_TRANSITION_OCTAVES = 0.5
#: The network runs this many mean delays before its output is used, so the late part starts
#: dense rather than as a handful of first round trips (after three round trips there are
#: ~N³ paths).
PREROLL_ROUND_TRIPS = 4.0
#: :func:`calibrate_decay` keeps each decay time within this factor of where it started: a band
#: that an octave filter cannot separate from a neighbour with a much longer decay (the analysis
#: filter's skirt passes the neighbour) must not be driven to nonsense.
CALIBRATION_RANGE = 1.6
#: Length of the renderings :func:`calibrate_decay` analyses, in units of the longest T60:
#: 60 dB of decay, enough for T30's 45 dB of range (ISO 3382-1 5.3.3).
CALIBRATION_LENGTH = 1.0
#: Early diffuse part (:func:`_early_diffuse`): seed of its noise, noise kept on both sides of
#: the cut-out segment, s, and its fade-in, s.
DIFFUSE_SEED = 20060
DIFFUSE_PAD_S = 0.05
DIFFUSE_FADE_IN_S = 0.001
#: Energy decay constant × T60 for a 60 dB fall: 6·ln 10.
DECAY_60DB_E = 6.0 * math.log(10.0)
#: Largest block of :func:`run_network`, samples (see its notes).
MAX_BLOCK = 1024
#: Length of the power ramp of the envelope correction at each segment edge, s.
ENVELOPE_RAMP_S = 0.002


def orthogonal_matrix(n_lines: int) -> np.ndarray:
    """The normalised Hadamard matrix ``H_N / √N``: orthogonal, all entries ``±1/√N``.

    Parameters
    ----------
    n_lines : int, a power of two >= 2

    Notes
    -----
    Among matrices with entries bounded by one it has the largest determinant, and every entry
    has the same magnitude, so each line feeds every other equally ([4], feedback matrices).
    """
    from scipy.linalg import hadamard

    n = int(n_lines)
    if n < 2 or n & (n - 1):
        raise ParameterError(
            f"n_lines={n_lines!r} must be a power of two >= 2 (e.g. 8 or 16) for a Hadamard "
            "feedback matrix; pick one")
    return hadamard(n).astype(np.float64) / math.sqrt(n)


def _is_prime(k: int) -> bool:
    if k < 2:
        return False
    if k % 2 == 0:
        return k == 2
    r = int(math.isqrt(k))
    return all(k % d for d in range(3, r + 1, 2))


def coprime_delays(delays_s: Sequence[float], fs: int) -> tuple[int, ...]:
    """Delay-line lengths in samples: distinct primes nearest ``delays_s · fs``.

    Distinct primes are pairwise coprime, so no two lines share a recurrence period and the
    modes of the lines do not pile up ([4], delay-line lengths).

    Parameters
    ----------
    delays_s : sequence of float, > 0, s
        Nominal lengths.
    fs : int, > 0, Hz
        Sample rate of the rendering.
    """
    fs = check_fs(fs)
    out: list[int] = []
    for d in delays_s:
        target = max(3, int(round(check_positive(d, "delay", unit="s") * fs)))
        for step in range(0, 10 * target):
            for cand in (target + step, target - step):
                if cand >= 2 and cand not in out and _is_prime(cand):
                    break
            else:
                continue
            break
        out.append(cand)
    return tuple(out)


def min_total_delay(t60_s: float, fs: int) -> int:
    """Σ m_i needed for a modal density of 0.15 modes per Hz per second of T60 ([4])."""
    return int(math.ceil(MODAL_DENSITY_FACTOR * float(t60_s) * fs))


def nominal_delays_s(t60_max_s: float, *, n_lines: int = DEFAULT_N_LINES) -> tuple[float, ...]:
    """Delay-line lengths in seconds, spread geometrically over a 1 : 2.6 range.

    The mean is at least :data:`MIN_MEAN_DELAY_S` and the lengths satisfy the modal-density
    rule ``Σ m_i >= 0.15 · T60 · fs`` for the longest ``T60`` (rate independent: both sides
    scale with ``fs``) with the margin :data:`MODAL_DENSITY_MARGIN`.
    """
    t60 = check_positive(t60_max_s, "t60_max", unit="s")
    mean_s = max(MIN_MEAN_DELAY_S, MODAL_DENSITY_MARGIN * MODAL_DENSITY_FACTOR * t60 / n_lines)
    ratios = np.geomspace(1.0, 2.6, n_lines)
    ratios = ratios / ratios.mean()
    # interleave long and short lines so neighbours in the matrix differ in length
    order = np.argsort(np.arange(n_lines) % 2 * n_lines + np.arange(n_lines))
    return tuple(float(mean_s * r) for r in ratios[order])


def line_gains(delays: Sequence[int], fs: int, t60_s) -> np.ndarray:
    """Jot–Chaigne line gains ``g_i = 10^(−3 m_i / (fs T60))`` ([2], [3]).

    Parameters
    ----------
    delays : sequence of int
        Line lengths in samples.
    fs : int, > 0, Hz
    t60_s : float or array of float, > 0, s
        One decay time, or one per band (shape ``(bands,)``).

    Returns
    -------
    ndarray, shape ``(lines,)`` or ``(bands, lines)``
    """
    fs = check_fs(fs)
    m = np.asarray(delays, dtype=np.float64)
    t = np.asarray(t60_s, dtype=np.float64)
    if not np.all(t > 0) or not np.all(np.isfinite(t)):
        raise ParameterError(f"t60_s={t60_s!r} must be positive and finite; give decay times in s")
    return 10.0 ** (-3.0 * m / (fs * t[..., np.newaxis]))


@dataclass(frozen=True, slots=True, eq=False)
class DelayNetwork:
    """A feedback delay network, possibly several copies differing only in their line gains.

    Attributes
    ----------
    delays : tuple of int
        Line lengths ``m_i`` in samples.
    matrix : ndarray, shape (N, N)
        Feedback matrix ``A``.
    gains : ndarray, shape (B, N)
        Per-line gains ``g_i`` of each of ``B`` copies (one per band; ``B = 1`` for one network).
    b, c : ndarray, shape (N,)
        Input and output gains.
    """

    delays: tuple[int, ...]
    matrix: np.ndarray
    gains: np.ndarray
    b: np.ndarray
    c: np.ndarray

    def __post_init__(self) -> None:
        n = len(self.delays)
        if n < 1 or any(int(m) < 1 for m in self.delays):
            raise ParameterError(f"delays={self.delays!r} must be >= 1 sample each")
        for name, arr, shape in (("matrix", self.matrix, (n, n)), ("b", self.b, (n,)),
                                 ("c", self.c, (n,))):
            if arr.shape != shape:
                raise ParameterError(f"{name} has shape {arr.shape}; expected {shape}")
        if self.gains.ndim != 2 or self.gains.shape[1] != n:
            raise ParameterError(f"gains has shape {self.gains.shape}; expected (bands, {n})")
        for arr in (self.matrix, self.gains, self.b, self.c):
            arr.setflags(write=False)

    @property
    def n_lines(self) -> int:
        return len(self.delays)

    @property
    def n_copies(self) -> int:
        return int(self.gains.shape[0])


@dataclass(frozen=True, slots=True, eq=False)
class NetworkState:
    """What the delay lines hold: ``lines[i][k]`` leaves line ``i`` ``k`` samples from now.

    Each array has shape ``(B, m_i)`` (one row per copy of the network).
    """

    lines: tuple[np.ndarray, ...]

    def __post_init__(self) -> None:
        for a in self.lines:
            a.setflags(write=False)


def stored_energy(state: NetworkState) -> np.ndarray:
    """Energy held in the delay lines, ``Σ_i Σ_k lines[i][k]²``, one value per copy."""
    return sum(np.sum(a * a, axis=-1) for a in state.lines)


def run_network(net: DelayNetwork, n_samples: int, *, x: np.ndarray | None = None,
                state: NetworkState | None = None, dtype=np.float64
                ) -> tuple[np.ndarray, NetworkState]:
    """Run the network for ``n_samples`` samples.

    Parameters
    ----------
    net : DelayNetwork
    n_samples : int, >= 0
    x : ndarray, shape (n,), optional
        Input, ``n <= n_samples`` (zero after its end). None: no input.
    state : NetworkState, optional
        Initial contents of the lines; None: all zero.
    dtype : numpy float type
        Arithmetic of the lines (float64 by default; float32 halves the memory traffic, its
        round-off of about 1e-7 of the signal in each round trip is far below anything an
        impulse response is analysed for).

    Returns
    -------
    y : ndarray, shape (B, n_samples)
        Output of each copy.
    state : NetworkState
        The contents of the lines after the run.

    Notes
    -----
    Works in blocks of ``L = min(min(m_i), MAX_BLOCK)`` samples: what leaves the lines during a
    block was written at least ``L`` samples earlier, so a whole block is one ``(B, N, L)``
    array and one batched matrix product with the per-copy matrices ``A·diag(g_b)``. The lines
    share a circular buffer of length ``P >= max(m_i) + L``. The cap :data:`MAX_BLOCK` keeps
    the block's arrays in the processor's cache at high rates (at 96 kHz a block of
    ``min(m_i)`` is ~3 MB per array and the loop ran memory-bound).
    """
    n_samples = int(n_samples)
    if n_samples < 0:
        raise ParameterError(f"n_samples={n_samples} must be >= 0")
    m = np.asarray(net.delays, dtype=np.int64)
    n_lines, n_b = net.n_lines, net.n_copies
    block = int(min(int(m.min()), MAX_BLOCK))
    p = 1 << int(math.ceil(math.log2(int(m.max()) + block + 1)))
    buf = np.zeros((n_b, n_lines, p), dtype=dtype)
    if state is not None:
        if len(state.lines) != n_lines:
            raise ParameterError(f"state has {len(state.lines)} lines; the network has {n_lines}")
        for i, a in enumerate(state.lines):
            if a.shape != (n_b, int(m[i])):
                raise ParameterError(f"state line {i} has shape {a.shape}; expected "
                                     f"({n_b}, {int(m[i])})")
            buf[:, i, : m[i]] = a
    xin = np.zeros(n_samples)
    if x is not None:
        xa = np.asarray(x, dtype=np.float64).ravel()
        if xa.size > n_samples:
            raise ParameterError(f"the input has {xa.size} samples, more than n_samples={n_samples}")
        xin[: xa.size] = xa
    y = np.empty((n_b, n_samples), dtype=dtype)
    # A·diag(g_b) for each copy b: one batched product per block
    ag = (net.matrix[np.newaxis, :, :] * net.gains[:, np.newaxis, :]).astype(dtype)
    b_vec, c_vec = net.b[:, np.newaxis].astype(dtype), net.c.astype(dtype)
    has_input = np.flatnonzero(xin)
    last_input = int(has_input[-1]) if has_input.size else -1
    k = 0
    while k < n_samples:
        n_blk = min(block, n_samples - k)
        r0 = k % p
        if r0 + n_blk <= p:
            s = buf[:, :, r0: r0 + n_blk]
        else:
            s = np.concatenate((buf[:, :, r0:], buf[:, :, : r0 + n_blk - p]), axis=2)
        y[:, k: k + n_blk] = np.matmul(c_vec, s)
        v = np.matmul(ag, s)
        if k <= last_input:
            v += b_vec * xin[k: k + n_blk]
        for i in range(n_lines):
            w0 = (k + int(m[i])) % p
            if w0 + n_blk <= p:
                buf[:, i, w0: w0 + n_blk] = v[:, i, :]
            else:
                cut = p - w0
                buf[:, i, w0:] = v[:, i, :cut]
                buf[:, i, : n_blk - cut] = v[:, i, cut:]
        k += n_blk
    lines = []
    for i in range(n_lines):
        idx = (n_samples + np.arange(int(m[i]))) % p
        lines.append(buf[:, i, idx].copy())
    return y, NetworkState(tuple(lines))


def _sign_pattern(n: int, salt: int) -> np.ndarray:
    # A fixed, documented ±1 pattern (bits of a Weyl sequence), so rendering is deterministic
    # without a random generator: the input and output gains must not be all equal, or the
    # Hadamard matrix would send the first round trip into a single line.
    k = np.arange(n)
    frac = (k * 0.6180339887498949 + salt * 0.7548776662466927) % 1.0
    return np.where(frac < 0.5, 1.0, -1.0)


def half_spectrum_weights(n_fft: int) -> np.ndarray:
    """Parseval weights of the ``n_fft // 2 + 1`` bins of a real signal's ``rfft``.

    ``Σ x² = (|X|² @ w) / n_fft``: the interior bins stand for themselves and their mirror
    images (weight 2); DC, and Nyquist for an even ``n_fft``, only for themselves (weight 1).
    """
    w = np.full(n_fft // 2 + 1, 2.0)
    w[0] = 1.0
    if n_fft % 2 == 0:
        w[-1] = 1.0
    return w


def band_masks(band_centers_hz: Sequence[float], freqs_hz: np.ndarray, *,
               transition_octaves: float | None = None) -> np.ndarray:
    """Amplitude-complementary band masks (:func:`measure.bands.complementary_masks`) with
    this module's default cross-fade width, MASK_TRANSITION_OCTAVES."""
    from measure.bands import complementary_masks

    if transition_octaves is None:
        transition_octaves = MASK_TRANSITION_OCTAVES
    return complementary_masks(band_centers_hz, freqs_hz, transition_octaves=transition_octaves)


def white_levels_db(band_centers_hz: Sequence[float], fs: int, total_db: float) -> tuple[float, ...]:
    """Band levels of a white spectrum whose total energy is ``total_db``.

    Each band gets the share ``∫W_b(f)² df / Σ_b ∫W_b(f)² df`` of the energy, ``W_b`` the masks
    of :func:`band_masks` up to Nyquist at ``fs``.
    """
    fs = check_fs(fs)
    f = np.linspace(0.0, fs / 2, 8193)
    w2 = np.sum(band_masks(band_centers_hz, f) ** 2, axis=1)
    return tuple(float(total_db + 10.0 * math.log10(v / w2.sum())) for v in w2)


@dataclass(frozen=True, slots=True, eq=False)
class LateReverb:
    """The late part of a room model, independent of the sample rate.

    Attributes
    ----------
    band_centers_hz : tuple of float
        Octave-band centres, rising.
    t60_s : tuple of float, > 0, s
        Decay time of the network per band.
    level_db : tuple of float, dB
        Energy of the late part within each band mask before the envelope correction,
        ``10·log10 Σ h_b[n]²``, re the energy of a unit impulse (so its ratio to the direct
        sound is the same at every sample rate).
    start_s : float, >= 0, s
        Where the late part starts, re the direct sound.
    fade_s : float, >= 0, s
        Length of its half-Hann fade-in.
    delays_s : tuple of float, s
        Nominal delay-line lengths (made distinct primes at the rendering rate).
    envelope_edges_s : tuple of tuple of float, s
        Per band, segment edges re the direct sound (rising) of its envelope correction;
        ``()`` for no correction at all.
    envelope_db : tuple of tuple of float, dB
        Per band, one gain per segment (see :func:`envelope_gain`): the early energy of a
        measured band rarely follows one exponential, and this is what makes the model's early
        decay and clarity follow the measurement's.
    diffuse_from_s : float or None, s
        Start (re the direct sound) of the early diffuse part: band-shaped noise that carries
        the diffuse energy between the direct sound and the network's start ``start_s`` and
        cross-fades (power-complementary, over ``fade_s``) into the network; see
        :func:`render_late_bands`. None: the network alone (its fade-in a half-Hann).
    """

    band_centers_hz: tuple[float, ...]
    t60_s: tuple[float, ...]
    level_db: tuple[float, ...]
    start_s: float
    fade_s: float
    delays_s: tuple[float, ...]
    envelope_edges_s: tuple[tuple[float, ...], ...] = ()
    envelope_db: tuple[tuple[float, ...], ...] = ()
    diffuse_from_s: float | None = None

    def __post_init__(self) -> None:
        n = len(self.band_centers_hz)
        if n < 1 or len(self.t60_s) != n or len(self.level_db) != n:
            raise ParameterError(
                f"late part: {n} band centres, {len(self.t60_s)} decay times and "
                f"{len(self.level_db)} levels must be equally many and at least one")
        fc = np.asarray(self.band_centers_hz, dtype=np.float64)
        if not np.all(fc > 0) or not np.all(np.diff(fc) > 0):
            raise ParameterError(f"band_centers_hz={self.band_centers_hz!r} must be positive and "
                                 "rising")
        for t in self.t60_s:
            check_positive(t, "t60", unit="s")
        if not all(np.isfinite(v) for v in self.level_db):
            raise ParameterError(f"level_db={self.level_db!r} must be finite")
        if not (self.start_s >= 0) or not (self.fade_s >= 0):
            raise ParameterError(f"start_s={self.start_s!r} and fade_s={self.fade_s!r} must be "
                                 ">= 0")
        if self.diffuse_from_s is not None and not (0 <= self.diffuse_from_s < self.start_s):
            raise ParameterError(f"diffuse_from_s={self.diffuse_from_s!r} must lie in 0 … "
                                 f"start_s={self.start_s!r}, or be None (no early diffuse part)")
        n_l = len(self.delays_s)
        if n_l < 2 or n_l & (n_l - 1):
            raise ParameterError(f"{n_l} delay lines given; the network needs a power of two >= 2")
        for d in self.delays_s:
            check_positive(d, "delay", unit="s")
        if len(self.envelope_edges_s) or len(self.envelope_db):
            if len(self.envelope_edges_s) != n or len(self.envelope_db) != n:
                raise ParameterError(
                    f"the envelope needs knots and gains for each of the {n} bands; got "
                    f"{len(self.envelope_edges_s)} and {len(self.envelope_db)}; re-fit the model")
            for b, (kn, db) in enumerate(zip(self.envelope_edges_s, self.envelope_db,
                                             strict=True)):
                k = np.asarray(kn, dtype=np.float64)
                d = np.asarray(db, dtype=np.float64)
                if (k.ndim != 1 or d.ndim != 1 or d.size < 1 or k.size != d.size + 1
                        or not np.all(np.isfinite(k)) or not np.all(np.isfinite(d))
                        or np.any(np.diff(k) <= ENVELOPE_RAMP_S)):
                    raise ParameterError(
                        f"envelope of band {b}: edges {kn!r} must be finite and rising (more than "
                        f"{ENVELOPE_RAMP_S * 1000:g} ms apart), one more than its gains {db!r}; "
                        "re-fit the model")

    def replace(self, **changes) -> LateReverb:
        """A copy with some fields changed."""
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict:
        return {
            "band_centers_hz": [float(v) for v in self.band_centers_hz],
            "t60_s": [float(v) for v in self.t60_s],
            "level_db": [float(v) for v in self.level_db],
            "start_s": float(self.start_s),
            "fade_s": float(self.fade_s),
            "delays_s": [float(v) for v in self.delays_s],
            "envelope_edges_s": [[float(v) for v in row] for row in self.envelope_edges_s],
            "envelope_db": [[float(v) for v in row] for row in self.envelope_db],
            "diffuse_from_s": None if self.diffuse_from_s is None else float(self.diffuse_from_s),
        }


def make_network(late: LateReverb, fs: int) -> DelayNetwork:
    """The per-band network of ``late`` at rate ``fs`` (bands above Nyquist included)."""
    delays = coprime_delays(late.delays_s, fs)
    n = len(delays)
    return DelayNetwork(
        delays=delays, matrix=orthogonal_matrix(n),
        gains=line_gains(delays, fs, np.asarray(late.t60_s)),
        b=_sign_pattern(n, 1), c=_sign_pattern(n, 2) / math.sqrt(n))


def kept_bands(late: LateReverb, fs: int) -> np.ndarray:
    """Mask of the bands rendered at ``fs``: centres below 0.45·fs."""
    return np.asarray(late.band_centers_hz) < 0.45 * fs


def render_late_bands(late: LateReverb, fs: int, n_samples: int) -> np.ndarray:
    """The late part band by band, ``(kept bands, n_samples)``, time 0 = the direct sound.

    Parameters
    ----------
    late : LateReverb
    fs : int, > 0, Hz
    n_samples : int, >= 1

    Returns
    -------
    ndarray, shape (number of bands with centre < 0.45·fs, n_samples)
        Their sum is :func:`render_late`.

    Notes
    -----
    1. Run the per-band network from a unit impulse; drop the first
       :data:`PREROLL_ROUND_TRIPS` mean delays (the sparse first round trips).
    2. Apply the half-Hann fade-in and place the start at ``start_s``.
    3. Weight each band's output with its mask in the frequency domain (zero phase), scale it to
       its energy ``level_db``, and multiply by the band's envelope correction.
    Bands whose centre lies above 0.45·fs are left out and the mask of the highest band kept
    reaches to Nyquist.
    """
    from scipy.fft import irfft, next_fast_len, rfft

    fs = check_fs(fs)
    n_samples = int(n_samples)
    keep = kept_bands(late, fs)
    if not np.any(keep):
        raise ParameterError(f"every late band lies above Nyquist at fs={fs}; use a higher rate")
    fc = np.asarray(late.band_centers_hz)[keep]
    net = make_network(late, fs)
    net = DelayNetwork(net.delays, net.matrix, np.ascontiguousarray(net.gains[keep]), net.b, net.c)
    out = np.zeros((fc.size, n_samples))
    start = int(round(late.start_s * fs))
    fade = int(round(late.fade_s * fs))
    if start >= n_samples:
        return out
    lead = int(round(0.01 * fs))  # room before the start for the masks' zero-phase spread
    n_pre = int(round(PREROLL_ROUND_TRIPS * np.mean(net.delays)))
    n_body = n_samples - start
    y, _ = run_network(net, n_pre + n_body, x=np.ones(1), dtype=np.float32)
    seg = y[:, n_pre:]
    diffuse = late.diffuse_from_s is not None
    if fade > 0:
        k = min(fade, n_body)
        ramp = np.sin(0.5 * np.pi * (np.arange(k) + 0.5) / fade)
        # with an early diffuse part, sin/cos: the powers of the two add to one
        seg[:, :k] *= ramp if diffuse else ramp ** 2
    n_fft = next_fast_len(lead + n_body + lead, real=True)
    buf = np.zeros((fc.size, n_fft))
    buf[:, lead: lead + n_body] = seg
    spec = rfft(buf, axis=1)
    spec *= band_masks(fc, np.arange(spec.shape[1]) * fs / n_fft)
    energy = (np.abs(spec) ** 2 @ half_spectrum_weights(n_fft)) / n_fft
    target = 10.0 ** (np.asarray(late.level_db)[keep] / 10.0)
    spec *= np.sqrt(target / np.maximum(energy, 1e-300))[:, np.newaxis]
    body = irfft(spec, n=n_fft, axis=1)
    lo = start - lead
    src0, dst0 = max(0, -lo), max(0, lo)
    n_copy = min(n_samples - dst0, n_fft - src0)
    out[:, dst0: dst0 + n_copy] = body[:, src0: src0 + n_copy]
    if diffuse:
        out += _early_diffuse(late, fs, n_samples, out, keep)
    if late.envelope_edges_s:
        t = np.arange(n_samples) / fs
        rows = [i for i in range(keep.size) if keep[i]]
        for j, i in enumerate(rows):
            if len(late.envelope_edges_s[i]):
                out[j] *= envelope_gain(t, late.envelope_edges_s[i], late.envelope_db[i])
    return out


def _early_diffuse(late: LateReverb, fs: int, n_samples: int, net_out: np.ndarray,
                   keep: np.ndarray) -> np.ndarray:
    """The early diffuse part, band by band: noise from ``diffuse_from_s`` into the network.

    Gaussian noise from a fixed seed (so a model renders the same every time), split into the
    bands with the masks of :func:`band_masks` and given, per band, the network output's power
    at its start continued backwards along the band's decay ``exp(−13.8·t/T60)``; a 1 ms
    half-Hann fade-in at ``diffuse_from_s`` and a cosine fade-out over the network's sine
    fade-in (their powers add to one). The envelope correction then shapes it like the rest.
    """
    from scipy.fft import irfft, next_fast_len, rfft

    d0 = int(round(late.diffuse_from_s * fs))
    start = int(round(late.start_s * fs))
    fade = int(round(late.fade_s * fs))
    stop = min(n_samples, start + fade)
    out = np.zeros_like(net_out)
    if d0 >= stop:
        return out
    n_seg = stop - d0
    pad = int(round(DIFFUSE_PAD_S * fs))  # noise on both sides: the cut-out stays stationary
    rng = np.random.default_rng(DIFFUSE_SEED)
    n_fft = next_fast_len(n_seg + 4 * pad, real=True)
    buf = np.zeros(n_fft)
    buf[: n_seg + 2 * pad] = rng.standard_normal(n_seg + 2 * pad)
    spec = rfft(buf)
    fc = np.asarray(late.band_centers_hz)[keep]
    masks = band_masks(fc, np.arange(spec.size) * fs / n_fft)
    noise = irfft(spec[np.newaxis, :] * masks, n=n_fft, axis=1)[:, pad: pad + n_seg]
    # expected power of unit white noise through a zero-phase mask: the mean of |W|² over the
    # whole spectrum
    p_noise = (masks ** 2 @ half_spectrum_weights(n_fft)) / n_fft
    t60 = np.asarray(late.t60_s)[keep][:, np.newaxis]
    rate = DECAY_60DB_E / t60  # energy decay per second
    # the network's power at its start: its band energy level_db spread over an exponential
    # decay exp(−rate·t) from start_s to the end of the rendering (less half the fade)
    span = max(n_samples - start, 1) / fs
    e_band = 10.0 ** (np.asarray(late.level_db)[keep] / 10.0)
    n_eff = fs * (1.0 - np.exp(-rate[:, 0] * span)) / rate[:, 0] - 0.5 * fade  # samples
    p_net = e_band / np.maximum(n_eff, 1.0)
    t = (np.arange(d0, stop) - start) / fs
    amp = np.sqrt(p_net / np.maximum(p_noise, 1e-300))[:, np.newaxis] * np.exp(-0.5 * rate * t)
    win = np.ones(n_seg)
    k_in = min(n_seg, max(1, int(round(DIFFUSE_FADE_IN_S * fs))))
    win[:k_in] = np.sin(0.5 * np.pi * (np.arange(k_in) + 0.5) / k_in) ** 2
    if fade > 0:
        k = np.arange(max(start, d0), stop)
        win[k - d0] *= np.cos(0.5 * np.pi * (k - start + 0.5) / fade)
    out[:, d0:stop] = noise * amp * win
    return out


def envelope_gain(t_s: np.ndarray, edges_s: Sequence[float], gains_db: Sequence[float]
                  ) -> np.ndarray:
    """Amplitude factor of an envelope correction: one gain per segment between edges.

    ``len(edges_s) == len(gains_db) + 1``; the first gain also holds before the first edge and
    the last one after the last edge. At each interior edge the power gain ramps linearly over
    :data:`ENVELOPE_RAMP_S` centred on the edge, so the correction has no clicks.
    """
    e = np.asarray(edges_s, dtype=np.float64)
    p = 10.0 ** (np.asarray(gains_db, dtype=np.float64) / 10.0)
    if p.size == 1:
        return np.full(np.shape(t_s), math.sqrt(p[0]))
    half = 0.5 * ENVELOPE_RAMP_S
    xs, ys = [], []
    for j, edge in enumerate(e[1:-1]):
        xs += [edge - half, edge + half]
        ys += [p[j], p[j + 1]]
    return np.sqrt(np.interp(t_s, xs, ys))


def render_late(late: LateReverb, fs: int, n_samples: int) -> np.ndarray:
    """The late part alone, ``n_samples`` long, time 0 = the direct sound.

    See :func:`render_late_bands`, whose bands this sums.

    Returns
    -------
    ndarray, shape (n_samples,)
    """
    return render_late_bands(late, fs, n_samples).sum(axis=0)


def analysis_octaves(centers_hz: Sequence[float], fs: int) -> list:
    """The IEC octave bands of :mod:`measure.bands` at ``fs`` nearest ``centers_hz`` (within a
    tenth of an octave), one per centre; None where ``fs`` carries no such band."""
    from measure.bands import make_bands

    bands = make_bands(fs, "octave")
    out = []
    for f in centers_hz:
        match = [b for b in bands if abs(math.log2(b.center_hz / f)) < 0.1]
        out.append(match[0] if match else None)
    return out


def octave_t30_s(h: np.ndarray, fs: int, bands) -> list[float | None]:
    """T30 of ``h`` in each band of ``bands`` (None entries stay None), by :mod:`measure.decay`.

    The onset is that of the broadband ``h`` (ISO 3382-1 A.3.4); time-reversed filtering.
    """
    from measure.bands import filter_bands
    from measure.decay import analyze_decay, onset_index

    real = [b for b in bands if b is not None]
    hb = filter_bands(h, fs, real, mode="reversed")
    on = onset_index(h, fs)
    vals = iter([analyze_decay(x, fs, onset=on).t30_s for x in hb])
    return [None if b is None else next(vals) for b in bands]


def calibrate_decay(late: LateReverb, fs: int, target_t30_s: Sequence[float | None], *,
                    n_iterations: int = 6, tolerance: float = 0.01
                    ) -> tuple[LateReverb, tuple[float | None, ...]]:
    """Adjust the network's decay times until the octave-band T30 of its output hits targets.

    An octave-band analysis filter also passes part of the neighbouring bands, whose decay
    differs, and a single rendering fluctuates around its mean decay (modes beating); so the
    T30 measured on the output is not exactly the ``t60_s`` asked of the network. This
    renders the late part alone, measures its T30 per band with :mod:`measure.bands` and
    :mod:`measure.decay` (the analysis the rest of the package reports), and scales each band's
    decay time by ``target / measured`` (at most a factor 1.5 per step), until every band is
    within ``tolerance`` or ``n_iterations`` is spent. The network is deterministic, so the
    measured T30 is a smooth function of the decay times and the iteration converges in a few
    steps.

    Parameters
    ----------
    late : LateReverb
    fs : int, > 0, Hz
        Rate of the analysis (and of the rendering it is tuned for).
    target_t30_s : sequence of float or None
        Wanted T30 per band of ``late``; None leaves a band as it is.

    Returns
    -------
    late : LateReverb
        With calibrated ``t60_s``.
    t30_s : tuple of float or None
        T30 per band measured on the last rendering.
    """
    fs = check_fs(fs)
    if len(target_t30_s) != len(late.t60_s):
        raise ParameterError(f"{len(target_t30_s)} targets for {len(late.t60_s)} bands; give one "
                             "per band (None to leave a band alone)")
    bands = analysis_octaves(late.band_centers_hz, fs)
    t60 = np.asarray(late.t60_s, dtype=np.float64)
    lo, hi = t60 / CALIBRATION_RANGE, t60 * CALIBRATION_RANGE
    measured: list[float | None] = [None] * t60.size
    for _ in range(max(1, int(n_iterations))):
        n = int(round((late.start_s + CALIBRATION_LENGTH * float(t60.max())) * fs)) + 1
        cur = late.replace(t60_s=tuple(float(v) for v in t60))
        measured = octave_t30_s(render_late(cur, fs, n), fs, bands)
        worst = 0.0
        for i, (want, got) in enumerate(zip(target_t30_s, measured, strict=True)):
            if want is None or got is None:
                continue
            ratio = float(np.clip(want / got, 1 / 1.5, 1.5))
            worst = max(worst, abs(ratio - 1.0))
            t60[i] = float(np.clip(t60[i] * ratio, lo[i], hi[i]))
        if worst < tolerance:
            break
        late = cur
    final = late.replace(t60_s=tuple(float(v) for v in t60))
    if worst >= tolerance:  # the last step changed t60 after the last measurement: re-measure
        n = int(round((final.start_s + CALIBRATION_LENGTH * float(t60.max())) * fs)) + 1
        measured = octave_t30_s(render_late(final, fs, n), fs, bands)
    return final, tuple(measured)
