"""Sound devices: listing, the level check and the full-duplex take (the only user of sounddevice).

``sounddevice`` is imported inside the functions that need it, never at module level, so that
every offline part of the package works on a machine without PortAudio. When the import fails
(``OSError: PortAudio library not found`` on Linux without ``libportaudio2``) the error becomes a
:class:`~measure.errors.MissingDependencyError` whose message says what to install on Linux,
macOS and Windows.

A take is played and recorded by one full-duplex PortAudio stream: the output callback reads the
sweep program block by block while the input callback stores the same blocks, so the recording
and the playback share the stream's clock and its start. Every flag the stream raises (input
overflow, output underflow) is counted; a take with any of them is marked for redo, because a
dropped block shifts the rest of the recording and smears the impulse response.

The pure helpers at the bottom (:func:`input_stats`, :func:`level_program`,
:func:`analyze_level`, :func:`judge_take`) do no I/O and are tested without hardware.
"""

from __future__ import annotations

import math
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from measure._validate import check_fs
from measure.deconvolve import (  # one clipping rule for takes, level check and IR
    CLIP_LEVEL,
    predicted_noise_power,
)
from measure.errors import DeviceError, MissingDependencyError, ParameterError

__all__ = [
    "PORTAUDIO_ADVICE",
    "CLIP_LEVEL",
    "DeviceInfo",
    "Recording",
    "ChannelStats",
    "LevelReport",
    "Verdict",
    "list_devices",
    "resolve_device",
    "check_rate",
    "play_and_record",
    "input_stats",
    "level_program",
    "octaves_inside",
    "analyze_level",
    "judge_take",
    "figure_reasons",
    "VERDICT_T20_OCTAVES",
]

#: What to install when PortAudio is missing (shown by ``measure devices`` and ``measure capture``).
PORTAUDIO_ADVICE = (
    "install the PortAudio library: on Debian/Ubuntu `sudo apt-get install libportaudio2`, on "
    "Fedora `sudo dnf install portaudio`, on Arch `sudo pacman -S portaudio`; on macOS and "
    "Windows the sounddevice wheel ships PortAudio, so `python -m pip install --force-reinstall "
    "sounddevice` (or on macOS `brew install portaudio`). The offline commands (sweep, ir, "
    "analyze, import, ...) work without it")

NO_DEVICE_ADVICE = (
    "check that the interface or microphone is plugged in and switched on; on Linux check that "
    "`arecord -l` lists it, that your user is in the `audio` group, and that no other program "
    "holds the device (or that the PipeWire/PulseAudio/JACK server runs); on macOS allow "
    "microphone access for the terminal in System Settings > Privacy; on Windows enable the "
    "device in Sound settings and allow microphone access")

#: Peak-to-noise ratio needed in the impulse response: the noise must be at least 15 dB below the
#: bottom of the evaluation range, i.e. 35 dB for T20 and 45 dB for T30 (ISO 3382-1:2009 5.3.3).
PNR_T20_DB = 35.0
PNR_T30_DB = 45.0
#: A peak below this leaves the converter's own noise too close (common practice: aim for a peak
#: between -20 and -6 dBFS, so that the take has level and headroom).
LOW_PEAK_DBFS = -40.0
HEADROOM_PEAK_DBFS = -3.0
#: Below this peak-to-noise (dB) the signal is not found at all in the recording (common practice:
#: a matched filter's peak 20 dB above its noise is an unambiguous detection).
FOUND_PNR_DB = 20.0
#: A mean above this (|mean| re full scale) is a large DC offset: a healthy AC-coupled input
#: sits far below it, and at 1 % of full scale the offset is a fault worth fixing (common
#: practice). The response is still recovered (the inverse filter is band-limited above f1),
#: so it is a warning, not a redo.
DC_WARN_DBFS = -40.0


def _sd() -> Any:
    """Import sounddevice, translating a missing native library into a clear error."""
    try:
        import sounddevice
    except OSError as err:  # "PortAudio library not found"
        raise MissingDependencyError(f"cannot use sound devices ({err}); {PORTAUDIO_ADVICE}") from err
    except ImportError as err:
        raise MissingDependencyError(
            f"the Python package sounddevice is not installed ({err}); install it with "
            "`python -m pip install sounddevice`") from err
    return sounddevice


# ---------------------------------------------------------------------------------------------
# Devices
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True, eq=False)
class DeviceInfo:
    """One PortAudio device.

    Attributes
    ----------
    index : int
        PortAudio's device index (valid for this run of the program only).
    name : str
    hostapi : str
        The host API that owns it (ALSA, JACK, Core Audio, WASAPI, ...).
    n_inputs, n_outputs : int
        Maximum input and output channels.
    default_fs : int
        The device's default sample rate in Hz.
    is_default_input, is_default_output : bool
    """

    index: int
    name: str
    hostapi: str
    n_inputs: int
    n_outputs: int
    default_fs: int
    is_default_input: bool = False
    is_default_output: bool = False

    def to_dict(self) -> dict[str, Any]:
        return {
            "index": self.index, "name": self.name, "hostapi": self.hostapi,
            "n_inputs": self.n_inputs, "n_outputs": self.n_outputs,
            "default_fs": self.default_fs, "is_default_input": self.is_default_input,
            "is_default_output": self.is_default_output,
        }


def list_devices(*, allow_empty: bool = False) -> tuple[DeviceInfo, ...]:
    """Every input and output device PortAudio knows, with its host API and default rate.

    Raises
    ------
    MissingDependencyError
        If PortAudio is not installed.
    DeviceError
        If PortAudio finds no device at all (unless ``allow_empty``: then an empty tuple).
    """
    sd = _sd()
    try:
        raw = sd.query_devices()
        apis = sd.query_hostapis()
        default_in, default_out = _defaults(sd)
    except sd.PortAudioError as err:
        raise DeviceError(f"PortAudio cannot list the devices ({err}); {NO_DEVICE_ADVICE}") from err
    devices = tuple(
        DeviceInfo(index=int(d["index"]), name=str(d["name"]),
                   hostapi=str(apis[d["hostapi"]]["name"]),
                   n_inputs=int(d["max_input_channels"]), n_outputs=int(d["max_output_channels"]),
                   default_fs=int(round(float(d["default_samplerate"]))),
                   is_default_input=int(d["index"]) == default_in,
                   is_default_output=int(d["index"]) == default_out)
        for d in raw)
    if not devices and not allow_empty:
        raise DeviceError(f"PortAudio found no sound devices; {NO_DEVICE_ADVICE}")
    return devices


def _defaults(sd: Any) -> tuple[int, int]:
    dev = sd.default.device
    try:
        d_in, d_out = int(dev[0]), int(dev[1])
    except (TypeError, ValueError):
        d_in = d_out = -1
    return d_in, d_out


def resolve_device(spec: str | int | None, kind: Literal["input", "output"],
                   devices: Sequence[DeviceInfo] | None = None) -> DeviceInfo:
    """Find a device by index, exact name or unique part of its name (case-insensitive).

    Parameters
    ----------
    spec : str, int or None
        ``None`` picks the system default for ``kind``. A string of digits is an index.
    kind : {"input", "output"}
    devices : sequence of DeviceInfo, optional
        The list to search (default: :func:`list_devices`).

    Raises
    ------
    DeviceError
        If nothing matches, the match has no channels of that kind, or the name is ambiguous.
    """
    if kind not in ("input", "output"):
        raise ParameterError(f"kind={kind!r} is not one of input, output")
    devs = tuple(devices) if devices is not None else list_devices()
    has = (lambda d: d.n_inputs > 0) if kind == "input" else (lambda d: d.n_outputs > 0)
    listing = "; ".join(f"{d.index}: {d.name} ({d.hostapi})" for d in devs if has(d)) or "none"
    if spec is None:
        chosen = [d for d in devs if (d.is_default_input if kind == "input" else d.is_default_output)]
        if not chosen:
            raise DeviceError(
                f"there is no default {kind} device; pass one by name or index "
                f"({kind} devices: {listing}); `measure devices` lists them")
        return chosen[0]
    text = str(spec).strip()
    if text.isdigit():
        matches = [d for d in devs if d.index == int(text)]
    else:
        exact = [d for d in devs if d.name.lower() == text.lower()]
        matches = exact or [d for d in devs if text.lower() in d.name.lower()]
    if not matches:
        raise DeviceError(
            f"no {kind} device matches {spec!r}; pick one of these by name or index: {listing}")
    with_channels = [d for d in matches if has(d)]
    if not with_channels:
        raise DeviceError(
            f"the device {matches[0].name!r} has no {kind} channels; pick an {kind} device: "
            f"{listing}")
    if len(with_channels) > 1:
        names = "; ".join(f"{d.index}: {d.name} ({d.hostapi})" for d in with_channels)
        raise DeviceError(
            f"{spec!r} matches several {kind} devices ({names}); give the index or the full name")
    return with_channels[0]


def check_rate(input_device: DeviceInfo, output_device: DeviceInfo, fs: int, *,
               n_inputs: int, n_outputs: int) -> None:
    """Raise a :class:`DeviceError` with advice unless both devices run at ``fs`` with the channels.

    The sweep is played at its own rate, never resampled; so the device must run at that rate.
    """
    sd = _sd()
    fs = check_fs(fs)
    for dev, n, check, what in ((input_device, n_inputs, sd.check_input_settings, "input"),
                                (output_device, n_outputs, sd.check_output_settings, "output")):
        try:
            check(device=dev.index, channels=n, samplerate=fs, dtype="float32")
        except sd.PortAudioError as err:
            msg = str(err)
            if "sample rate" in msg.lower():
                raise DeviceError(
                    f"the {what} device {dev.name!r} ({dev.hostapi}) cannot run at {fs} Hz "
                    f"({msg}; its default is {dev.default_fs} Hz); set the interface (or the audio "
                    f"server) to {fs} Hz, or make the sweep at the device's rate: "
                    f"`measure sweep SWEEP.wav --rate {dev.default_fs}`") from err
            raise DeviceError(
                f"the {what} device {dev.name!r} ({dev.hostapi}) refuses {n} channel(s) at "
                f"{fs} Hz ({msg}); check the channel numbers (it has {dev.n_inputs} in, "
                f"{dev.n_outputs} out) and that no other program holds the device") from err


# ---------------------------------------------------------------------------------------------
# Full-duplex play and record
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True, eq=False)
class Recording:
    """What one full-duplex run delivered.

    Attributes
    ----------
    y : ndarray, (channels, samples), float64
        The recorded input channels, in the order of ``input_channels``.
    fs : int
    input_device, output_device : DeviceInfo
    input_channels, output_channels : tuple of int
        0-based channel numbers on the devices (the command line shows them 1-based).
    start_utc : str
        ISO 8601 time at which the stream started.
    n_input_overflows, n_output_underflows : int
        Callbacks in which PortAudio reported a lost input block or a missing output block.
    n_other_xruns : int
        Callbacks flagged input underflow or output overflow (duplex bookkeeping; also counted).
    stream_latency_s : tuple of float
        The (input, output) latency PortAudio reported for the open stream.
    stopped_at_sample : int or None
        Where the run stopped early (clip guard), else None.
    """

    y: np.ndarray
    fs: int
    input_device: DeviceInfo
    output_device: DeviceInfo
    input_channels: tuple[int, ...]
    output_channels: tuple[int, ...]
    start_utc: str
    n_input_overflows: int
    n_output_underflows: int
    n_other_xruns: int
    stream_latency_s: tuple[float, float]
    stopped_at_sample: int | None = None

    def __post_init__(self) -> None:
        self.y.setflags(write=False)

    @property
    def n_xruns(self) -> int:
        return self.n_input_overflows + self.n_output_underflows + self.n_other_xruns

    def to_dict(self) -> dict[str, Any]:
        return {
            "input_device": self.input_device.to_dict(),
            "output_device": self.output_device.to_dict(),
            "input_channels": [c + 1 for c in self.input_channels],
            "output_channels": [c + 1 for c in self.output_channels],
            "fs": self.fs,
            "start_utc": self.start_utc,
            "n_input_overflows": self.n_input_overflows,
            "n_output_underflows": self.n_output_underflows,
            "n_other_xruns": self.n_other_xruns,
            "n_xruns": self.n_xruns,
            "stream_latency_s": list(self.stream_latency_s),
        }


def play_and_record(program: np.ndarray, fs: int, *, input_device: DeviceInfo,
                    output_device: DeviceInfo, input_channels: Sequence[int],
                    output_channels: Sequence[int], extra_s: float = 0.5,
                    progress: Callable[[float, float], None] | None = None,
                    stop_on_clip: bool = False) -> Recording:
    """Play ``program`` on the output channels and record the inputs in one full-duplex stream.

    Parameters
    ----------
    program : ndarray, (samples,)
        The signal to play, full scale = 1 (the same on every output channel).
    fs : int, Hz
        Stream rate; the devices must accept it (see :func:`check_rate`).
    input_device, output_device : DeviceInfo
    input_channels, output_channels : sequence of int
        0-based channel numbers to record and to play on.
    extra_s : float, s
        Recording continues this long after the program, plus the stream's reported latency,
        so that the last sweep's tail and the devices' delay are inside the take.
    progress : callable(elapsed_s, total_s), optional
        Called from this thread about ten times a second.
    stop_on_clip : bool
        Stop playing at once when any input sample reaches :data:`CLIP_LEVEL` (level check).

    Raises
    ------
    DeviceError
        If the stream cannot be opened or fails.
    KeyboardInterrupt
        Propagated after the stream is stopped (nothing is kept).
    """
    fs = check_fs(fs)
    x = np.ascontiguousarray(np.asarray(program, dtype=np.float32).ravel())
    in_ch = tuple(int(c) for c in input_channels)
    out_ch = tuple(int(c) for c in output_channels)
    if not in_ch or not out_ch:
        raise ParameterError("give at least one input and one output channel")
    if min(in_ch) < 0 or max(in_ch) >= input_device.n_inputs:
        raise DeviceError(
            f"input channel(s) {[c + 1 for c in in_ch]} do not exist on {input_device.name!r}, "
            f"which has {input_device.n_inputs}; pick channels 1..{input_device.n_inputs}")
    if min(out_ch) < 0 or max(out_ch) >= output_device.n_outputs:
        raise DeviceError(
            f"output channel(s) {[c + 1 for c in out_ch]} do not exist on "
            f"{output_device.name!r}, which has {output_device.n_outputs}; pick channels "
            f"1..{output_device.n_outputs}")
    if input_device.hostapi != output_device.hostapi:
        raise DeviceError(
            f"the input {input_device.name!r} ({input_device.hostapi}) and the output "
            f"{output_device.name!r} ({output_device.hostapi}) belong to different host APIs, "
            "which cannot share one stream; pick both from the same host API (`measure devices`)")
    n_open_in, n_open_out = max(in_ch) + 1, max(out_ch) + 1
    sd = _sd()
    check_rate(input_device, output_device, fs, n_inputs=n_open_in, n_outputs=n_open_out)

    state = {"pos": 0, "over": 0, "under": 0, "other": 0, "clip_at": None, "error": None}
    done = threading.Event()
    in_idx = list(in_ch)
    rec: np.ndarray | None = None
    n_rec = 0

    def callback(indata: np.ndarray, outdata: np.ndarray, frames: int, _t: Any, status: Any) -> None:
        try:
            if status.input_overflow:
                state["over"] += 1
            if status.output_underflow:
                state["under"] += 1
            if status.input_underflow or status.output_overflow:
                state["other"] += 1
            i = state["pos"]
            outdata.fill(0.0)
            m = max(0, min(frames, x.size - i))
            if m and state["clip_at"] is None:
                for c in out_ch:
                    outdata[:m, c] = x[i:i + m]
            k = max(0, min(frames, n_rec - i))
            if k:
                block = indata[:k, in_idx]
                rec[i:i + k] = block
                if stop_on_clip and state["clip_at"] is None and np.any(np.abs(block) >= CLIP_LEVEL):
                    state["clip_at"] = i
            state["pos"] = i + frames
            if state["pos"] >= n_rec or state["clip_at"] is not None:
                raise sd.CallbackStop
        except sd.CallbackStop:
            raise
        except Exception as err:  # noqa: BLE001 - handed to the main thread, not swallowed
            state["error"] = err
            raise sd.CallbackAbort from err

    try:
        stream = sd.Stream(samplerate=fs, device=(input_device.index, output_device.index),
                           channels=(n_open_in, n_open_out), dtype="float32",
                           callback=callback, finished_callback=done.set)
    except sd.PortAudioError as err:
        raise DeviceError(
            f"cannot open {input_device.name!r} -> {output_device.name!r} at {fs} Hz ({err}); "
            "close other programs using the device and check `measure devices`") from err
    latency = (float(stream.latency[0]), float(stream.latency[1]))
    n_rec = x.size + int(math.ceil((extra_s + latency[0] + latency[1]) * fs))
    rec = np.zeros((n_rec, len(in_ch)), dtype=np.float32)
    total_s = n_rec / fs
    start_utc = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    try:
        stream.start()
        deadline = time.monotonic() + total_s + 10.0
        while not done.wait(0.1):
            if progress is not None:
                progress(min(state["pos"], n_rec) / fs, total_s)
            if time.monotonic() > deadline:
                raise DeviceError(
                    f"the stream on {input_device.name!r} stopped delivering audio "
                    f"({state['pos'] / fs:.1f} s of {total_s:.1f} s); check the connection and "
                    "that no other program took the device")
        if progress is not None:
            progress(total_s, total_s)
    except sd.PortAudioError as err:
        raise DeviceError(f"the audio stream failed ({err}); check the device and try again") from err
    finally:
        try:
            stream.abort(ignore_errors=True)
        finally:
            stream.close(ignore_errors=True)
    if state["error"] is not None:
        raise state["error"]
    return Recording(
        y=np.ascontiguousarray(rec.T, dtype=np.float64), fs=fs, input_device=input_device,
        output_device=output_device, input_channels=in_ch, output_channels=out_ch,
        start_utc=start_utc, n_input_overflows=state["over"], n_output_underflows=state["under"],
        n_other_xruns=state["other"], stream_latency_s=latency, stopped_at_sample=state["clip_at"])


# ---------------------------------------------------------------------------------------------
# Pure helpers: statistics of a recording, the level check, the verdict
# ---------------------------------------------------------------------------------------------
def _db(power: float) -> float | None:
    """10 lg(power), or None for exact digital silence (no honest finite number)."""
    return None if not (power > 0) else 10.0 * math.log10(power)


@dataclass(frozen=True, slots=True, eq=False)
class ChannelStats:
    """Input level figures of one recorded channel.

    Attributes
    ----------
    peak_dbfs : float or None
        20 lg max|y|; None for digital silence.
    noise_rms_dbfs : float or None
        RMS of the noise-only part (before the sweep arrives), 20 lg rms re 1.0; None if exactly 0.
    n_clipped : int
        Samples with |y| >= CLIP_LEVEL.
    n_noise_samples : int
        Samples the noise figure was measured on (0: no noise-only part, e.g. no lead-in).
    dc_dbfs : float or None
        DC offset, 20 lg |mean(y)| re 1.0 over the whole channel; None if the mean is exactly 0.
    """

    peak_dbfs: float | None
    noise_rms_dbfs: float | None
    n_clipped: int
    n_noise_samples: int = 0
    dc_dbfs: float | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"peak_dbfs": self.peak_dbfs, "noise_rms_dbfs": self.noise_rms_dbfs,
                "n_clipped": self.n_clipped, "n_noise_samples": self.n_noise_samples,
                "dc_dbfs": self.dc_dbfs}


def dc_offsets_dbfs(y: np.ndarray) -> tuple[float | None, ...]:
    """DC offset of each channel of ``y`` (channels, samples): 20 lg |mean| re full scale, or
    None where the mean is exactly 0."""
    y = np.atleast_2d(np.asarray(y, dtype=np.float64))
    return tuple(_db(float(np.mean(ch)) ** 2) if ch.size else None for ch in y)


def dc_offset_warning(dc_dbfs: float | None, label: str) -> str | None:
    """The warning for a DC offset above :data:`DC_WARN_DBFS`, or None.

    Notes
    -----
    An offset d (linear, re full scale) leaves the signal 1 - |d| before it clips on the
    offset's side, so it costs -20 lg(1 - |d|) dB of headroom (derived).
    """
    if dc_dbfs is None or not dc_dbfs > DC_WARN_DBFS:
        return None
    d = 10.0 ** (dc_dbfs / 20.0)
    cost = "all of the headroom" if d >= 1.0 else (
        f"{-20.0 * math.log10(1.0 - d):.2f} dB of headroom")
    return (f"{label}: DC offset {dc_dbfs:.1f} dBFS (above {DC_WARN_DBFS:g} dBFS) costs {cost} "
            "on that side; the response is recovered regardless, but check the input (a faulty "
            "preamplifier, a DC-coupled input or a failing microphone) before the next take")


def input_stats(y: np.ndarray, noise: slice) -> tuple[ChannelStats, ...]:
    """Peak, noise and clipped-sample count of each channel of ``y`` (channels, samples).

    ``noise`` selects the samples that hold only background noise (e.g. the lead-in).
    """
    y = np.atleast_2d(np.asarray(y, dtype=np.float64))
    out = []
    for ch, dc in zip(y, dc_offsets_dbfs(y), strict=True):
        a = np.abs(ch)
        seg = ch[noise]
        out.append(ChannelStats(
            peak_dbfs=_db(float(a.max()) ** 2) if a.size else None,
            noise_rms_dbfs=_db(float(np.mean(seg ** 2))) if seg.size else None,
            n_clipped=int(np.count_nonzero(a >= CLIP_LEVEL)), n_noise_samples=int(seg.size),
            dc_dbfs=dc))
    return tuple(out)


#: The level check: quiet background first, then short sweeps rising in 6 dB steps from 30 dB
#: below the take's level (a slow rise, never a jump to full scale).
LEVEL_NOISE_S = 0.6
LEVEL_SWEEP_S = 0.3
LEVEL_GAP_S = 0.2
LEVEL_STEPS_DB = (-30.0, -24.0, -18.0, -12.0, -6.0, 0.0)


def level_program(spec: Any) -> tuple[np.ndarray, Any, tuple[int, ...]]:
    """The level-check signal for a take made with sweep ``spec``.

    Returns
    -------
    program : ndarray
        ``LEVEL_NOISE_S`` of silence, then one short sweep (same f1, f2) per step of
        ``LEVEL_STEPS_DB`` relative to ``spec.level_dbfs``, each followed by ``LEVEL_GAP_S``.
    short : SweepSpec
        The short sweep at the take's level (lead-in 0, one repeat).
    starts : tuple of int
        Sample index at which each step's sweep starts in ``program``.
    """
    from measure.sweep import SweepSpec, sweep_signal

    fade_in = min(spec.fade_in_s, 0.1 * LEVEL_SWEEP_S)
    short = SweepSpec(fs=spec.fs, f1_hz=spec.f1_hz, f2_hz=spec.f2_hz, duration_s=LEVEL_SWEEP_S,
                      repeats=1, gap_s=LEVEL_GAP_S, lead_in_s=0.0, level_dbfs=spec.level_dbfs,
                      fade_in_s=fade_in, fade_out_s=min(spec.fade_out_s, 0.1 * LEVEL_SWEEP_S))
    x = sweep_signal(short)
    n_noise = int(round(LEVEL_NOISE_S * spec.fs))
    period = short.n_sweep + short.n_gap
    program = np.zeros(n_noise + len(LEVEL_STEPS_DB) * period)
    starts = []
    for k, step_db in enumerate(LEVEL_STEPS_DB):
        i = n_noise + k * period
        program[i:i + x.size] = x * 10.0 ** (step_db / 20.0)
        starts.append(i)
    return program, short, tuple(starts)


#: Nominal octave centres the level check and the take summary consider (IEC 61260-1 Annex E;
#: the exact base-10 mid-bands are 1000·10^(3k/10) Hz).
OCTAVE_CENTRES_HZ = (31.5, 63.0, 125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0, 16000.0)


def octaves_inside(f1_hz: float, f2_hz: float) -> list[float]:
    """The centres of :data:`OCTAVE_CENTRES_HZ` whose whole band (fc/√2 … fc·√2) lies in
    [f1_hz, f2_hz]: the octaves a sweep over that range excites fully."""
    return [fc for fc in OCTAVE_CENTRES_HZ
            if fc / math.sqrt(2.0) >= f1_hz and fc * math.sqrt(2.0) <= f2_hz]


@dataclass(frozen=True, slots=True, eq=False)
class LevelReport:
    """Result of the level check, per recorded channel.

    Attributes
    ----------
    channels : tuple of int
        0-based device input channels.
    peak_dbfs : tuple of (float or None)
        Input peak during the loudest step reached.
    noise_rms_dbfs : tuple of (float or None)
        Background noise (RMS) before anything played.
    n_clipped : tuple of int
    step_reached_db : float
        The loudest step played, dB re the take's level (below 0 when clipping stopped it).
    pnr_db : tuple of (float or None)
        Broadband peak-to-noise the full take is predicted to reach; None without noise.
    octave_pnr_db : tuple of dict
        Per channel {octave centre Hz: predicted peak-to-noise in dB, or None}.
    found : tuple of bool
        Whether the test signal was found on each channel at all.
    warnings : tuple of str
    """

    channels: tuple[int, ...]
    peak_dbfs: tuple[float | None, ...]
    noise_rms_dbfs: tuple[float | None, ...]
    n_clipped: tuple[int, ...]
    step_reached_db: float
    pnr_db: tuple[float | None, ...]
    octave_pnr_db: tuple[dict[float, float | None], ...]
    found: tuple[bool, ...]
    warnings: tuple[str, ...] = field(default=())

    @property
    def ok(self) -> bool:
        return all(self.found) and not any(self.n_clipped)

    def to_dict(self) -> dict[str, Any]:
        return {
            "channels": [c + 1 for c in self.channels],
            "peak_dbfs": list(self.peak_dbfs), "noise_rms_dbfs": list(self.noise_rms_dbfs),
            "n_clipped": list(self.n_clipped), "step_reached_db": self.step_reached_db,
            "predicted_pnr_db": list(self.pnr_db),
            "predicted_octave_pnr_db": [{f"{k:g}": v for k, v in d.items()}
                                        for d in self.octave_pnr_db],
            "found": list(self.found), "warnings": list(self.warnings), "ok": self.ok,
        }


def _deconvolve(seg: np.ndarray, short: Any) -> np.ndarray:
    """Plain regularised inverse of one short sweep applied to ``seg`` (linear, no wrap)."""
    from measure.sweep import inverse_spectrum

    n_fft = 1 << int(math.ceil(math.log2(seg.size + short.n_sweep)))
    inv = inverse_spectrum(short, n_fft)
    return np.fft.irfft(np.fft.rfft(seg, n_fft) * inv, n_fft)


def _octave_power_response(fs: int, centre_hz: float, f_hz: np.ndarray) -> np.ndarray:
    """|B(f)|² of the octave band with nominal centre ``centre_hz``: the same IEC 61260-1
    class 1 filter the room figures use (:func:`measure.bands.band_filter_sos`)."""
    from scipy.signal import sosfreqz

    from measure.bands import band_centers, band_filter_sos

    band = band_centers("octave", centre_hz, centre_hz)[0]
    _, b = sosfreqz(band_filter_sos(band, fs), worN=f_hz, fs=fs)
    return np.abs(b) ** 2


def _band_peak2(h: np.ndarray, fs: int, centre_hz: float) -> float:
    """Peak power of ``h`` filtered (zero phase, |B|²) into one octave, in the frequency domain."""
    n = 1 << int(math.ceil(math.log2(2 * h.size)))
    f = np.fft.rfftfreq(n, 1.0 / fs)
    hb = np.fft.irfft(np.fft.rfft(h, n) * _octave_power_response(fs, centre_hz, f), n)
    return float(np.max(hb ** 2))


def _ratio_db(peak2: float, noise2: float) -> float | None:
    if not (noise2 > 0) or not (peak2 > 0):
        return None
    return 10.0 * math.log10(peak2 / noise2)


def analyze_level(y: np.ndarray, fs: int, take_spec: Any, *, channels: Sequence[int],
                  stopped_at_sample: int | None = None) -> LevelReport:
    """Judge a level-check recording ``y`` (channels, samples) made with :func:`level_program`.

    The loudest complete step is deconvolved with its short sweep: its peak, scaled to the take's
    level, is the peak the take will have (a linear system's impulse response does not depend on
    the sweep's length). The noise the take's impulse response will carry is computed from the
    background noise recorded first: its spectrum times the take's own inverse filter
    (:func:`measure.deconvolve.predicted_noise_power`), divided by M for M averaged sweeps (measurement sheet §1.5).
    Both are also computed per octave.
    """
    fs = check_fs(fs)
    y = np.atleast_2d(np.asarray(y, dtype=np.float64))
    _, short, starts = level_program(take_spec)
    period = short.n_sweep + short.n_gap
    n_noise = int(round(LEVEL_NOISE_S * fs))
    # The last step whose sweep and gap were fully recorded before any clip stop.
    limit = y.shape[1] if stopped_at_sample is None else int(stopped_at_sample)
    complete = [k for k, s in enumerate(starts) if s + period <= limit]
    k_last = complete[-1] if complete else None
    if stopped_at_sample is not None:
        reached = [k for k, s in enumerate(starts) if s <= stopped_at_sample]
        step_db = LEVEL_STEPS_DB[reached[-1]] if reached else LEVEL_STEPS_DB[0]
    else:
        step_db = LEVEL_STEPS_DB[-1]
    # The noise segment: the quiet start, minus a margin for the stream's start-up.
    noise = y[:, n_noise // 6: n_noise]
    peaks, noises, clips, pnrs, octs, found, warns = [], [], [], [], [], [], []
    bands = [fc for fc in octaves_inside(take_spec.f1_hz, take_spec.f2_hz)
             if fc * math.sqrt(2.0) < fs / 2]
    n_fft_take = 1 << int(math.ceil(math.log2(take_spec.n_sweep + 1)))
    f_take = np.fft.rfftfreq(n_fft_take, 1.0 / fs)
    weights = {fc: _octave_power_response(fs, fc, f_take) ** 2 for fc in bands}
    for ci, ch in enumerate(y):
        a = np.abs(ch[:limit])
        clips.append(int(np.count_nonzero(np.abs(ch) >= CLIP_LEVEL)))
        noises.append(_db(float(np.mean(noise[ci] ** 2))) if noise.shape[1] else None)
        if k_last is None:
            peaks.append(_db(float(a.max()) ** 2) if a.size else None)
            pnrs.append(None)
            octs.append({fc: None for fc in bands})
            found.append(False)
            continue
        s = starts[k_last]
        seg = ch[s:s + period]
        peaks.append(_db(float(np.max(np.abs(ch[starts[0]:limit]))) ** 2))
        scale2 = 10.0 ** (-LEVEL_STEPS_DB[k_last] / 10.0)  # the step was this far below the take
        h = _deconvolve(seg, short)[:period]
        peak2 = float(np.max(h ** 2))
        # Found: the step's impulse stands clearly out of the noise its own short sweep gives.
        step_noise, _, _ = predicted_noise_power(noise[ci], fs, short)
        p_step = _ratio_db(peak2, step_noise)
        if p_step is None and peak2 > 0:
            p_step = math.inf  # digital silence around a clear impulse
        found.append(bool(p_step is not None and p_step > FOUND_PNR_DB))
        take_noise, band_noise, _ = predicted_noise_power(noise[ci], fs, take_spec, weights)
        m = take_spec.repeats
        pnrs.append(_ratio_db(peak2 * scale2, take_noise / m))
        od: dict[float, float | None] = {
            fc: _ratio_db(_band_peak2(h, fs, fc) * scale2, band_noise[fc] / m) for fc in bands}
        octs.append(od)
    for ci, c in enumerate(channels):
        name = f"input {c + 1}"
        if clips[ci]:
            warns.append(
                f"{name} clipped at the step {step_db:+.0f} dB re the sweep level: lower the "
                f"loudspeaker volume or the input gain by at least {6 - step_db:.0f} dB, then "
                "check the level again")
        elif not found[ci]:
            warns.append(
                f"{name}: the test signal was not found (silent, disconnected or wrong input): "
                "check the cable, the microphone's power (phantom 48 V for a condenser), the "
                "input channel, and that the output device is the one feeding the loudspeaker")
        else:
            pk = peaks[ci]
            if pk is not None and pk > HEADROOM_PEAK_DBFS:
                warns.append(f"{name} peaks at {pk:.1f} dBFS, less than 3 dB of headroom: lower "
                             "the input gain a little")
            if pk is not None and pk < LOW_PEAK_DBFS:
                warns.append(f"{name} peaks at only {pk:.1f} dBFS: raise the input gain (or the "
                             "loudspeaker volume, step by step)")
            pn = pnrs[ci]
            if pn is not None and pn < PNR_T30_DB:
                warns.append(
                    f"{name}: predicted peak-to-noise {pn:.0f} dB is below the 45 dB T30 needs "
                    "(ISO 3382-1 5.3.3): raise the level, use a longer sweep or more repeats, "
                    "or make the room quieter")
            weak = [f"{fc:g}" for fc, v in octs[ci].items() if v is not None and v < PNR_T20_DB]
            if weak:
                warns.append(f"{name}: octaves {', '.join(weak)} Hz are predicted below the 35 dB "
                             "T20 needs (ISO 3382-1 5.3.3)")
    return LevelReport(channels=tuple(int(c) for c in channels), peak_dbfs=tuple(peaks),
                       noise_rms_dbfs=tuple(noises), n_clipped=tuple(clips),
                       step_reached_db=float(step_db), pnr_db=tuple(pnrs),
                       octave_pnr_db=tuple(octs), found=tuple(found), warnings=tuple(warns))


#: The octaves in which a take must give T20 to be good (where its sweep covers them): the
#: 250 Hz–4 kHz this tool asks of a take, between the survey grade's 250 Hz–2 kHz and the
#: engineering grade's 125 Hz–4 kHz of ISO 3382-2:2008 (measurement.md §2.4, from memory).
VERDICT_T20_OCTAVES: tuple[str, ...] = ("250", "500", "1k", "2k", "4k")


def figure_reasons(doc: dict[str, Any], label: str, *, cut: bool = False,
                   gap_needed_s: float | None = None) -> list[str]:
    """Why a take cannot give the figures it was made for (empty when it can), and what to do.

    ``doc`` is the channel's :meth:`measure.parameters.RoomFigures.to_dict`; a take must give
    T20 in every octave of :data:`VERDICT_T20_OCTAVES` that it analysed, unless what keeps
    T20 out is the room rather than the take (a decay too short for the band filter: another
    take would not help). ``cut`` says the response ended before its decay reached the noise
    (then the gap is too short).
    """
    from measure.decay import REQUIRED_RANGE_DB

    bands = doc.get("bands") or []
    details = (doc.get("details") or {}).get("bands") or [{}] * len(bands)
    missing = []
    for b, d in zip(bands, details, strict=False):
        if b.get("label") not in VERDICT_T20_OCTAVES or b.get("t20_s") is not None:
            continue
        rng = d.get("decay_range_db")
        short = isinstance(rng, (int, float)) and rng < REQUIRED_RANGE_DB["t20"]
        ended = any("the response ends" in f for f in b.get("flags", []))
        if short or ended:
            missing.append((b["label"], rng))
    if not missing:
        return []
    names = ", ".join(lab for lab, _ in missing)
    what = (f"{label}: T20 is missing in the {names} octave{'s' if len(missing) > 1 else ''} "
            f"(a take must give it at 250 Hz–4 kHz)")
    if cut:
        gap = f" (at least --gap {gap_needed_s:g})" if gap_needed_s is not None else ""
        return [f"{what}: the response ends before its decay reaches the noise; make the sweep "
                f"with a longer gap{gap} and record again"]
    ranges = [r for _, r in missing if isinstance(r, (int, float))]
    have = f" (at most {max(ranges):.0f} dB of decay above the noise there)" if ranges else ""
    return [f"{what}: T20 needs 35 dB of decay above the noise{have}; raise the level step by "
            "step, use a longer sweep or more repeats, or make the room quieter, and record "
            "again"]


@dataclass(frozen=True, slots=True, eq=False)
class Verdict:
    """Good or redo, with every reason (``reasons`` empty for a good take), notes, and warnings
    (a fault to fix before the next take that did not spoil this one, e.g. a DC offset)."""

    good: bool
    reasons: tuple[str, ...]
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"verdict": "good" if self.good else "redo", "reasons": list(self.reasons),
                "notes": list(self.notes), "warnings": list(self.warnings)}


def judge_take(stats: Sequence[ChannelStats], *, n_xruns: int, channel_labels: Sequence[str],
               pnr_db: Sequence[float | None] | None = None, found: Sequence[bool] | None = None,
               same_device: bool = True, has_loopback: bool = False,
               drift_ppm: float | None = None, extra: Sequence[str] = ()) -> Verdict:
    """Decide whether a take is good or must be redone, and say why (pure).

    Redo when: any sample clipped; the stream reported any overflow or underflow; no sweep was
    found on a channel; the peak-to-noise of a measurement channel is below the 35 dB T20 needs
    (ISO 3382-1 5.3.3). Notes (not redo): below 45 dB (no T30), a low peak, two devices.
    Warnings (not redo): a DC offset above :data:`DC_WARN_DBFS`.
    """
    reasons: list[str] = list(extra)
    notes: list[str] = []
    warnings = [w for st, label in zip(stats, channel_labels, strict=True)
                if (w := dc_offset_warning(st.dc_dbfs, label)) is not None]
    for st, label in zip(stats, channel_labels, strict=True):
        if st.n_clipped:
            reasons.append(
                f"{label}: {st.n_clipped} clipped sample(s) (at or beyond full scale); lower the "
                "loudspeaker volume or the input gain and record again")
    if n_xruns:
        reasons.append(
            f"the stream lost or missed {n_xruns} audio block(s) (overflow/underflow); close other "
            "programs, use a larger buffer or another USB port, and record again")
    for i, label in enumerate(channel_labels):
        if found is not None and not found[i]:
            reasons.append(
                f"{label}: no sweep found in the recording (silent, disconnected or wrong "
                "input); check the cable, the microphone's power, the input channel and that the "
                "output device feeds the loudspeaker")
            continue
        if pnr_db is not None and "reference" not in label:
            p = pnr_db[i]
            if p is not None and p < PNR_T20_DB:
                reasons.append(
                    f"{label}: peak-to-noise {p:.0f} dB is below the 35 dB T20 needs (ISO "
                    "3382-1 5.3.3); raise the level step by step, lengthen the sweep or add "
                    "repeats")
            elif p is not None and p < PNR_T30_DB:
                notes.append(f"{label}: peak-to-noise {p:.0f} dB allows T20 but not T30 (45 dB)")
        st = stats[i]
        if st.peak_dbfs is not None and st.peak_dbfs < LOW_PEAK_DBFS and "reference" not in label:
            notes.append(f"{label}: low input peak {st.peak_dbfs:.1f} dBFS; raise the input gain")
    if not same_device:
        txt = ("input and output are different devices with separate clocks: the latency "
               "includes both devices' buffers and changes from take to take")
        if drift_ppm is not None:
            txt += f"; clock drift {round(drift_ppm, 1) + 0.0:+.1f} ppm was corrected"
        if not has_loopback:
            txt += ("; for exact timing use one interface with a loopback cable "
                    "(--loopback-channel)")
        notes.append(txt)
    return Verdict(good=not reasons, reasons=tuple(reasons), notes=tuple(notes),
                   warnings=tuple(warnings))
