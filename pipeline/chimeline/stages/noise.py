"""Noise stage: per-point vertical measurement noise with a confidence interval (config section ``noise``).

Two independent estimators that must agree:

- within-bin: the pooled variance of kept points about their (bin, station)
  cell mean, with sum(n_c - 1) degrees of freedom; chi-square interval;
- pairs: non-overlapping pairs of azimuth-neighbours of one station (closer than
  ``pair_max_gap_deg``), sigma^2 = sum(d^2) / (2 m) with m degrees of freedom;
  it never looks at the bins.

Their agreement is an F test of equal variances. ``attach_uncertainty`` then gives each profile bin its
1-sigma standard error from the per-station noise and the registration spread:

    SE^2 = sum_j n_j sigma_j^2 / n^2  +  sigma_reg^2 sum_j (n_j / n)^2

(j = stations in the bin): points of one station share its registration error,
so a bin seen by one station cannot beat sigma_reg however many points it has. Station vertical offsets
(registration) come from the profile stage (bins seen by more than one station,
z = mu_bin + offset_station, offsets summing to zero); their spread, less its
estimation noise, is ``registration_sigma``.
"""
from __future__ import annotations

import dataclasses
import logging
import warnings
from dataclasses import dataclass, field
from typing import Optional

import numpy as np
from scipy import stats

from ..config import NoiseConfig
from .junction import Junction
from .profile import Profile

log = logging.getLogger(__name__)


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


def truncation_factor(k: float) -> float:
    """Variance of a unit normal truncated to |x| <= k (rejection at k sigma shrinks the variance by this)."""
    if not np.isfinite(k):
        return 1.0
    return float(1 - 2 * k * stats.norm.pdf(k) / (2 * stats.norm.cdf(k) - 1))


def _chi2_estimate(ss, dof, n, conf, trunc=1.0):
    if dof <= 0:
        return None
    ss = ss / trunc
    s2 = ss / dof
    a = (1 - conf) / 2
    lo = np.sqrt(ss / stats.chi2.ppf(1 - a, dof))
    hi = np.sqrt(ss / stats.chi2.ppf(a, dof))
    return Estimate(sigma=float(np.sqrt(s2)), ci=(float(lo), float(hi)), dof=int(dof), n_points=int(n))


def _within(z, b, s, mask, conf, trunc=1.0):
    z, b, s = z[mask], b[mask], s[mask]
    if len(z) == 0:
        return None
    key = b.astype(np.int64) * 100000 + s.astype(np.int64)
    _, inv, counts = np.unique(key, return_inverse=True, return_counts=True)
    sums = np.bincount(inv, weights=z)
    means = sums / counts
    r = z - means[inv]
    ss = float((r ** 2).sum())
    dof = int((counts - 1).sum())
    return _chi2_estimate(ss, dof, len(z), conf, trunc)


def _pairs(az, z, conf, max_gap, trunc=1.0):
    if len(z) < 4:
        return None
    o = np.argsort(az)
    a, zz = az[o], z[o]
    m = len(zz) // 2
    d = zz[1:2 * m:2] - zz[0:2 * m:2]
    gap = a[1:2 * m:2] - a[0:2 * m:2]
    ok = gap < max_gap
    d = d[ok]
    if len(d) < 2:
        return None
    return _chi2_estimate(float((d ** 2).sum()) / 2.0, len(d), 2 * len(d), conf, trunc)


def estimate_noise(p: Profile, j: Junction, cfg: NoiseConfig, reject_k: float = np.inf) -> NoiseEstimate:
    """``reject_k``: the profile's rejection threshold in robust sigmas; the estimates are corrected for it."""
    kept = p.kept
    b, s, az = p.bin_index, j.station, j.azimuth_deg
    # remove the profile's local slope so the truth's own variation within a bin is not taken for noise
    z = j.z
    if p.slope_per_deg is not None:
        daz = np.degrees(np.angle(np.exp(1j * np.radians(az - p.azimuth_deg[b]))))
        z = j.z - p.slope_per_deg[b] * daz
    conf = cfg.confidence
    tf = truncation_factor(reject_k)
    within = _within(z, b, s, kept, conf, tf)
    if within is None:
        within = Estimate(float("nan"), (float("nan"), float("nan")), 0, 0)
    # pairs per station, pooled
    ss_pairs, dof_pairs, n_pairs = 0.0, 0, 0
    per_station = []
    offsets = p.station_offset
    # an offset is a difference of the station's points from bin means that are themselves estimated
    offset_se = {k: within.sigma * np.sqrt(2.0 / max(n, 1)) for k, n in p.station_offset_n.items()}
    for st in np.unique(s[kept]):
        m = kept & (s == st)
        w_est = _within(z, b, s, m, conf, tf)
        p_est = _pairs(az[m], z[m], conf, cfg.pair_max_gap_deg, tf)
        if p_est is not None:
            ss_pairs += p_est.sigma ** 2 * p_est.dof
            dof_pairs += p_est.dof
            n_pairs += p_est.n_points
        per_station.append(StationNoise(int(st), w_est, p_est, float(offsets.get(int(st), 0.0)),
                                        float(offset_se.get(int(st), 0.0))))
    pairs = _chi2_estimate(ss_pairs * tf, dof_pairs, n_pairs, conf, tf) if dof_pairs else None
    p_val, agree = None, True
    if pairs is not None and within.dof > 0:
        f = within.sigma ** 2 / pairs.sigma ** 2
        p_val = float(2 * min(stats.f.cdf(f, within.dof, pairs.dof), stats.f.sf(f, within.dof, pairs.dof)))
        agree = not (p_val < cfg.agreement_p and abs(within.sigma / pairs.sigma - 1) > cfg.agreement_ratio)
    reg = 0.0
    if len(offsets) >= 2:
        o = np.array(list(offsets.values()))
        e = np.array(list(offset_se.values()))
        reg = float(np.sqrt(max(0.0, (o ** 2).sum() / (len(o) - 1) - np.mean(e ** 2))))
    resid_reg = _residual_registration(z, b, s, kept, offsets, within.sigma)
    datum = reg / np.sqrt(len(offsets)) if len(offsets) >= 2 else 0.0
    log.debug("noise: sigma %.2f mm [%.2f, %.2f] within-bin, %s pairs; registration spread %.2f mm",
             within.sigma * 1e3, within.ci[0] * 1e3, within.ci[1] * 1e3,
             f"{pairs.sigma * 1e3:.2f} mm" if pairs else "no", reg * 1e3)
    return NoiseEstimate(sigma=within.sigma, ci=within.ci, confidence=conf, within_bin=within, pairs=pairs,
                         agreement_p=p_val, agree=agree, registration_sigma=reg, stations=tuple(per_station),
                         registration_residual_sigma=resid_reg, datum_sigma=float(datum), offset_se=offset_se)


def _residual_registration(z, b, s, kept, offsets, sigma):
    """Spread of (bin, station) cell means about bin mean + station offset, beyond what the noise explains."""
    if not offsets:
        return 0.0
    zk, bk, sk = z[kept], b[kept], s[kept]
    ids = np.array(sorted(offsets))
    off = np.array([offsets[i] for i in ids])
    pos = np.clip(np.searchsorted(ids, sk), 0, len(ids) - 1)
    zc = zk - np.where(ids[pos] == sk, off[pos], 0.0)
    key = bk.astype(np.int64) * 100000 + sk.astype(np.int64)
    uk, inv, cnt = np.unique(key, return_inverse=True, return_counts=True)
    cell_mean = np.bincount(inv, weights=zc) / cnt
    cell_bin = uk // 100000
    nst = np.bincount(np.unique(cell_bin, return_inverse=True)[1])
    ub, binv = np.unique(cell_bin, return_inverse=True)
    shared = nst[binv] > 1
    if shared.sum() < 6:
        return 0.0
    # per shared bin, deviation of each cell from the unweighted mean of its bin's cells
    bm = np.bincount(binv[shared], weights=cell_mean[shared]) / np.maximum(np.bincount(binv[shared]), 1)
    dev = cell_mean[shared] - bm[binv[shared]]
    k = nst[binv[shared]]
    expected = sigma ** 2 / cnt[shared] * (k - 1) / k
    v = np.mean(dev ** 2 * k / (k - 1) - expected * k / (k - 1))
    return float(np.sqrt(max(v, 0.0)))


def attach_uncertainty(p: Profile, j: Junction, noise: NoiseEstimate, k_sigma: float = 3.0) -> Profile:
    """Standard error per bin from per-station noise and the registration spread; flags isolated bins."""
    sig = {s.station: (s.within_bin.sigma if s.within_bin is not None else noise.sigma) for s in noise.stations}
    nb = len(p.azimuth_deg)
    se = np.full(nb, np.nan)
    neff = np.full(nb, np.nan)
    kb = p.bin_index[p.kept]
    ks = j.station[p.kept]
    for k in np.nonzero(p.n_points > 0)[0]:
        st = ks[kb == k]
        ids, counts = np.unique(st, return_counts=True)
        n = counts.sum()
        var = sum(c * sig.get(int(i), noise.sigma) ** 2 for i, c in zip(ids, counts)) / n ** 2
        w2 = (counts / n) ** 2
        if p.leveled:
            # offsets were removed: what remains is their estimation error and the registration error
            # they cannot remove (rotations make it vary along the ring)
            oe = np.array([noise.offset_se.get(int(i), noise.registration_sigma) for i in ids])
            var += float((w2 * (oe ** 2 + noise.registration_residual_sigma ** 2)).sum())
        else:
            var += noise.registration_sigma ** 2 * float(w2.sum())
        se[k] = np.sqrt(var)
        neff[k] = noise.sigma ** 2 / var if var > 0 else n
    status = _flag_isolated(p.elevation, se, p.status.copy(), k_sigma)
    cov = float((status == "ok").mean())
    return dataclasses.replace(p, std_error=se, n_eff=neff, status=status, coverage=cov)


def _flag_isolated(el, se, status, k_sigma):
    """Mark 'suspect' an ok bin that sits apart from both neighbours on each side by more than k combined SE.

    A bottom plate cannot step by several sigma within one bin and back: such a bin holds contaminated
    points (an occluded arc where only mixed pixels or foundation points remain).
    """
    n = len(el)
    if n < 5:
        return status
    idx = np.arange(n)
    nb = np.stack([np.roll(el, s) for s in (2, 1, -1, -2)])
    nse = np.stack([np.roll(se, s) for s in (2, 1, -1, -2)])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-nan neighbourhoods inside gaps
        med = np.nanmedian(nb, axis=0)
        nse_med = np.nanmedian(nse, axis=0)
    with np.errstate(invalid="ignore"):
        dev = np.abs(el - med) / np.sqrt(se ** 2 + nse_med ** 2)
        left = np.abs(el - np.roll(el, 1)) / np.sqrt(se ** 2 + np.roll(se, 1) ** 2)
        right = np.abs(el - np.roll(el, -1)) / np.sqrt(se ** 2 + np.roll(se, -1) ** 2)
    bad = (status == "ok") & np.isfinite(dev) & (dev > k_sigma) & (np.nan_to_num(left, nan=np.inf) > k_sigma) & \
          (np.nan_to_num(right, nan=np.inf) > k_sigma)
    status[idx[bad]] = "suspect"
    return status
