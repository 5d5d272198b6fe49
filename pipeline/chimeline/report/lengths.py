"""Local metres to a run's output unit, and local elevations to scan-datum elevations."""
from __future__ import annotations

import numpy as np

from ..units import to_metres


class Lengths:
    """Conversions for a run result: local metres -> output units; local z -> scan-datum elevation."""

    def __init__(self, res):
        self.unit = res.out_units
        self.f = to_metres(self.unit)
        fr = res.frame
        self.z0 = fr.up_origin_m()
        self.origin_m = fr.origin * fr.scale

    def length(self, v):
        return np.asarray(v, dtype=float) / self.f

    def elevation(self, z_local):
        return (np.asarray(z_local, dtype=float) + self.z0) / self.f

    def xy(self, xy_local, frame):
        """Local (x, y) m -> scan-frame horizontal coordinates (origin added back) in the output unit."""
        if frame.up_axis == "z":
            return (np.asarray(xy_local[:2]) + self.origin_m[:2]) / self.f
        return np.array([xy_local[0] + self.origin_m[0], -xy_local[1] + self.origin_m[2]]) / self.f
