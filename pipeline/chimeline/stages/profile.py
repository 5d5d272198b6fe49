"""Profile stage: azimuth bins of the junction candidates (config section ``profile``).

Per bin: iterative rejection about the median with a robust scale (1.4826 MAD,
floored at half the scan-wide robust scale so a tight small bin does not reject
good points), then the mean of the kept points, corrected to the bin centre with
the profile slope from the neighbouring bins. The noise stage adds the 1-sigma
standard error per bin once it has measured the noise. Bins without kept points are gaps and stay empty; they are never interpolated.
"""
from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import Optional

import numpy as np

from scipy.sparse import coo_matrix
from scipy.sparse.linalg import lsqr

from ..config import ProfileConfig
from ..core.circular import gap_arcs
from ..core.robust import MAD_TO_SIGMA
from .junction import Junction

log = logging.getLogger(__name__)

MODE_HALF_BINS = 2  # the noise-based rejection starts from the mode of a bin and this many bins each side
MODE_STARTS = 64  # candidate starting heights for that mode


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
    evidence: Optional[np.ndarray] = None  # (n_bins,) str: kinds joined ("top", "top+foot", "foot+step", ...; "")
    width_deg: Optional[np.ndarray] = None  # (n_bins,) degrees, width of the window used (nan where empty)
    fusion: Optional[object] = None  # stages.fusion.Fusion: the evidence model


def n_bins_for(cfg: ProfileConfig, radius: float) -> int:
    width = cfg.bin_width_deg
    if cfg.bin_arc_length is not None:
        width = np.degrees(cfg.bin_arc_length / radius)
    return max(int(round(360.0 / width)), 4)


def bin_junction(j: Junction, cfg: ProfileConfig, radius: float) -> Profile:
    nb = n_bins_for(cfg, radius)
    w = 360.0 / nb
    b = (j.azimuth_deg / w).astype(int) % nb
    order = np.argsort(b, kind="stable")
    starts = np.searchsorted(b[order], np.arange(nb + 1))
    # pass 1: per bin, iterative rejection about the median with the bin's robust scale
    med = np.full(nb, np.nan)
    for k in range(nb):
        idx = order[starts[k]:starts[k + 1]]
        if len(idx):
            med[k] = np.median(j.z[idx])
    r0 = j.z - med[b]
    global_scale = MAD_TO_SIGMA * np.median(np.abs(r0 - np.median(r0))) if len(r0) else np.nan
    floor = 0.5 * global_scale if np.isfinite(global_scale) else 0.0
    kept = np.zeros(len(j.z), bool)
    for k in range(nb):
        idx = order[starts[k]:starts[k + 1]]
        if len(idx) == 0:
            continue
        zz = j.z[idx]
        keep = np.ones(len(idx), bool)
        for _ in range(cfg.max_iterations):
            m = np.median(zz[keep])
            s = max(MAD_TO_SIGMA * np.median(np.abs(zz[keep] - m)), floor)
            new = np.abs(zz - m) <= cfg.reject_k * s
            if new.sum() == 0 or np.array_equal(new, keep):
                break
            keep = new
        kept[idx] = keep
    # pass 2: reject by each station's robust noise scale about the bin locations (a contaminated bin
    # inflates its own scale; the station's scale is measured over the whole ring). Residuals are taken
    # after removing the stations' relative vertical offsets (registration), or a bin shared by two
    # stations would reject the points of the one that sits a few sigma off.
    station = j.station
    offsets = {}
    for _ in range(cfg.max_iterations):
        offsets, _n = station_offsets(j.z[kept], b[kept], station[kept])
        zc = j.z - offset_of(station, offsets)
        loc = _means(zc, b, kept, nb)
        r = zc - loc[b]
        # a point alone in its bin has residual 0: the station's scale comes from bins of two or more, each
        # residual scaled to the variance of one point (n / (n - 1))
        nk = np.bincount(b[kept], minlength=nb)[b]
        shared = kept & (nk >= 2)
        rs = r * np.sqrt(nk / np.maximum(nk - 1, 1))
        new = kept.copy()
        for st in np.unique(station):
            m = station == st
            rk = rs[m & shared]
            if len(rk) < 10:
                continue
            s = MAD_TO_SIGMA * np.median(np.abs(rk - np.median(rk)))
            new[m] = np.isfinite(r[m]) & (np.abs(r[m]) <= cfg.reject_k * max(s, 1e-6))
        if np.array_equal(new, kept):
            break
        kept = new
    return _from_kept(j, cfg, kept, nb)


def reject_with_noise(p: Profile, j: Junction, scale: np.ndarray, cfg: ProfileConfig) -> Profile:
    """Reject again with the measured noise instead of the bins' own scatter.

    Mixed pixels widen a bin's robust scale, so the first rejection keeps them. With the noise known (``scale``,
    (n,) m per candidate), each bin starts from the mode of its heights (kernel bandwidth = the noise) and keeps
    what lies within
    ``reject_k`` x scale of its mean, iterated with the station offsets and the profile's slope.
    """
    nb = len(p.azimuth_deg)
    b = p.bin_index
    daz = np.degrees(np.angle(np.exp(1j * np.radians(j.azimuth_deg - p.azimuth_deg[b]))))
    slope = p.slope_per_deg if p.slope_per_deg is not None else np.zeros(nb)
    loc = _mode_centres(j.z - offset_of(j.station, p.station_offset), j.azimuth_deg, b, scale, slope, p.azimuth_deg)
    zl = j.z - offset_of(j.station, p.station_offset) - slope[b] * daz
    kept = p.kept
    for _ in range(cfg.max_iterations):
        new = np.isfinite(loc[b]) & (np.abs(zl - loc[b]) <= cfg.reject_k * scale)
        if np.array_equal(new, kept):
            break
        kept = new
        offsets, _n = station_offsets(j.z[kept], b[kept], j.station[kept])
        zl = j.z - offset_of(j.station, offsets) - slope[b] * daz
        loc = np.where(np.bincount(b[kept], minlength=nb) > 0, _means(zl, b, kept, nb), loc)
    return _from_kept(j, cfg, kept, nb)


def _mode_centres(z, az, b, h, slope, centres, half=MODE_HALF_BINS):
    """Per bin: the mode of a normal kernel density (bandwidth ``h`` per value) of the heights in the bin and
    ``half`` bins each side, moved to the bin centre along the profile's slope; by mean shift from the densest of
    up to ``MODE_STARTS`` quantiles. The plate's returns line up from bin to bin while
    contaminants spread out, so the mode sits on the plate even in a bin where they are fewer."""
    nb = len(centres)
    out = np.full(nb, np.nan)
    order = np.argsort(b, kind="stable")
    starts = np.searchsorted(b[order], np.arange(nb + 1))
    counts = np.diff(starts)
    for k in np.nonzero(counts)[0]:
        idx = np.concatenate([order[starts[i % nb]:starts[i % nb + 1]] for i in range(k - half, k + half + 1)])
        v = z[idx] - slope[k] * np.degrees(np.angle(np.exp(1j * np.radians(az[idx] - centres[k]))))
        hh = h[idx]
        if len(v) <= 2:
            out[k] = float(v.mean())
            continue
        # the density at up to MODE_STARTS quantiles of the values (bounded work on dense scans), then mean shift
        tries = np.quantile(v, np.linspace(0, 1, min(len(v), MODE_STARTS)))
        dens = np.exp(-0.5 * ((v[None, :] - tries[:, None]) / hh[None, :]) ** 2).sum(axis=1)
        mu = float(tries[int(np.argmax(dens))])
        for _ in range(20):
            w = np.exp(-0.5 * ((v - mu) / hh) ** 2)
            new = float((w * v).sum() / w.sum())
            if abs(new - mu) < 1e-7:
                break
            mu = new
        out[k] = mu
    return out


def _from_kept(j: Junction, cfg: ProfileConfig, kept: np.ndarray, nb: int) -> Profile:
    """Every per-bin output of the profile from the kept candidates."""
    w = 360.0 / nb
    centres = (np.arange(nb) + 0.5) * w
    b = (j.azimuth_deg / w).astype(int) % nb
    order = np.argsort(b, kind="stable")
    starts = np.searchsorted(b[order], np.arange(nb + 1))
    station = j.station
    offsets, offsets_n = station_offsets(j.z[kept], b[kept], station[kept])
    zl = j.z - offset_of(station, offsets) if cfg.station_leveling == "adjust" else j.z
    loc = _means(zl, b, kept, nb)
    n_pts = np.bincount(b[kept], minlength=nb)
    n_tot = np.bincount(b, minlength=nb)
    n_rej = n_tot - n_pts
    scale = np.full(nb, np.nan)
    mean_az = np.full(nb, np.nan)
    n_st = np.zeros(nb, int)
    for k in np.nonzero(n_pts)[0]:
        idx = order[starts[k]:starts[k + 1]]
        idx = idx[kept[idx]]
        if len(idx) > 1:
            scale[k] = float(j.z[idx].std(ddof=1))
        a = j.azimuth_deg[idx]
        mean_az[k] = float(centres[k] + np.degrees(np.mean(np.angle(np.exp(1j * np.radians(a - centres[k]))))))
        n_st[k] = len(np.unique(station[idx]))
    # move each mean from its points' mean azimuth to the bin centre using the neighbours' slope
    have = np.isfinite(loc)
    slope = np.zeros(nb)
    for k in np.nonzero(have)[0]:
        kp, km = (k + 1) % nb, (k - 1) % nb
        if have[kp] and have[km]:
            daz = np.mod(mean_az[kp] - mean_az[km] + 180, 360) - 180
            if abs(daz) > 1e-9:
                slope[k] = (loc[kp] - loc[km]) / daz
    offset = np.where(have, np.degrees(np.angle(np.exp(1j * np.radians(mean_az - centres)))), 0.0)
    loc = np.where(have, loc - slope * offset, np.nan)
    status = np.where(n_pts == 0, "empty", np.where(n_pts < cfg.min_points, "sparse", "ok")).astype(object)
    suspect = (n_pts > 0) & (n_rej / np.maximum(n_tot, 1) > cfg.max_reject_fraction)
    status[suspect & (status == "ok")] = "suspect"
    status = status.astype(str)
    # residuals about the local line through the bin (the profile's own slope removed)
    daz = np.degrees(np.angle(np.exp(1j * np.radians(j.azimuth_deg - centres[b]))))
    resid = np.where(kept, zl - (loc[b] + slope[b] * daz), np.nan)
    gaps = gap_arcs(status == "empty", w)
    cov = float((status == "ok").mean())
    log.debug("profile: %d bins of %.3g deg, %.1f %% ok, %d gap(s), %d of %d candidates rejected",
             nb, w, 100 * cov, len(gaps), int((~kept).sum()), len(kept))
    nanv = np.full(nb, np.nan)
    return Profile(azimuth_deg=centres, bin_width_deg=w, elevation=loc, std_error=nanv.copy(), scale=scale,
                   n_points=n_pts, n_rejected=n_rej, n_stations=n_st, n_eff=nanv.copy(), status=status,
                   gaps=tuple(gaps), coverage=cov, kept=kept, bin_index=b, residual=resid,
                   station_offset=offsets, station_offset_n=offsets_n, slope_per_deg=slope,
                   leveled=cfg.station_leveling == "adjust" and bool(offsets))


def offset_of(station, offsets) -> np.ndarray:
    """Each point's station offset (m) from ``offsets`` (station id -> m); 0 for stations without one."""
    if not offsets:
        return np.zeros(len(station))
    ids = np.array(sorted(offsets))
    vals = np.array([offsets[i] for i in ids])
    pos = np.clip(np.searchsorted(ids, station), 0, len(ids) - 1)
    return np.where(ids[pos] == station, vals[pos], 0.0)


def station_offsets(z, b, s):
    """Vertical offset per station from bins shared by several stations.

    Least squares of z = mu_bin + offset_station over the shared bins (sparse, exact), with the offsets
    constrained to average zero over the stations (the scan's vertical datum is the mean of the stations'
    levelling). Returns offsets and the number of points behind each, by station id.
    """
    ids = np.unique(s)
    if len(ids) < 2 or len(z) == 0:
        return {}, {}
    si = np.searchsorted(ids, s)
    pair = np.unique(np.column_stack([b, si]), axis=0)
    n_st_bin = np.bincount(pair[:, 0], minlength=int(b.max()) + 1)
    m = n_st_bin[b] > 1
    if m.sum() < 10:
        return {}, {}
    zb, bb, ss = z[m], b[m], si[m]
    ub, bi = np.unique(bb, return_inverse=True)
    nm, J, n = len(ub), len(ids), len(zb)
    cnt_s = np.bincount(ss, minlength=J).astype(float)
    rows = np.concatenate([np.arange(n), np.arange(n), np.full(J, n)])
    cols = np.concatenate([bi, nm + ss, nm + np.arange(J)])
    vals = np.concatenate([np.ones(n), np.ones(n), np.full(J, 1e3 / J)])
    A = coo_matrix((vals, (rows, cols)), shape=(n + 1, nm + J)).tocsr()
    rhs = np.concatenate([zb - zb.mean(), [0.0]])
    o = lsqr(A, rhs, atol=1e-12, btol=1e-12, iter_lim=20000)[0][nm:]
    return ({int(ids[i]): float(o[i]) for i in range(J) if cnt_s[i] > 0},
            {int(ids[i]): int(cnt_s[i]) for i in range(J) if cnt_s[i] > 0})


def _means(z, b, kept, nb):
    cnt = np.bincount(b[kept], minlength=nb)
    s = np.bincount(b[kept], weights=z[kept], minlength=nb)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(cnt > 0, s / np.maximum(cnt, 1), np.nan)
