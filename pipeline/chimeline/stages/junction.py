"""Junction stage: the top of the bottom-plate projection at the shell's outer face (config section ``junction``).

Works on the thin ring of points streamed around the shell base:

1. shell foot: per sector, a low quantile of the points on the shell face
   (|radial| < 2 x shell RMS) gives the rough base elevation;
2. candidates: points between ``radial_min`` and ``radial_max`` outside the shell
   face and within ``search_window`` of the foot; with ``radial_max: auto`` the
   projection width is estimated from where the median height of the radial
   profile drops (the plate's outer edge) and the window stops ``radial_margin``
   short of it, away from mixed pixels at the edge and the foundation beyond;
3. prior: per sector, the densest 2 mm height class of the candidates (the plate
   top is a horizontal surface, so its points pile up in one class), smoothed by
   a circular running median;
4. gate: keep candidates within ``height_gate`` of the prior interpolated to
   their azimuth. Stair treads, nozzles and supports sit above the gate; the
   foundation, ground and mixed pixels below the edge sit outside the window or
   below the gate. The profile stage then rejects what is left by robust scale.
"""
from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Optional

import numpy as np
from scipy import optimize, stats
from scipy.ndimage import median_filter

from ..config import JunctionConfig
from ..core.circular import fill_circular, interp_sectors, sector_slices
from ..core.robust import MAD_TO_SIGMA
from ..core.rng import Purpose, stream
from ..errors import StageError
from .shell import ShellFit

log = logging.getLogger(__name__)


#: m relative to the junction prior: the window searched for the shell foot's lower edge, and for the upper
#: edge of the projection's step face
FOOT_WINDOW = (-0.02, 0.04)
STEP_WINDOW = (-0.025, 0.008)


@dataclass(frozen=True)
class EdgeEvidence:
    """Returns whose edge in height marks the junction elevation: the shell foot (lower edge of the shell
    face's returns) or the projection's step face (upper edge of its returns)."""

    azimuth_deg: np.ndarray  # (m,)
    z: np.ndarray  # (m,) m, local elevation (step face: moved to the shell face along the tilt plane)
    z_rel: np.ndarray  # (m,) m, z minus the junction prior at the point's azimuth
    station: np.ndarray  # (m,) int
    window: tuple  # (lo, hi) m: z_rel range searched
    edge: str  # "lower" (foot) or "upper" (step face)


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
    foot: Optional[EdgeEvidence] = None  # shell-face returns near the foot
    step: Optional[EdgeEvidence] = None  # returns on and around the projection's step face
    edge_smear: Optional[float] = None  # m, radial smear of the projection's outer edge (fitted with the width)


def extract_junction(pts: np.ndarray, station: np.ndarray, shell: ShellFit, frame, cfg: JunctionConfig) -> Junction:
    """Junction candidates from ring points (n, 3) local m with station ids (n,)."""
    h, rho, dx, dy = shell.radial(pts)
    z = pts[:, 2]
    az = frame.azimuth_deg(dx, dy)
    slices, sec_w = sector_slices(az, cfg.sector_deg)
    n_sec = len(slices)
    # the shell face per sector (out-of-roundness, dents): radial offset of the wall above the base
    d, wall_scale = _local_face(rho - shell.radius, z, az, slices, sec_w)
    tol = max(2.5 * wall_scale, 0.004)
    face = np.abs(d) < tol
    if face.sum() < 20:
        raise StageError(f"junction: only {int(face.sum())} points on the shell face near the base; "
                         f"the shell fit may be off (rms {shell.rms_residual * 1000:.1f} mm)")
    foot = np.full(n_sec, np.nan)
    for k, idx in enumerate(slices):
        zz = z[idx][face[idx]]
        if len(zz) >= 5:
            foot[k] = np.percentile(zz, 2)
    base_z = float(np.nanmedian(foot))
    foot = fill_circular(foot)
    foot_at = interp_sectors(az, foot, sec_w)
    near = np.abs(z - foot_at) < cfg.search_window
    # clear of the shell face's own noise (4 sigma), but never more than a third of the largest projection
    rmin = max(cfg.radial_min, min(4.0 * wall_scale, cfg.radial_max_limit / 3))
    # projection width from the radial profile of plate-level returns, fitted with its noise
    level = fill_circular(_plate_level(z, d, near, slices, rmin, foot))
    width, edge_smear = _projection_width(d, z - interp_sectors(az, level, sec_w), near, rmin, cfg)
    if cfg.radial_max == "auto":
        # stop short of the edge by the margin, or by the radial noise of returns seen head-on like the step
        # face (2.5 x the shell face's scale), or half the edge's fitted smear: what still crosses in lies below
        # the plate and is gated or rejected
        rmax = (width - max(cfg.radial_margin, 2.5 * wall_scale, 0.5 * edge_smear)) if width is not None else 0.045
    else:
        rmax = float(cfg.radial_max)
    rmax = max(rmax, rmin + 0.004)
    cand = near & (d >= rmin) & (d <= rmax)
    n_cand = int(cand.sum())
    if n_cand == 0:
        raise StageError(f"junction: no points on the projection top between {rmin * 1000:.0f} and "
                         f"{rmax * 1000:.0f} mm outside the shell; check junction.radial_min / radial_max")
    prior = np.full(n_sec, np.nan)
    for k, idx in enumerate(slices):
        zz = z[idx][cand[idx]]
        if len(zz) >= 3:
            prior[k] = _mode(zz, 0.002)
    prior_raw = prior.copy()
    ok = np.isfinite(prior)
    both = ok & np.isfinite(foot)
    if both.sum() >= 3 and (~ok).any():
        # sectors without enough projection-top returns: the shell foot, moved by its median offset to the top
        prior = np.where(ok, prior, foot + float(np.median(prior[both] - foot[both])))
        ok = np.isfinite(prior)
    if ok.sum() >= 3:
        filled = fill_circular(prior)
        smooth = median_filter(filled, size=3, mode="wrap")
        # keep the smoothing only where it removes an outlying sector
        prior = np.where(np.isfinite(prior_raw) & (np.abs(prior_raw - smooth) < cfg.height_gate), prior_raw, smooth)
    prior = fill_circular(prior)
    prior_at = interp_sectors(az, prior, sec_w)
    gated = cand & (np.abs(z - prior_at) < cfg.height_gate)
    # move each point to the shell face along the tilt plane: the plate tilts with the tank, so across a
    # 50 mm projection a 1:500 tilt is 0.1 mm, which is systematic by azimuth
    zc = _to_face(z, az, d, gated, shell.radius, frame)
    # the other evidence of the junction's elevation: the lowest shell-face returns (the foot) and the top
    # edge of the projection's step face; the profile stage fits their edges per bin
    foot_ev = _edge_evidence(face & (z > prior_at + FOOT_WINDOW[0]) & (z < prior_at + FOOT_WINDOW[1]),
                             az, z, prior_at, station, FOOT_WINDOW, "lower")
    step_ev = None
    if width is not None:
        half = float(np.clip(edge_smear, 0.006, 0.015))
        step_sel = (np.abs(d - width) < half) & (z > prior_at + STEP_WINDOW[0]) & (z < prior_at + STEP_WINDOW[1])
        step_ev = _edge_evidence(step_sel, az, zc, prior_at, station, STEP_WINDOW, "upper")
    log.debug("junction: %d ring points, %d candidates, %d within the gate; projection width %s; %d foot and %d "
             "step-face returns", len(pts), n_cand, int(gated.sum()),
             f"{width * 1000:.0f} mm" if width else "not found", len(foot_ev.z),
             len(step_ev.z) if step_ev is not None else 0)
    centres = (np.arange(n_sec) + 0.5) * sec_w
    return Junction(azimuth_deg=az[gated], z=zc[gated], station=station[gated], radial=d[gated],
                    prior_sector_deg=centres, prior_z=np.where(np.isfinite(prior_raw), prior, np.nan),
                    projection_width=width, radial_window=(rmin, rmax), n_ring=len(pts),
                    n_candidates=n_cand, n_gated=int(gated.sum()), base_z=base_z, foot=foot_ev, step=step_ev,
                    edge_smear=edge_smear)


def _edge_evidence(sel, az, z, prior_at, station, window, edge) -> "EdgeEvidence":
    zr = z[sel] - prior_at[sel]
    return EdgeEvidence(azimuth_deg=az[sel], z=z[sel], z_rel=zr, station=station[sel], window=window, edge=edge)




def _to_face(z, az, d, sel, radius, frame):
    """z minus (radial slope of the best tilt plane) x (distance outside the face)."""
    if sel.sum() < 10:
        return z
    th = np.radians(az[sel])
    A = np.column_stack([np.ones(sel.sum()), np.cos(th), np.sin(th)])
    coef, *_ = np.linalg.lstsq(A, z[sel], rcond=None)
    # for z = a + b cos(theta) + c sin(theta) at the shell, the plane's slope outward is (b cos + c sin) / R
    thr = np.radians(az)
    slope = (coef[1] * np.cos(thr) + coef[2] * np.sin(thr)) / radius
    return z - slope * d


def _local_face(d0, z, az, slices, sec_w, band=0.06):
    """Distance outside the local shell face: d0 minus the wall's median offset in each sector."""
    n_sec = len(slices)
    f = np.full(n_sec, np.nan)
    for k, idx in enumerate(slices):
        dd = d0[idx]
        m = np.abs(dd) < band
        if m.sum() < 10:
            continue
        zz = z[idx][m]
        dd = dd[m]
        upper = zz > np.percentile(zz, 30)  # the wall, above the plate and foot
        f0 = np.median(dd[upper])
        near = upper & (np.abs(dd - f0) < 0.015)
        if near.sum() >= 5:
            f[k] = np.median(dd[near])
    if not np.isfinite(f).any():
        return d0, 0.005
    f = fill_circular(f)
    d = d0 - interp_sectors(az, f, sec_w)
    wall = np.abs(d) < 0.02
    scale = MAD_TO_SIGMA * np.median(np.abs(d[wall])) if wall.sum() > 10 else 0.005
    return d, float(scale)


def _mode(z, step):
    lo = z.min()
    b = ((z - lo) / step).astype(int)
    counts = np.bincount(b)
    # smooth over neighbouring classes so noise does not split the peak
    sm = np.convolve(counts, [1, 2, 1], mode="same")
    k = int(np.argmax(sm))
    sel = np.abs(b - k) <= 1
    return float(np.median(z[sel]))


def _plate_level(z, d, near, slices, rmin, fallback):
    """Per sector: the plate top's height, the mode of the near points just outside the face (nan where none)."""
    inner = near & (d >= rmin) & (d <= rmin + 0.02)
    level = np.full(len(slices), np.nan)
    for k, idx in enumerate(slices):
        zz = z[idx][inner[idx]]
        if len(zz) >= 3:
            level[k] = _mode(zz, 0.002)
    return np.where(np.isfinite(level), level, fallback)


def _projection_width(d, dz, near, rmin, cfg):
    """Outer edge of the plate (W, m) and its radial smear (s, m) from the radial profile of the returns near
    the plate level; (None, None) if no edge is found.

    1. The step face: the projection's outer face is seen head-on while its top is seen at grazing incidence,
       so its returns pile up at one radius (W) with heights from the plate top down by the plate thickness. The
       densest 3 mm radial slice of the returns within 8 mm below to 4 mm above the plate level, beyond
       ``rmin`` + 10 mm, is the face when it holds at least ``STEP_PEAK`` times the median slice density
       between ``rmin`` and it; W is the density-weighted centre of the slices above half the peak around it.
    2. Otherwise the plate-level share: returns within ``g`` = 3 robust sigma of the plate level (2.5-6 mm)
       are the plate top; beyond the edge the surface drops by the plate thickness or more. Their share in 2 mm
       radial slices is fitted by binomial maximum likelihood with P(d) = A Phi((W - d) / s) + B (s the radial
       smear of the edge by range noise at grazing incidence and mixed pixels, A the plate share inside, B the
       background at plate level beyond).
    """
    limit = cfg.radial_max_limit
    sel = near & (d >= rmin) & (d < limit)
    if sel.sum() < 30:
        return None, None
    dd, zz = d[sel], dz[sel]
    peak = _step_face(dd, zz, rmin, limit)
    if peak is not None:
        return peak
    core = (dd <= rmin + 0.02) & (np.abs(zz) < 0.01)
    sv = MAD_TO_SIGMA * np.median(np.abs(zz[core])) if core.sum() >= 10 else 0.001
    g = float(np.clip(3.0 * sv, 0.0025, 0.006))
    on = np.abs(zz) < g
    step = 0.002
    k = ((dd - rmin) / step).astype(int)
    nb = int(np.ceil((limit - rmin) / step))
    n = np.bincount(k, minlength=nb)[:nb].astype(float)
    y = np.bincount(k, weights=on.astype(float), minlength=nb)[:nb]
    centre = rmin + (np.arange(nb) + 0.5) * step
    if y.sum() < 10:
        return None, None

    def nll(p):
        w, s, a, b = p
        pr = np.clip(a * stats.norm.cdf((w - centre) / s) + b, 1e-9, 1 - 1e-9)
        return -float((y * np.log(pr) + (n - y) * np.log(1 - pr)).sum())

    best = None
    bounds = [(rmin + step, limit), (0.0005, 0.04), (0.0, 1.0), (0.0, 1.0)]
    for w0 in np.linspace(rmin + 0.01, limit - 0.005, 8):
        r = optimize.minimize(nll, [w0, 0.004, 0.8, 0.05], method="L-BFGS-B", bounds=bounds)
        if best is None or r.fun < best.fun:
            best = r
    w, s, a, b = best.x
    # an edge needs a real drop of the plate-level share, inside the searched range
    if a < 0.3 or a + b > 1.0 + 1e-6 or w >= limit - step:
        return None, None
    return float(w), float(s)


STEP_PEAK = 3.0  # density of the step face's slice over the median slice inside it
#: m about the plate level: the step face's upper part (plates are 6-14 mm thick); a berm sloping away below the
#: edge or a ringwall top a plate thickness down lies mostly outside it
STEP_BAND = (-0.008, 0.004)


def _step_face(dd, zz, rmin, limit, step=0.003):
    """(W, half width) of the step face's pile of returns, or None (see ``_projection_width``)."""
    band = (zz > STEP_BAND[0]) & (zz < STEP_BAND[1])
    start = rmin + 0.01
    nb = int((limit - start) / step)
    if nb < 4:
        return None
    k = ((dd[band] - start) / step).astype(int)
    k = k[(k >= 0) & (k < nb)]
    n = np.bincount(k, minlength=nb).astype(float)
    sm = np.convolve(n, [0.25, 0.5, 0.25], mode="same")
    i = int(np.argmax(sm))
    inside = sm[:max(i - 1, 1)]
    base = float(np.median(inside)) if len(inside) >= 2 else float(np.median(sm))
    if sm[i] < STEP_PEAK * max(base, 1.0) or i == nb - 1:
        return None
    lo = i
    while lo > 0 and sm[lo - 1] > 0.5 * sm[i]:
        lo -= 1
    hi = i
    while hi < nb - 1 and sm[hi + 1] > 0.5 * sm[i]:
        hi += 1
    idx = np.arange(lo, hi + 1)
    centre = start + (idx + 0.5) * step
    w = float((centre * n[idx]).sum() / max(n[idx].sum(), 1.0))
    return w, float(max((hi - lo + 1) * step / 2, step))


class RingFilter:
    """Per-chunk hook of the junction stage: keeps the thin ring around the shell base while the scan streams.

    The ring is ``band_below``/``band_above`` around the shell foot and from 0.15 m inside to ``band_outside``
    outside the shell. The shell face is most of that ring and only its position is needed, so a face model
    fitted on the detection sample decides which points are on the face and only about ``face_budget`` of
    them (a seeded random share) are kept over the whole scan: memory stays flat as the scan grows.
    """

    def __init__(self, sample_local: np.ndarray, shell: ShellFit, frame, cfg: JunctionConfig, n_total: int,
                 seed: int):
        self.shell, self.frame, self.cfg = shell, frame, cfg
        self.zlo, self.zhi = shell.z_min - cfg.band_below, shell.z_min + cfg.band_above
        self._face, self.face_keep_fraction = _face_model(sample_local, shell, frame, cfg, self.zlo, self.zhi,
                                                          n_total, len(sample_local), cfg.face_budget)
        self._rng = stream(seed, Purpose.FACE_THINNING)

    def up_band_file(self) -> tuple[float, float]:
        """The ring's height band in file units along the file's up axis (chunks are cut on it first)."""
        fr = self.frame
        up = 2 if fr.up_axis == "z" else 1
        return (self.zlo / fr.metres_per_unit + fr.origin[up], self.zhi / fr.metres_per_unit + fr.origin[up])

    def __call__(self, p: np.ndarray, station: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The ring points among local points ``p`` (n, 3) m and their station ids (n,)."""
        _, rho, dx, dy = self.shell.radial(p)
        d = rho - self.shell.radius
        keep = (d > -0.15) & (d < self.cfg.band_outside) & (p[:, 2] > self.zlo) & (p[:, 2] < self.zhi)
        if self.face_keep_fraction < 1.0 and keep.any():
            dl = d - self._face(self.frame.azimuth_deg(dx, dy))
            on_face = dl < self._face.tol  # the face and whatever lies inside it: only its position is used
            keep &= ~on_face | (self._rng.random(len(p)) < self.face_keep_fraction)
        return p[keep], station[keep]


class _Face:
    """Shell face radial offset per azimuth sector (from the sample)."""

    def __init__(self, per_sector, sec_w, tol):
        self.f, self.sec_w, self.tol = per_sector, sec_w, tol

    def __call__(self, az):
        return interp_sectors(az, self.f, self.sec_w)


def _face_model(local, shell, frame, jc, zlo, zhi, n_total, n_sample, budget):
    """(face model, keep probability) so that about ``budget`` shell-face points are kept from the whole scan."""
    _, rho, dx, dy = shell.radial(local)
    m = (local[:, 2] > zlo) & (local[:, 2] < zhi) & (np.abs(rho - shell.radius) < 0.15)
    if m.sum() < 200:
        return None, 1.0
    az = frame.azimuth_deg(dx[m], dy[m])
    slices, sec_w = sector_slices(az, jc.sector_deg)
    d0 = rho[m] - shell.radius
    d, scale = _local_face(d0, local[m, 2], az, slices, sec_w)
    per_sector = np.array([np.median((d0 - d)[s]) if len(s) else np.nan for s in slices])
    per_sector = fill_circular(per_sector)
    # the face band is kept generously (+-3 sigma of the face, at least 3 mm): plate points lie outside it
    tol = max(3.0 * scale, 0.003)
    expected = (d < tol).sum() * n_total / max(n_sample, 1)
    p = min(1.0, budget / max(expected, 1.0))
    return _Face(per_sector, sec_w, tol), p
