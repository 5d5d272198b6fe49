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
from scipy.ndimage import median_filter

from ..config import JunctionConfig
from ..core.circular import fill_circular, interp_sectors, sector_slices
from ..core.robust import MAD_TO_SIGMA
from ..core.rng import Purpose, stream
from ..errors import StageError
from .shell import ShellFit

log = logging.getLogger(__name__)


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
    # projection width from the radial height profile
    width = _projection_width(d, z - foot_at, near, cfg)
    if cfg.radial_max == "auto":
        rmax = (width - cfg.radial_margin) if width is not None else 0.045
    else:
        rmax = float(cfg.radial_max)
    rmin = max(cfg.radial_min, 4.0 * wall_scale)  # clear of the shell face's own noise
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
    log.debug("junction: %d ring points, %d candidates, %d within the gate; projection width %s",
             len(pts), n_cand, int(gated.sum()), f"{width * 1000:.0f} mm" if width else "not found")
    centres = (np.arange(n_sec) + 0.5) * sec_w
    return Junction(azimuth_deg=az[gated], z=zc[gated], station=station[gated], radial=d[gated],
                    prior_sector_deg=centres, prior_z=np.where(np.isfinite(prior_raw), prior, np.nan),
                    projection_width=width, radial_window=(rmin, rmax), n_ring=len(pts),
                    n_candidates=n_cand, n_gated=int(gated.sum()), base_z=base_z)




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


def _projection_width(d, dz, near, cfg):
    """Outer edge of the plate: first 5 mm radial slice whose median height drops below the plate level."""
    step = 0.005
    edges = np.arange(0.0, cfg.radial_max_limit + step, step)
    sel = near & (d >= 0) & (d < edges[-1])
    dd, zz = d[sel], dz[sel]
    k = (dd / step).astype(int)
    med = np.full(len(edges) - 1, np.nan)
    o = np.argsort(k, kind="stable")
    b = np.searchsorted(k[o], np.arange(len(edges)))
    for i in range(len(edges) - 1):
        v = zz[o[b[i]:b[i + 1]]]
        if len(v) >= 10:
            med[i] = np.median(v)
    if not np.isfinite(med[:4]).any():
        return None
    level = np.nanmedian(med[1:4]) if np.isfinite(med[1:4]).any() else np.nanmedian(med[:4])
    for i in range(2, len(med)):
        if np.isfinite(med[i]) and med[i] < level - 0.004:
            return float(edges[i])
    return None






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
