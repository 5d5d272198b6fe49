"""Geometry stage: out-of-plumbness, roundness and a deviation map of the shell face (config section ``geometry``).

Input: a bounded, seeded share of the points near the shell face at all heights, kept while the scan streams by
``FaceSampler`` (the per-chunk hook), plus the shell fit, the frame and the junction profile. Everything is
measured in the scan frame with its up axis as the vertical:

1. heights: metres above the junction plane (the cosine fit of the profile), so a rigidly tilted tank's course
   seams sit at one height all round; horizontal distance ``rho`` from the vertical through the shell's base
   centre, azimuth in the frame's convention;
2. face: per 5 deg x ``height_step`` cell the densest 2 mm class of rho (the face piles up in one class; stair
   treads, pipes and mixed pixels spread out); points beyond ``reject_k`` face sigmas of it are dropped, then each
   cell, bin or window rejects about its own median by its interquartile scale;
3. deviation map: the mean face per ``azimuth_step_deg`` x ``height_step`` cell minus the best vertical cylinder
   (least squares over the cells); cells with fewer than ``min_points`` are gaps;
4. sections: at each measuring height a band of ``band_height``; azimuth bins, then a weighted Fourier fit of
   rho (modes 0..``fourier_max_mode``, fewer where a mode's half wavelength fits in the largest gap): mode 1 is the
   section's centre, mode 2 the ovality. Radii are then taken from that centre; the deviation is from the fitted
   radius (or the nominal one);
5. out-of-plumbness along vertical lines every ``plumb_step_deg``: radial = face at a course top (or the shell top)
   minus face at ``plumb_reference_height``, taken per station and combined, so a station's registration shift
   cancels; tangential = the shift of the section centre between the two heights, along increasing azimuth.

Standard errors: per bin, the shrunk within-bin variance over n plus the between-station (registration) variance
component sum_j (n_j / n)^2 sigma_reg^2, with sigma_reg estimated from cells seen by several stations; Fourier
coefficients by weighted least squares (inflated by the reduced chi-square when above 1) plus the propagated
registration (each station's points shifted by one plan vector of sigma_reg per axis). Out-of-plumbness rests on
the scan's vertical reference (scanner levelling and registration): ``vertical_reference_sigma`` x height
difference is added to its standard errors; roundness does not depend on it.

Tolerances (from memory, verify against the governing edition): out-of-plumbness H/100, max 5 in (API 653 10.5.2,
reconstruction) or H/200 (API 650 7.5.2, new construction); radius by diameter band (API 650 7.5.3, stated at 1 ft
above the bottom). They are construction tolerances, used for assessment at the engineer's discretion; they never
set the settlement verdict.
"""
from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from ..config import GeometryConfig
from ..core.circular import angle_diff_deg, fill_circular
from ..core.robust import MAD_TO_SIGMA
from ..core.rng import Purpose, stream
from ..units import INCH
from .shell import ShellFit

log = logging.getLogger(__name__)

#: the reconstruction rule's cap on out-of-plumbness, 5 in (from memory of API 653 10.5.2)
PLUMB_CAP = 5 * INCH
PLUMB_RATIO = {"reconstruction": 1 / 100, "new_construction": 1 / 200}
PLUMB_SOURCE = {"reconstruction": "H/100, max 5 in (API 653 10.5.2, reconstruction; from memory)",
                "new_construction": "H/200 (API 650 7.5.2, new construction; from memory)"}
IQR_TO_SIGMA = 1 / 1.3489795003921634  # normal: interquartile range = 2 Phi^-1(3/4) sigma (scipy.stats.norm.ppf)
_COARSE_DEG, _COARSE_H, _CLASS = 5.0, 1.0, 0.002
_PRIOR_DOF = 5.0  # weight (in degrees of freedom) of the pooled face variance in each bin's variance
_PRIOR_PAIRS = 2.0  # weight (in overlapping station pairs) of geometry.registration_sigma_prior


@dataclass(frozen=True)
class PlumbTable:
    """Out-of-plumbness of vertical lines, relative to the face at ``reference_height``."""

    azimuth_deg: np.ndarray  # (n_lines,) line azimuths
    heights: np.ndarray  # (n_h,) m above the junction plane: band centres below each course top and the shell top
    course: np.ndarray  # (n_h,) int, the course whose top each row measures (the last row: the shell top)
    radial: np.ndarray  # (n_h, n_lines) m, outward positive; nan = gap
    radial_se: np.ndarray  # (n_h, n_lines) m, 1 sigma
    tangential: np.ndarray  # (n_h, n_lines) m, toward increasing azimuth; nan = gap
    tangential_se: np.ndarray  # (n_h, n_lines) m, 1 sigma
    total: np.ndarray  # (n_h, n_lines) m, hypot(radial, tangential)
    total_se: np.ndarray  # (n_h, n_lines) m, 1 sigma (delta method)
    n_points: np.ndarray  # (n_h, n_lines) int, face points in the two windows
    n_stations: np.ndarray  # (n_h, n_lines) int, stations that saw both windows (0: pooled across stations)
    reference_height: float  # m above the junction plane
    tolerance: float  # m
    tolerance_rule: str  # what the tolerance is and where it comes from


@dataclass(frozen=True)
class Roundness:
    """Radius per azimuth bin at each measuring height, from the centre fitted to that section."""

    azimuth_deg: np.ndarray  # (n_bins,) bin centres
    heights: np.ndarray  # (n_h,) m above the junction plane
    radius: np.ndarray  # (n_h, n_bins) m, nan = gap
    radius_se: np.ndarray  # (n_h, n_bins) m, 1 sigma (the bin and the fitted centre)
    deviation: np.ndarray  # (n_h, n_bins) m, radius minus reference_radius
    deviation_se: np.ndarray  # (n_h, n_bins) m, 1 sigma (the bin, the fitted centre and, if fitted, radius)
    n_points: np.ndarray  # (n_h, n_bins) int
    reference_radius: np.ndarray  # (n_h,) m, fitted mean radius (or nominal) of each section
    reference: str  # fitted | nominal
    center: np.ndarray  # (n_h, 2) m, local plan position of each section's centre
    modes: np.ndarray  # (n_h, n_modes) m, amplitude of Fourier modes 2.. of the radius
    modes_se: np.ndarray  # (n_h, n_modes) m, 1 sigma
    ovality: np.ndarray  # (n_h,) m, mode-2 amplitude: radius = R + ovality cos(2 (theta - long axis))
    ovality_se: np.ndarray  # (n_h,) m, 1 sigma
    ovality_axis_deg: np.ndarray  # (n_h,) azimuth of the long axis in [0, 180)
    coverage: np.ndarray  # (n_h,) share of the bins with a value
    tolerance: float  # m, +- on the deviation
    tolerance_rule: str
    diameter: float  # m, diameter used for the tolerance band
    diameter_source: str  # config | fitted


@dataclass(frozen=True)
class DeviationMap:
    """Radial deviation of the face from the best vertical cylinder on an azimuth x height grid."""

    azimuth_deg: np.ndarray  # (n_az,) cell centres
    heights: np.ndarray  # (n_h,) m above the junction plane, cell centres
    deviation: np.ndarray  # (n_h, n_az) m, outward positive; nan = gap
    std_error: np.ndarray  # (n_h, n_az) m, 1 sigma
    n_points: np.ndarray  # (n_h, n_az) int
    n_stations: np.ndarray  # (n_h, n_az) int
    cylinder_center: np.ndarray  # (2,) m, local plan position of the best vertical cylinder's axis
    cylinder_radius: float  # m


@dataclass(frozen=True)
class ShellGeometry:
    plumb: PlumbTable
    roundness: Roundness
    deviation: DeviationMap
    shell_top: float  # m above the junction plane, measured (99.9 % quantile of the face)
    shell_height: float  # m, used for the plumbness tolerance
    shell_height_source: str  # config | measured
    course_tops: np.ndarray  # (n_courses,) m above the junction plane (the last: the shell top)
    face_sigma: float  # m, robust radial noise of a face point about its cell
    registration_sigma: float  # m, between-station radial spread adopted (estimate shrunk toward the prior)
    registration_sigma_raw: float  # m, estimate from overlapping stations alone (nan: no overlap)
    registration_pairs: int  # overlapping station pairs behind the estimate
    base_plane: np.ndarray  # (3,) m: junction plane z = a + b cos(az) + c sin(az) (local z, frame azimuth)
    n_face: int  # face points in
    n_kept: int  # after rejection
    warnings: tuple  # str


class FaceSampler:
    """Per-chunk hook of the geometry stage: keeps a seeded, bounded share of the points near the shell face.

    ``stride`` tells the reader how finely to subsample each chunk (the cheap, deterministic first cut); of those
    points, the ones within ``face_band`` of the fitted shell are kept with probability ``keep_fraction``. Should
    more than twice ``face_budget`` accumulate (the detection sample misjudged the face's share), every kept point
    and the probability are halved, so the sample stays uniform and memory stays flat.
    """

    def __init__(self, sample_local: np.ndarray, shell: ShellFit, cfg: GeometryConfig, n_total: int, seed: int):
        self.shell, self.band, self.budget = shell, cfg.face_band, cfg.face_budget
        share = float(np.mean(self._near(sample_local))) if len(sample_local) else 1.0
        expected = max(share * n_total, 1.0)
        self.stride = max(1, int(expected / (1.25 * self.budget)))
        self.keep_fraction = min(1.0, self.budget / (expected / self.stride))
        self._rng = stream(seed, Purpose.FACE_SAMPLE)
        self._pts, self._st = [], []
        self.n_kept = 0
        self.n_halved = 0

    def _near(self, p):
        _, rho, _, _ = self.shell.radial(p)
        return np.abs(rho - self.shell.radius) < self.band

    def __call__(self, p: np.ndarray, station: np.ndarray) -> None:
        """Offer local points ``p`` (n, 3) m with station ids (n,)."""
        keep = self._near(p)
        if self.keep_fraction < 1.0:
            keep &= self._rng.random(len(p)) < self.keep_fraction
        if keep.any():
            self._pts.append(p[keep])
            self._st.append(station[keep])
            self.n_kept += int(keep.sum())
        while self.n_kept > 2 * self.budget:
            for i in range(len(self._pts)):
                m = self._rng.random(len(self._pts[i])) < 0.5
                self._pts[i], self._st[i] = self._pts[i][m], self._st[i][m]
            self.keep_fraction /= 2
            self.n_halved += 1
            self.n_kept = sum(len(a) for a in self._pts)

    def points(self) -> tuple[np.ndarray, np.ndarray]:
        """The kept points (m, 3) local m and their station ids (m,)."""
        if not self._pts:
            return np.zeros((0, 3)), np.zeros(0, np.int64)
        # keep one copy only (the chunks are dropped for the concatenation)
        self._pts, self._st = [np.concatenate(self._pts)], [np.concatenate(self._st).astype(np.int64)]
        return self._pts[0], self._st[0]


def measure_geometry(pts: np.ndarray, station: np.ndarray, shell: ShellFit, frame, profile,
                     cfg: GeometryConfig, shell_height: float | None = None,
                     diameter: float | None = None) -> ShellGeometry:
    """Shell geometry from face points (n, 3) local m with station ids (n,).

    ``profile`` gives the junction plane the heights refer to; ``shell_height`` and ``diameter`` (m, from the tank
    data, or None) set the tolerances, else the measured shell top and the fitted diameter do.
    """
    warnings = []
    plane = _junction_plane(profile, shell)
    r0 = shell.radius
    dx, dy = pts[:, 0] - shell.center[0], pts[:, 1] - shell.center[1]
    az = frame.azimuth_deg(dx, dy)
    h = pts[:, 2] - _plane_at(plane, az)
    # the face above the junction (below it lie the plate, the foundation and the ground)
    up = h > 0
    dx, dy, az, h = dx[up], dy[up], az[up], h[up]
    d = np.hypot(dx, dy) - r0
    sid = _station_index(station[up])
    n_st = int(sid.max()) + 1 if len(sid) else 1
    # 2. coarse mode per cell, then reject points far from it
    resid = d - _coarse_face(az, h, d, cfg.face_band, cfg.height_step)
    near = np.abs(resid) < 0.03
    sigma_f = MAD_TO_SIGMA * float(np.median(np.abs(resid[near] - np.median(resid[near])))) if near.sum() > 10 else 0.003
    sigma_f = max(sigma_f, 1e-4)
    keep = np.abs(resid) <= max(cfg.reject_k * sigma_f, 0.004)
    top = float(np.quantile(h[keep], 0.999)) if keep.sum() > 100 else float(np.max(h, initial=0.0))
    P = _Points(az[keep], h[keep], d[keep], dx[keep], dy[keep], sid[keep], n_st, sigma_f, cfg)
    del dx, dy, az, h, d, sid, resid, near, keep, up  # the stage's memory is bounded by the face budget
    # 3. deviation map (also gives the registration variance component)
    dmap, (sigma_reg, reg_raw, n_pairs) = _deviation_map(P, cfg, top, frame, r0)
    P.sigma_reg = sigma_reg
    if n_pairs == 0:
        warnings.append(f"geometry: no two stations saw the same part of the shell, so their registration spread is "
                        f"not observable; assumed geometry.registration_sigma_prior = "
                        f"{cfg.registration_sigma_prior * 1e3:.1f} mm")
    # 4. sections
    tops = _course_tops(cfg, top)
    plumb_h = np.round([t - cfg.edge_margin - cfg.band_height / 2 for t in tops], 9)
    plumb_ok = plumb_h > cfg.plumb_reference_height + cfg.band_height
    plumb_h, courses = plumb_h[plumb_ok], np.arange(1, len(tops) + 1)[plumb_ok]
    round_h = _roundness_heights(cfg, tops)
    ring_h = np.unique(np.concatenate([[cfg.plumb_reference_height], plumb_h, round_h]))
    rings = {float(hh): _section(P, hh, cfg, frame, r0) for hh in ring_h}
    # tolerances
    if shell_height is not None:
        H, h_src = float(shell_height), "config"
        if abs(H - top) > 0.5:
            warnings.append(f"geometry: the shell top was measured {top:.2f} m above the junction but tank.shell_height "
                            f"is {H:.2f} m; the plumbness tolerance uses tank.shell_height")
    else:
        H, h_src = top, "measured"
    plumb = _plumbness(P, rings, plumb_h, courses, cfg, frame, H)
    roundness = _roundness(rings, round_h, cfg, frame, diameter if diameter is not None else 2 * r0,
                           "config" if diameter is not None else "fitted")
    thin = [hh for hh, ring in rings.items() if ring.coverage < 0.5]
    if thin:
        warnings.append(f"geometry: less than half of the section was seen at {len(thin)} of {len(rings)} measuring "
                        f"heights ({', '.join(f'{h:.2f}' for h in thin[:6])}{' ...' if len(thin) > 6 else ''} m); "
                        f"their centres and modes are poorly determined (standard errors say how); on a sparse scan "
                        f"raise geometry.azimuth_step_deg or geometry.band_height, or lower geometry.min_points")
    log.info("geometry: %d face points, %d kept; face sigma %.2f mm, registration %.2f mm; shell top %.2f m",
             len(pts), len(P.d), sigma_f * 1e3, sigma_reg * 1e3, top)
    return ShellGeometry(plumb=plumb, roundness=roundness, deviation=dmap, shell_top=top, shell_height=H,
                         shell_height_source=h_src, course_tops=np.asarray(tops), face_sigma=sigma_f,
                         registration_sigma=sigma_reg, registration_sigma_raw=reg_raw, registration_pairs=n_pairs,
                         base_plane=plane, n_face=len(pts), n_kept=len(P.d),
                         warnings=tuple(warnings))


# ---------------------------------------------------------------------------
# heights, courses, tolerances


def _junction_plane(profile, shell) -> np.ndarray:
    ok = (profile.status == "ok") & np.isfinite(profile.elevation)
    if ok.sum() < 10:
        return np.array([float(shell.center[2]), 0.0, 0.0])
    th = np.radians(profile.azimuth_deg[ok])
    A = np.column_stack([np.ones(ok.sum()), np.cos(th), np.sin(th)])
    coef, *_ = np.linalg.lstsq(A, profile.elevation[ok], rcond=None)
    return coef


def _plane_at(plane, az_deg):
    th = np.radians(az_deg)
    return plane[0] + plane[1] * np.cos(th) + plane[2] * np.sin(th)


def _course_tops(cfg: GeometryConfig, top: float) -> list:
    """Course seams below the shell top (m above the junction), then the shell top itself."""
    if cfg.course_heights:
        seams = list(np.cumsum(cfg.course_heights))
    else:
        seams = list(np.arange(1, int(top / cfg.course_height) + 2) * cfg.course_height)
    gap = cfg.edge_margin + cfg.band_height
    return [float(s) for s in seams if s < top - gap] + [top]


def _roundness_heights(cfg: GeometryConfig, tops) -> np.ndarray:
    if cfg.roundness_heights != "auto":
        return np.asarray(cfg.roundness_heights, dtype=float)
    bottoms = [0.0] + list(tops[:-1])
    return np.round([cfg.plumb_reference_height] + [(a + b) / 2 for a, b in zip(bottoms, tops)], 9)


def plumb_tolerance(cfg: GeometryConfig, shell_height: float) -> tuple[float, str]:
    """(tolerance m, description) of the out-of-plumbness rule for a shell of ``shell_height`` m."""
    t = cfg.plumb_tolerance
    if not isinstance(t, str):
        return float(t), "user value (geometry.plumb_tolerance)"
    tol = PLUMB_RATIO[t] * shell_height
    if t == "reconstruction":
        tol = min(tol, PLUMB_CAP)
    return tol, PLUMB_SOURCE[t]


def radius_tolerance(cfg: GeometryConfig, diameter: float) -> float:
    """The tolerance row of the last band whose smallest diameter is at most ``diameter`` (m)."""
    tol = cfg.radius_tolerance_table[0][1]
    for d_min, t in cfg.radius_tolerance_table:
        if diameter >= d_min:
            tol = t
    return float(tol)


# ---------------------------------------------------------------------------
# the face and robust group statistics


def _coarse_face(az, h, d, band, h_step):
    """Per point, the face offset (m from the shell radius) of its 5 deg x ``h_step`` cell: the densest 2 mm class
    of the cell's offsets (smoothed over neighbouring classes); empty cells take their ring neighbours' value."""
    n_az = int(round(360 / _COARSE_DEG))
    ak = np.minimum((az * (1 / _COARSE_DEG)).astype(np.int64), n_az - 1)
    cell = (h * (1 / h_step)).astype(np.int64) * n_az + ak  # h > 0
    n_cell = int(cell.max(initial=0)) + 1
    n_cls = int(np.ceil(2 * band / _CLASS)) + 1
    ck = np.clip(((d + band) * (1 / _CLASS)).astype(np.int64), 0, n_cls - 1)
    hist = np.bincount(cell * n_cls + ck, minlength=n_cell * n_cls).reshape(n_cell, n_cls)
    sm = hist[:, :-2] + 2 * hist[:, 1:-1] + hist[:, 2:]
    mode = np.where(hist.sum(axis=1) >= 10, (np.argmax(sm, axis=1) + 1.5) * _CLASS - band, np.nan)
    n_rows = -(-n_cell // n_az)
    mode = np.concatenate([mode, np.full(n_rows * n_az - n_cell, np.nan)]).reshape(n_rows, n_az)
    for i in range(n_rows):  # fill gaps along the ring, then from the nearest rows
        if np.isfinite(mode[i]).any():
            mode[i] = fill_circular(mode[i])
    rows = np.isfinite(mode).all(axis=1)
    if not rows.any():
        return np.zeros(len(d))
    for j in range(n_az):
        mode[~rows, j] = np.interp(np.nonzero(~rows)[0], np.nonzero(rows)[0], mode[rows, j])
    return mode.ravel()[cell]


def _station_index(station) -> np.ndarray:
    """Station ids to 0..S-1 (ids are small non-negative integers: LAS point source ids)."""
    station = np.asarray(station, dtype=np.int64)
    if len(station) == 0:
        return station
    lo = int(station.min())
    present = np.bincount(station - lo) > 0
    return (np.cumsum(present) - 1)[station - lo]


class _Points:
    """The kept face points and what the group statistics need."""

    def __init__(self, az, h, d, dx, dy, sid, n_st, sigma_f, cfg):
        self.az, self.h, self.d, self.dx, self.dy, self.sid = az, h, d, dx, dy, sid
        self.n_st, self.sigma_f, self.cfg = n_st, sigma_f, cfg
        self.sigma_reg = 0.0


@dataclass
class _Groups:
    n: np.ndarray  # (G,) kept points
    mean: np.ndarray  # (G,) of the value, nan where n < 1
    var_mean: np.ndarray  # (G,) noise variance of the mean (shrunk within-group variance / n)
    w2: np.ndarray  # (G,) sum over stations of (n_j / n)^2
    n_stations: np.ndarray  # (G,)
    keep: np.ndarray  # (n,) bool, kept points
    st_n: np.ndarray  # (G, S) per station counts
    st_mean: np.ndarray  # (G, S) per station means (nan where none)
    st_var: np.ndarray  # (G, S) noise variance of each station mean


def _groups(g, v, sid, n_groups, n_st, k, sigma_f, passes=3) -> _Groups:
    """Robust per-group statistics of ``v``: rejection about each group's median by its interquartile scale
    (floored at half the pooled face sigma), then means, shrunk variances and per-station means."""
    span = float(np.ptp(v)) if len(v) else 1.0
    order = np.argsort(g + (v - (v.min() if len(v) else 0.0)) / (1.001 * span + 1e-12))  # by group, then value
    gs, vs = g[order], v[order]
    keep = np.ones(len(v), bool)
    floor = 0.5 * sigma_f
    for _ in range(passes):
        gk, vk = gs[keep], vs[keep]
        cnt = np.bincount(gk, minlength=n_groups)
        start = np.concatenate([[0], np.cumsum(cnt)[:-1]])
        has = cnt > 0
        if not len(vk):
            break

        def q(p):
            idx = np.where(has, start + np.floor(p * (cnt - 1) + 0.5).astype(np.int64), 0)
            return np.where(has, vk[np.minimum(idx, len(vk) - 1)], np.nan)

        med = q(0.5)
        lim = k * np.maximum((q(0.75) - q(0.25)) * IQR_TO_SIGMA, floor)
        new = np.abs(vs - med[gs]) <= lim[gs]
        if np.array_equal(new, keep):
            break
        keep = new
    kept = np.empty(len(v), bool)
    kept[order] = keep
    gk, vk, sk = g[kept], v[kept], sid[kept]
    n = np.bincount(gk, minlength=n_groups).astype(float)
    s1 = np.bincount(gk, weights=vk, minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):  # empty groups give nan, masked below
        mean = s1 / n
        dev2 = np.bincount(gk, weights=(vk - mean[gk]) ** 2, minlength=n_groups)
        var = (dev2 + _PRIOR_DOF * sigma_f ** 2) / (np.maximum(n - 1, 0) + _PRIOR_DOF)
        gs_idx = gk * n_st + sk
        st_n = np.bincount(gs_idx, minlength=n_groups * n_st).reshape(n_groups, n_st).astype(float)
        st_s1 = np.bincount(gs_idx, weights=vk, minlength=n_groups * n_st).reshape(n_groups, n_st)
        st_mean = np.where(st_n > 0, st_s1 / st_n, np.nan)
        w2 = ((st_n / n[:, None]) ** 2).sum(axis=1)
        st_var = var[:, None] / st_n
        var_mean = np.where(n > 0, var / n, np.nan)
    return _Groups(n=n, mean=np.where(n > 0, mean, np.nan), var_mean=var_mean, w2=w2,
                   n_stations=(st_n > 0).sum(axis=1), keep=kept, st_n=st_n, st_mean=st_mean, st_var=st_var)


def _registration_sigma(G: _Groups, prior: float, min_n=3) -> tuple[float, float, int]:
    """Between-station radial spread of group means: (adopted sigma, raw estimate, station pairs behind it).

    Method of moments over groups seen by >= 2 stations, E[sum_s (m_s - mean)^2] = (S - 1) sigma^2 + (S - 1) / S
    sum_s v_s. Groups of one station pair share that pair's shift, so the estimate has about as many degrees of
    freedom as overlapping station pairs; it is shrunk toward ``prior`` with the weight of two such pairs, and is
    the prior itself when no stations overlap.
    """
    ok = G.st_n >= min_n
    S = ok.sum(axis=1)
    use = S >= 2
    if use.sum() < 5:
        return prior, float("nan"), 0
    m = np.where(ok, G.st_mean, 0.0)[use]
    v = np.where(ok, G.st_var, 0.0)[use]
    okk = ok[use]
    Su = S[use].astype(float)
    mbar = m.sum(axis=1) / Su
    Q = (np.where(okk, (m - mbar[:, None]) ** 2, 0.0)).sum(axis=1)
    noise = (Su - 1) / Su * v.sum(axis=1)
    est = max((Q.sum() - noise.sum()) / (Su - 1).sum(), 0.0)
    idx = np.nonzero(okk)
    pairs = {(a, b) for row in np.split(idx[1], np.cumsum(np.bincount(idx[0], minlength=len(okk)))[:-1])
             for a in row for b in row if a < b}
    n_pairs = len(pairs)
    adopted = (n_pairs * est + _PRIOR_PAIRS * prior ** 2) / (n_pairs + _PRIOR_PAIRS)
    return float(np.sqrt(adopted)), float(np.sqrt(est)), n_pairs


def _se(G: _Groups, sigma_reg: float) -> np.ndarray:
    return np.sqrt(G.var_mean + sigma_reg ** 2 * G.w2)


# ---------------------------------------------------------------------------
# deviation map


def _deviation_map(P: _Points, cfg, top, frame, r0):
    step = 360.0 / max(int(round(360.0 / cfg.azimuth_step_deg)), 4)
    n_az = int(round(360.0 / step))
    n_h = max(int(np.ceil(top / cfg.height_step)), 1)
    ak = (P.az / step).astype(np.int64) % n_az
    hk = np.minimum((P.h / cfg.height_step).astype(np.int64), n_h - 1)
    G = _groups(hk * n_az + ak, P.d, P.sid, n_h * n_az, P.n_st, cfg.reject_k, P.sigma_f)
    sigma_reg, raw, n_pairs = _registration_sigma(G, cfg.registration_sigma_prior)
    ok = G.n >= cfg.min_points
    az_c = (np.arange(n_az) + 0.5) * step
    h_c = (np.arange(n_h) + 0.5) * cfg.height_step
    th = np.tile(_std_rad(frame, az_c), n_h)
    # best vertical cylinder: rho = R + cx sin(theta) + cy cos(theta) (plan offset (cx, cy) of its axis)
    A = np.column_stack([np.ones(ok.sum()), np.sin(th[ok]), np.cos(th[ok])])
    if ok.sum() >= 3:
        coef, *_ = np.linalg.lstsq(A, G.mean[ok], rcond=None)
    else:
        coef = np.zeros(3)
    model = coef[0] + coef[1] * np.sin(th) + coef[2] * np.cos(th)
    dev = np.where(ok, G.mean - model, np.nan).reshape(n_h, n_az)
    se = np.where(ok, _se(G, sigma_reg), np.nan).reshape(n_h, n_az)
    return DeviationMap(azimuth_deg=az_c, heights=h_c, deviation=dev, std_error=se,
                        n_points=G.n.astype(np.int64).reshape(n_h, n_az),
                        n_stations=G.n_stations.astype(np.int64).reshape(n_h, n_az),
                        cylinder_center=np.array([coef[1], coef[2]]), cylinder_radius=float(r0 + coef[0])), \
        (sigma_reg, raw, n_pairs)


# ---------------------------------------------------------------------------
# sections (rings) at the measuring heights


@dataclass
class _Ring:
    height: float
    groups: _Groups  # pass 1: rho from the base centre, per azimuth bin
    sel: np.ndarray  # (n,) bool, points in the band
    center: np.ndarray  # (2,) m, centre offset from the base centre (nan when not fitted)
    center_cov: np.ndarray  # (2, 2) m^2, noise part
    center_reg: np.ndarray  # (S, 2, 2): centre error per unit plan translation of each station (registration)
    radius: np.ndarray  # (n_bins,) m from the fitted centre (pass 2)
    radius_se: np.ndarray  # (n_bins,) the bin and the centre
    fitted_se: np.ndarray  # (n_bins,) the bin, the centre and the fitted radius (deviation from the fitted circle)
    n_radius: np.ndarray  # (n_bins,)
    coef: np.ndarray  # pass-2 Fourier coefficients [a0, a1, b1, a2, b2, ...] in the standard azimuth
    cov: np.ndarray  # their covariance, noise and registration
    coverage: float


def _n_bins(cfg):
    return max(int(round(360.0 / cfg.azimuth_step_deg)), 4)


def _section(P: _Points, height, cfg, frame, r0) -> _Ring:
    nb = _n_bins(cfg)
    step = 360.0 / nb
    sel = np.abs(P.h - height) <= cfg.band_height / 2
    az, d, sid = P.az[sel], P.d[sel], P.sid[sel]
    G1 = _groups((az / step).astype(np.int64) % nb, d, sid, nb, P.n_st, cfg.reject_k, P.sigma_f)
    th = _std_rad(frame, (np.arange(nb) + 0.5) * step)
    ok = G1.n >= cfg.min_points
    # a mode whose half wavelength fits in a gap can hide there: the order is capped by the largest gap, and the
    # section needs a fair share of the circumference for its centre and modes
    K = min(cfg.fourier_max_mode, int(ok.sum()) // 4, int(180.0 / (_largest_gap(ok) * step))) \
        if ok.mean() >= 0.25 else 0
    if K < 2:
        nan = np.full(1 + 2 * max(K, 1), np.nan)
        return _Ring(height, G1, sel, np.full(2, np.nan), np.full((2, 2), np.nan), np.zeros((P.n_st, 2, 2)),
                     np.full(nb, np.nan), np.full(nb, np.nan), np.full(nb, np.nan), np.zeros(nb, np.int64), nan,
                     np.full((len(nan), len(nan)), np.nan), float(ok.mean()))
    coef, cov, J = _fourier(th, G1, ok, K, P.sigma_reg)
    center = np.array([coef[2], coef[1]])  # rho ~ R + cx sin + cy cos: b1 is cx, a1 is cy
    # pass 2: radii from the fitted centre
    dx, dy = P.dx[sel] - center[0], P.dy[sel] - center[1]
    az2 = frame.azimuth_deg(dx, dy)
    G2 = _groups((az2 / step).astype(np.int64) % nb, np.hypot(dx, dy) - r0, sid, nb, P.n_st, cfg.reject_k, P.sigma_f)
    ok2 = G2.n >= cfg.min_points
    se2 = _se(G2, P.sigma_reg)
    coef2, cov2, J2 = _fourier(th, G2, ok2, K, P.sigma_reg)
    cov2 = cov2 + P.sigma_reg ** 2 * np.einsum("sik,sjk->ij", J2, J2)
    # a bin's radius moves with the fitted centre; its deviation also with the fitted radius (pass-1 circle terms,
    # noise and registration)
    c1 = (cov + P.sigma_reg ** 2 * np.einsum("sik,sjk->ij", J, J))[:3, :3]
    g = np.column_stack([np.ones(nb), np.cos(th), np.sin(th)])
    var_c = np.einsum("bi,ij,bj->b", g[:, 1:], c1[1:, 1:], g[:, 1:])
    var_f = np.einsum("bi,ij,bj->b", g, c1, g)
    return _Ring(height, G1, sel, center, cov[np.ix_([2, 1], [2, 1])], J[:, [2, 1], :],
                 np.where(ok2, G2.mean + r0, np.nan), np.where(ok2, np.sqrt(se2 ** 2 + var_c), np.nan),
                 np.where(ok2, np.sqrt(se2 ** 2 + var_f), np.nan), G2.n.astype(np.int64),
                 coef2 + np.r_[r0, np.zeros(len(coef2) - 1)], cov2, float(ok2.mean()))


def _largest_gap(ok) -> int:
    """Longest circular run of bins without a value (at least 1)."""
    if ok.all():
        return 1
    if not ok.any():
        return len(ok)
    k0 = int(np.argmax(ok))
    runs = np.diff(np.nonzero(np.r_[True, np.roll(ok, -k0), True])[0]) - 1
    return max(int(runs.max()), 1)


def _fourier(th, G: _Groups, ok, K, sigma_reg):
    """Weighted least squares of the group means on [1, cos k th, sin k th] (k = 1..K) over the ``ok`` bins.

    Returns the coefficients, their noise covariance (sandwich with the bins' noise variances, inflated by the
    reduced chi-square when above 1: model and correlated errors) and, per station, the coefficients' response to
    a unit plan translation of that station's points (S, n_coef, 2): a registration shift moves every point of
    the station by the same vector, whose radial part at a bin is t . u(theta).
    """
    cols = [np.ones(ok.sum())]
    for k in range(1, K + 1):
        cols += [np.cos(k * th[ok]), np.sin(k * th[ok])]
    A = np.column_stack(cols)
    var = G.var_mean[ok] + sigma_reg ** 2 * G.w2[ok]
    Aw = A / np.sqrt(var)[:, None]
    L = np.linalg.pinv(Aw) / np.sqrt(var)[None, :]  # coef = L y
    y = G.mean[ok]
    coef = L @ y
    dof = len(y) - A.shape[1]
    chi2 = float((((y - A @ coef) ** 2) / var).sum())
    cov = (L * G.var_mean[ok][None, :]) @ L.T * (max(1.0, chi2 / dof) if dof > 0 else 1.0)
    w = G.st_n[ok] / G.n[ok][:, None]  # (n_ok, S) share of each station in each bin
    U = np.column_stack([np.sin(th[ok]), np.cos(th[ok])])  # plan direction of each bin
    J = np.einsum("cb,bs,bk->sck", L, w, U)
    return coef, cov, J


# ---------------------------------------------------------------------------
# roundness and plumbness


def _roundness(rings, heights, cfg, frame, diameter, d_src) -> Roundness:
    nb = _n_bins(cfg)
    az = (np.arange(nb) + 0.5) * 360.0 / nb
    n_h = len(heights)
    n_modes = cfg.fourier_max_mode - 1
    radius = np.full((n_h, nb), np.nan)
    rse = np.full((n_h, nb), np.nan)
    dse = np.full((n_h, nb), np.nan)
    npts = np.zeros((n_h, nb), np.int64)
    ref = np.full(n_h, np.nan)
    center = np.full((n_h, 2), np.nan)
    modes = np.full((n_h, n_modes), np.nan)
    modes_se = np.full((n_h, n_modes), np.nan)
    axis = np.full(n_h, np.nan)
    cover = np.zeros(n_h)
    for i, hh in enumerate(heights):
        r = rings[float(hh)]
        radius[i], rse[i], npts[i], center[i], cover[i] = r.radius, r.radius_se, r.n_radius, r.center, r.coverage
        dse[i] = r.fitted_se if cfg.roundness_reference == "fitted" else r.radius_se
        if not np.isfinite(r.coef).all():
            continue
        ref[i] = r.coef[0] if cfg.roundness_reference == "fitted" else diameter / 2
        for k in range(2, (len(r.coef) - 1) // 2 + 1):
            a, b = r.coef[2 * k - 1], r.coef[2 * k]
            amp = float(np.hypot(a, b))
            g = np.array([a, b]) / max(amp, 1e-12)
            c = r.cov[2 * k - 1:2 * k + 1, 2 * k - 1:2 * k + 1]
            modes[i, k - 2], modes_se[i, k - 2] = amp, float(np.sqrt(max(g @ c @ g, 0.0)))
            if k == 2:  # a cos 2t + b sin 2t = amp cos(2 (t - t_long)): the long axis at t_long = atan2(b, a) / 2
                t_long = np.degrees(np.arctan2(b, a)) / 2
                ref_az = frame.azimuth_reference_deg
                axis[i] = np.mod(t_long - ref_az if frame.azimuth_direction == "cw" else ref_az - t_long, 180.0)
    tol = radius_tolerance(cfg, diameter)
    return Roundness(azimuth_deg=az, heights=np.asarray(heights, float), radius=radius, radius_se=rse,
                     deviation=radius - ref[:, None], deviation_se=dse, n_points=npts, reference_radius=ref,
                     reference=cfg.roundness_reference, center=center, modes=modes, modes_se=modes_se,
                     ovality=modes[:, 0].copy(), ovality_se=modes_se[:, 0].copy(),
                     ovality_axis_deg=axis, coverage=cover, tolerance=tol,
                     tolerance_rule=f"+-{tol / INCH:.3g} in for a {diameter / 0.3048:.0f} ft diameter (API 650 7.5.3 "
                                    f"band table, stated at 1 ft above the bottom; from memory)",
                     diameter=float(diameter), diameter_source=d_src)


def _plumbness(P: _Points, rings, heights, courses, cfg, frame, H) -> PlumbTable:
    lines = np.arange(0.0, 360.0 - 1e-9, cfg.plumb_step_deg)
    half = 180.0 / _n_bins(cfg)
    n_l, n_h = len(lines), len(heights)
    out = {k: np.full((n_h, n_l), np.nan) for k in ("radial", "radial_se", "tangential", "tangential_se")}
    npts = np.zeros((n_h, n_l), np.int64)
    nst = np.zeros((n_h, n_l), np.int64)
    ref = rings[float(cfg.plumb_reference_height)]
    ref_line = _line_stats(P, ref, lines, half)
    th = _std_rad(frame, lines)
    sign = 1.0 if frame.azimuth_direction == "cw" else -1.0
    t_vec = np.column_stack([np.cos(th), -np.sin(th)]) * sign  # d(plan direction)/d(azimuth)
    for i, hh in enumerate(heights):
        ring = rings[float(hh)]
        top_line = _line_stats(P, ring, lines, half)
        for j in range(n_l):
            r, se, n, s = _line_offset(top_line[j], ref_line[j], cfg.min_points, P.sigma_f, P.sigma_reg)
            out["radial"][i, j], out["radial_se"][i, j], npts[i, j], nst[i, j] = r, se, n, s
        dc = ring.center - ref.center
        cov = ring.center_cov + ref.center_cov
        out["tangential"][i] = t_vec @ dc
        # registration: a station's plan shift moves both centres; only the difference of the responses counts
        dj = np.einsum("lk,skm->slm", t_vec, ring.center_reg - ref.center_reg)  # (S, n_lines, 2)
        reg = P.sigma_reg ** 2 * (dj ** 2).sum(axis=(0, 2))
        out["tangential_se"][i] = np.sqrt(np.einsum("ij,jk,ik->i", t_vec, cov, t_vec) + reg)
    # the scan's vertical reference (levelling, registration): a tilt error e gives e x height difference
    vref = (cfg.vertical_reference_sigma * (np.asarray(heights, float) - cfg.plumb_reference_height))[:, None]
    out["radial_se"] = np.hypot(out["radial_se"], vref)
    out["tangential_se"] = np.hypot(out["tangential_se"], vref)
    bad = ~np.isfinite(out["radial"])
    out["tangential"][bad] = np.nan
    out["tangential_se"][bad] = np.nan
    total = np.hypot(out["radial"], out["tangential"])
    with np.errstate(invalid="ignore", divide="ignore"):
        total_se = np.sqrt((out["radial"] * out["radial_se"]) ** 2
                           + (out["tangential"] * out["tangential_se"]) ** 2) / total
    total_se = np.where(total > 0, total_se, np.hypot(out["radial_se"], out["tangential_se"]))
    tol, rule = plumb_tolerance(cfg, H)
    return PlumbTable(azimuth_deg=lines, heights=np.asarray(heights, float), course=np.asarray(courses), **out,
                      total=total, total_se=total_se, n_points=npts, n_stations=nst,
                      reference_height=float(cfg.plumb_reference_height), tolerance=tol,
                      tolerance_rule=f"{rule}, H = {H:.2f} m")


def _line_stats(P: _Points, ring: _Ring, lines, half):
    """Per line: (kept values, station ids) of the ring's band points within ``half`` degrees of the line."""
    az = P.az[ring.sel][ring.groups.keep]
    d = P.d[ring.sel][ring.groups.keep]
    sid = P.sid[ring.sel][ring.groups.keep]
    step = lines[1] - lines[0] if len(lines) > 1 else 360.0
    j = np.rint(az / step).astype(np.int64) % len(lines)
    m = np.abs(angle_diff_deg(az, lines[j])) < half
    order = np.argsort(j[m], kind="stable")
    jj, dd, ss = j[m][order], d[m][order], sid[m][order]
    b = np.searchsorted(jj, np.arange(len(lines) + 1))
    return [(dd[b[i]:b[i + 1]], ss[b[i]:b[i + 1]]) for i in range(len(lines))]


def _line_offset(top, ref, min_points, sigma_f, sigma_reg):
    """(radial offset, SE, points, stations) of a line: per-station differences of means, inverse-variance
    combined (a station's registration shift cancels); pooled means with the registration term otherwise."""
    (vt, st), (vr, sr) = top, ref
    n = len(vt) + len(vr)
    if len(vt) < min_points or len(vr) < min_points:
        return np.nan, np.nan, n, 0
    need = max(3, min_points // 2)
    ds, vs = [], []
    for s in np.intersect1d(np.unique(st), np.unique(sr)):
        a, b = vt[st == s], vr[sr == s]
        if len(a) >= need and len(b) >= need:
            ds.append(a.mean() - b.mean())
            vs.append(_var(a, sigma_f) / len(a) + _var(b, sigma_f) / len(b))
    if ds:
        ds, w = np.array(ds), 1.0 / np.maximum(np.array(vs), 1e-14)
        est = float((w * ds).sum() / w.sum())
        se = float(np.sqrt(1.0 / w.sum()))
        if len(ds) >= 2:
            se *= np.sqrt(max(1.0, float((w * (ds - est) ** 2).sum()) / (len(ds) - 1)))
        return est, se, n, len(ds)
    se = np.sqrt(_var(vt, sigma_f) / len(vt) + _var(vr, sigma_f) / len(vr) + 2 * sigma_reg ** 2)
    return float(vt.mean() - vr.mean()), float(se), n, 0


def _var(v, sigma_f):
    """Within-window variance shrunk toward the pooled face variance (as ``_groups`` does)."""
    dev2 = float(((v - v.mean()) ** 2).sum())
    return (dev2 + _PRIOR_DOF * sigma_f ** 2) / (max(len(v) - 1, 0) + _PRIOR_DOF)


def _std_rad(frame, az_deg):
    """Frame azimuths (degrees) to the standard azimuth in radians (clockwise from +Y of the scan)."""
    a = np.asarray(az_deg, dtype=float)
    ref = frame.azimuth_reference_deg
    return np.radians(a + ref if frame.azimuth_direction == "cw" else ref - a)
