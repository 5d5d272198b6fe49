"""Tilt plane against statsmodels OLS and the exact p-value of 2 numerator degrees of freedom
(check values derived in the shared domain notes, section 5)."""
import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from chimeline.evaluate.tilt import fit_tilt


def test_tilt_fit_matches_statsmodels_ols():
    rng = np.random.default_rng(1)
    az = np.sort(rng.uniform(0, 360, 24))
    th = np.radians(az)
    z = 0.3 + 0.02 * np.cos(th) - 0.011 * np.sin(th) + 0.004 * np.cos(3 * th) + rng.normal(0, 0.002, 24)
    t = fit_tilt(az, z)
    ref = sm.OLS(z, np.column_stack([np.ones(24), np.cos(th), np.sin(th)])).fit()
    np.testing.assert_allclose([t.a, t.b, t.c], ref.params, rtol=1e-9)
    assert t.r_squared == pytest.approx(ref.rsquared, rel=1e-9)
    assert t.f_test.statistic == pytest.approx(ref.fvalue, rel=1e-9)
    assert t.f_test.p_value == pytest.approx(ref.f_pvalue, rel=1e-9)
    # low point of a + b cos + c sin is at atan2(c, b) + 180 deg
    grid = np.arange(0, 360, 0.01)
    zz = t.b * np.cos(np.radians(grid)) + t.c * np.sin(np.radians(grid))
    assert t.low_azimuth_deg == pytest.approx(grid[np.argmin(zz)], abs=0.01)


def _tilt_with_r2(n, r2, seed=0):
    """Equally spaced survey whose cosine fit has exactly ``r2``: residuals orthogonal to the fit, scaled."""
    th = np.linspace(0, 2 * np.pi, n, endpoint=False)
    e = np.random.default_rng(seed).normal(size=n)
    X = np.column_stack([np.ones(n), np.cos(th), np.sin(th)])
    e = e - X @ np.linalg.lstsq(X, e, rcond=None)[0]
    e *= math.sqrt((1 - r2) / r2 * (0.0001 * n / 2) / (e @ e))  # SSE = SSR (1 - R^2) / R^2
    return fit_tilt(np.degrees(th), 0.01 * np.cos(th) + e)


def test_decisions_agree_with_scipy_quantiles():
    """p <= alpha exactly when F >= F_(1-alpha)(2, N-3) (scipy.stats quantile)."""
    for n, r2 in [(8, 0.69), (8, 0.71), (12, 0.48), (12, 0.50), (24, 0.24), (24, 0.26)]:
        t = _tilt_with_r2(n, r2, seed=n)
        assert t.r_squared == pytest.approx(r2, rel=1e-6)
        crit = stats.f.ppf(0.95, 2, n - 3)
        assert t.f_test.reject == (t.f_test.statistic >= crit)


@pytest.mark.parametrize("n,r2_at_005", [(8, 0.70), (12, 0.49), (24, 0.25)])
def test_r2_that_gives_p_005(n, r2_at_005):
    """Derived check values: the fit with R^2 = 1 - 0.05^(2/(N-3)) has p = 0.05, and that R^2 is 0.70, 0.49, 0.25."""
    t = _tilt_with_r2(n, 1 - 0.05 ** (2 / (n - 3)))
    assert t.r_squared == pytest.approx(r2_at_005, abs=0.005)
    assert t.f_test.p_value == pytest.approx(0.05, rel=1e-6)
    assert t.f_test.p_value == pytest.approx((1 - t.r_squared) ** ((n - 3) / 2), rel=1e-9)


def test_r2_09_at_n8_gives_p_3e3():
    t = _tilt_with_r2(8, 0.9)
    assert t.f_test.p_value == pytest.approx(3.2e-3, rel=0.02)
    assert t.f_test.p_value == pytest.approx(0.1 ** 2.5, rel=1e-9)
    assert t.r2_rule_met and t.significant


def test_constant_survey_has_no_tilt():
    t = fit_tilt(np.arange(0, 360, 30.0), np.full(12, 3.0))
    assert t.r_squared == 0.0 and t.f_test.p_value == 1.0 and not t.significant and t.amplitude < 1e-12
