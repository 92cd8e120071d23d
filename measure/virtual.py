"""A virtual room and a virtual take: the demo's rooms and the tests' workhorse.

:func:`room_ir` synthesises an impulse response from per-octave reverberation times, a direct
sound, early reflections and a direct-to-reverberant ratio. The late part is Gaussian noise
split into octave bands by complementary (zero-phase, partition-of-unity) masks, each band
shaped by its own exponential energy decay exp(−13.8155·t/T_b), so each band decays at its own
rate; reflections are band-limited impulses placed exactly (to a fraction of a sample) where
they are asked for.

:func:`virtual_take` "plays" a sweep file through it the way real equipment would: a
memoryless loudspeaker nonlinearity (its harmonics above Nyquist never reach the recording, as
a recorder's anti-alias filter removes them), the room, a latency, a recording clock running
fast or slow (drift), and background noise that is white, pink or a low-frequency rumble
(:func:`background_noise`). :func:`loudspeaker_ir` is a small loudspeaker without lows, to
convolve with a room; :func:`impulsive_noise` a door or a cough to add to a take.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from measure._dsp import fractional_impulse, interpolate
from measure._validate import check_fs, check_nonnegative, check_positive, check_signal
from measure.bands import complementary_masks
from measure.errors import ParameterError

__all__ = ["VirtualRoom", "room_ir", "virtual_take", "background_noise", "loudspeaker_ir",
           "impulsive_noise", "VirtualSpace", "positioned_ir", "DEMO_ROOMS",
           "OCTAVE_CENTERS_HZ", "NOISE_KINDS"]

NoiseKind = Literal["white", "pink", "rumble"]
#: Background noises the virtual take can add (see :func:`background_noise`).
NOISE_KINDS: tuple[str, ...] = ("white", "pink", "rumble")

#: Exact base-10 octave mid-band frequencies 63 Hz–8 kHz (IEC 61260-1:2014, 5.2).
OCTAVE_CENTERS_HZ: tuple[float, ...] = tuple(1000.0 * 10.0 ** (0.3 * k) for k in range(-4, 4))
DECAY_60DB = 6.0 * math.log(10.0)  # 13.8155: energy decay constant × T for a 60 dB fall


@dataclass(frozen=True, slots=True)
class VirtualRoom:
    """A synthetic room.

    Parameters
    ----------
    name : str
    band_centers_hz : tuple of float
        Centres of the bands whose reverberation times are given (ascending).
    rt_s : tuple of float, > 0, s
        Reverberation time (60 dB energy fall) in each band.
    direct_delay_s : float, >= 0, s
        Arrival of the direct sound (source–receiver distance / speed of sound).
    drr_db : float, dB
        Direct-to-reverberant ratio: direct energy over everything after it (reflections and
        diffuse tail).
    reflections : tuple of (delay_s, gain)
        Early reflections: delay after the direct sound (s, > 0) and signed amplitude relative to
        the direct sound.
    length_s : float, > 0, s
        Length of the synthesised response.
    tail_onset_s : float, >= 0, s
        Delay after the direct sound at which the diffuse tail starts (a short raised-cosine
        build-up follows it).
    """

    name: str
    band_centers_hz: tuple[float, ...]
    rt_s: tuple[float, ...]
    direct_delay_s: float
    drr_db: float
    reflections: tuple[tuple[float, float], ...] = ()
    length_s: float = 2.0
    tail_onset_s: float = 0.0

    def __post_init__(self) -> None:
        if len(self.band_centers_hz) != len(self.rt_s) or not self.rt_s:
            raise ParameterError("give one reverberation time per band centre")
        if any(b <= a for a, b in zip(self.band_centers_hz, self.band_centers_hz[1:], strict=False)):
            raise ParameterError("band centres must ascend")
        for t in self.rt_s:
            check_positive(t, "reverberation time", unit="s")
        check_nonnegative(self.direct_delay_s, "direct delay", unit="s")
        check_positive(self.length_s, "length", unit="s")
        check_nonnegative(self.tail_onset_s, "tail onset", unit="s")
        for d, _g in self.reflections:
            check_positive(d, "reflection delay", unit="s")


#: Width (octaves) of the cross-fade between neighbouring bands of the synthetic tail.
CROSSFADE_OCTAVES = 1.0 / 3.0


def room_ir(room: VirtualRoom, fs: int, *, seed: int = 0) -> np.ndarray:
    """Synthesise the room's impulse response at ``fs``.

    Returns
    -------
    ndarray, (round(length_s·fs),), float64
        Direct sound of unit amplitude at ``direct_delay_s``, reflections, and the diffuse tail
        scaled to give ``drr_db``.

    Examples
    --------
    >>> r = VirtualRoom("box", (1000.0,), (0.5,), direct_delay_s=0.01, drr_db=0.0, length_s=1.0)
    >>> h = room_ir(r, 8000)
    >>> int(np.argmax(np.abs(h)))
    80
    """
    fs = check_fs(fs)
    n = int(round(room.length_s * fs))
    t0 = room.direct_delay_s * fs
    direct = fractional_impulse(n, t0)
    early = np.zeros(n)
    for delay_s, gain in room.reflections:
        pos = t0 + delay_s * fs
        if pos < n:
            early += gain * fractional_impulse(n, pos)

    rng = np.random.default_rng(seed)
    n_fft = 1 << int(math.ceil(math.log2(2 * n)))
    noise_spec = np.fft.rfft(rng.standard_normal(n_fft))
    masks = complementary_masks(room.band_centers_hz, np.fft.rfftfreq(n_fft, 1.0 / fs),
                                transition_octaves=CROSSFADE_OCTAVES)
    t = (np.arange(n) - t0) / fs  # time after the direct sound
    onset = room.tail_onset_s
    build = np.clip((t - onset) / 0.002, 0.0, 1.0)  # 2 ms raised-cosine build-up
    build = 0.5 - 0.5 * np.cos(math.pi * build)
    tail = np.zeros(n)
    for mask, rt in zip(masks, room.rt_s, strict=True):
        band_noise = np.fft.irfft(noise_spec * mask, n_fft)[:n]
        env = np.exp(-0.5 * DECAY_60DB * np.maximum(t, 0.0) / rt)  # amplitude: half the energy rate
        tail += band_noise * env
    tail *= build

    e_direct = float(np.sum(direct**2))
    e_early = float(np.sum(early**2))
    e_target = e_direct / 10.0 ** (room.drr_db / 10.0)
    e_tail_target = e_target - e_early
    if e_tail_target <= 0:
        raise ParameterError(
            f"the reflections of {room.name!r} alone carry more energy than a DRR of "
            f"{room.drr_db:g} dB allows; raise drr_db or weaken the reflections")
    tail *= math.sqrt(e_tail_target / float(np.sum(tail**2)))
    return direct + early + tail


def virtual_take(program: np.ndarray, fs: int, h: np.ndarray, *, latency_s: float = 0.0,
                 drift_ppm: float = 0.0, hd2_percent: float = 0.0, hd3_percent: float = 0.0,
                 noise_dbfs: float | None = None, noise_kind: NoiseKind = "white",
                 extra_s: float = 0.0, seed: int = 0) -> np.ndarray:
    """What a microphone records when ``program`` is played into the room ``h``.

    Parameters
    ----------
    program : ndarray, (n,)
        The file that is played (e.g. :attr:`measure.sweep.Sweep.program`).
    fs : int, Hz
        Sample rate of the player.
    h : ndarray, (m,)
        Room impulse response at ``fs``.
    latency_s : float, >= 0, s
        Delay of the playback/recording chain, may be fractional.
    drift_ppm : float
        How fast the recorder's clock runs against the player's, in parts per million; a
        positive value records more samples than were played.
    hd2_percent, hd3_percent : float, >= 0, %
        Second and third harmonic distortion of the loudspeaker at the program's peak level A,
        each relative to the fundamental at the output, from the memoryless polynomial
        u = x + a2·x² + a3·x³. For x = A·sin θ the identities sin²θ = (1 − cos 2θ)/2 and
        sin³θ = (3 sin θ − sin 3θ)/4 give a fundamental A·g with g = 1 + 3·a3·A²/4, a second
        harmonic a2·A²/2 and a third a3·A³/4; hence a3 = 4·HD3/(A²·(1 − 3·HD3)) and
        a2 = 2·HD2·g/A (derived). The nonlinearity is applied at three times the sample rate
        and filtered back (scipy.signal.resample_poly), so that harmonics above Nyquist are
        not folded back into the band, as a recorder's anti-alias filter ensures.
    noise_dbfs : float or None, dBFS
        RMS level of the background noise added at the microphone; None for none.
    noise_kind : {"white", "pink", "rumble"}
        Its spectrum (:func:`background_noise`).
    extra_s : float, >= 0, s
        Extra recording after the program's end.
    seed : int
        Seed of the noise generator.

    Returns
    -------
    ndarray, (k,)
        The recording at the recorder's own rate (fs·(1 + drift)).
    """
    fs = check_fs(fs)
    x = check_signal(program, "program", ndim=(1,))
    h = check_signal(h, "room response", ndim=(1,))
    check_nonnegative(latency_s, "latency", unit="s")
    check_nonnegative(hd2_percent, "HD2", unit="%")
    check_nonnegative(hd3_percent, "HD3", unit="%")
    check_nonnegative(extra_s, "extra", unit="s")
    peak = float(np.max(np.abs(x)))
    if peak > 0 and (hd2_percent or hd3_percent):
        hd2, hd3 = hd2_percent / 100.0, hd3_percent / 100.0
        if hd3 >= 1.0 / 3.0:
            raise ParameterError(f"hd3_percent={hd3_percent!r} must be below 33.3 %")
        a3 = 4.0 * hd3 / (peak**2 * (1.0 - 3.0 * hd3))
        a2 = 2.0 * hd2 * (1.0 + 0.75 * a3 * peak**2) / peak
        from scipy.signal import resample_poly

        # the linear term exact; the products (up to 3f) computed at 3·fs and band-limited back
        xu = resample_poly(x, 3, 1)
        x = x + resample_poly(a2 * xu**2 + a3 * xu**3, 1, 3)[:x.size]
        del xu
    from scipy.signal import fftconvolve

    z = fftconvolve(x, h)
    ratio = 1.0 + drift_ppm * 1e-6
    n_out = int(math.floor((x.size + latency_s * fs + extra_s * fs) * ratio))
    if drift_ppm == 0.0 and float(latency_s * fs).is_integer():
        lag = int(latency_s * fs)
        y = np.zeros(n_out)
        m = min(n_out - lag, z.size)
        y[lag:lag + m] = z[:m]
    else:
        # Recorder sample k is taken at player time k/ratio; the chain delays everything by
        # the latency.
        y = interpolate(z, np.arange(n_out) / ratio - latency_s * fs)
    if noise_dbfs is not None:
        y = y + background_noise(y.size, fs, level_dbfs=noise_dbfs, kind=noise_kind, seed=seed)
    return y


#: Corner of the rumble spectrum, Hz: ventilation and traffic put most of their energy below
#: about 100 Hz and fall steeply above (common practice for the shape; the corner is this
#: scenario's choice).
RUMBLE_CORNER_HZ = 50.0
#: The rumble's broadband floor re its low-frequency plateau (the microphone's own hiss).
RUMBLE_FLOOR_DB = -50.0


def background_noise(n: int, fs: int, *, level_dbfs: float, kind: NoiseKind = "white",
                     seed: int = 0) -> np.ndarray:
    """Stationary Gaussian background noise of RMS ``level_dbfs`` and a given spectrum.

    Parameters
    ----------
    n : int
        Samples.
    fs : int, Hz
    level_dbfs : float, dBFS
        RMS level of the whole noise.
    kind : {"white", "pink", "rumble"}
        ``white``: flat power density. ``pink``: power density ∝ 1/f, −3 dB per octave (flat
        below 10 Hz). ``rumble``: ventilation or traffic, a plateau below
        :data:`RUMBLE_CORNER_HZ` falling 12 dB per octave above it (power ∝
        1/(1 + (f/f_c)⁴)), over a white floor :data:`RUMBLE_FLOOR_DB` below the plateau.
    seed : int

    Examples
    --------
    >>> z = background_noise(48000, 48000, level_dbfs=-40.0, kind="pink")
    >>> round(20 * float(np.log10(np.sqrt(np.mean(z ** 2)))), 6)
    -40.0
    """
    fs = check_fs(fs)
    if kind not in NOISE_KINDS:
        raise ParameterError(f"noise kind {kind!r} is not one of {', '.join(NOISE_KINDS)}")
    rng = np.random.default_rng(seed)
    z = rng.standard_normal(n)
    if kind != "white" and n > 1:
        n_fft = 1 << int(math.ceil(math.log2(n)))
        Z = np.fft.rfft(rng.standard_normal(n_fft))
        f = np.fft.rfftfreq(n_fft, 1.0 / fs)
        if kind == "pink":
            power = 1.0 / np.maximum(f, 10.0)
        else:
            power = 1.0 / (1.0 + (f / RUMBLE_CORNER_HZ) ** 4) + 10.0 ** (RUMBLE_FLOOR_DB / 10.0)
        z = np.fft.irfft(Z * np.sqrt(power), n_fft)[:n]
    z *= 10.0 ** (level_dbfs / 20.0) / math.sqrt(float(np.mean(z * z)) + 1e-300)
    return z


def loudspeaker_ir(fs: int, *, highpass_hz: float, order: int = 2, length_s: float = 0.25
                   ) -> np.ndarray:
    """Impulse response of a small loudspeaker without lows: a Butterworth high-pass.

    A small sealed box rolls off 12 dB per octave below its resonance (``order`` 2; a vented
    one 24 dB, ``order`` 4; common practice). The response is causal and minimum-phase
    (scipy.signal.butter, sosfilt of a unit impulse); convolve it with a room's response to get
    what such a loudspeaker measures in that room.

    Examples
    --------
    >>> g = loudspeaker_ir(48000, highpass_hz=200.0)
    >>> G = np.abs(np.fft.rfft(g, 1 << 16)); f = np.fft.rfftfreq(1 << 16, 1 / 48000)
    >>> round(20 * float(np.log10(G[np.argmin(abs(f - 200.0))])), 1)  # -3 dB at the corner
    -3.0
    """
    from scipy.signal import butter, sosfilt

    fs = check_fs(fs)
    check_positive(highpass_hz, "high-pass corner", unit="Hz")
    check_positive(length_s, "length", unit="s")
    if not highpass_hz < fs / 2:
        raise ParameterError(f"the high-pass corner {highpass_hz:g} Hz must be below Nyquist")
    imp = np.zeros(max(int(round(length_s * fs)), 2))
    imp[0] = 1.0
    return sosfilt(butter(order, highpass_hz, "highpass", fs=fs, output="sos"), imp)


def impulsive_noise(n: int, fs: int, *, at_s: float, level_dbfs: float,
                    kind: Literal["door", "cough"] = "door", seed: int = 0) -> np.ndarray:
    """A short disturbance to add to a take: a door slammed shut, or a cough.

    ``door``: a thud, noise band-passed to 40 Hz–2 kHz with a 50 ms exponential decay, 0.4 s
    long; ``cough``: two bursts of noise band-passed to 300 Hz–4 kHz, 0.12 s each, 0.25 s apart
    (common practice for both shapes; the numbers are this scenario's choice). ``level_dbfs``
    is the peak.
    """
    from scipy.signal import butter, sosfilt

    fs = check_fs(fs)
    check_nonnegative(at_s, "disturbance time", unit="s")
    rng = np.random.default_rng(seed)
    if kind == "door":
        m = int(0.4 * fs)
        b = rng.standard_normal(m) * np.exp(-np.arange(m) / fs / 0.05)
        b = sosfilt(butter(2, [40.0, 2000.0], "bandpass", fs=fs, output="sos"), b)
    elif kind == "cough":
        m = int(0.37 * fs)
        one = int(0.12 * fs)
        env = np.zeros(m)
        env[:one] = np.sin(np.pi * np.arange(one) / one)
        env[int(0.25 * fs):int(0.25 * fs) + one] = 0.6 * np.sin(np.pi * np.arange(one) / one)
        b = sosfilt(butter(2, [300.0, 4000.0], "bandpass", fs=fs, output="sos"),
                    rng.standard_normal(m) * env)
    else:
        raise ParameterError(f"disturbance kind {kind!r} is not one of door, cough")
    b *= 10.0 ** (level_dbfs / 20.0) / float(np.max(np.abs(b)))
    out = np.zeros(n)
    i = int(round(at_s * fs))
    if i < n:
        out[i:i + b.size] = b[:n - i]
    return out


def _octave_room(name: str, rt_s: tuple[float, ...], *, direct_delay_s: float, drr_db: float,
                 reflections: tuple[tuple[float, float], ...], length_s: float,
                 tail_onset_s: float) -> VirtualRoom:
    return VirtualRoom(name=name, band_centers_hz=OCTAVE_CENTERS_HZ, rt_s=rt_s,
                       direct_delay_s=direct_delay_s, drr_db=drr_db, reflections=reflections,
                       length_s=length_s, tail_onset_s=tail_onset_s)


#: The demo building, "Larkspur Yard Depot" (invented): three rooms with their own character.
#: Reverberation times per octave 63 Hz–8 kHz; reflections as (delay after direct s, gain).
DEMO_ROOMS: tuple[VirtualRoom, ...] = (
    # A tiled concrete stairwell: long, bright-ish decay, strong floor/landing reflections.
    _octave_room("stairwell", (2.6, 2.5, 2.4, 2.3, 2.1, 1.8, 1.4, 0.9),
                 direct_delay_s=0.0117, drr_db=-6.0,
                 reflections=((0.0041, 0.55), (0.0093, -0.38), (0.0158, 0.30), (0.0236, 0.22)),
                 length_s=3.5, tail_onset_s=0.004),
    # A carpeted open-plan office with a lay-in ceiling: short, dull decay.
    _octave_room("office", (0.75, 0.62, 0.52, 0.45, 0.42, 0.40, 0.36, 0.30),
                 direct_delay_s=0.0087, drr_db=3.0,
                 reflections=((0.0029, 0.42), (0.0071, 0.25), (0.0124, -0.18)),
                 length_s=1.5, tail_onset_s=0.003),
    # A concrete parking level: big, low ceiling, long low-frequency decay, flutter echoes.
    _octave_room("parking", (3.4, 3.1, 2.8, 2.6, 2.3, 1.9, 1.4, 0.9),
                 direct_delay_s=0.0233, drr_db=-9.0,
                 reflections=((0.0062, 0.50), (0.0187, 0.33), (0.0311, -0.27), (0.0436, 0.2)),
                 length_s=4.5, tail_onset_s=0.006),
    # A concrete plant room beside the boiler house: hard walls, pipes and tanks; it is
    # measured while the ventilation runs (its rumble is in the demo's take, not here).
    _octave_room("plant-room", (2.3, 2.1, 1.9, 1.8, 1.7, 1.5, 1.2, 0.8),
                 direct_delay_s=0.0146, drr_db=-5.0,
                 reflections=((0.0035, 0.45), (0.0081, -0.31), (0.0149, 0.26)),
                 length_s=3.5, tail_onset_s=0.004),
)


# ---------------------------------------------------------------------------------------------
# A room with a source and a microphone in it: distance and direction

@dataclass(frozen=True, slots=True)
class VirtualSpace:
    """A room in which a source can be heard from a distance and an angle.

    Parameters
    ----------
    name : str
    band_centers_hz : tuple of float
        Band centres of ``rt_s`` and ``directivity`` (ascending).
    rt_s : tuple of float, > 0, s
        Reverberation time per band.
    volume_m3 : float, > 0, m³
        Sets the absorption area A = 0.161·V/T per band (Sabine) and so the reverberant level.
    directivity : tuple of float, 0..0.5
        b per band of the source's directivity D(θ, f) = 1 − b + b·cos θ (amplitude re on axis;
        b = 0 omnidirectional, 0.5 a cardioid); interpolated in log frequency, held outside.
    temperature_c, humidity_percent : float
        Air for the speed of sound and the ISO 9613-1 absorption of the direct path.
    revised_theory : bool
        Barron's revised theory: the reverberant energy arriving after the direct sound at
        distance d is the classical one times exp(−13.8155·d/(c·T)); else constant (classical).
    air_absorption : bool
        Apply ISO 9613-1 absorption to the direct path (off: spreading alone).
    length_s : float, > 0, s
    """

    name: str
    band_centers_hz: tuple[float, ...]
    rt_s: tuple[float, ...]
    volume_m3: float
    directivity: tuple[float, ...] = ()
    temperature_c: float = 20.0
    humidity_percent: float = 50.0
    revised_theory: bool = True
    air_absorption: bool = True
    length_s: float = 2.0

    def __post_init__(self) -> None:
        if len(self.band_centers_hz) != len(self.rt_s) or not self.rt_s:
            raise ParameterError("give one reverberation time per band centre")
        if self.directivity and len(self.directivity) != len(self.band_centers_hz):
            raise ParameterError("give one directivity value per band centre, or none")
        if any(not 0.0 <= b <= 0.5 for b in self.directivity):
            raise ParameterError("directivity values b must lie in 0..0.5 (0.5: a cardioid)")
        for t in self.rt_s:
            check_positive(t, "reverberation time", unit="s")
        check_positive(self.volume_m3, "volume", unit="m³")
        check_positive(self.length_s, "length", unit="s")

    def _b(self, f_hz: np.ndarray) -> np.ndarray:
        f = np.maximum(np.asarray(f_hz, dtype=np.float64), 1e-3)
        if not self.directivity:
            return np.zeros(f.shape)
        return np.interp(np.log2(f), np.log2(self.band_centers_hz), self.directivity)

    def directivity_db(self, angle_deg: float, f_hz: np.ndarray) -> np.ndarray:
        """20·lg D(θ, f), re the source's axis."""
        b = self._b(f_hz)
        d = 1.0 - b + b * math.cos(math.radians(angle_deg))
        return 20.0 * np.log10(np.maximum(d, 1e-6))

    def directivity_factor(self, f_hz: np.ndarray) -> np.ndarray:
        """Q = 1/⟨D²⟩ with ⟨D²⟩ = (1 − b)² + b²/3, the mean of D² over the sphere (derived:
        ½∫₀^π (1 − b + b cos θ)² sin θ dθ)."""
        b = self._b(f_hz)
        return 1.0 / ((1.0 - b) ** 2 + b * b / 3.0)

    def critical_distance_m(self, f_hz: float) -> float:
        """r_c = √(Q·A/(16π)), A = 0.161·V/T (measurement.md §7; ≈ 0.057·√(Q·V/T))."""
        t = float(np.interp(math.log2(f_hz), np.log2(self.band_centers_hz), self.rt_s))
        q = float(self.directivity_factor(np.array([f_hz]))[0])
        return math.sqrt(q * 0.161 * self.volume_m3 / t / (16.0 * math.pi))


def positioned_ir(space: VirtualSpace, fs: int, *, distance_m: float, angle_deg: float = 0.0,
                  seed: int = 0) -> np.ndarray:
    """The response of ``space`` with the microphone ``distance_m`` from the source, at
    ``angle_deg`` off its axis.

    The direct sound, 10 ms + d/c into the response, has the spectrum
    (1/d)·D(θ, f)·10^(−α(f)·d/20) (on axis at 1 m: a unit impulse; α of ISO 9613-1,
    measure.attenuation.air_absorption_db_per_m). The reverberant part is band noise decaying at
    each band's rate (as :func:`room_ir`), starting 1 ms after the direct sound, whose energy in
    band b is β_b·16π/(Q_b·A_b): β_b the band's share of a unit impulse's energy, so that the
    direct and reverberant energies on axis meet at r_c = √(Q·A/(16π)) (classical diffuse-field
    theory, derived), times exp(−13.8155·d/(c·T_b)) with ``revised_theory``.
    """
    from measure.attenuation import air_absorption_db_per_m, speed_of_sound_m_s

    fs = check_fs(fs)
    check_positive(distance_m, "distance", unit="m")
    n = int(round(space.length_s * fs))
    n_fft = 1 << int(math.ceil(math.log2(2 * n)))
    f = np.fft.rfftfreq(n_fft, 1.0 / fs)
    c = speed_of_sound_m_s(space.temperature_c)
    t0 = 0.010 + distance_m / c
    mag = 10.0 ** (space.directivity_db(angle_deg, f) / 20.0) / distance_m
    if space.air_absorption:
        mag *= 10.0 ** (-air_absorption_db_per_m(np.maximum(f, 1.0),
                                                 temperature_c=space.temperature_c,
                                                 humidity_percent=space.humidity_percent)
                        * distance_m / 20.0)
    direct = np.fft.irfft(mag * np.exp(-2j * np.pi * f * t0), n_fft)[:n]
    rng = np.random.default_rng(seed)
    noise_spec = np.fft.rfft(rng.standard_normal(n_fft))
    masks = complementary_masks(space.band_centers_hz, f, transition_octaves=CROSSFADE_OCTAVES)
    t = np.arange(n) / fs - (t0 + 0.001)
    build = 0.5 - 0.5 * np.cos(math.pi * np.clip(t / 0.002, 0.0, 1.0))
    q = space.directivity_factor(np.asarray(space.band_centers_hz))
    tail = np.zeros(n)
    for mask, rt, q_b in zip(masks, space.rt_s, q, strict=True):
        area = 0.161 * space.volume_m3 / rt
        beta = float(np.sum(np.fft.irfft(mask, n_fft) ** 2))  # the band's share of an impulse
        energy = beta * 16.0 * math.pi / (q_b * area)
        if space.revised_theory:
            energy *= math.exp(-DECAY_60DB * distance_m / (c * rt))
        band = np.fft.irfft(noise_spec * mask, n_fft)[:n]
        band *= np.exp(-0.5 * DECAY_60DB * np.maximum(t, 0.0) / rt) * build
        e = float(np.sum(band * band))
        if e > 0:
            tail += band * math.sqrt(energy / e)
    return direct + tail
