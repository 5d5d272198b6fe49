"""Frame stage: units, local origin, up axis and azimuth convention (config sections ``input`` and ``frame``).

The local origin is removed before any float work, so georeferenced coordinates
(612345.12, 5234567.89) do not cost precision in the fits.
"""
from __future__ import annotations

import logging

import numpy as np

from ..config import FrameConfig, InputConfig
from ..model import Frame
from ..units import to_metres

log = logging.getLogger(__name__)


def make_frame(sample_xyz: np.ndarray, units_hint, in_cfg: InputConfig, cfg: FrameConfig, warnings: list) -> Frame:
    """Build the frame from a sample of raw file coordinates (n, 3) and the file's unit hint."""
    if in_cfg.units == "auto":
        units, src = (units_hint, "LAS CRS") if units_hint else ("m", "default")
    else:
        units, src = in_cfg.units, "config"
        if units_hint and units_hint != units:
            msg = (f"input.units is {units!r} but the file's CRS says {units_hint!r}; using {units!r} "
                   f"as configured")
            log.warning("frame: %s", msg)
            warnings.append(msg)
    if cfg.origin is not None:
        origin = np.asarray(cfg.origin, dtype=float)
    else:
        finite = sample_xyz[np.isfinite(sample_xyz).all(axis=1)]
        origin = np.round(np.median(finite, axis=0), 0) if len(finite) else np.zeros(3)
    return Frame(origin=origin, units=units, metres_per_unit=to_metres(units), up_axis=in_cfg.up_axis,
                 azimuth_reference_deg=cfg.azimuth_reference_deg, azimuth_direction=cfg.azimuth_direction,
                 units_source=src)
