"""The built-in demo scenario: an invented building measured with virtual equipment.

"Larkspur Yard Depot" is a converted tram depot that exists only here. Three of its spaces are
measured the way a sound designer would measure them on a site visit: a laptop plays a sweep,
a USB microphone with its own clock records it (so the take has latency, clock drift, a little
loudspeaker distortion and each room's background noise). The rooms are the virtual rooms of
:data:`measure.virtual.DEMO_ROOMS`.
"""

from __future__ import annotations

from dataclasses import dataclass

from measure.sweep import SweepSpec
from measure.virtual import DEMO_ROOMS, VirtualRoom

__all__ = ["BUILDING", "DemoTake", "DEMO_TAKES", "DEMO_SWEEP"]

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


DEMO_TAKES: tuple[DemoTake, ...] = (
    DemoTake(DEMO_ROOMS[0], "landing-2",
             "tiled concrete stairwell, microphone on the second landing",
             latency_s=0.0871, drift_ppm=23.0, hd2_percent=0.8, hd3_percent=0.4,
             noise_dbfs=-84.0, distance_m=4.0),
    DemoTake(DEMO_ROOMS[1], "desk-4",
             "carpeted open-plan office with a lay-in ceiling, microphone at a desk",
             latency_s=0.0871, drift_ppm=23.0, hd2_percent=0.8, hd3_percent=0.4,
             noise_dbfs=-76.0, distance_m=3.0),
    DemoTake(DEMO_ROOMS[2], "bay-17",
             "concrete parking level under the depot, microphone in bay 17",
             latency_s=0.0871, drift_ppm=23.0, hd2_percent=0.8, hd3_percent=0.4,
             noise_dbfs=-72.0, distance_m=8.0),
)
