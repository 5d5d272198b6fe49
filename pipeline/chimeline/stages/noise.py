"""Noise stage: per-point vertical measurement noise with a confidence interval (config section ``noise``).

Mixed pixels at the shell/plate crease and at the projection's outer edge lie a few mm off the plate, inside
any rejection threshold a contaminated robust scale allows, so the noise is measured where they are rare and
with an estimator they cannot inflate:

- interior: kept junction points in the middle half of the radial window (away from the crease and the edge),
  when it holds enough of them;
- truncated maximum likelihood: the fixed point sigma^2 = mean(r^2 | |r| < k sigma) / c(k), k = 2.5 (c(k) the
  variance of a unit normal truncated at +-k), started from 1.4826 MAD; a normal sample returns its sigma,
  broad tails of mixed returns beyond 2.5 sigma no longer count.

Two independent estimators that must agree:

- within-bin: leave-one-out residuals of points in their (bin, station) cell, scaled by sqrt((n-1)/n) so
  each has variance sigma^2; sum(n_c - 1) degrees of freedom, chi-square interval;
- pairs: non-overlapping pairs of consecutive junction points in the file (one scan line of one station when
  the file keeps its scans in order, which merged clouds without station ids usually still do) closer than
  ``pair_max_gap_deg`` in azimuth, else pairs of azimuth-neighbours of one station; d / sqrt(2).

Their agreement is an F test of equal variances; a third comparison, with the classical within-bin variance
of every kept point, measures the contamination by mixed pixels and is reported (``contamination``).

Quantisation: a file coordinate resolution q (the LAS scale) rounds every elevation. The measured scatter is
then g(sigma) = sigma^2 + q^2/12 - b^2(sigma), with b^2(sigma) = sum_k q^2 / (2 pi^2 k^2) exp(-4 pi^2 k^2
sigma^2 / q^2) the variance of the rounding error's mean given the true value (the Fourier series of the
saw-tooth rounding error; b^2 -> q^2/12 as sigma -> 0, -> 0 once sigma exceeds q/2). The scanner's sigma is
g^-1 of the measured variance, and every bin mean carries b^2 that no number of points averages away.

Registration: station vertical offsets come from the profile stage (bins seen by more than one station,
z = mu_bin + offset_station, offsets summing to zero); their spread, less its estimation noise, is
``registration_sigma``. Without station ids nothing can be levelled: the correlated error is estimated from
the excess of the within-bin scatter (out to 4 noise sigmas) over the point noise: stations that disagree widen
the bins they share; sigma_c^2 = 2 x the excess (``_correlated_sigma``).

``attach_uncertainty`` then gives each profile bin its 1-sigma standard error from the per-station noise and
the registration spread (``bin_variance``):

    SE^2 = sum_j n_j sigma_j^2 / n^2  +  sigma_reg^2 sum_j (n_j / n)^2  [+ sigma_c^2]  [+ b^2]

(j = stations in the bin): points of one station share its registration error, so a bin seen by one station
cannot beat sigma_reg however many points it has.
"""
from __future__ import annotations

import dataclasses
import logging
import warnings
from dataclasses import dataclass, field
from typing import Optional

import numpy as np
from scipy import optimize, stats

from ..config import NoiseConfig
from .junction import Junction
from .profile import Profile

log = logging.getLogger(__name__)

TRUNCATION_K = 2.5  # robust noise: truncated maximum likelihood at +- this many sigma
#: variance of the full-sample sigma over that of the truncated estimator on normal data (Monte Carlo, 3000
#: samples of 400: 0.654); the chi-square interval uses dof x this, so it keeps its coverage
TRUNCATED_EFFICIENCY = 0.65
MIN_DOF = 30  # an estimator with fewer degrees of freedom gives way to the other
CORRELATED_ALLOWANCE = 0.003  # m: the most station disagreement the noise-based rejection allows for
MIXTURE_K = 4.0  # without station ids: within-bin residuals beyond this many noise sigmas are not stations


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
    sigma: float  # m, adopted per-point vertical noise of the scanner (quantisation removed)
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
    adopted: str = "within_bin"  # which estimator gives sigma: within_bin or pairs
    classical_sigma: float = float("nan")  # m, plain within-bin estimate over every kept point (truncation-corrected)
    contamination: float = float("nan")  # classical over robust sigma: > 1 where mixed pixels inflate the scatter
    interior: bool = False  # the estimate used only the middle half of the radial window
    pairs_source: str = ""  # "file order" or "azimuth"
    station_ids: bool = True  # the scan carries station ids (else stations cannot be levelled)
    correlated_sigma: float = 0.0  # m, correlated (registration) error per bin estimated without station ids
    quantum: float = 0.0  # m, vertical coordinate resolution of the file (0: negligible or unknown)
    quantization_bias_sigma: float = 0.0  # m, the rounding error of a bin mean that averaging cannot remove


def truncation_factor(k: float) -> float:
    """Variance of a unit normal truncated to |x| <= k (rejection at k sigma shrinks the variance by this)."""
    if not np.isfinite(k):
        return 1.0
    return float(1 - 2 * k * stats.norm.pdf(k) / (2 * stats.norm.cdf(k) - 1))


def rounding_bias_var(sigma, q: float):
    """b^2: variance over the true value of the mean rounding error of N(mu, sigma^2) rounded to steps q."""
    sigma = np.asarray(sigma, dtype=float)
    if q <= 0:
        return np.zeros_like(sigma)
    k = np.arange(1, 60)[:, None]
    x = (2 * np.pi * sigma.reshape(1, -1) / q) ** 2
    out = (q ** 2 / (2 * np.pi ** 2 * k ** 2) * np.exp(-np.minimum(k ** 2 * x, 700))).sum(axis=0)
    return out.reshape(sigma.shape)


def quantized_var(sigma, q: float):
    """g(sigma): expected within-cell variance of values with noise sigma rounded to steps q."""
    sigma = np.asarray(sigma, dtype=float)
    if q <= 0:
        return sigma ** 2
    return sigma ** 2 + q ** 2 / 12 - rounding_bias_var(sigma, q)


def scanner_sigma(measured: float, q: float) -> float:
    """The noise sigma whose rounded values scatter with ``measured`` (g^-1); 0 below what rounding allows."""
    if q <= 0 or not np.isfinite(measured):
        return float(measured)
    target = measured ** 2
    if target <= quantized_var(0.0, q) + 1e-30:
        return 0.0
    hi = max(measured, q)
    while quantized_var(hi, q) < target:
        hi *= 2
    return float(optimize.brentq(lambda s: float(quantized_var(s, q)) - target, 0.0, hi, xtol=1e-12))


def _chi2_estimate(ss, dof, n, conf, trunc=1.0):
    if dof <= 0:
        return None
    ss = ss / trunc
    s2 = ss / dof
    a = (1 - conf) / 2
    lo = np.sqrt(ss / stats.chi2.ppf(1 - a, dof))
    hi = np.sqrt(ss / stats.chi2.ppf(a, dof))
    return Estimate(sigma=float(np.sqrt(s2)), ci=(float(lo), float(hi)), dof=int(dof), n_points=int(n))


def _truncated_ml(r, k=TRUNCATION_K):
    """(sigma, share inside +-k sigma): the fixed point of sigma^2 = mean(r^2 | |r| < k sigma) / c(k)."""
    r = np.asarray(r, dtype=float)
    if len(r) < 2:
        return float("nan"), 0.0
    s = 1.4826 * float(np.median(np.abs(r)))
    if s <= 0:
        s = float(np.sqrt(np.mean(r ** 2)))
    if s <= 0:
        return 0.0, 1.0
    c = truncation_factor(k)
    for _ in range(100):
        inside = np.abs(r) < k * s
        if inside.sum() < 2:
            break
        s_new = float(np.sqrt(np.mean(r[inside] ** 2) / c))
        if abs(s_new - s) <= 1e-9 * max(s, 1e-12):
            s = s_new
            break
        s = s_new
    return s, float((np.abs(r) < k * s).mean())


def _robust_estimate(r, dof, conf, q):
    """Truncated-ML sigma of residuals ``r`` (each of variance sigma^2) with a chi-square interval on the
    effective degrees of freedom (``TRUNCATED_EFFICIENCY`` x ``dof``); quantisation removed (g^-1)."""
    s, _share = _truncated_ml(r)
    if not np.isfinite(s):
        return None
    d = max(int(round(dof * TRUNCATED_EFFICIENCY)), 1)
    est = _chi2_estimate(s ** 2 * d, d, len(r), conf)
    return _unquantize(est, q)


def _unquantize(est, q):
    if est is None or q <= 0:
        return est
    return Estimate(sigma=scanner_sigma(est.sigma, q), ci=(scanner_sigma(est.ci[0], q), scanner_sigma(est.ci[1], q)),
                    dof=est.dof, n_points=est.n_points)


def _cells(b, s):
    key = b.astype(np.int64) * 100000 + s.astype(np.int64)
    _, inv, counts = np.unique(key, return_inverse=True, return_counts=True)
    return inv, counts


def _loo_residuals(z, b, s):
    """Leave-one-out residuals in (bin, station) cells of >= 2 points, each with variance sigma^2; and dof."""
    if len(z) == 0:
        return np.zeros(0), 0
    inv, counts = _cells(b, s)
    n = counts[inv]
    tot = np.bincount(inv, weights=z)[inv]
    m = n >= 2
    mu_other = (tot[m] - z[m]) / (n[m] - 1)
    r = (z[m] - mu_other) * np.sqrt((n[m] - 1) / n[m])
    return r, int((counts[counts >= 2] - 1).sum())


def _within(z, b, s, mask, conf, q, trunc=1.0, robust=True):
    z, b, s = z[mask], b[mask], s[mask]
    if len(z) == 0:
        return None
    if robust:
        r, dof = _loo_residuals(z, b, s)
        return _robust_estimate(r, dof, conf, q) if dof > 0 else None
    inv, counts = _cells(b, s)
    means = np.bincount(inv, weights=z) / counts
    ss = float(((z - means[inv]) ** 2).sum())
    return _unquantize(_chi2_estimate(ss, int((counts - 1).sum()), len(z), conf, trunc), q)


def _file_order_pairs(az, st, mask, max_gap):
    """Indices (i, i+1) of non-overlapping consecutive points (file order) of one station within ``max_gap``."""
    idx = np.nonzero(mask)[0]
    if len(idx) < 2:
        return np.zeros(0, int), np.zeros(0, int)
    a, b = idx[:-1], idx[1:]
    gap = np.abs(np.mod(az[b] - az[a] + 180.0, 360.0) - 180.0)
    ok = (st[a] == st[b]) & (gap < max_gap)
    first = np.nonzero(ok)[0]
    keep, last = [], -2
    for k in first:  # non-overlapping: a point belongs to one pair at most
        if k > last + 1:
            keep.append(k)
            last = k
    keep = np.asarray(keep, dtype=int)
    return a[keep], b[keep]


def _azimuth_pairs(az, z, max_gap):
    if len(z) < 4:
        return np.zeros(0)
    o = np.argsort(az, kind="stable")
    a, zz = az[o], z[o]
    m = len(zz) // 2
    d = zz[1:2 * m:2] - zz[0:2 * m:2]
    gap = a[1:2 * m:2] - a[0:2 * m:2]
    return d[gap < max_gap]


def _pairs(az, z, st, mask, conf, max_gap, q):
    """Robust pair estimate over ``mask`` and its source: file-order pairs when there are enough, else
    azimuth-neighbour pairs per station."""
    i, k = _file_order_pairs(az, st, mask, max_gap)
    if len(i) >= max(30, 0.1 * mask.sum()):
        d, source = z[k] - z[i], "file order"
    else:
        d = np.concatenate([_azimuth_pairs(az[mask & (st == s)], z[mask & (st == s)], max_gap)
                            for s in np.unique(st[mask])] or [np.zeros(0)])
        source = "azimuth"
    if len(d) < 2:
        return None, source
    return _robust_estimate(d / np.sqrt(2.0), len(d), conf, q), source


def _interior(j: Junction, kept) -> np.ndarray:
    """The middle half of the radial window, away from the crease and the outer edge, if it holds enough."""
    lo, hi = j.radial_window
    w = hi - lo
    m = kept & (j.radial >= lo + 0.25 * w) & (j.radial <= hi - 0.25 * w)
    return m if m.sum() >= max(200, 0.25 * kept.sum()) else kept


def estimate_noise(p: Profile, j: Junction, cfg: NoiseConfig, reject_k: float = np.inf, *,
                   quantum: float = 0.0, station_ids: bool = True) -> NoiseEstimate:
    """``reject_k``: the profile's rejection threshold in robust sigmas (the classical estimate is corrected
    for it); ``quantum``: the file's vertical coordinate resolution in m; ``station_ids``: whether the scan
    carries them (else the correlated error is estimated from the data)."""
    kept = p.kept
    b, s, az = p.bin_index, j.station, j.azimuth_deg
    # remove the profile's local slope so the truth's own variation within a bin is not taken for noise
    z = j.z
    if p.slope_per_deg is not None:
        daz = np.degrees(np.angle(np.exp(1j * np.radians(az - p.azimuth_deg[b]))))
        z = j.z - p.slope_per_deg[b] * daz
    conf = cfg.confidence
    q = float(quantum or 0.0)
    tf = truncation_factor(reject_k)
    inner = _interior(j, kept)
    within = _within(z, b, s, inner, conf, q)
    classical = _within(z, b, s, kept, conf, q, tf, robust=False)
    if within is None:
        within = Estimate(float("nan"), (float("nan"), float("nan")), 0, 0)
    pairs, pairs_source = _pairs(az, z, s, inner, conf, cfg.pair_max_gap_deg, q)
    per_station = []
    offsets = p.station_offset
    # an offset is a difference of the station's points from bin means that are themselves estimated
    offset_se = {k: within.sigma * np.sqrt(2.0 / max(n, 1)) for k, n in p.station_offset_n.items()}
    for st in np.unique(s[kept]):
        m = inner & (s == st)
        w_est = _within(z, b, s, m, conf, q)
        p_est, _ = _pairs(az, z, s, m, conf, cfg.pair_max_gap_deg, q)
        per_station.append(StationNoise(int(st), w_est, p_est, float(offsets.get(int(st), 0.0)),
                                        float(offset_se.get(int(st), 0.0))))
    p_val, agree = None, True
    if pairs is not None and within.dof > 0 and pairs.sigma > 0:
        f = within.sigma ** 2 / pairs.sigma ** 2
        p_val = float(2 * min(stats.f.cdf(f, within.dof, pairs.dof), stats.f.sf(f, within.dof, pairs.dof)))
    # without station ids the within-bin scatter also holds the stations' disagreement: the pairs (one scan
    # line) measure the noise, and the excess is the correlated error
    adopted, est = "within_bin", within
    corr = 0.0
    if not station_ids and pairs is not None and pairs_source == "file order":
        adopted, est = "pairs", pairs
        corr = _correlated_sigma(z, b, inner, pairs.sigma, q)
    elif pairs is not None and within.dof < MIN_DOF <= pairs.dof:
        adopted, est = "pairs", pairs  # bins too thin to hold two points: the pairs carry the estimate
    elif p_val is not None:
        agree = not (p_val < cfg.agreement_p and abs(within.sigma / pairs.sigma - 1) > cfg.agreement_ratio)
    reg = 0.0
    if len(offsets) >= 2:
        o = np.array(list(offsets.values()))
        e = np.array(list(offset_se.values()))
        reg = float(np.sqrt(max(0.0, (o ** 2).sum() / (len(o) - 1) - np.mean(e ** 2))))
    resid_reg = _residual_registration(z, b, s, kept, offsets, est.sigma)
    datum = reg / np.sqrt(len(offsets)) if len(offsets) >= 2 else 0.0
    contamination = classical.sigma / est.sigma if classical is not None and est.sigma > 0 else float("nan")
    bias_q = float(np.sqrt(rounding_bias_var(est.sigma, q))) if q > 0 else 0.0
    log.debug("noise: sigma %.2f mm [%.2f, %.2f] (%s), within-bin %.2f mm, pairs %s; classical %.2f mm; "
             "registration spread %.2f mm%s", est.sigma * 1e3, est.ci[0] * 1e3, est.ci[1] * 1e3, adopted,
             within.sigma * 1e3, f"{pairs.sigma * 1e3:.2f} mm ({pairs_source})" if pairs else "no",
             classical.sigma * 1e3 if classical else float("nan"), reg * 1e3,
             f"; correlated error without station ids {corr * 1e3:.2f} mm" if not station_ids else "")
    method = ("robust: truncated maximum likelihood at 2.5 sigma on the middle half of the radial window"
              if inner is not kept else "robust: truncated maximum likelihood at 2.5 sigma") + \
             f"; within-bin (bin x station) leave-one-out residuals; pairs of consecutive points ({pairs_source})"
    return NoiseEstimate(sigma=est.sigma, ci=est.ci, confidence=conf, within_bin=within, pairs=pairs,
                         agreement_p=p_val, agree=agree, registration_sigma=reg, stations=tuple(per_station),
                         registration_residual_sigma=resid_reg, datum_sigma=float(datum), offset_se=offset_se,
                         method=method, adopted=adopted,
                         classical_sigma=classical.sigma if classical else float("nan"),
                         contamination=float(contamination), interior=inner is not kept, pairs_source=pairs_source,
                         station_ids=station_ids, correlated_sigma=float(corr), quantum=q,
                         quantization_bias_sigma=bias_q)


def _correlated_sigma(z, b, mask, sigma, q):
    """sigma_c without station ids: stations whose offsets differ by Delta widen the bins they share by
    w (1 - w) Delta^2. The within-bin scatter (leave-one-out residuals, every station in one cell) is taken out
    to ``MIXTURE_K`` x the noise, wide enough to keep stations a few mm apart and to drop returns far off the
    plate; its excess over the noise, v, gives sigma_c^2 = 2 v (the mean squared offset error of a bin over the
    mean within-bin spread when the stations' weights cross-fade linearly between neighbours)."""
    r, _dof = _loo_residuals(z[mask], b[mask], np.zeros(int(mask.sum()), dtype=np.int64))
    if len(r) < 10:
        return 0.0
    g = float(quantized_var(sigma, q))
    r = r[np.abs(r) < MIXTURE_K * np.sqrt(g)]
    return float(np.sqrt(max(2.0 * (np.mean(r ** 2) - g), 0.0))) if len(r) else 0.0


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


def station_sigmas(noise: NoiseEstimate) -> dict:
    """Station id -> m, the per-point noise used for its points' standard errors."""
    if noise.adopted != "within_bin":
        return {st.station: noise.sigma for st in noise.stations}
    return {st.station: (st.within_bin.sigma if st.within_bin is not None and np.isfinite(st.within_bin.sigma)
                         else noise.sigma) for st in noise.stations}


def point_scale(j: Junction, noise: NoiseEstimate) -> np.ndarray:
    """(n,) m: the scatter of each junction candidate about its bin's location: its station's noise (with the
    dithered rounding) and, without station ids, the stations' disagreement."""
    sig = station_sigmas(noise)
    ids = np.unique(j.station)
    # the stations' disagreement is allowed for up to what registration can do (1-3 mm, common practice): more
    # within-bin scatter than that is returns off the plate, which the rejection must not keep
    corr = min(noise.correlated_sigma, CORRELATED_ALLOWANCE)
    per = {int(i): float(np.sqrt(quantized_var(sig.get(int(i), noise.sigma), noise.quantum) + corr ** 2))
           for i in ids}
    lookup = np.array([per[int(i)] for i in ids])
    return lookup[np.searchsorted(ids, j.station)]


def bin_variance(ids, counts, noise: NoiseEstimate, leveled: bool, sig: dict) -> tuple[float, float]:
    """SE^2 of a mean of ``counts`` points of stations ``ids``, as (random, systematic): the noise (with the
    dithered rounding), and the registration terms, the correlated error without station ids and the rounding
    bias of the mean (what more points of the same stations do not reduce)."""
    counts = np.asarray(counts, dtype=float)
    n = counts.sum()
    q = noise.quantum
    rand = sum(c * float(quantized_var(sig.get(int(i), noise.sigma), q)) for i, c in zip(ids, counts)) / n ** 2
    w2 = (counts / n) ** 2
    if leveled:
        # offsets were removed: what remains is their estimation error and the registration error
        # they cannot remove (rotations make it vary along the ring)
        oe = np.array([noise.offset_se.get(int(i), noise.registration_sigma) for i in ids])
        syst = float((w2 * (oe ** 2 + noise.registration_residual_sigma ** 2)).sum())
    else:
        syst = noise.registration_sigma ** 2 * float(w2.sum())
    return float(rand), float(syst + noise.correlated_sigma ** 2 + noise.quantization_bias_sigma ** 2)


def attach_uncertainty(p: Profile, j: Junction, noise: NoiseEstimate, k_sigma: float = 3.0) -> Profile:
    """Standard error per bin from per-station noise and the registration spread; flags isolated bins."""
    sig = station_sigmas(noise)
    nb = len(p.azimuth_deg)
    se = np.full(nb, np.nan)
    neff = np.full(nb, np.nan)
    kb = p.bin_index[p.kept]
    ks = j.station[p.kept]
    for k in np.nonzero(p.n_points > 0)[0]:
        ids, counts = np.unique(ks[kb == k], return_counts=True)
        var = sum(bin_variance(ids, counts, noise, p.leveled, sig))
        se[k] = np.sqrt(var)
        neff[k] = noise.sigma ** 2 / var if var > 0 else counts.sum()
    status = flag_isolated(p.elevation, se, p.status.copy(), k_sigma)
    cov = float((status == "ok").mean())
    return dataclasses.replace(p, std_error=se, n_eff=neff, status=status, coverage=cov)


def flag_isolated(el, se, status, k_sigma):
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
