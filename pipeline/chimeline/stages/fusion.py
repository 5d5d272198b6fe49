"""Evidence fusion: the junction elevation per bin from every kind of evidence, widened where the scan is thin
(config section ``profile``).

Three kinds of returns carry the junction's elevation (the top of the projection at the shell's outer face):

- top: projection-top returns; per bin the mean of the kept points (station offsets removed, moved to the bin
  centre along the profile's slope), standard error from the noise model (``noise.bin_variance``);
- foot: the lowest returns of the shell face; per bin the lower edge of their heights, z0 = L - N(z < L) / rho
  with L the middle of the searched window and rho the returns per metre of height above L (a face scanned in
  rows has an even density of returns with height; points smeared across the edge by noise or by mixing with the
  plate cancel in N);
- step: returns on and around the projection's step face; per bin the upper edge of their heights, the 85th
  percentile (the face spans the plate thickness below the edge; plate-top returns at the edge lie on it).

Foot and step estimates are biased in a way that depends on the scan pattern, so each is tied to the top by a
measured offset: the running median of (kind - top) over the bins where both are seen (``OFFSET_WINDOW_DEG``
each side; the median of all such bins where fewer than ``MIN_PAIRS`` are near), and each gets its own scatter
from its bin-to-bin roughness (``_kind_model``). The top's random variance is scaled up by its own roughness
when its bins scatter more than their standard errors say (returns that are not on the plate pass for it). Per
bin the kinds seen are joined with inverse-variance weights; the registration part of the error (shared by all
kinds of a station) is added once. Kinds that disagree with the most precise one by more than ``profile.reject_k`` combined sigmas are left out
of that bin (counted in ``Fusion.n_conflicts``).

Status from uncertainty: a bin is ``ok`` when its standard error is at most ``profile.max_std_error``. Where the
scan is thin the bin widens (2, 3, ... times the bin width, centred, up to ``profile.max_bin_width_deg``) until it
is; the width used is reported. A bin with no evidence of any kind within its own width is a gap and stays empty:
widening never fills a gap. Foot and step are used only where the projection top is seen within the widest
window: where the plate is hidden (shrubs, equipment against the shell) the lowest visible face returns mark
the occluder's edge, not the junction.
"""
from __future__ import annotations

import dataclasses
import logging
from dataclasses import dataclass
from typing import Optional

import numpy as np

from ..config import ProfileConfig
from ..core.circular import angle_diff_deg, gap_arcs, interp_sectors
from .junction import EdgeEvidence, Junction
from .noise import NoiseEstimate, bin_variance, flag_isolated, station_sigmas
from .profile import Profile, offset_of

log = logging.getLogger(__name__)

OFFSET_WINDOW_DEG = 20.0  # running median of a kind's offset to the top: +- this
MIN_PAIRS = 8  # bins where a kind and the top are both seen, for a local offset
KINDS = ("top", "foot", "step")
ROUGH_TOP = 2.0  # roughness of the top beyond which a disagreement with the foot is taken seriously
FOOT_ABOVE = 0.001  # m: a shell foot this far above a rough projection top means the top was pulled down
FOOT_BELOW = 0.004  # m: ... this far below it, that the two disagree
KIND_SIGMA_FLOOR = 0.0002  # m: no kind is trusted beyond this per bin
CHI2_1_MEDIAN = 0.454936423119572  # median of chi-square with 1 degree of freedom (scipy.stats.chi2(1).median())


@dataclass(frozen=True)
class KindModel:
    """How one kind of evidence relates to the projection-top returns."""

    kind: str  # "foot" or "step"
    offset: float  # m, median of (kind - top) over the bins where both were seen (local offsets follow it)
    sigma: float  # m, 1 sigma scatter of one bin's estimate at the bin width, offset removed
    n_pairs: int  # bins where both were seen
    n_bins: int  # bins where this kind was seen


@dataclass(frozen=True)
class Fusion:
    """The evidence model of a profile."""

    kinds: tuple  # KindModel for foot and step (those that could be tied to the top)
    n_widened: int  # bins whose width was widened
    n_conflicts: int  # bins where a kind disagreed with the most precise one and was left out
    roughness: float  # median chi-square of the top's second differences over its own: > 1 inflates its SE
    foot_disagreement: float  # m, |foot - top| offset beyond FOOT_ABOVE / FOOT_BELOW (added to every SE), else 0
    counts: dict  # evidence label -> bins
    max_std_error: float  # m, the limit of an ok bin
    max_width_deg: float


def fuse_evidence(p: Profile, j: Junction, noise: NoiseEstimate, cfg: ProfileConfig) -> Profile:
    """The profile with every kind of evidence joined, bins widened where thin and status from uncertainty."""
    nb = len(p.azimuth_deg)
    w = p.bin_width_deg
    centres = p.azimuth_deg
    n_w = max(1, int(np.floor(cfg.max_bin_width_deg / w + 1e-9)))
    widths = w * np.arange(1, n_w + 1)
    sig = station_sigmas(noise)
    slope = p.slope_per_deg if p.slope_per_deg is not None else np.zeros(nb)
    prior = _prior_at(j, centres)
    top = np.stack([_top(p, j, noise, sig, slope, width) for width in widths])  # (n_w, 4, nb)
    roughness = _roughness(top[0, 0], top[0, 1])
    top[:, 1] *= max(roughness, 1.0)
    edges = {}
    for kind, ev in (("foot", j.foot), ("step", j.step)):
        if ev is not None and len(ev.z):
            edges[kind] = np.stack([_edge(ev, p, noise, sig, slope, prior, width) for width in widths])
    # evidence inside each bin's own width: a bin without any stays a gap. Foot and step count only where the
    # projection top is seen within the widest window: where the plate is hidden (shrubs, equipment against the
    # shell) the lowest visible face returns mark the occluder's edge, not the junction
    anchored = top[-1, 3] > 0
    own = top[0, 3] > 0
    for kind, ev in (("foot", j.foot), ("step", j.step)):
        if ev is not None and len(ev.z):
            # a few face or step returns (too few for an edge of their own) still show the base is in view
            own |= anchored & (np.bincount(_bin_of(ev.azimuth_deg, w, nb), minlength=nb) > 0)
        if kind in edges:
            edges[kind][:, :, ~anchored] = np.nan
            edges[kind][:, 3, ~anchored] = 0
    models, kinds = {}, []
    for kind, e in edges.items():
        m = _kind_model(kind, e, top, centres, noise.quantum)
        if m is not None:
            models[kind] = m
            kinds.append(m[0])
    # the shell foot is the same edge as the plate top. When the top's bins scatter well beyond their noise
    # (roughness above ROUGH_TOP: returns off the plate pass for it) and the foot sits clearly above it (more than
    # FOOT_ABOVE and 3 standard errors of the offset) those returns have likely pulled the top down (mixed pixels
    # at the outer edge sink below the plate); far below (FOOT_BELOW), one of the two is wrong. Which one is
    # unknown: the disagreement joins every bin's systematic error. (A smooth top with a foot above it is the
    # normal case of coarse scan rows, whose lowest face return sits above the junction.)
    disagreement = 0.0
    if "foot" in models and roughness > ROUGH_TOP:
        fm = models["foot"][0]
        off, off_se = fm.offset, 1.25 * fm.sigma / np.sqrt(max(fm.n_pairs, 1))
        if (off > FOOT_ABOVE or off < -FOOT_BELOW) and abs(off) > 3 * off_se:
            disagreement = abs(off)
    if disagreement > 0:
        top[:, 2] += disagreement ** 2
        for e in edges.values():
            e[:, 2] += disagreement ** 2
    el = np.full(nb, np.nan)
    se = np.full(nb, np.nan)
    used = np.full(nb, "", dtype=object)
    width_used = np.full(nb, np.nan)
    conflict = np.zeros(nb, bool)
    for b in np.nonzero(own)[0]:
        best = None
        for iw in range(n_w):
            cand = _join(b, iw, top, edges, models, cfg.reject_k)
            if cand is None:
                continue
            if best is None or cand[1] < best[1] - 1e-15:
                best = cand + (iw,)
            if cand[1] <= cfg.max_std_error:
                best = cand + (iw,)
                break
        if best is not None:
            el[b], se[b], used[b], conflict[b], iw = best
            width_used[b] = widths[iw]
    status = _status(p, el, se, top[0, 3], used, cfg)
    counts = {k: int(v) for k, v in zip(*np.unique(used[status != "empty"].astype(str), return_counts=True))}
    n_widened = int(((width_used > w * 1.001) & (status != "empty")).sum())
    fusion = Fusion(kinds=tuple(kinds), n_widened=n_widened, n_conflicts=int((conflict & (status != "empty")).sum()),
                    roughness=float(roughness), counts=counts,
                    foot_disagreement=float(disagreement), max_std_error=cfg.max_std_error,
                    max_width_deg=float(widths[-1]))
    neff = np.where(np.isfinite(se) & (se > 0), noise.sigma ** 2 / se ** 2, np.nan)
    cov = float((status == "ok").mean())
    log.info("fusion: %s; %d bins widened; %.1f %% ok", ", ".join(f"{k} {v}" for k, v in counts.items()),
             n_widened, 100 * cov)
    return dataclasses.replace(p, elevation=el, std_error=se, n_eff=neff, status=status, coverage=cov,
                               gaps=tuple(gap_arcs(status == "empty", w)), evidence=used.astype(str),
                               width_deg=width_used, fusion=fusion)


def _roughness(v, var) -> float:
    """Median over bins of (v_b - (v_{b-1} + v_{b+1}) / 2)^2 / (var_b + (var_{b-1} + var_{b+1}) / 4), divided by
    the median of chi-square with 1 degree of freedom (0.4549): about 1 when the random standard errors explain
    the profile's bin-to-bin scatter (the junction is smooth over three bins), more when returns that are not
    on the plate (mixed pixels, foundation) pass for it. The median ignores the few bins of a sharp local dip."""
    d2 = v - 0.5 * (np.roll(v, 1) + np.roll(v, -1))
    pv = var + 0.25 * (np.roll(var, 1) + np.roll(var, -1))
    ok = np.isfinite(d2) & np.isfinite(pv) & (pv > 0)
    if ok.sum() < 20:
        return 1.0
    return float(np.median(d2[ok] ** 2 / pv[ok]) / CHI2_1_MEDIAN)


def _bin_of(az, w, nb):
    return (np.asarray(az) / w).astype(int) % nb


def _prior_at(j: Junction, az) -> np.ndarray:
    pz = np.asarray(j.prior_z, dtype=float)
    if not np.isfinite(pz).any():
        return np.full(len(az), np.nan)
    ok = np.isfinite(pz)
    filled = np.interp(np.arange(len(pz)), np.nonzero(ok)[0], pz[ok], period=len(pz)) if not ok.all() else pz
    return interp_sectors(az, filled, 360.0 / len(pz))


def _window(az, centres, width):
    """For each centre, the indices of ``az`` within +- width / 2 (circular)."""
    o = np.argsort(az, kind="stable")
    a = az[o]
    ext = np.concatenate([a - 360.0, a, a + 360.0])
    idx = np.concatenate([o, o, o])
    lo = np.searchsorted(ext, centres - width / 2, side="left")
    hi = np.searchsorted(ext, centres + width / 2, side="left")
    return [idx[lo[k]:hi[k]] for k in range(len(centres))]


def _top(p: Profile, j: Junction, noise, sig, slope, width):
    """(value, random var, systematic var, n) per bin from the kept projection-top points within ``width``."""
    nb = len(p.azimuth_deg)
    out = np.full((4, nb), np.nan)
    out[3] = 0
    k = np.nonzero(p.kept)[0]
    if len(k) == 0:
        return out
    z = j.z[k] - (offset_of(j.station[k], p.station_offset) if p.leveled else 0.0)
    az, st = j.azimuth_deg[k], j.station[k]
    for b, idx in enumerate(_window(az, p.azimuth_deg, width)):
        if len(idx) == 0:
            continue
        zz = z[idx] - slope[b] * angle_diff_deg(az[idx], p.azimuth_deg[b])
        ids, counts = np.unique(st[idx], return_counts=True)
        rand, syst = bin_variance(ids, counts, noise, p.leveled, sig)
        out[:, b] = (zz.mean(), rand, syst, len(idx))
    return out


def _edge(ev: EdgeEvidence, p: Profile, noise, sig, slope, prior, width):
    """(value, 0, systematic var, n) per bin: the edge of the kind's heights within ``width`` (its random
    variance is measured against the top later)."""
    nb = len(p.azimuth_deg)
    out = np.full((4, nb), np.nan)
    out[3] = 0
    zr = ev.z_rel - (offset_of(ev.station, p.station_offset) if p.leveled else 0.0)
    lo, hi = ev.window
    for b, idx in enumerate(_window(ev.azimuth_deg, p.azimuth_deg, width)):
        if len(idx) < 3 or not np.isfinite(prior[b]):
            continue
        zz = zr[idx] - slope[b] * angle_diff_deg(ev.azimuth_deg[idx], p.azimuth_deg[b])
        z0 = _lower_edge(zz, lo, hi) if ev.edge == "lower" else float(np.percentile(zz, 85))
        if z0 is None:
            continue
        ids, counts = np.unique(ev.station[idx], return_counts=True)
        _, syst = bin_variance(ids, counts, noise, p.leveled, sig)
        out[:, b] = (prior[b] + z0, 0.0, syst, len(idx))
    return out


def _lower_edge(z, lo, hi) -> Optional[float]:
    """Lower edge of heights spread evenly above it in [lo, hi]: z0 = L - N(z < L) / rho (L mid-window)."""
    L = 0.5 * (lo + hi)
    above = int((z >= L).sum())
    if above < 3:
        return None
    rho = above / (hi - L)
    return float(L - (z < L).sum() / rho)


def _kind_model(kind, e, top, centres, quantum=0.0):
    """(KindModel, local offsets (nb,), variance per bin and width (n_w, nb)) or None.

    The kind's own scatter comes from its bin-to-bin roughness at the bin width, so a poor top cannot make it
    look precise: sigma_k^2 = median(second difference^2) / (0.4549 x 1.5) (a second difference of independent
    values has 1.5 times their variance), at least the rounding's q^2 / 12 and KIND_SIGMA_FLOOR; at wider
    windows it shrinks with the number of returns. The local
    offset to the top is a median over the bins near it, with variance (pi / 2) (sigma_k^2 + SE_top^2) / n.
    """
    both = np.isfinite(e[0, 0]) & np.isfinite(top[0, 0]) & (top[0, 3] > 0)
    if both.sum() < MIN_PAIRS:
        return None
    d = e[0, 0] - top[0, 0]
    glob = float(np.median(d[both]))
    v = e[0, 0]
    d2 = v - 0.5 * (np.roll(v, 1) + np.roll(v, -1))
    ok = np.isfinite(d2)
    if ok.sum() < MIN_PAIRS:
        return None
    # floor: rounded heights can make a kind look perfectly smooth (no better than the rounding, q^2 / 12)
    s2 = max(float(np.median(d2[ok] ** 2)) / (CHI2_1_MEDIAN * 1.5), quantum ** 2 / 12, KIND_SIGMA_FLOOR ** 2)
    top_var = float(np.median(top[0, 1][both]))
    offs = np.full(len(centres), glob)
    off_var = np.full(len(centres), np.pi / 2 * (s2 + top_var) / both.sum())
    ab, db = centres[both], d[both]
    for b in range(len(centres)):
        near = np.abs(angle_diff_deg(ab, centres[b])) <= OFFSET_WINDOW_DEG
        if near.sum() >= MIN_PAIRS:
            offs[b] = float(np.median(db[near]))
            off_var[b] = np.pi / 2 * (s2 + top_var) / near.sum()
    n0 = float(np.median(e[0, 3][np.isfinite(e[0, 0])]))
    var = s2 * n0 / np.maximum(e[:, 3], 1.0) + off_var[None, :]
    model = KindModel(kind=kind, offset=glob, sigma=float(np.sqrt(s2)), n_pairs=int(both.sum()),
                      n_bins=int(np.isfinite(e[0, 0]).sum()))
    return model, offs, var


def _join(b, iw, top, edges, models, reject_k):
    """(value, SE, evidence label, conflict) of bin ``b`` at width index ``iw``, or None without evidence."""
    parts = []
    if top[iw, 3, b] > 0 and np.isfinite(top[iw, 0, b]):
        parts.append(("top", top[iw, 0, b], top[iw, 1, b], top[iw, 2, b]))
    for kind, e in edges.items():
        if kind not in models or not np.isfinite(e[iw, 0, b]):
            continue
        _, offs, var = models[kind]
        parts.append((kind, e[iw, 0, b] - offs[b], var[iw, b], e[iw, 2, b]))
    if not parts:
        return None
    conflict = False
    best = min(parts, key=lambda t: t[2])
    keep = [t for t in parts if abs(t[1] - best[1]) <= reject_k * np.sqrt(t[2] + best[2])]
    if len(keep) < len(parts):
        conflict = True
    wts = np.array([1.0 / max(t[2], 1e-18) for t in keep])
    vals = np.array([t[1] for t in keep])
    value = float((wts * vals).sum() / wts.sum())
    rand = 1.0 / wts.sum()
    # the registration part is shared by every kind of a station: added once, weighted like the values
    syst = float((wts * np.sqrt([max(t[3], 0.0) for t in keep])).sum() / wts.sum()) ** 2
    label = "+".join(k for k in KINDS if any(t[0] == k for t in keep))
    return value, float(np.sqrt(rand + syst)), label, conflict


def _status(p: Profile, el, se, n_top, used, cfg):
    """empty (no evidence), sparse (standard error above the limit, or too few top points with top alone),
    suspect (most of a thin top-only bin rejected, or an isolated outlier), ok.

    The noise-based rejection keeps the plate's returns and drops the rest, so in a scan with many mixed pixels
    most bins reject many candidates; that alone says nothing against the kept ones (their scatter is in the
    standard error). A bin is suspect for its rejections only when under 3 top points remain and nothing else
    supports it."""
    status = np.where(~np.isfinite(el), "empty",
                      np.where(se > cfg.max_std_error, "sparse", "ok")).astype(object)
    top_only = used == "top"
    status[top_only & (n_top < cfg.min_points) & (status == "ok")] = "sparse"
    tot = p.n_points + p.n_rejected
    suspect = top_only & (p.n_points > 0) & (p.n_points < 3) & \
        (p.n_rejected / np.maximum(tot, 1) > cfg.max_reject_fraction)
    status[suspect & (status == "ok")] = "suspect"
    return flag_isolated(el, se, status.astype(str), cfg.reject_k)
