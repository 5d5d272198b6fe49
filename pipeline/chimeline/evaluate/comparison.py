"""Comparison of two runs (scanner setups, or survey dates): noise variance ratio and profile difference.

Noise: the F ratio of the noise variances with its two-sided p-value and an interval for the sigma ratio;
a Brown-Forsythe test (Levene's test about the median, scipy.stats) on the kept residuals. Profiles are
compared on the azimuths both have: the difference with its standard error (the datum uncertainties of both
scans add to the mean difference) and a chi-square consistency test of the point-to-point differences.
"""
from __future__ import annotations

import math

import numpy as np
from scipy import stats

from ..core.circular import interp_periodic, near_sample


def variance_ratio(s1, d1, s2, d2, conf=0.95):
    """F = s2^2 / s1^2 on (d2, d1) degrees of freedom: two-sided p and an interval for s2 / s1."""
    F = (s2 / s1) ** 2
    p = float(2 * min(stats.f.cdf(F, d2, d1), stats.f.sf(F, d2, d1)))
    a = (1 - conf) / 2
    lo = math.sqrt(F / stats.f.ppf(1 - a, d2, d1))
    hi = math.sqrt(F / stats.f.ppf(a, d2, d1))
    return {"sigma_ratio": s2 / s1, "F": F, "df": [d2, d1], "p_value": p, "ratio_ci95": [lo, hi]}


def brown_forsythe(resid_a, resid_b) -> dict:
    bf = stats.levene(resid_a, resid_b, center="median")
    return {"statistic": float(bf.statistic), "p_value": float(bf.pvalue)}


def profile_difference(az_a, el_a, se_a, ok_a, datum_a, az_b, el_b, se_b, ok_b, datum_b) -> dict:
    """b minus a on a's bin centres where both are ok (b interpolated if its bins differ); lengths in m."""
    okb = ok_b & np.isfinite(el_b)
    eb = interp_periodic(az_a, az_b[okb], el_b[okb])
    sb = interp_periodic(az_a, az_b[okb], se_b[okb])
    step = np.median(np.diff(az_b))
    near = near_sample(az_a, az_b[okb], 1.01 * step)
    m = ok_a & np.isfinite(el_a) & near
    d = eb[m] - el_a[m]
    sd = np.sqrt(se_a[m] ** 2 + sb[m] ** 2)
    if len(d) < 3:
        return {"n_common": int(len(d))}
    w = 1 / sd ** 2
    mean = float((w * d).sum() / w.sum())
    mean_se = float(math.sqrt(1 / w.sum() + datum_a ** 2 + datum_b ** 2))
    chi2 = float((((d - mean) / sd) ** 2).sum())
    dof = len(d) - 1
    return {"n_common": int(len(d)), "mean_difference": mean, "mean_difference_se": mean_se,
            "rms_difference": float(np.sqrt(np.mean((d - mean) ** 2))),
            "consistency_chi2": chi2, "consistency_dof": dof, "consistency_p": float(stats.chi2.sf(chi2, dof)),
            "azimuth_deg": az_a[m], "difference": d, "difference_sd": sd}
