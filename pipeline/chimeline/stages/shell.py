"""Shell stage: find the shell cylinder by RANSAC on a subsample and refine it (config section ``shell``).

1. Voxel-downsample the sample and estimate normals (open3d); keep points whose
   normals are near horizontal.
2. RANSAC circles through 3 candidates in plan (vectorised batches), scored by
   inliers whose normals also point radially.
3. Refine centre, axis tilt and radius by robust least squares (scipy,
   soft-L1 loss) on the inliers.
4. Repeat on the remaining candidates for further tanks; choose the one nearest
   ``tank.center_hint`` or else the most complete.
"""
from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from ..config import ShellConfig
from ..errors import StageError
from ..io.readers import load_open3d
from ..units import LENGTH_FACTORS

log = logging.getLogger(__name__)
N_SECTORS = 72


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


def fit_shell(xyz: np.ndarray, cfg: ShellConfig, rng: np.random.Generator, *, center_hint=None,
              metres_per_unit: float = 1.0) -> ShellFit:
    """Detect and fit the shell in a local-metre sample (n, 3)."""
    pts, nrm = _normals(xyz, cfg)
    cand = np.abs(nrm[:, 2]) < cfg.max_normal_z
    P, N = pts[cand], nrm[cand]
    n_cand = len(P)
    if n_cand < 20:
        raise StageError(f"shell: no tank shell found: only {n_cand} points with near-horizontal normals in the "
                         f"sample; is the scan of a tank? (try shell.max_normal_z, shell.voxel_size)")
    remaining = np.ones(n_cand, bool)
    found = []
    trials_total = 0
    for _ in range(cfg.max_tanks):
        idx = np.nonzero(remaining)[0]
        # another tank needs a real share of the candidates; the rest is clutter
        if len(idx) < max(cfg.min_inliers // 4, 10) or (found and len(idx) < 0.1 * n_cand):
            break
        best, trials = _ransac_circle(P[idx], N[idx], cfg, rng)
        trials_total += trials
        if best is None:
            break
        cx, cy, r = best
        fit = _refine(P[idx], cx, cy, r, cfg)
        if fit is None:
            break
        inl = _inliers(P, fit, cfg.inlier_tolerance * 2) & remaining
        remaining &= ~_inliers(P, fit, max(cfg.inlier_tolerance * 3, 0.15))
        n_in = int(inl.sum())
        if n_in < 30:
            break
        h_ext = float(np.ptp(P[inl, 2])) if n_in else 0.0
        cov = _coverage(P[inl], fit)
        found.append((fit, n_in, cov, h_ext, P[inl]))
    good = [f for f in found if cfg.min_radius <= f[0][3] <= cfg.max_radius and f[3] >= cfg.min_height]
    # a tank shell is well supported: enough inliers around enough of the circle (a pipe rack, a wall or a
    # curb can give a short weak arc of a big circle)
    weak = [f for f in good if f[1] < cfg.min_inliers or f[2] < cfg.min_coverage]
    good = [f for f in good if f not in weak]
    # concentric cylinders (ringwall face, insulation jacket, a course) belong to one tank: keep the tallest
    good.sort(key=lambda f: -f[3] * f[1])
    merged = []
    for f in good:
        if not any(np.hypot(f[0][0] - g[0][0], f[0][1] - g[0][1]) < 0.1 * g[0][3] and abs(f[0][3] - g[0][3]) < 0.1 * g[0][3]
                   for g in merged):
            merged.append(f)
    good = merged
    if not good:
        if weak:
            raise StageError(_weak_shell_message(max(weak, key=lambda f: f[1] * f[2]), cfg))
        raise StageError(_no_shell_message(found, cfg, n_cand, trials_total, metres_per_unit))
    if center_hint is not None:
        hint = np.asarray(center_hint, dtype=float)
        d = [np.hypot(f[0][0] - hint[0], f[0][1] - hint[1]) for f in good]
        k = int(np.argmin(d))
        why = f"nearest tank.center_hint ({d[k]:.2f} m away)"
    else:
        score = [f[2] * f[1] for f in good]
        k = int(np.argmax(score))
        why = "most complete cylinder (sector coverage x inliers)"
    (cx, cy, z0, r, ax), n_in, cov, h_ext, inl_pts = good[k]
    # other cylinders in view, the weakly supported ones included (a neighbouring tank seen from one side), but
    # not the chosen tank's own concentric faces
    also = [f for f in weak if np.hypot(f[0][0] - cx, f[0][1] - cy) > 0.1 * r]
    others = tuple(TankCandidate(np.array([f[0][0], f[0][1]]), f[0][3], f[1], f[2], f[3])
                   for f in [g for j, g in enumerate(good) if j != k] + also)
    res = _radial_residual(inl_pts, (cx, cy, z0, r, ax))
    log.debug("shell: r = %.3f m at (%.2f, %.2f), %d inliers, coverage %.0f %%, %d other cylinder(s)",
             r, cx, cy, n_in, 100 * cov, len(others))
    return ShellFit(center=np.array([cx, cy, z0]), axis=ax, radius=r, radius_mean=r,
                    rms_residual=float(np.sqrt(np.mean(res ** 2))), n_inliers=n_in, coverage=cov,
                    n_trials=trials_total, n_candidates=n_cand, others=others,
                    z_min=float(np.percentile(inl_pts[:, 2], 0.5)), z_max=float(np.percentile(inl_pts[:, 2], 99.5)),
                    selection=why)


def refine_base(shell: ShellFit, pts: np.ndarray, base_z: float, cfg: ShellConfig) -> ShellFit:
    """Refit centre and radius (axis fixed) on full-density shell points just above the base."""
    h, rho, _, _ = shell.radial(pts)
    zb = base_z - shell.center[2]
    sel = (h > zb + 0.05) & (h < zb + cfg.base_fit_height) & (np.abs(rho - shell.radius) < cfg.inlier_tolerance)
    if sel.sum() < 50:
        return shell
    q = pts[sel]
    if len(q) > 60_000:  # plenty for three parameters; keeps the fit fast on dense scans
        q = q[:: len(q) // 60_000 + 1]
    ax = shell.axis
    c0 = shell.center

    def resid(p):
        c = np.array([p[0], p[1], c0[2]])
        w = q - c
        hh = w @ ax
        return np.linalg.norm(w - np.outer(hh, ax), axis=1) - p[2]

    sol = least_squares(resid, [c0[0], c0[1], shell.radius], loss="soft_l1", f_scale=0.003)
    r = resid(sol.x)
    center = np.array([sol.x[0], sol.x[1], c0[2]])
    # move the axis point to the base elevation
    t = (base_z - center[2]) / ax[2]
    center = center + t * ax
    return ShellFit(center=center, axis=ax, radius=float(sol.x[2]), radius_mean=shell.radius,
                    rms_residual=float(np.sqrt(np.mean(np.minimum(r ** 2, 0.01 ** 2)))), n_inliers=shell.n_inliers,
                    coverage=shell.coverage, n_trials=shell.n_trials, n_candidates=shell.n_candidates,
                    others=shell.others, z_min=shell.z_min, z_max=shell.z_max, selection=shell.selection)


# ---------------------------------------------------------------------------


def _normals(xyz, cfg):
    o3d = load_open3d()

    pc = o3d.geometry.PointCloud(o3d.utility.Vector3dVector(np.ascontiguousarray(xyz, dtype=np.float64)))
    pc = pc.voxel_down_sample(cfg.voxel_size)
    pc.estimate_normals(o3d.geometry.KDTreeSearchParamHybrid(radius=cfg.normal_radius, max_nn=30))
    return np.asarray(pc.points), np.asarray(pc.normals)


def _ransac_circle(P, N, cfg, rng, batch=256):
    n = len(P)
    xy = P[:, :2]
    sub = rng.choice(n, 6000, replace=False) if n > 6000 else np.arange(n)
    xs, ns = xy[sub], N[sub, :2]
    ns = ns / np.maximum(np.linalg.norm(ns, axis=1, keepdims=True), 1e-9)
    best, best_score, trials = None, 0, 0
    tol = cfg.inlier_tolerance
    lo, hi = 0.2, 1e5  # radius limits applied after the search (for the unit diagnosis)
    while trials < cfg.max_trials:
        k = min(batch, cfg.max_trials - trials)
        trials += k
        ijk = rng.integers(0, n, (k, 3))
        a, b, c = xy[ijk[:, 0]], xy[ijk[:, 1]], xy[ijk[:, 2]]
        d = 2 * (a[:, 0] * (b[:, 1] - c[:, 1]) + b[:, 0] * (c[:, 1] - a[:, 1]) + c[:, 0] * (a[:, 1] - b[:, 1]))
        ok = np.abs(d) > 1e-9
        a2, b2, c2 = (a ** 2).sum(1), (b ** 2).sum(1), (c ** 2).sum(1)
        with np.errstate(divide="ignore", invalid="ignore"):
            ux = (a2 * (b[:, 1] - c[:, 1]) + b2 * (c[:, 1] - a[:, 1]) + c2 * (a[:, 1] - b[:, 1])) / d
            uy = (a2 * (c[:, 0] - b[:, 0]) + b2 * (a[:, 0] - c[:, 0]) + c2 * (b[:, 0] - a[:, 0])) / d
        r = np.hypot(a[:, 0] - ux, a[:, 1] - uy)
        ok &= (r > lo) & (r < hi)
        if not ok.any():
            continue
        ux, uy, r = ux[ok], uy[ok], r[ok]
        dx = xs[None, :, 0] - ux[:, None]
        dy = xs[None, :, 1] - uy[:, None]
        rho = np.hypot(dx, dy)
        radial_ok = np.abs(dx * ns[None, :, 0] + dy * ns[None, :, 1]) > 0.8 * rho
        score = ((np.abs(rho - r[:, None]) < tol) & radial_ok).sum(axis=1)
        j = int(np.argmax(score))
        if score[j] > best_score:
            best_score, best = int(score[j]), (float(ux[j]), float(uy[j]), float(r[j]))
    if best is None or best_score < 10:
        return None, trials
    return best, trials


def _axis(tx, ty):
    a = np.array([tx, ty, 1.0])
    return a / np.linalg.norm(a)


def _radial_residual(P, fit):
    cx, cy, z0, r, ax = fit
    w = P - np.array([cx, cy, z0])
    h = w @ ax
    return np.linalg.norm(w - np.outer(h, ax), axis=1) - r


def _refine(P, cx, cy, r, cfg):
    rho = np.hypot(P[:, 0] - cx, P[:, 1] - cy)
    sel = np.abs(rho - r) < cfg.inlier_tolerance * 2
    if sel.sum() < 10:
        return None
    Q = P[sel]
    z0 = float(np.median(Q[:, 2]))
    max_t = np.tan(np.radians(cfg.max_tilt_deg)) if cfg.max_tilt_deg > 0 else 1e-9

    def resid(p):
        return _radial_residual(Q, (p[0], p[1], z0, p[2], _axis(p[3], p[4])))

    sol = least_squares(resid, [cx, cy, r, 0.0, 0.0], loss="soft_l1", f_scale=cfg.inlier_tolerance / 3,
                        bounds=([-np.inf, -np.inf, 0, -max_t, -max_t], [np.inf, np.inf, np.inf, max_t, max_t]))
    cx, cy, r, tx, ty = sol.x
    return (float(cx), float(cy), z0, float(r), _axis(tx, ty))


def _inliers(P, fit, tol):
    return np.abs(_radial_residual(P, fit)) < tol


def _coverage(P, fit):
    if len(P) == 0:
        return 0.0
    cx, cy = fit[0], fit[1]
    az = np.mod(np.arctan2(P[:, 0] - cx, P[:, 1] - cy), 2 * np.pi)
    sec = np.bincount((az / (2 * np.pi) * N_SECTORS).astype(int) % N_SECTORS, minlength=N_SECTORS)
    return float((sec >= 3).mean())


def _weak_shell_message(f, cfg):
    r, n_in, cov, h_ext = f[0][3], f[1], f[2], f[3]
    why = []
    if n_in < cfg.min_inliers:
        why.append(f"only {n_in} inliers (shell.min_inliers = {cfg.min_inliers})")
    if cov < cfg.min_coverage:
        why.append(f"inliers on only {100 * cov:.0f} % of the circle (shell.min_coverage = {cfg.min_coverage})")
    return (f"shell: no tank shell found: the best cylinder (r = {r:.4g} m, {h_ext:.2f} m tall) has "
            f"{' and '.join(why)}; is this a scan of a tank? (a tank seen from one side only may need a lower "
            f"shell.min_coverage)")


def _no_shell_message(found, cfg, n_cand, trials, metres_per_unit):
    if found:
        f = max(found, key=lambda f: f[1])
        r = f[0][3]
        hint = ""
        if not cfg.min_radius <= r <= cfg.max_radius:
            r_file = r / metres_per_unit
            fits = [u for u, fac in LENGTH_FACTORS.items() if cfg.min_radius <= r_file * fac <= cfg.max_radius
                    and abs(fac - metres_per_unit) > 1e-9]
            if fits:
                hint = (f"; a radius of {r:.4g} m is absurd for a tank: the scan is probably in "
                        f"{' or '.join(fits)} (set input.units)")
            else:
                hint = f"; adjust shell.min_radius / shell.max_radius ({cfg.min_radius}-{cfg.max_radius} m)"
        elif f[3] < cfg.min_height:
            hint = f"; the best cylinder is only {f[3]:.2f} m tall (shell.min_height = {cfg.min_height})"
        return (f"shell: no tank shell found: best cylinder r = {r:.4g} m with {f[1]} inliers after {trials} "
                f"trials on {n_cand} candidates{hint}")
    return (f"shell: no cylinder found after {trials} RANSAC trials on {n_cand} candidate points; relax "
            f"shell.inlier_tolerance or shell.max_normal_z, or raise shell.max_trials")
