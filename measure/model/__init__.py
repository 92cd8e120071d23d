"""Compact room model: coloration (pole-zero), echoes (delays and gains), late reverberation.

A measured impulse response is reduced to a few numbers a game engine can run:

    H(s) = coloration(s) · (1 + Σ a_k·e^(−s·t_k)) + late reverberation,

where the coloration is a low-order minimum-phase filter fitted to the smoothed magnitude
response (:mod:`measure.model.coloration`), the echoes are the direct sound and the strongest
discrete early reflections (:mod:`measure.model.echoes`), and the late part starts at the
mixing time estimated from the normalised echo density (:mod:`measure.model.mixing`).

Submodules are imported explicitly (``from measure.model.coloration import fit_coloration``);
this package file has no side effects.
"""

from __future__ import annotations

__all__: list[str] = []
