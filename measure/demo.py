"""The built-in demo scenario: an invented building measured with virtual equipment.

"Larkspur Yard Depot" is a converted tram depot that exists only here. Four of its spaces are
measured the way a sound designer would measure them on a site visit: a laptop plays a sweep,
a USB microphone with its own clock records it (so the take has latency, clock drift, a little
loudspeaker distortion and each room's background noise), its input gain set so that the take
peaks between about -10 and -6 dBFS. The plant room is measured while its ventilation runs: the
rumble buries the two lowest octaves, and the demo shows which figures that costs and why. The
rooms are the virtual rooms of :data:`measure.virtual.DEMO_ROOMS`.

A fifth space, the canteen, is measured for distance and direction (:data:`DEMO_SERIES`): a
talker-sized loudspeaker (omnidirectional in the lows, beaming in the highs) at one end, the
microphone at five distances along the room on its axis and at five angles round it at 1 m,
so that ``measure attenuation`` has a distance and an angle series to fit
(:data:`CANTEEN`, a :class:`measure.virtual.VirtualSpace`, is the truth).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from measure.sweep import SweepSpec
from measure.virtual import (
    DEMO_ROOMS,
    OCTAVE_CENTERS_HZ,
    NoiseKind,
    VirtualRoom,
    VirtualSpace,
)

__all__ = ["BUILDING", "DemoTake", "DEMO_TAKES", "DEMO_SWEEP", "demo_recording", "CANTEEN",
           "DemoPosition", "DEMO_SERIES", "demo_series_recording"]

BUILDING = "Larkspur Yard Depot"

#: The demo's sweep: 48 kHz, 20 Hz to Nyquist, 5 s, two repeats with 4.5 s for the tails.
DEMO_SWEEP = SweepSpec(fs=48000, f1_hz=20.0, f2_hz=24000.0, duration_s=5.0, repeats=2,
                       gap_s=4.5, lead_in_s=0.5, level_dbfs=-20.0, fade_in_s=0.05,
                       fade_out_s=0.002)


@dataclass(frozen=True, slots=True)
class DemoTake:
    """How one room of the demo is recorded (position label and the virtual equipment)."""

    room: VirtualRoom
    position: str
    description: str
    latency_s: float
    drift_ppm: float
    hd2_percent: float
    hd3_percent: float
    noise_dbfs: float
    distance_m: float
    gain_db: float = 0.0
    noise_kind: NoiseKind = "white"


DEMO_TAKES: tuple[DemoTake, ...] = (
    DemoTake(DEMO_ROOMS[0], "landing-2",
             "tiled concrete stairwell, microphone on the second landing",
             latency_s=0.0871, drift_ppm=23.0, hd2_percent=0.8, hd3_percent=0.4,
             noise_dbfs=-84.0, distance_m=4.0, gain_db=-6.0),
    DemoTake(DEMO_ROOMS[1], "desk-4",
             "carpeted open-plan office with a lay-in ceiling, microphone at a desk",
             latency_s=0.0871, drift_ppm=23.0, hd2_percent=0.8, hd3_percent=0.4,
             noise_dbfs=-76.0, distance_m=3.0),
    DemoTake(DEMO_ROOMS[2], "bay-17",
             "concrete parking level under the depot, microphone in bay 17",
             latency_s=0.0871, drift_ppm=23.0, hd2_percent=0.8, hd3_percent=0.4,
             noise_dbfs=-72.0, distance_m=8.0, gain_db=-8.0),
    DemoTake(DEMO_ROOMS[3], "door-side",
             "concrete plant room with the ventilation running, microphone by the door",
             latency_s=0.0871, drift_ppm=23.0, hd2_percent=0.8, hd3_percent=0.4,
             noise_dbfs=-30.0, distance_m=3.5, gain_db=-4.0, noise_kind="rumble"),
)


def demo_recording(index: int, program: np.ndarray, fs: int) -> tuple[np.ndarray, np.ndarray]:
    """The true response and the raw take of demo take ``index`` (``program`` is the sweep
    file that plays): the room at the take's input gain, with its latency, drift, distortion
    and background noise; deterministic (the seeds follow the index).

    Returns
    -------
    (h_true, y)
        The room's own impulse response (at 0 dB gain) and the recording.
    """
    from measure.virtual import room_ir, virtual_take

    t = DEMO_TAKES[index]
    h_true = room_ir(t.room, fs, seed=100 + index)
    # the input gain scales what reaches the converter; the noise is the converter's input
    y = virtual_take(program, fs, h_true * 10.0 ** (t.gain_db / 20.0), latency_s=t.latency_s,
                     drift_ppm=t.drift_ppm, hd2_percent=t.hd2_percent,
                     hd3_percent=t.hd3_percent, noise_dbfs=t.noise_dbfs,
                     noise_kind=t.noise_kind, extra_s=0.5, seed=200 + index)
    return h_true, y


#: The canteen: 20 × 10 × 3 m with an absorbent ceiling (T about 0.6 s in the mid bands), a
#: loudspeaker of about a talker's directivity. Its critical distance on the loudspeaker's axis
#: is 1.6 m at 125 Hz, 2.3 m at 1 kHz and 3.1 m at 4 kHz
#: (measure.virtual.VirtualSpace.critical_distance_m).
CANTEEN = VirtualSpace("canteen", OCTAVE_CENTERS_HZ, (0.85, 0.75, 0.65, 0.6, 0.6, 0.55, 0.5, 0.45),
                       volume_m3=600.0,
                       directivity=(0.0, 0.0, 0.05, 0.12, 0.22, 0.32, 0.42, 0.48),
                       temperature_c=21.0, humidity_percent=45.0, length_s=1.5)


@dataclass(frozen=True, slots=True)
class DemoPosition:
    """One microphone position of the canteen's series."""

    position: str
    distance_m: float
    angle_deg: float


#: The canteen's positions: on the loudspeaker's axis at five distances, and at 1 m at five
#: angles (the on-axis 1 m position belongs to both series).
DEMO_SERIES: tuple[DemoPosition, ...] = (
    DemoPosition("axis-1m", 1.0, 0.0),
    DemoPosition("axis-2m", 2.0, 0.0),
    DemoPosition("axis-3m", 3.0, 0.0),
    DemoPosition("axis-5m", 5.0, 0.0),
    DemoPosition("axis-8m", 8.0, 0.0),
    DemoPosition("1m-45deg", 1.0, 45.0),
    DemoPosition("1m-90deg", 1.0, 90.0),
    DemoPosition("1m-135deg", 1.0, 135.0),
    DemoPosition("1m-180deg", 1.0, 180.0),
)


def demo_series_recording(index: int, program: np.ndarray, fs: int) -> np.ndarray:
    """The raw take of canteen position ``index`` with the demo's virtual equipment (latency,
    drift and distortion as the other takes, background noise at −80 dBFS); deterministic."""
    from measure.virtual import positioned_ir, virtual_take

    p = DEMO_SERIES[index]
    h = positioned_ir(CANTEEN, fs, distance_m=p.distance_m, angle_deg=p.angle_deg,
                      seed=300 + index)
    t = DEMO_TAKES[0]
    return virtual_take(program, fs, h, latency_s=t.latency_s, drift_ppm=t.drift_ppm,
                        hd2_percent=t.hd2_percent, hd3_percent=t.hd3_percent, noise_dbfs=-80.0,
                        extra_s=0.5, seed=400 + index)
