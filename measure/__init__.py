"""measure: room-acoustics measurement and compact room models for interactive audio.

The curated public API is re-exported here lazily (PEP 562): importing the package is cheap and
has no side effects, so ``measure --help`` starts fast, and ``measure.recover_ir`` etc. load
their module on first use.
"""

from __future__ import annotations

import importlib
from typing import Any

from measure._version import __version__

_EXPORTS = {
    "SweepSpec": "measure.sweep",
    "Sweep": "measure.sweep",
    "make_sweep": "measure.sweep",
    "recover_ir": "measure.deconvolve",
    "ImpulseResponse": "measure.deconvolve",
    "VirtualRoom": "measure.virtual",
    "room_ir": "measure.virtual",
    "virtual_take": "measure.virtual",
    "analyze_ir": "measure.parameters",
    "RoomFigures": "measure.parameters",
    "read_audio": "measure.audio_io",
    "read_sweep": "measure.audio_io",
    "MeasureError": "measure.errors",
}

__all__ = ["__version__", *_EXPORTS]


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        return getattr(importlib.import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'measure' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)
