"""Tilt plane: the single cosine fit, its R^2 (what the standard asks) and its F test (what statistics asks).

z = a + b cos(theta) + c sin(theta) by ordinary least squares (statsmodels OLS); amplitude sqrt(b^2 + c^2);
the plane is lowest at theta = atan2(c, b) + 180 deg. F = (R^2 / 2) / ((1 - R^2) / (N - 3)) on 2 and N - 3
degrees of freedom; for 2 numerator degrees of freedom p = (1 - R^2)^((N - 3) / 2) exactly.
"""
from __future__ import annotations

import numpy as np

from .results import TestResult, TiltFit


def fit_tilt(theta_deg, z, *, alpha=0.05, r2_min=0.9, rule="p_value") -> TiltFit:
    import statsmodels.api as sm

    th = np.radians(np.asarray(theta_deg, dtype=float))
    z = np.asarray(z, dtype=float)
    n = len(z)
    X = np.column_stack([np.ones(n), np.cos(th), np.sin(th)])
    res = sm.OLS(z, X).fit()
    sst = float(res.centered_tss)
    df2 = n - 3
    if sst <= 0:  # constant data: nothing is explained
        r2, f, p = 0.0, 0.0, 1.0
    else:
        r2 = float(res.rsquared)
        if r2 >= 1.0:
            f, p = float("inf"), 0.0
        else:
            f, p = float(res.fvalue), float(res.f_pvalue)
    test = TestResult("cosine fit overall F test", float(f), p, (2, df2), p <= alpha)
    a, b, c = (float(v) for v in res.params)
    amp = float(np.hypot(b, c))
    low = float(np.mod(np.degrees(np.arctan2(c, b)) + 180.0, 360.0))
    r2_ok = r2 >= r2_min
    sig = test.reject if rule == "p_value" else r2_ok
    return TiltFit(a=a, b=b, c=c, amplitude=amp, low_azimuth_deg=low, r_squared=float(r2), f_test=test,
                   r2_rule_met=bool(r2_ok), significant=bool(sig), decided_by=rule, n=n)
