"""A captures tree as `measure capture` files it, for the command-line tests: a sweep file with
its sidecar, and per position a take recorded through measure.virtual.virtual_take whose
sidecar names that sweep."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from measure import audio_io, session
from measure.sweep import SweepSpec, make_sweep
from measure.virtual import virtual_take


def room_folder(root: Path, responses: Sequence[np.ndarray], sidecars: Sequence[dict[str, Any]],
                fs: int, *, noise_dbfs: float = -90.0, room: str = "hall") -> Path:
    """Write ``root``/sweeps/s.wav and one take per response as ``root``/captures/``room``/
    pN-take1.wav (N from 1), each sidecar ``sidecars[i]`` plus the sweep's name; returns the
    room folder."""
    spec = SweepSpec(fs=fs, f1_hz=20.0, f2_hz=min(24000.0, fs / 2), duration_s=1.0, gap_s=1.5,
                     lead_in_s=0.2, level_dbfs=-12.0)
    sweep = make_sweep(spec)
    sweep_wav, _ = audio_io.write_pair(root / "sweeps" / "s.wav", sweep.program, fs,
                                       sweep.sidecar(), subtype="FLOAT")
    for i, (h, side) in enumerate(zip(responses, sidecars, strict=True)):
        y = virtual_take(sweep.program, fs, h, latency_s=0.01, noise_dbfs=noise_dbfs,
                         extra_s=0.3, seed=30 + i)
        session.save_take(root / "captures", room, f"p{i + 1}", y[np.newaxis, :], fs,
                          {"sweep_file": str(sweep_wav), **side})
    return root / "captures" / room
