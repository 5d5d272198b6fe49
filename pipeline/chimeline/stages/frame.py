"""Frame stage: units, local origin, up axis and azimuth convention (config sections ``input`` and ``frame``).

The local origin is removed before any float work, so georeferenced coordinates
(612345.12, 5234567.89) do not cost precision in the fits.
"""
from __future__ import annotations

import dataclasses
import logging
from dataclasses import dataclass

import numpy as np

from ..config import FrameConfig, InputConfig
from ..errors import InputError
from ..units import LENGTH_FACTORS, to_metres

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Frame:
    """Scan file coordinates -> local metres: ``(xyz_file - origin) * metres_per_unit``, axes permuted to z-up."""

    origin: np.ndarray  # (3,) file units, in the file's axis order
    units: str  # file length unit: m, ft, us_ft, mm
    metres_per_unit: float
    up_axis: str  # "z" or "y"
    azimuth_reference_deg: float
    azimuth_direction: str  # "cw" or "ccw"
    units_source: str  # "config", "LAS CRS", "default"

    def to_local(self, xyz_file: np.ndarray) -> np.ndarray:
        p = (xyz_file - self.origin) * self.metres_per_unit
        if self.up_axis == "y":  # file (x, y=up, z) -> local (x, -z, y), right-handed
            p = np.column_stack([p[:, 0], -p[:, 2], p[:, 1]])
        return p

    def to_file_xy(self, xy_local: np.ndarray) -> np.ndarray:
        """Local (x, y) metres back to file horizontal coordinates (z-up files)."""
        xy = np.asarray(xy_local, dtype=float)
        if self.up_axis == "y":
            return np.array([xy[0] / self.metres_per_unit + self.origin[0], -xy[1] / self.metres_per_unit + self.origin[2]])
        return xy / self.metres_per_unit + self.origin[:2]

    def file_xy_to_local(self, xy_file) -> np.ndarray:
        """File horizontal coordinates (with any georeferencing offset) to local (x, y) metres."""
        h = np.asarray(xy_file, dtype=float)
        if self.up_axis == "z":
            return (h - self.origin[:2]) * self.metres_per_unit
        return np.array([(h[0] - self.origin[0]), -(h[1] - self.origin[2])]) * self.metres_per_unit

    def up_origin_m(self) -> float:
        """The local origin's elevation in metres (local z + this = scan-datum elevation in metres)."""
        return float(self.origin[2 if self.up_axis == "z" else 1] * self.metres_per_unit)

    def azimuth_deg(self, dx, dy) -> np.ndarray:
        """Azimuth of horizontal offsets (local m) in degrees per the frame's convention, in [0, 360)."""
        a = np.degrees(np.arctan2(dx, dy))
        if self.azimuth_direction == "ccw":
            a = -a
        return np.mod(a - self.azimuth_reference_deg * (1 if self.azimuth_direction == "cw" else -1), 360.0)


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


def check_extent(scan, local: np.ndarray, frame: Frame, min_radius: float, max_radius: float) -> None:
    """Refuse a scan whose plan size is absurd for the declared unit, and say which unit would fit."""
    span = float(np.max(np.ptp(local[:, :2], axis=0)))
    lo, hi = 2 * min_radius, 20 * max_radius
    if lo <= span <= hi:
        return
    span_file = span / frame.metres_per_unit
    fits = [u for u, f in LENGTH_FACTORS.items() if lo <= span_file * f <= hi and u in ("m", "mm", "ft", "us_ft")
            and abs(f - frame.metres_per_unit) > 1e-12]
    hint = f"; if the scan is in {' or '.join(fits)}, set input.units" if fits else ""
    raise InputError(f"{scan}: the scan spans {span:.4g} m in plan with input.units = {frame.units!r}, absurd for a "
                     f"tank site{hint}")


def tie_azimuth_zero(frame: Frame, shell, point_file, scan="") -> Frame:
    """The frame with azimuth 0 pointing from the shell axis at a feature given in scan coordinates [x, y]."""
    p = frame.file_xy_to_local(point_file)
    dx, dy = p[0] - shell.center[0], p[1] - shell.center[1]
    if np.hypot(dx, dy) < 0.05 * shell.radius:
        raise InputError(f"{scan}: 'frame.azimuth_zero_at' {list(point_file)} lies at the tank centre; give a point "
                         f"on or near the shell (a manway, a nameplate, survey point 1)")
    ref = float(np.mod(np.degrees(np.arctan2(dx, dy)), 360.0))  # clockwise from +Y, either direction
    return dataclasses.replace(frame, azimuth_reference_deg=ref)
