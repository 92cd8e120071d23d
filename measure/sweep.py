"""Exponential sine sweeps: design, the signal to play, and the spectrum of its inverse.

The sweep is the exponential (logarithmic) sine sweep of Farina [1]_:

    x(t) = A · sin(2π f1 L (e^{t/L} − 1)),  0 ≤ t < T,  L = T / ln(f2/f1),

whose instantaneous frequency f1·e^{t/L} spends equal time in every octave. By stationary phase
its spectrum is pink, |X(f)| = (A/2)·√(L/f) inside [f1, f2] (measurement.md §1.1), and the
harmonic-distortion products of a deconvolution land before the linear impulse response,
advanced by L·ln N for the N-th harmonic [1]_.

The inverse (:func:`inverse_spectrum`)
--------------------------------------
Deconvolution is regularised spectral division (Kirkeby et al. [2]_, measurement.md §1.7):

    G(f) = X*(f) / (|X(f)|² + ε(f)),   ε(f) = β·max|X|² + P_nom(f)·ρ(f).

* Inside [f1, f2] ρ = 0 and ε = β·max|X|² with β = 1e-6 (60 dB below the strongest bin): G is
  the exact inverse 1/X wherever the sweep has energy, fades included, and equals the ideal
  in-band inverse of measurement.md §1.7 there. (A sweep from 20 Hz loses 0.005 dB at 20 kHz to
  this ε; one from 1 Hz, 0.1 dB at 24 kHz.)
* Outside [f1, f2] the sweep has no energy of its own, only the skirts of its edges and its
  fades. There ε follows the sweep's nominal power at the nearer edge, P_nom(f) = |X(f_edge)|²
  (the stationary-phase level above, in DFT units fs²·A²·L/(4 f_edge)), times a raised-cosine
  step ρ(f) that rises from 0 at the edge to 1 over :data:`LOW_TRANSITION_OCTAVES` below f1 and
  :data:`HIGH_TRANSITION_OCTAVES` above f2. Since max over |X| of |X|/(|X|² + c) is 1/(2√c),
  the gain beyond the transition is at most half the in-band gain at the edge, whatever the
  sweep's skirts hold: the background noise there is not amplified.

The earlier design let ε rise geometrically from 1e-9·max|X|² to max|X|² over half an octave
outside the band; the sweep's skirt falls much faster than that, so just above f2 the inverse's
gain stood about 50 dB above its in-band gain (measured: 52 dB at 20.7 kHz for a 20 Hz–20 kHz
sweep at 48 kHz), and white background noise there filled every octave band of the response
(a 50 Hz–16 kHz sweep lost 12 dB of range in the 8 kHz octave; 100 Hz–10 kHz with 0.2 s fades,
20 dB). With this design the deconvolved noise of every octave band inside the sweep equals an
ideal in-band inverse (measured within 0.06 dB for white, pink and rumble noise, 44.1–96 kHz, sweeps
ending at 10, 16, 20 kHz or Nyquist, fades of 0–0.5 s; tests/test_noise_floor.py).

The low transition is wide (half an octave) so that the band limit at f1 rings for about two
periods of f1 only: the response keeps that much time before its direct sound
(:func:`measure.deconvolve.default_pre_s`). The high one is narrow (1/12 octave) because the
sweep's skirt above f2 is narrow; a sweep that reaches Nyquist has no band above it.

Everything that defines the signal is in :class:`SweepSpec`; :func:`make_sweep` rebuilds it bit
for bit from those numbers, which is what the JSON sidecar stores.

References
----------
.. [1] A. Farina, "Simultaneous measurement of impulse response and distortion with a
   swept-sine technique", AES 108th Convention, Paris, 2000, preprint 5093.
.. [2] O. Kirkeby, P. A. Nelson, H. Hamada, F. Orduna-Bustamante, "Fast deconvolution of
   multichannel systems using regularization", IEEE Trans. Speech Audio Process. 6(2), 1998.
"""

from __future__ import annotations

import functools
import math
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from measure._validate import check_fs, check_nonnegative, check_positive
from measure._version import __version__
from measure.errors import AudioFileError, ParameterError

__all__ = [
    "SweepSpec",
    "Sweep",
    "make_sweep",
    "sweep_signal",
    "inverse_spectrum",
    "spec_from_dict",
    "SIDECAR_FORMAT",
    "DEFAULT_LEVEL_DBFS",
]

SIDECAR_FORMAT = "measure.sweep/1"
#: Peak level of a new sweep. Deliberately low: raise it step by step after a level check.
DEFAULT_LEVEL_DBFS = -20.0
#: In-band regularisation β of the spectral division, relative to the largest |X|²: 60 dB down,
#: the ideal in-band inverse of measurement.md §1.7 (see the module notes).
IN_BAND_REGULARISATION = 1e-6
#: Out-of-band regularisation ρ reached at the end of each transition, relative to the sweep's
#: nominal power at the nearer edge: the gain there is at most half the edge's (module notes).
OUT_OF_BAND_REGULARISATION = 1.0
#: Widths of the raised-cosine steps of ρ below f1 and above f2, in octaves (module notes).
LOW_TRANSITION_OCTAVES = 0.5
HIGH_TRANSITION_OCTAVES = 1.0 / 12.0


#: Longest sweep file (lead-in, sweeps and gaps), s: a take of it and the arrays its recovery
#: works on (a few float64 copies at twice its length) stay within a laptop's memory.
MAX_FILE_S = 600.0


@dataclass(frozen=True, slots=True)
class SweepSpec:
    """Every number that defines a sweep file; rebuilt bit for bit by :func:`make_sweep`.

    Parameters
    ----------
    fs : int, > 0, Hz
        Sample rate.
    f1_hz : float, > 0, Hz
        Start frequency.
    f2_hz : float, f1_hz < f2_hz <= fs/2, Hz
        Stop frequency. Running up to Nyquist (the default of the command line) gives a loopback
        impulse of unit peak.
    duration_s : float, > 0, s
        Length of one sweep.
    repeats : int, >= 1
        Number of sweeps in the file, each followed by ``gap_s`` of silence.
    gap_s : float, >= 0, s
        Silence after each sweep, for the room's tail; make it at least the reverberation time.
    lead_in_s : float, >= 0, s
        Silence before the first sweep.
    level_dbfs : float, <= 0, dBFS
        Peak level of the sweep.
    fade_in_s, fade_out_s : float, >= 0, s
        Half-Hann fade lengths at the start and end of each sweep.
    """

    fs: int
    f1_hz: float
    f2_hz: float
    duration_s: float
    repeats: int = 1
    gap_s: float = 2.0
    lead_in_s: float = 0.5
    level_dbfs: float = DEFAULT_LEVEL_DBFS
    fade_in_s: float = 0.05
    fade_out_s: float = 0.002

    def __post_init__(self) -> None:
        fs = check_fs(self.fs)
        f1 = check_positive(self.f1_hz, "f1", unit="Hz")
        f2 = check_positive(self.f2_hz, "f2", unit="Hz")
        nyquist = fs / 2
        if f2 > nyquist:
            raise ParameterError(
                f"the stop frequency f2={f2:g} Hz exceeds Nyquist ({nyquist:g} Hz at {fs} Hz); "
                "lower f2 or use a higher sample rate")
        if not f1 < f2:
            raise ParameterError(
                f"the start frequency f1={f1:g} Hz must be below the stop frequency f2={f2:g} Hz; "
                "swap or change them")
        check_positive(self.duration_s, "duration", unit="s")
        if isinstance(self.repeats, bool) or int(self.repeats) != self.repeats or self.repeats < 1:
            raise ParameterError(f"repeats={self.repeats!r} must be a whole number >= 1")
        check_nonnegative(self.gap_s, "gap", unit="s")
        check_nonnegative(self.lead_in_s, "lead-in", unit="s")
        check_nonnegative(self.fade_in_s, "fade-in", unit="s")
        check_nonnegative(self.fade_out_s, "fade-out", unit="s")
        if not np.isfinite(self.level_dbfs) or self.level_dbfs > 0:
            raise ParameterError(
                f"level={self.level_dbfs!r} dBFS must be at most 0 dBFS (full scale); "
                "start low, e.g. -20, and raise it step by step")
        if self.fade_in_s + self.fade_out_s > self.duration_s:
            raise ParameterError(
                f"the fades ({self.fade_in_s:g} s + {self.fade_out_s:g} s) are longer than the "
                f"sweep ({self.duration_s:g} s); shorten them or lengthen the sweep")
        if self.n_sweep < 16:
            raise ParameterError(
                f"a {self.duration_s:g} s sweep at {fs} Hz has fewer than 16 samples; lengthen it")
        total_s = self.lead_in_s + self.repeats * (self.duration_s + self.gap_s)
        if total_s > MAX_FILE_S:
            raise ParameterError(
                f"the sweep file would last {total_s:.3g} s; at most {MAX_FILE_S:g} s "
                f"({MAX_FILE_S / 60:g} min) fits the memory that recovering its takes needs; "
                "use fewer repeats, a shorter sweep or a shorter gap")
        object.__setattr__(self, "fs", fs)
        object.__setattr__(self, "repeats", int(self.repeats))

    # -- derived sizes (all in samples) -------------------------------------------------------
    @property
    def rate_constant_s(self) -> float:
        """L = T / ln(f2/f1), the sweep's rate constant in seconds."""
        return self.duration_s / math.log(self.f2_hz / self.f1_hz)

    @property
    def n_sweep(self) -> int:
        return int(round(self.duration_s * self.fs))

    @property
    def n_gap(self) -> int:
        return int(round(self.gap_s * self.fs))

    @property
    def n_lead(self) -> int:
        return int(round(self.lead_in_s * self.fs))

    @property
    def n_period(self) -> int:
        """Samples from the start of one sweep to the start of the next."""
        return self.n_sweep + self.n_gap

    @property
    def n_total(self) -> int:
        return self.n_lead + self.repeats * self.n_period

    @property
    def peak(self) -> float:
        return 10.0 ** (self.level_dbfs / 20.0)

    def harmonic_advance_s(self, order: int) -> float:
        """How far the ``order``-th harmonic IR lands before the linear one: L·ln(order) [1]."""
        return self.rate_constant_s * math.log(order)

    def sweep_start(self, k: int) -> int:
        """Index of the first sample of sweep ``k`` (0-based) in the played file."""
        return self.n_lead + k * self.n_period

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def spec_from_dict(d: dict[str, Any], *, source: str = "sidecar") -> SweepSpec:
    """Rebuild a :class:`SweepSpec` from a sweep sidecar.

    Raises
    ------
    AudioFileError
        If the sidecar is of another format or lacks a field.
    """
    if d.get("format") != SIDECAR_FORMAT:
        raise AudioFileError(
            f"{source} has format {d.get('format')!r}, expected {SIDECAR_FORMAT!r}; "
            "make the sweep again with `measure sweep`")
    try:
        spec = d["sweep"]
        return SweepSpec(**{k: spec[k] for k in SweepSpec.__dataclass_fields__})
    except (KeyError, TypeError) as err:
        raise AudioFileError(
            f"{source} lacks the sweep field {err}; make the sweep again with `measure sweep`"
        ) from err
    except ParameterError as err:
        raise AudioFileError(f"{source} holds an invalid sweep: {err}") from err


@dataclass(frozen=True, slots=True, eq=False)
class Sweep:
    """A designed sweep: one sweep ``x`` and the whole file to play, ``program``.

    Attributes
    ----------
    spec : SweepSpec
    x : ndarray, (n_sweep,), float64
        One sweep, peak ``spec.peak``.
    program : ndarray, (n_total,), float64
        Lead-in silence, then ``repeats`` × (sweep, gap).
    """

    spec: SweepSpec
    x: np.ndarray
    program: np.ndarray = field(repr=False)

    def __post_init__(self) -> None:
        self.x.setflags(write=False)
        self.program.setflags(write=False)

    @property
    def fs(self) -> int:
        return self.spec.fs

    def sidecar(self) -> dict[str, Any]:
        """The JSON sidecar: every number needed to rebuild the signal and its inverse."""
        s = self.spec
        return {
            "format": SIDECAR_FORMAT,
            "tool_version": __version__,
            "kind": "exponential sine sweep",
            "sweep": s.to_dict(),
            "rate_constant_s": s.rate_constant_s,
            "n_sweep_samples": s.n_sweep,
            "n_period_samples": s.n_period,
            "n_lead_samples": s.n_lead,
            "n_total_samples": s.n_total,
            "sample_format": "FLOAT",
            "fade_shape": "half-Hann",
            "formula": "x(n) = 10^(level_dbfs/20) * sin(2*pi*f1_hz*L*(exp(n/(fs*L)) - 1)) * fade(n)",
            "inverse": {
                "method": "regularised spectral division X*/(|X|^2 + eps)",
                "in_band_regularisation_re_max_power": IN_BAND_REGULARISATION,
                "out_of_band_regularisation_re_edge_power": OUT_OF_BAND_REGULARISATION,
                "low_transition_octaves": LOW_TRANSITION_OCTAVES,
                "high_transition_octaves": HIGH_TRANSITION_OCTAVES,
            },
            "harmonic_advance_s": {str(n): s.harmonic_advance_s(n) for n in range(2, 6)},
        }


def sweep_signal(spec: SweepSpec, *, stretch: float = 1.0) -> np.ndarray:
    """One sweep sampled at ``fs·stretch`` (the same continuous signal on a faster clock).

    ``stretch = 1`` gives the samples that are played. A recording device whose clock runs
    ε fast samples the played sweep at ``fs·(1+ε)``; ``stretch = 1+ε`` reproduces what it
    records, which is how drift is removed in :mod:`measure.deconvolve`.
    """
    if not (stretch > 0):
        raise ParameterError(f"stretch={stretch!r} must be positive")
    fs_eff = spec.fs * stretch
    n = int(round(spec.n_sweep * stretch))
    L = spec.rate_constant_s
    # in place, to keep long sweeps light: t → phase → sin
    x = np.arange(n, dtype=np.float64)
    x /= fs_eff * L
    np.expm1(x, out=x)  # expm1 keeps the phase accurate near t = 0
    x *= 2.0 * math.pi * spec.f1_hz * L
    np.mod(x, 2.0 * math.pi, out=x)  # reduce before sin() for accuracy late in the sweep
    np.sin(x, out=x)
    x *= spec.peak
    n_in = min(int(math.ceil(spec.fade_in_s * fs_eff)), n)
    if spec.fade_in_s > 0 and n_in > 0:
        u = np.arange(n_in) / fs_eff / spec.fade_in_s
        x[:n_in] *= 0.5 - 0.5 * np.cos(math.pi * np.minimum(u, 1.0))
    n_out = min(int(math.ceil(spec.fade_out_s * fs_eff)) + 1, n)
    if spec.fade_out_s > 0 and n_out > 0:
        t = np.arange(n - n_out, n) / fs_eff
        u = np.clip((spec.duration_s - t) / spec.fade_out_s, 0.0, 1.0)
        x[n - n_out:] *= 0.5 - 0.5 * np.cos(math.pi * u)
    return x


def make_sweep(spec: SweepSpec) -> Sweep:
    """Build the sweep and the whole file to play from ``spec`` (deterministic, bit for bit).

    Examples
    --------
    >>> s = make_sweep(SweepSpec(fs=8000, f1_hz=50.0, f2_hz=4000.0, duration_s=1.0,
    ...                          repeats=2, gap_s=0.5, lead_in_s=0.25))
    >>> s.program.shape, round(float(abs(s.x).max()), 3)
    ((26000,), 0.1)
    """
    x = sweep_signal(spec)
    program = np.zeros(spec.n_total)
    for k in range(spec.repeats):
        i = spec.sweep_start(k)
        program[i:i + spec.n_sweep] = x
    return Sweep(spec=spec, x=x, program=program)


def _edge_weight(f_hz: np.ndarray, f1_hz: float, f2_hz: float, nyquist_hz: float
                 ) -> np.ndarray:
    """ρ(f)/f_edge: 0 inside [f1, f2], outside a raised-cosine step to ρ_max over the transition
    divided by the nearer edge frequency (the nominal power is ∝ 1/f_edge).

    Only the bins outside [f1, f2] are computed (memory stays at one array for long FFTs).
    """
    w = np.zeros(f_hz.shape)

    def step(sel: np.ndarray, octaves: np.ndarray, width: float, edge_hz: float) -> None:
        u = np.clip(octaves / width, 0.0, 1.0)
        w[sel] = OUT_OF_BAND_REGULARISATION * (0.5 - 0.5 * np.cos(math.pi * u)) / edge_hz

    below = np.nonzero(f_hz < f1_hz)[0]
    step(below, math.log2(f1_hz) - np.log2(np.maximum(f_hz[below], 1e-12)),
         LOW_TRANSITION_OCTAVES, f1_hz)
    if f2_hz < nyquist_hz * 0.999:  # a sweep up to Nyquist has no band above it
        above = np.nonzero(f_hz > f2_hz)[0]
        step(above, np.log2(f_hz[above]) - math.log2(f2_hz), HIGH_TRANSITION_OCTAVES, f2_hz)
    return w


def inverse_spectrum(spec: SweepSpec, n_fft: int, *, stretch: float = 1.0,
                     x: np.ndarray | None = None) -> np.ndarray:
    """rfft-domain inverse of one sweep: X*/(|X|² + ε(f)), for deconvolution by multiplication.

    The design (where ε is small and where it follows the sweep's edges) is in the module notes.

    Parameters
    ----------
    spec : SweepSpec
    n_fft : int
        FFT length; at least the recording length plus the sweep length, so that the linear
        convolution does not wrap.
    stretch : float
        Clock ratio of the recorder to the player (1 + drift), see :func:`sweep_signal`.
    x : ndarray, optional
        The sweep's samples when the caller has them (:attr:`Sweep.x`, ``stretch`` 1): they
        are not computed again.

    Returns
    -------
    ndarray, (n_fft//2 + 1,), complex128
        Multiply the rfft of a recording by this and take the irfft: the impulse response of
        sweep start ``s`` in the recording appears at index ``s``; harmonic products at negative
        lags wrap to the end.

    Examples
    --------
    The gain beyond f2 stays below the in-band gain at f2 (here 20 Hz–20 kHz at 48 kHz):

    >>> spec = SweepSpec(fs=48000, f1_hz=20.0, f2_hz=20000.0, duration_s=2.0)
    >>> g = np.abs(inverse_spectrum(spec, 1 << 18))
    >>> f = np.fft.rfftfreq(1 << 18, 1 / 48000)
    >>> edge = np.median(g[(f > 17000) & (f < 19000)])
    >>> bool(g[f > 20000 * 2 ** (1 / 12)].max() < 0.5 * edge)
    True
    """
    from scipy.fft import rfft

    if x is None or stretch != 1.0:
        x = sweep_signal(spec, stretch=stretch)
    if n_fft < x.size:
        raise ParameterError(f"n_fft={n_fft} is shorter than the sweep ({x.size} samples)")
    X = rfft(x, n_fft)
    power = X.real * X.real
    power += X.imag * X.imag
    # ε: β·max|X|² everywhere, plus the nominal edge power (fs²·A²·L/(4 f_edge), module notes)
    # times the step outside the band. The step's shape is taken on the player's frequency
    # grid: a clock stretch of a few hundred ppm moves it by a negligible fraction of its width.
    floor = IN_BAND_REGULARISATION * float(power.max())
    nominal = spec.fs**2 * spec.peak**2 * spec.rate_constant_s / 4.0
    power += nominal * _weight_on_grid(n_fft, spec.fs, spec.f1_hz, spec.f2_hz)
    power += floor
    np.conjugate(X, out=X)
    X /= power
    return X


@functools.lru_cache(maxsize=8)
def _weight_on_grid(n_fft: int, fs: int, f1_hz: float, f2_hz: float) -> np.ndarray:
    f = np.fft.rfftfreq(n_fft, 1.0 / fs)
    w = _edge_weight(f, f1_hz, f2_hz, fs / 2)
    w.setflags(write=False)
    return w
