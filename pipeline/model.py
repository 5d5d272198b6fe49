"""Shared result dataclasses. Lengths are metres in the local frame unless a field says otherwise;
azimuths are degrees clockwise from the configured reference (default +Y), in [0, 360)."""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Optional

import numpy as np


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

    def azimuth_deg(self, dx, dy) -> np.ndarray:
        """Azimuth of horizontal offsets (local m) in degrees per the frame's convention, in [0, 360)."""
        a = np.degrees(np.arctan2(dx, dy))
        if self.azimuth_direction == "ccw":
            a = -a
        return np.mod(a - self.azimuth_reference_deg * (1 if self.azimuth_direction == "cw" else -1), 360.0)


@dataclass(frozen=True)
class TankCandidate:
    center: np.ndarray  # (2,) local m at the reference height
    radius: float  # m
    n_inliers: int
    coverage: float  # share of 5-degree sectors with inliers
    height_extent: float  # m


@dataclass(frozen=True)
class ShellFit:
    center: np.ndarray  # (3,) local m: point on the axis at z = center[2] (the base, once refined)
    axis: np.ndarray  # (3,) unit vector, +z up
    radius: float  # m, outer radius near the base
    radius_mean: float  # m, mean outer radius of all inliers (courses step inward)
    rms_residual: float  # m, radial RMS of the refinement inliers
    n_inliers: int
    coverage: float  # share of 5-degree sectors with shell inliers
    n_trials: int  # RANSAC trials run
    n_candidates: int  # points with near-horizontal normals
    others: tuple = ()  # further TankCandidate found
    z_min: float = 0.0  # m, lowest shell inlier (rough base)
    z_max: float = 0.0  # m, highest shell inlier
    selection: str = ""  # why this tank was chosen

    def radial(self, p: np.ndarray):
        """(height along axis from center, radial distance from the axis, horizontal offsets dx, dy) of points (n, 3)."""
        w = p - self.center
        h = w @ self.axis
        qx = w[:, 0] - h * self.axis[0]
        qy = w[:, 1] - h * self.axis[1]
        return h, np.hypot(qx, qy), qx, qy


@dataclass(frozen=True)
class Junction:
    """Junction candidates: points on the projection top next to the shell."""

    azimuth_deg: np.ndarray  # (n,)
    z: np.ndarray  # (n,) m, local elevation
    station: np.ndarray  # (n,) int, point source id (0 when unknown)
    radial: np.ndarray  # (n,) m outside the shell face
    prior_sector_deg: np.ndarray  # (n_sectors,) sector centres
    prior_z: np.ndarray  # (n_sectors,) m, coarse junction prior (nan where none)
    projection_width: Optional[float]  # m, estimated from the radial profile (None if not found)
    radial_window: tuple  # (min, max) m used
    n_ring: int  # points in the streamed ring
    n_candidates: int  # in the radial window and the search window
    n_gated: int  # within the height gate of the prior (returned)
    base_z: float  # m, median shell foot elevation


@dataclass(frozen=True)
class Profile:
    """Junction elevation per azimuth bin."""

    azimuth_deg: np.ndarray  # (n_bins,) bin centres
    bin_width_deg: float
    elevation: np.ndarray  # (n_bins,) m, local frame; nan where empty
    std_error: np.ndarray  # (n_bins,) m, 1 sigma (noise and registration); nan where empty
    scale: np.ndarray  # (n_bins,) m, robust scale of the kept points
    n_points: np.ndarray  # (n_bins,) kept
    n_rejected: np.ndarray  # (n_bins,)
    n_stations: np.ndarray  # (n_bins,)
    n_eff: np.ndarray  # (n_bins,) effective number of independent readings
    status: np.ndarray  # (n_bins,) str: ok, sparse, suspect, empty
    gaps: tuple  # ((start_deg, end_deg), ...) arcs without a value
    coverage: float  # share of bins with status ok
    kept: np.ndarray  # (n_candidates,) bool over the junction candidates
    bin_index: np.ndarray  # (n_candidates,) int
    residual: np.ndarray  # (n_candidates,) m, candidate z minus its bin location (nan where rejected)
    station_offset: dict = field(default_factory=dict)  # station id -> m, relative vertical offset (sum zero)
    station_offset_n: dict = field(default_factory=dict)  # station id -> points in shared bins behind it
    slope_per_deg: Optional[np.ndarray] = None  # (n_bins,) m per degree, from the neighbouring bins
    leveled: bool = False  # station offsets were removed from the elevations


@dataclass(frozen=True)
class Estimate:
    sigma: float  # m, 1 sigma vertical measurement noise per point
    ci: tuple  # (lo, hi) m at the configured confidence
    dof: int
    n_points: int


@dataclass(frozen=True)
class StationNoise:
    station: int
    within_bin: Optional[Estimate]
    pairs: Optional[Estimate]
    offset: float  # m, vertical offset of this station against the others (registration), 0 if unknown
    offset_se: float  # m


@dataclass(frozen=True)
class NoiseEstimate:
    sigma: float  # m, adopted per-point vertical noise (within-bin estimator)
    ci: tuple  # (lo, hi) m
    confidence: float
    within_bin: Estimate
    pairs: Optional[Estimate]
    agreement_p: Optional[float]  # two-sided F test of equal variance of the two estimators
    agree: bool
    registration_sigma: float  # m, spread of station vertical offsets (0 with one station)
    stations: tuple  # StationNoise per station
    registration_residual_sigma: float = 0.0  # m, station disagreement left after removing constant offsets
    datum_sigma: float = 0.0  # m, 1 sigma of the scan's vertical datum (mean of the stations' levelling)
    offset_se: dict = field(default_factory=dict)  # station id -> m, 1 sigma of its estimated offset
    method: str = "within-bin (bin x station) pooled variance; non-overlapping neighbour pairs"
