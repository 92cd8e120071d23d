"""What an engine takes: an impulse response for a convolution reverb, and fair listening pairs.

Convolution-ready response (:func:`convolution_ir`)
----------------------------------------------------
A recovered response keeps time before its direct sound because the deconvolution's band limit
B(f) = |X|²/(|X|² + ε(f)) (:func:`measure.sweep.inverse_spectrum`) is zero-phase: it rings
before the direct sound as long as after it, and cutting that pre-time away would bend the
magnitude response near f1 by about a decibel. A convolution reverb wants the response to start
at the direct sound, with no pre-delay. So the zero-phase band limit is exchanged for the
minimum-phase one of the same magnitude, H' = H · B_min/B (B_min from the real cepstrum of
ln B, Oppenheim & Schafer, "Discrete-Time Signal Processing", the homomorphic minimum-phase
construction; the same as scipy.signal.minimum_phase's 'homomorphic' method, there for FIR
filters), which puts all of the band limit's ringing after the direct sound; then the response
is cut at the direct sound (its first sample within 40 dB of the peak, :data:`START_LEVEL`)
and scaled to a stated peak. The magnitude above 2·f1 then stays within
:data:`MAX_BEND_DB` of the uncut response (checked by :func:`bend_db`).

Listening pairs (:func:`loudness_matched`)
------------------------------------------
A measured and a modelled auralization are compared fairly only at the same loudness: both are
brought to the same ITU-R BS.1770 integrated loudness (pyloudnorm, a maintained implementation
of BS.1770-4), and then both lowered by one common gain if either's sample peak would pass
−1 dBFS, so neither clips and the match holds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from measure._validate import check_fs, check_signal
from measure.errors import MissingDependencyError, ParameterError

__all__ = ["MAX_BEND_DB", "ConvolutionIR", "convolution_ir", "bend_db", "LoudnessPair",
           "loudness_matched", "integrated_loudness_lufs"]

#: Largest magnitude change above 2·f1 that cutting the pre-time may cause, dB (the issue's
#: acceptance; 1/6-octave smoothed).
MAX_BEND_DB = 0.5
#: The response starts at its first sample within 40 dB of the peak power: one to three samples
#: before the ISO 3382-1 onset (20 dB), which cut the direct sound's leading edge and bent the
#: top octaves by up to 0.4 dB (measured, 20 Hz–24 kHz sweep at 48 kHz).
START_LEVEL = 1e-4


@dataclass(frozen=True, slots=True, eq=False)
class ConvolutionIR:
    """A response ready for a convolution reverb.

    Attributes
    ----------
    h : ndarray
        Starting at the direct sound, scaled so its sample peak is ``peak_dbfs``.
    fs : int
    peak_dbfs : float
    gain_db : float
        The scaling applied to the recovered response.
    cut_s : float
        Time cut from the start of the recovered response.
    bend_db : float
        Largest 1/6-octave magnitude change above 2·f1 against the uncut response.
    """

    h: np.ndarray
    fs: int
    peak_dbfs: float
    gain_db: float
    cut_s: float
    bend_db: float

    def sidecar(self) -> dict[str, Any]:
        note = ("starts at the direct sound (no pre-delay); the band limit made minimum-phase "
                "so the cut does not bend the response")
        if self.bend_db > MAX_BEND_DB:
            note = (f"starts at the direct sound; cutting the pre-time bends the response by "
                    f"{self.bend_db:.2f} dB above 2·f1, more than {MAX_BEND_DB} dB: use the "
                    "recovered response where that matters")
        return {"format": "measure.convolution-ir/1", "fs": self.fs,
                "peak_dbfs": self.peak_dbfs, "gain_db": self.gain_db, "cut_s": self.cut_s,
                "bend_above_2f1_db": self.bend_db, "note": note}


def _band_limit(spec: Any, n_fft: int) -> np.ndarray:
    """B(f) = |X|²/(|X|² + ε(f)) of the sweep's inverse on an rfft grid of ``n_fft``."""
    from measure.sweep import inverse_spectrum, sweep_signal

    x = sweep_signal(spec)
    n = max(n_fft, 1 << int(math.ceil(math.log2(x.size))))
    b = np.real(np.fft.rfft(x, n) * inverse_spectrum(spec, n, x=x))
    if n != n_fft:  # evaluate on the wanted grid
        f_n = np.fft.rfftfreq(n, 1.0)
        b = np.interp(np.fft.rfftfreq(n_fft, 1.0), f_n, b)
    return np.clip(b, 0.0, None)


def _minimum_phase(mag: np.ndarray, n_fft: int) -> np.ndarray:
    """The minimum-phase spectrum with magnitude ``mag`` (rfft grid of ``n_fft``), by folding
    the real cepstrum of ln|mag| (homomorphic construction)."""
    log_mag = np.log(np.maximum(mag, 1e-12))
    c = np.fft.irfft(log_mag, n_fft)
    fold = np.zeros(n_fft)
    fold[0] = c[0]
    fold[1:n_fft // 2] = 2.0 * c[1:n_fft // 2]
    fold[n_fft // 2] = c[n_fft // 2]
    return np.exp(np.fft.rfft(fold, n_fft))


def _smoothed_db(h: np.ndarray, fs: int, grid: np.ndarray, n_fft: int) -> np.ndarray:
    from measure.model._smoothing import smooth_power

    f = np.fft.rfftfreq(n_fft, 1.0 / fs)[1:]
    p = np.abs(np.fft.rfft(h, n_fft)[1:]) ** 2
    return 10.0 * np.log10(np.maximum(smooth_power(f, p, grid, fraction=6), 1e-300))


def bend_db(h_cut: np.ndarray, h_full: np.ndarray, fs: int, f_lo_hz: float, f_hi_hz: float
            ) -> float:
    """Largest |difference| of the 1/6-octave-smoothed magnitudes of ``h_cut`` and ``h_full``
    over [f_lo_hz, f_hi_hz], after removing their broadband level difference, dB."""
    n = 1 << int(math.ceil(math.log2(max(h_full.size, h_cut.size) * 2)))
    grid = np.geomspace(f_lo_hz, f_hi_hz, 200)
    d = _smoothed_db(h_cut, fs, grid, n) - _smoothed_db(h_full, fs, grid, n)
    d -= np.median(d)
    return float(np.max(np.abs(d)))


def convolution_ir(h: np.ndarray, fs: int, spec: Any, *, peak_dbfs: float = -1.0
                   ) -> ConvolutionIR:
    """The convolution-ready response of a recovered ``h`` whose sweep was ``spec``
    (:class:`measure.sweep.SweepSpec`) (module notes).

    Raises
    ------
    ParameterError
        If ``peak_dbfs`` is not in −60..0, or ``spec`` is at another rate.
    """
    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    if spec.fs != fs:
        raise ParameterError(f"the sweep is at {spec.fs} Hz and the response at {fs} Hz; give "
                             "the sweep the response was recovered with")
    if not -60.0 <= peak_dbfs <= 0.0:
        raise ParameterError(f"peak {peak_dbfs} dBFS must lie in -60..0 dBFS")
    n = 1 << int(math.ceil(math.log2(2 * h.size)))
    b = _band_limit(spec, n)
    ratio = np.zeros(b.size, dtype=np.complex128)
    ok = b > 1e-9
    ratio[ok] = _minimum_phase(b, n)[ok] / b[ok]
    h_min = np.fft.irfft(np.fft.rfft(h, n) * ratio, n)[:h.size]
    e = h_min * h_min
    start = int(np.argmax(e >= START_LEVEL * float(np.max(e))))
    cut = h_min[start:]
    f_hi = min(spec.f2_hz, 0.45 * fs) / 1.1
    bend = bend_db(cut, h, fs, 2.0 * spec.f1_hz, f_hi)
    peak = float(np.max(np.abs(cut)))
    if peak <= 0:
        raise ParameterError("the response is silent; recover it again from a take")
    gain = 10.0 ** (peak_dbfs / 20.0) / peak
    return ConvolutionIR(cut * gain, fs, peak_dbfs, 20.0 * math.log10(gain), start / fs, bend)


# ---------------------------------------------------------------------------------------------
# Listening pairs

def _meter(fs: int) -> Any:
    try:
        import pyloudnorm
    except ImportError as err:
        raise MissingDependencyError(
            f"loudness matching needs the Python package pyloudnorm ({err}); install it with "
            "`python -m pip install pyloudnorm`") from err
    return pyloudnorm.Meter(fs)


def integrated_loudness_lufs(x: np.ndarray, fs: int) -> float:
    """ITU-R BS.1770-4 integrated loudness of a mono signal (pyloudnorm), LUFS."""
    x = check_signal(x, "x", ndim=(1,))
    return float(_meter(check_fs(fs)).integrated_loudness(x))


@dataclass(frozen=True, slots=True, eq=False)
class LoudnessPair:
    """Two signals at the same integrated loudness, neither's sample peak above −1 dBFS."""

    a: np.ndarray
    b: np.ndarray
    fs: int
    loudness_lufs: float
    loudness_a_lufs: float
    loudness_b_lufs: float
    peak_a_dbfs: float
    peak_b_dbfs: float

    def sidecar(self, which: str) -> dict[str, Any]:
        return {"loudness_lufs": self.loudness_a_lufs if which == "a" else self.loudness_b_lufs,
                "peak_dbfs": self.peak_a_dbfs if which == "a" else self.peak_b_dbfs,
                "matched_to_lufs": self.loudness_lufs,
                "method": "ITU-R BS.1770-4 integrated loudness (pyloudnorm), one common gain "
                          "so no sample passes -1 dBFS"}


def loudness_matched(a: np.ndarray, b: np.ndarray, fs: int, *, peak_dbfs: float = -1.0
                     ) -> LoudnessPair:
    """``a`` and ``b`` brought to the same integrated loudness (the quieter one's), then one
    common gain so neither's sample peak passes ``peak_dbfs`` (module notes).

    Raises
    ------
    ParameterError
        If either signal is silent or too short to measure (BS.1770 needs 400 ms).
    """
    fs = check_fs(fs)
    a = check_signal(a, "a", ndim=(1,))
    b = check_signal(b, "b", ndim=(1,))
    if min(a.size, b.size) < int(0.4 * fs) + 1:
        raise ParameterError("a signal of the pair is shorter than 400 ms, the BS.1770 gating "
                             "block, so its loudness cannot be measured; give sound of at "
                             "least a second")
    la, lb = integrated_loudness_lufs(a, fs), integrated_loudness_lufs(b, fs)
    if not (math.isfinite(la) and math.isfinite(lb)):
        raise ParameterError("a signal of the pair is silent or shorter than 400 ms, so its "
                             "loudness cannot be measured; give sound of at least a second")
    target = min(la, lb)
    a2 = a * 10.0 ** ((target - la) / 20.0)
    b2 = b * 10.0 ** ((target - lb) / 20.0)
    peak = max(float(np.max(np.abs(a2))), float(np.max(np.abs(b2))))
    limit = 10.0 ** (peak_dbfs / 20.0)
    if peak > limit:
        g = limit / peak
        a2, b2, target = a2 * g, b2 * g, target + 20.0 * math.log10(g)
    la2, lb2 = integrated_loudness_lufs(a2, fs), integrated_loudness_lufs(b2, fs)

    def dbfs(x: np.ndarray) -> float:
        return 20.0 * math.log10(max(float(np.max(np.abs(x))), 1e-30))

    return LoudnessPair(a2, b2, fs, target, la2, lb2, dbfs(a2), dbfs(b2))
