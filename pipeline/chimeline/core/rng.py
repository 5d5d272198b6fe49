"""Random streams: one seed, and a purpose code per use so every stream is reproducible on its own.

``stream(seed, purpose, *index)`` is ``numpy.random.default_rng([seed, purpose, *index])``. The codes are part
of the reproducibility contract: the same scan, config and seed give the same bytes, so a code is never
reused or renumbered (that would change outputs). The scan-to-profile run also draws from the plain
``default_rng(seed)`` (the shell sample and RANSAC), in that order.
"""
from __future__ import annotations

from enum import IntEnum

import numpy as np


class Purpose(IntEnum):
    FACE_THINNING = 17  # which shell-face points the junction ring keeps while streaming
    PLOT_SAMPLE = 18  # subsample of the ring for figures
    SCAN_VIEW = 19  # subsample of a simulated scan for its view PNG
    EVALUATION_BANDS = 20  # Monte Carlo of the simultaneous (max-t) bands of the evaluation
    FACE_SAMPLE = 21  # which shell-face points (all heights) the geometry stage keeps while streaming
    SYNTH_STATION = 1000  # + station index: a simulated station's parameters and registration error
    SYNTH_CHUNK = 2000  # + station index, then the chunk number: a simulated station's rays
    SYNTH_GROUND = 7777  # the simulated ground's roughness
    SYNTH_MIXING = 3000  # + station index, then the chunk number: footprint mixing at the crease and the plate edge


def stream(seed: int, purpose: Purpose, *index: int, offset: int = 0) -> np.random.Generator:
    """The generator for ``purpose`` (+ ``offset``) and further indices under ``seed``."""
    return np.random.default_rng([int(seed), int(purpose) + int(offset), *map(int, index)])
