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


def equivalence(s1, d1, s2, d2, margin: float, alpha: float = 0.05) -> dict:
    """Two one-sided F tests that sigma2 / sigma1 lies within [1 / (1 + margin), 1 + margin].

    ``equivalent`` means the noise levels do not differ by more than the margin at level ``alpha`` (p = the larger
    of the two one-sided p-values).
    """
    F = (s2 / s1) ** 2
    lo, hi = 1.0 / (1.0 + margin), 1.0 + margin
    p_lo = float(stats.f.sf(F / lo ** 2, d2, d1))  # H0: ratio <= lo
    p_hi = float(stats.f.cdf(F / hi ** 2, d2, d1))  # H0: ratio >= hi
    p = max(p_lo, p_hi)
    return {"margin": margin, "bounds": [lo, hi], "p_value": p, "equivalent": p <= alpha}


def noise_in_words(name_a, name_b, s1, s2, vr, eq, p_text) -> str:
    """The QA answer in one sentence (sigmas in m, said in mm)."""
    r, (lo, hi) = vr["sigma_ratio"], vr["ratio_ci95"]
    differs = vr["p_value"] <= eq.get("alpha", 0.05)
    head = (f"{name_b} is {100 * (r - 1):.0f} % noisier than {name_a}" if r >= 1 else
            f"{name_b} is {100 * (1 - r):.0f} % quieter than {name_a}")
    text = f"{head} (ratio {r:.2f}, 95 % CI {lo:.2f}-{hi:.2f}, {p_text(vr['p_value'])})"
    if differs:
        extra = math.sqrt(abs(s2 ** 2 - s1 ** 2)) * 1e3
        text += (f"; the added noise in quadrature is {extra:.2f} mm" if r >= 1 else
                 f"; {name_a} carries {extra:.2f} mm more noise in quadrature")
    elif eq["equivalent"]:
        text += f"; they do not differ by more than {100 * eq['margin']:.0f} % (equivalence test {p_text(eq['p_value'])})"
    else:
        text += (f"; the difference is not significant, but a difference of {100 * eq['margin']:.0f} % cannot be ruled "
                 f"out (equivalence test {p_text(eq['p_value'])})")
    return text


CONSISTENCY_NOTE = ("the consistency test asks whether the two profiles differ by more than their standard errors "
                    "allow once a constant offset is removed (chi-square of the bin differences about their weighted "
                    "mean); a small p means real shape change or errors larger than stated, p near 1 means the "
                    "differences are smaller than the standard errors predict (conservative standard errors)")
