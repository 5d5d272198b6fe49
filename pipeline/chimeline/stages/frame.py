"""Frame stage: units, local origin, up axis and azimuth convention (config sections ``input`` and ``frame``).

The local origin is removed before any float work, so georeferenced coordinates
(612345.12, 5234567.89) do not cost precision in the fits.
"""
from __future__ import annotations

import dataclasses
import logging
from dataclasses import dataclass
from typing import Optional

import numpy as np

from ..config import FrameConfig, InputConfig
from ..errors import InputError
from ..units import LENGTH_FACTORS, to_metres

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Frame:
    """Scan file coordinates -> local metres: ``(xyz_file - origin) * scale``, axes permuted to z-up.

    Horizontal and vertical units may differ (compound CRSs: metres in plan, US survey feet in height):
    ``metres_per_unit`` is the vertical factor (elevations are what the profile reports), and
    ``metres_per_unit_horizontal`` the plan factor.
    """

    origin: np.ndarray  # (3,) file units, in the file's axis order
    units: str  # the file's vertical length unit (elevations): m, ft, us_ft, mm
    metres_per_unit: float  # metres per vertical file unit
    up_axis: str  # "z" or "y"
    azimuth_reference_deg: float
    azimuth_direction: str  # "cw" or "ccw"
    units_source: str  # "config", "file CRS (WKT)", "file CRS (GeoTIFF keys)", "default", or per axis
    units_horizontal: str = ""  # the file's horizontal length unit; "" = units
    metres_per_unit_horizontal: float = 0.0  # metres per horizontal file unit; 0 = metres_per_unit

    def __post_init__(self):
        if not self.units_horizontal:
            object.__setattr__(self, "units_horizontal", self.units)
        if not self.metres_per_unit_horizontal:
            object.__setattr__(self, "metres_per_unit_horizontal", self.metres_per_unit)

    @property
    def scale(self) -> np.ndarray:
        """(3,) metres per file unit along the file's axes (the up axis vertical, the others horizontal)."""
        s = np.full(3, self.metres_per_unit_horizontal)
        s[2 if self.up_axis == "z" else 1] = self.metres_per_unit
        return s

    def to_local(self, xyz_file: np.ndarray) -> np.ndarray:
        p = (xyz_file - self.origin) * self.scale
        if self.up_axis == "y":  # file (x, y=up, z) -> local (x, -z, y), right-handed
            p = np.column_stack([p[:, 0], -p[:, 2], p[:, 1]])
        return p

    def to_file_xy(self, xy_local: np.ndarray) -> np.ndarray:
        """Local (x, y) metres back to file horizontal coordinates (z-up files)."""
        xy = np.asarray(xy_local, dtype=float)
        f = self.metres_per_unit_horizontal
        if self.up_axis == "y":
            return np.array([xy[0] / f + self.origin[0], -xy[1] / f + self.origin[2]])
        return xy / f + self.origin[:2]

    def file_xy_to_local(self, xy_file) -> np.ndarray:
        """File horizontal coordinates (with any georeferencing offset) to local (x, y) metres."""
        h = np.asarray(xy_file, dtype=float)
        f = self.metres_per_unit_horizontal
        if self.up_axis == "z":
            return (h - self.origin[:2]) * f
        return np.array([(h[0] - self.origin[0]), -(h[1] - self.origin[2])]) * f

    def up_origin_m(self) -> float:
        """The local origin's elevation in metres (local z + this = scan-datum elevation in metres)."""
        return float(self.origin[2 if self.up_axis == "z" else 1] * self.metres_per_unit)

    def azimuth_deg(self, dx, dy) -> np.ndarray:
        """Azimuth of horizontal offsets (local m) in degrees per the frame's convention, in [0, 360)."""
        a = np.degrees(np.arctan2(dx, dy))
        if self.azimuth_direction == "ccw":
            a = -a
        return np.mod(a - self.azimuth_reference_deg * (1 if self.azimuth_direction == "cw" else -1), 360.0)


def _configured(in_cfg: InputConfig, axis: str) -> Optional[str]:
    """The unit the config gives an axis (``input.units_<axis>``, else the ``input.units`` shortcut), or None."""
    own = getattr(in_cfg, f"units_{axis}")
    if own != "auto":
        return own
    return in_cfg.units if in_cfg.units != "auto" else None


def resolve_units(crs, in_cfg: InputConfig, path, warnings: list) -> tuple[str, str, str]:
    """(horizontal unit, vertical unit, source) from the config and the file's CRS (``io.crs.CrsUnits``, a unit
    string standing for both axes, or None). A disagreement is an error unless ``input.units_priority`` says which
    wins."""
    if isinstance(crs, str):
        file_units, label, name, unknown = {"horizontal": crs, "vertical": crs}, "file CRS", crs, ""
    elif crs is not None:
        # a CRS without a vertical part: heights are taken in the plan unit (as single-unit files mean)
        file_units = {"horizontal": crs.horizontal, "vertical": crs.vertical or crs.horizontal}
        label, name, unknown = f"file CRS ({crs.source})", crs.name, crs.unknown_unit
    else:
        file_units, label, name, unknown = {"horizontal": None, "vertical": None}, "", "", ""
    out, sources = {}, {}
    for axis in ("horizontal", "vertical"):
        want, have = _configured(in_cfg, axis), file_units[axis]
        key = f"input.units_{axis}" if getattr(in_cfg, f"units_{axis}") != "auto" else "input.units"
        if have is None and unknown and want is None:
            raise InputError(f"{path}: the file's CRS ({name}) uses the length unit {unknown}, which chimeline does "
                             f"not convert; set {key} (m, ft, us_ft or mm) and input.units_priority: config")
        if want is not None and have is not None and want != have:
            msg = f"{key} is {want!r} but the file's CRS ({name}) says {have!r} for the {axis} axis"
            if in_cfg.units_priority == "error":
                raise InputError(f"{path}: {msg}; correct the config, or set input.units_priority: config (or file) "
                                 f"to say which wins")
            win = want if in_cfg.units_priority == "config" else have
            warnings.append(f"{msg}; using {win!r} (input.units_priority: {in_cfg.units_priority})")
            log.warning("frame: %s", warnings[-1])
            out[axis], sources[axis] = win, "config" if win == want else label
        elif want is not None:
            out[axis], sources[axis] = want, "config"
        elif have is not None:
            out[axis], sources[axis] = have, label
        else:
            out[axis], sources[axis] = "m", "default"
    src = sources["horizontal"] if sources["horizontal"] == sources["vertical"] else \
        f"horizontal: {sources['horizontal']}, vertical: {sources['vertical']}"
    return out["horizontal"], out["vertical"], src


def make_frame(sample_xyz: np.ndarray, units_hint, in_cfg: InputConfig, cfg: FrameConfig, warnings: list,
               path="scan") -> Frame:
    """Build the frame from a sample of raw file coordinates (n, 3) and the file's CRS units (``units_hint``: an
    ``io.crs.CrsUnits``, a unit name for both axes, or None)."""
    h_units, v_units, src = resolve_units(units_hint, in_cfg, path, warnings)
    if cfg.origin is not None:
        origin = np.asarray(cfg.origin, dtype=float)
    else:
        finite = sample_xyz[np.isfinite(sample_xyz).all(axis=1)]
        origin = np.round(np.median(finite, axis=0), 0) if len(finite) else np.zeros(3)
    return Frame(origin=origin, units=v_units, metres_per_unit=to_metres(v_units), up_axis=in_cfg.up_axis,
                 azimuth_reference_deg=cfg.azimuth_reference_deg, azimuth_direction=cfg.azimuth_direction,
                 units_source=src, units_horizontal=h_units, metres_per_unit_horizontal=to_metres(h_units))


def check_extent(scan, local: np.ndarray, frame: Frame, min_radius: float, max_radius: float) -> None:
    """Refuse a scan whose plan size is absurd for the declared unit, and say which unit would fit."""
    span = float(np.max(np.ptp(local[:, :2], axis=0)))
    lo, hi = 2 * min_radius, 20 * max_radius
    if lo <= span <= hi:
        return
    span_file = span / frame.metres_per_unit_horizontal
    fits = [u for u, f in LENGTH_FACTORS.items() if lo <= span_file * f <= hi and u in ("m", "mm", "ft", "us_ft")
            and abs(f - frame.metres_per_unit_horizontal) > 1e-12]
    hint = f"; if the scan is in {' or '.join(fits)}, set input.units" if fits else ""
    raise InputError(f"{scan}: the scan spans {span:.4g} m in plan with the horizontal unit "
                     f"{frame.units_horizontal!r} ({frame.units_source}), absurd for a tank site{hint}")


def tie_azimuth_zero(frame: Frame, shell, point_file, scan="") -> Frame:
    """The frame with azimuth 0 pointing from the shell axis at a feature given in scan coordinates [x, y]."""
    p = frame.file_xy_to_local(point_file)
    dx, dy = p[0] - shell.center[0], p[1] - shell.center[1]
    if np.hypot(dx, dy) < 0.05 * shell.radius:
        raise InputError(f"{scan}: 'frame.azimuth_zero_at' {list(point_file)} lies at the tank centre; give a point "
                         f"on or near the shell (a manway, a nameplate, survey point 1)")
    ref = float(np.mod(np.degrees(np.arctan2(dx, dy)), 360.0))  # clockwise from +Y, either direction
    return dataclasses.replace(frame, azimuth_reference_deg=ref)


#: a storage step whose rounding error (step / sqrt(12), uniform) exceeds this share of the measured noise sigma
#: gets a warning: it adds more than 6 % to the noise variance
QUANTUM_WARN_SHARE = 0.25
#: 32-bit float coordinates whose spacing exceeds this (m) at the data's magnitude get a warning
FLOAT32_WARN_M = 1e-4


def precision_warnings(quantum, storage: str, frame: Frame, noise_sigma: float, storage_step: bool = True) -> list[str]:
    """One warning each for coarse 32-bit float coordinates (large offsets) and for a storage step (LAS scale)
    that is coarse against the measured noise. ``quantum`` (3,) file units or None; sigma in m."""
    out = []
    if quantum is None:
        return out
    q_m = np.asarray(quantum, dtype=float) * frame.scale
    q_max = float(np.max(q_m))
    if storage == "float32" and q_max > FLOAT32_WARN_M:
        out.append(f"coordinates are 32-bit floats with large values: they are stored in steps of up to "
                   f"{q_max * 1e3:.3g} mm; shift the scan to a local origin (or store doubles) before export")
    if not storage_step:  # the noise stage words the storage step itself (it is in its variance model)
        return out
    q_up = float(q_m[2 if frame.up_axis == "z" else 1])
    if np.isfinite(noise_sigma) and noise_sigma > 0 and q_up / np.sqrt(12.0) > QUANTUM_WARN_SHARE * noise_sigma:
        out.append(f"the file stores heights in steps of {q_up * 1e3:.3g} mm, coarse against the measured noise "
                   f"sigma {noise_sigma * 1e3:.3g} mm (rounding adds {100 * q_up ** 2 / 12 / noise_sigma ** 2:.0f} % "
                   f"to the noise variance); export with a finer scale")
    for w in out:
        log.warning("frame: %s", w)
    return out
