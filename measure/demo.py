"""The built-in demo scenario: an invented building measured with virtual equipment.

"Larkspur Yard Depot" is a converted tram depot that exists only here. Four of its spaces are
measured the way a sound designer would measure them on a site visit: a laptop plays a sweep,
a USB microphone with its own clock records it (so the take has latency, clock drift, a little
loudspeaker distortion and each room's background noise), its input gain set so that the take
peaks between about -10 and -6 dBFS. The plant room is measured while its ventilation runs: the
rumble buries the two lowest octaves, and the demo shows which figures that costs and why. The
rooms are the virtual rooms of :data:`measure.virtual.DEMO_ROOMS`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from measure.sweep import SweepSpec
from measure.virtual import DEMO_ROOMS, NoiseKind, VirtualRoom

__all__ = ["BUILDING", "DemoTake", "DEMO_TAKES", "DEMO_SWEEP", "demo_recording"]

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
