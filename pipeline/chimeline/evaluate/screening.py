"""Screening flags for dense profiles: they inform and never set the overall verdict.

- curvature at the deflection spacing: the Fourier model's out-of-plane modes smoothed at the spacing L of the
  standard's deflection check (the second difference at L, -2 S_L / L^2), against 11 Y / (E H), with a
  simultaneous (max-t) 95 % band from the HAC covariance. The beam idealisation behind the curvature form holds
  for settlement that varies slowly against the spacing; shorter features are local dips.
- local dips shorter than the deflection spacing, found in the data: the residual below the long-wave model
  (wavelengths >= 2 L), smoothed over ``dip_min_length``, beyond a threshold that is simultaneous over the
  circumference for the residual's own (correlated) noise; its length is where it lies below half that
  threshold. A dip is compared with S_max at half its length (its centre against its ends); a shell bridges dips shorter than its height, so this is a local-support question
  for the engineer (a rigorous analysis), not a code exceedance.
"""
from __future__ import annotations

import numpy as np

from ..core.circular import angle_diff_deg, run_ranges, true_runs
from ..core.robust import mad_sigma
from .deflection import allowable
from .fourier import autocorrelation, design
from .results import LocalDip


def _segments(az, step):
    """Runs of contiguous bins (index arrays in ring order) and whether the data close the ring."""
    n = len(az)
    gap_after = np.abs(angle_diff_deg(np.roll(az, -1), az)) > 1.5 * step
    if not gap_after.any():
        return [np.arange(n)], True
    start = (int(np.nonzero(gap_after)[0][0]) + 1) % n
    order = (start + np.arange(n)) % n
    cuts = np.nonzero(gap_after[order])[0]
    segs, a = [], 0
    for c in cuts:
        segs.append(order[a:c + 1])
        a = c + 1
    return [sg for sg in segs if len(sg)], False


def _running_mean(vals, nw, ring):
    if ring:
        ext = np.concatenate([vals[-nw:], vals, vals[:nw]])
        return np.convolve(ext, np.ones(nw) / nw, mode="same")[nw:-nw]
    out = np.full(len(vals), np.nan)
    if len(vals) >= nw:
        v = np.convolve(vals, np.ones(nw) / nw, mode="valid")
        out[(nw - 1) // 2:(nw - 1) // 2 + len(v)] = v
    return out


def _ar_fit(r, order):
    """Yule-Walker AR(order) coefficients of a series (winsorised at 4 robust sigmas)."""
    s = mad_sigma(r) or float(np.std(r)) or 1.0
    x = np.clip(r - np.median(r), -4 * s, 4 * s)
    acf = autocorrelation(x, order)
    if len(acf) <= order:
        return np.zeros(0)
    T = np.array([[acf[abs(i - j)] for j in range(order)] for i in range(order)])
    try:
        return np.linalg.solve(T + 1e-9 * np.eye(order), acf[1:order + 1])
    except np.linalg.LinAlgError:
        return np.zeros(0)


def _null_quantile(r, nw, ring, segs, n, alpha, rng, draws=300, order=5):
    """The 1 - alpha quantile of -min(smoothed series) / MAD(smoothed series) for noise with the residuals' own
    autocorrelation (an AR(order) fit), simulated on the same segments with the same running mean: the depth
    threshold in robust sigmas, simultaneous over the circumference."""
    phi = _ar_fit(r, order)
    burn = 50
    e = rng.standard_normal((draws, n + burn))
    x = np.zeros_like(e)
    for t in range(e.shape[1]):
        acc = e[:, t].copy()
        for j, ph in enumerate(phi, start=1):
            if t - j >= 0:
                acc += ph * x[:, t - j]
        x[:, t] = acc
    x = x[:, burn:]
    stat = np.empty(draws)
    for i in range(draws):
        sm = np.full(n, np.nan)
        for sg in segs:
            sm[sg] = _running_mean(x[i, sg], nw, ring)
        ok = np.isfinite(sm)
        sig = mad_sigma(sm[ok])
        stat[i] = -np.min(sm[ok]) / sig if sig > 0 else 0.0
    return float(np.quantile(stat, 1 - alpha)), phi


def local_dips(az_deg, z, w, radius, spacing, min_length, Y, E, H, alpha=0.05, rng=None):
    """(dips, judged share of the circumference, notes) for a dense profile; ``w`` are the fit weights;
    ``rng`` draws the simulation that sets the depth threshold."""
    az = np.asarray(az_deg, dtype=float)
    z = np.asarray(z, dtype=float)
    n = len(z)
    if n < 20:
        return (), 0.0, ("too few bins for local dips",)
    step = float(np.median(np.diff(az)))
    k_long = max(1, min(int(np.floor(np.pi * radius / spacing)), (n - 2) // 2))
    X = design(np.radians(az), k_long)
    sw = np.sqrt(w)
    nw = max(1, int(round(np.degrees(min_length / radius) / step)))
    segs, ring = _segments(az, step)
    use = np.ones(n, bool)
    q = phi = None
    candidates = None  # bins beyond the threshold in the first pass (the calibrated test)
    for _ in range(3):  # the long-wave baseline is refitted without the dips it found (robust baseline)
        coef, *_ = np.linalg.lstsq(X[use] * sw[use, None], z[use] * sw[use], rcond=None)
        r = z - X @ coef
        sm = np.full(n, np.nan)
        for sg in segs:
            sm[sg] = _running_mean(r[sg], nw, ring)
        ok = np.isfinite(sm)
        if ok.sum() < 20:
            return (), float(ok.sum() * step / 360.0), ("too few contiguous bins for local dips",)
        sigma = mad_sigma(sm[ok])
        if q is None:  # calibrated once, on the residuals of the first baseline
            q, phi = _null_quantile(r, nw, ring, segs, n, alpha, rng if rng is not None else np.random.default_rng(0))
        thr = q * sigma
        if candidates is None:
            candidates = ok & (sm < -thr)
        new_use = ~(ok & (sm < -thr))
        # widen each excluded run to where the residual returns above zero
        for a, b in true_runs(~new_use):
            idx = np.arange(a, b) % n
            lo, hi = idx[0], idx[-1]
            while ok[(lo - 1) % n] and sm[(lo - 1) % n] < 0 and not (~new_use)[(lo - 1) % n]:
                lo -= 1
                new_use[lo % n] = False
            while ok[(hi + 1) % n] and sm[(hi + 1) % n] < 0 and not (~new_use)[(hi + 1) % n]:
                hi += 1
                new_use[hi % n] = False
        if np.array_equal(new_use, use) or new_use.sum() < X.shape[1] + 10:
            break
        use = new_use
    judged = float(ok.sum() * step / 360.0)
    out = {}
    for sg in segs:
        v = sm[sg]
        # a dip must have been beyond the threshold in the first (calibrated) pass; the refitted baseline only
        # measures it without the bias of the dip itself
        deep = np.isfinite(v) & (v < -thr) & candidates[sg]
        for a, b in true_runs(deep) if ring else _linear_runs(deep):
            core = np.arange(a, b) % len(sg)
            k = int(core[np.argmin(v[core])])
            lo = hi = k
            m = len(sg)
            edge = -0.5 * thr  # the dip's extent: where it lies below half the threshold
            while (ring or lo > 0) and np.isfinite(v[(lo - 1) % m]) and v[(lo - 1) % m] < edge and k - lo < m:
                lo -= 1
            while (ring or hi < m - 1) and np.isfinite(v[(hi + 1) % m]) and v[(hi + 1) % m] < edge and hi - k < m:
                hi += 1
            length = float(np.radians((hi - lo + 1) * step) * radius)
            if length < min_length or length >= spacing:
                continue
            d = float(-v[k])
            allow = float(allowable(length / 2.0, Y, E, H))
            dip = LocalDip(start_deg=float(az[sg[lo % m]]), end_deg=float(az[sg[hi % m]]), length=length, depth=d,
                           deepest_deg=float(az[sg[k]]), depth_sd=float(sigma), threshold=float(thr),
                           allowable=allow, ratio=d / allow)
            out[(dip.start_deg, dip.end_deg)] = dip
    notes = (f"long-wave model K = {k_long} (wavelengths >= 2 x {spacing:.2f} m); residual smoothed over {nw} "
             f"bin(s) ({min_length:g} m); depth threshold {thr * 1e3:.2f} mm = {q:.2f} x {sigma * 1e3:.2f} mm "
             f"(robust sigma), simultaneous over the circumference at alpha = {alpha} for noise with the residuals' "
             f"own autocorrelation (AR({len(phi)}) simulation)",)
    return tuple(sorted(out.values(), key=lambda d: -d.ratio)), judged, notes


def _linear_runs(flag):
    """Runs of true entries of a linear boolean array as (first, one-past-last)."""
    f = np.concatenate([[False], np.asarray(flag, bool), [False]])
    d = np.diff(f.astype(int))
    return list(zip(np.nonzero(d == 1)[0], np.nonzero(d == -1)[0]))


def dip_ranges(dips) -> tuple:
    return tuple((d.start_deg, d.end_deg) for d in dips)


def flag_ranges(az, flag) -> tuple:
    return run_ranges(az, flag)
