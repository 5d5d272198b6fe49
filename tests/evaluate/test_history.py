"""Settlement history: the split of a profile difference into uniform, tilt and out-of-plane change, and the
extrapolated date with Fieller's interval (checked against its definition and by Monte Carlo coverage)."""
import math

import numpy as np
import pytest

from chimeline.core.robust import Z95
from chimeline.evaluate.comparison import profile_difference
from chimeline.evaluate.history import (amplitude_rate, date_after, extrapolate_ratio, fieller_interval,
                                        settlement_change, years_between)


def test_fieller_interval_is_the_set_its_definition_gives():
    """Fieller (1954), from memory: theta is inside iff (N - theta D)^2 <= z^2 (vN - 2 theta c + theta^2 vD).
    The endpoints meet it with equality, a grid agrees inside and out."""
    rng = np.random.default_rng(5)
    for _ in range(50):
        N, D = rng.uniform(0.1, 1.0), rng.uniform(0.05, 0.5)
        vN, vD = rng.uniform(1e-5, 1e-3), rng.uniform(1e-5, 5e-4)
        c = -rng.uniform(0, 1) * math.sqrt(vN * vD)
        ci = fieller_interval(N, D, vN, vD, c)
        if D ** 2 <= Z95 ** 2 * vD:
            assert ci is None
            continue
        g = lambda t: (N - t * D) ** 2 - Z95 ** 2 * (vN - 2 * t * c + t ** 2 * vD)  # noqa: E731
        lo, hi = ci
        assert lo <= N / D <= hi
        assert g(lo) == pytest.approx(0, abs=1e-12) and g(hi) == pytest.approx(0, abs=1e-12)
        grid = np.linspace(lo - (hi - lo), hi + (hi - lo), 300)  # no grid point on an endpoint
        inside = (grid >= lo) & (grid <= hi)
        assert np.all((np.array([g(t) for t in grid]) <= 0) == inside)


def test_extrapolated_date_covers_the_truth_95_percent_of_the_time():
    """Monte Carlo: ratios 0.40 and 0.55 three years apart, 1 sigma 0.02 each: the true line reaches 1 nine years
    after the second survey; Fieller's interval (from the two noisy ratios) covers that in about 95 % of draws."""
    rng = np.random.default_rng(2024)
    se, n, hit, sig = 0.02, 4000, 0, 0
    truth = years_between("2022-06-15", "2025-06-15") * (1 - 0.55) / 0.15
    for _ in range(n):
        ra, rb = 0.40 + se * rng.standard_normal(), 0.55 + se * rng.standard_normal()
        ex = extrapolate_ratio("B.3.2.1", "2022-06-15", ra, se, "2025-06-15", rb, se)
        if ex.status == "extrapolated":
            sig += 1
            hit += ex.years_ci95[0] <= truth <= ex.years_ci95[1]
    assert sig > 0.99 * n
    assert 0.935 <= hit / sig <= 0.965, hit / sig


def test_extrapolation_statuses_and_dates():
    ex = extrapolate_ratio("arcs", "2020-01-01", 0.5, 0.01, "2022-01-01", 0.6, 0.01)
    assert ex.status == "extrapolated" and ex.significant
    dt = years_between("2020-01-01", "2022-01-01")
    assert ex.rate_per_year == pytest.approx(0.1 / dt) and ex.years_to_limit == pytest.approx(4 * dt)
    assert ex.date == date_after("2022-01-01", 4 * dt) and ex.date[:4] == "2030"
    assert ex.years_ci95[0] < ex.years_to_limit < ex.years_ci95[1]
    assert "linear extrapolation" in ex.method
    assert extrapolate_ratio("a", "2020-01-01", 0.5, 0.05, "2022-01-01", 0.55, 0.05).status == "not significant"
    assert extrapolate_ratio("a", "2020-01-01", 0.6, 0.01, "2022-01-01", 0.5, 0.01).status == "not increasing"
    r = extrapolate_ratio("a", "2020-01-01", 0.9, 0.01, "2022-01-01", 1.05, 0.01)
    assert r.status == "reached" and r.date is None


def _profile(az, uniform, tilt, low, modes, rng, sd):
    th = np.radians(az)
    z = uniform - tilt * np.cos(th - np.radians(low))
    for k, a, ph in modes:
        z = z + a * np.cos(k * (th - np.radians(ph)))
    return z + sd * rng.standard_normal(len(az))


def test_settlement_change_recovers_the_injected_change():
    """Two dense profiles 2.5 years apart: 6 mm more uniform settlement, 4 mm more tilt lowering at 100 deg and a
    2 mm mode-2 ovalisation that grew; the split recovers each within its uncertainty."""
    rng = np.random.default_rng(7)
    az = np.arange(0.5, 360, 1.0)
    sd = 0.0005
    a = _profile(az, -0.010, 0.014, 100, [(3, 0.003, 10)], rng, sd)
    b = _profile(az, -0.016, 0.018, 100, [(3, 0.003, 10), (2, 0.002, 30)], rng, sd)
    se = np.full(len(az), sd)
    ok = np.ones(len(az), bool)
    pd = profile_difference(az, a, se, ok, 0.0, az, b, se, ok, 0.0)
    ch = settlement_change("2022-01-01", "2024-07-02", pd, 15.0, dense=True)
    assert ch.years == pytest.approx(2.5, abs=0.01)
    assert abs(ch.mean - (-0.006)) < 3 * ch.mean_se + 1e-4  # the mode-2 term averages to zero over the circle
    assert abs(ch.tilt_amplitude - 0.004) < 3 * ch.tilt_amplitude_se
    assert abs(ch.tilt_low_azimuth_deg - 100) < 3
    assert ch.tilt_p < 1e-10 and ch.modes_p is not None and ch.modes_p < 1e-10
    true_oop = 0.002 * np.cos(2 * (np.radians(az) - np.radians(30)))
    z = (ch.out_of_plane - true_oop) / ch.out_of_plane_se
    assert np.mean(np.abs(z) < Z95) > 0.9
    assert ch.rate(ch.mean) == pytest.approx(ch.mean / ch.years)
    # the scans' vertical reference adds 2 (e R)^2 per axis to the tilt change, not to the out-of-plane change
    ch2 = settlement_change("2022-01-01", "2024-07-02", pd, 15.0, dense=True, vertical_reference=1e-4)
    assert np.allclose(np.diag(ch2.tilt_cov) - np.diag(ch.tilt_cov), 2 * (1e-4 * 15.0) ** 2)
    assert np.allclose(ch2.out_of_plane_se, ch.out_of_plane_se)


def test_no_shape_change_is_not_reported_as_one():
    rng = np.random.default_rng(8)
    az = np.arange(0.5, 360, 1.0)
    sd = 0.0005
    a = _profile(az, 0.0, 0.01, 40, [(2, 0.004, 0)], rng, sd)
    b = _profile(az, -0.002, 0.01, 40, [(2, 0.004, 0)], rng, sd)
    se = np.full(len(az), sd)
    ok = np.ones(len(az), bool)
    ch = settlement_change("2022-01-01", "2023-01-01", profile_difference(az, a, se, ok, 0.0, az, b, se, ok, 0.0),
                           15.0, dense=True)
    assert ch.tilt_p > 0.001
    assert ch.modes_p is None or ch.modes_p > 0.001
    assert np.mean(np.abs(ch.out_of_plane / ch.out_of_plane_se) < Z95) > 0.9


def test_amplitude_rate_projects_the_change_on_the_tilt_direction():
    rng = np.random.default_rng(9)
    az = np.arange(0.5, 360, 1.0)
    se = np.full(len(az), 0.0005)
    ok = np.ones(len(az), bool)
    a = _profile(az, 0, 0.010, 0, [], rng, 0.0005)
    b = _profile(az, 0, 0.013, 0, [], rng, 0.0005)
    ch = settlement_change("2020-01-01", "2023-01-01", profile_difference(az, a, se, ok, 0.0, az, b, se, ok, 0.0),
                           15.0, dense=True)
    rate, rse = amplitude_rate(-0.010, 0.0, -0.013, 0.0, ch)  # tilt lowest at 0 deg: b = -amplitude
    assert rate == pytest.approx(0.003 / ch.years) and rse == pytest.approx(math.sqrt(ch.tilt_cov[0, 0]) / ch.years)


def test_tilt_and_shape_tests_agree_with_statsmodels_wls():
    """A 24-point survey difference (nested F order selection, no autocorrelation correction): the Wald F tests of
    the tilt change and of the modes k >= 2 equal statsmodels' WLS f_test on the same design (outside reference)."""
    sm = pytest.importorskip("statsmodels.api")
    from chimeline.evaluate.fourier import design

    rng = np.random.default_rng(11)
    az = np.arange(0, 360, 15.0)
    se = np.full(len(az), 0.002)
    ok = np.ones(len(az), bool)
    a = _profile(az, 0.0, 0.010, 60, [], rng, 0.002)
    b = _profile(az, -0.004, 0.016, 60, [(2, 0.006, 10)], rng, 0.002)
    pd = profile_difference(az, a, se, ok, 0.0, az, b, se, ok, 0.0)
    ch = settlement_change("2019-03-01", "2024-03-01", pd, 20.0, dense=False)
    assert ch.model_order >= 2
    X = design(np.radians(np.asarray(pd["azimuth_deg"])), ch.model_order)
    res = sm.WLS(np.asarray(pd["difference"]), X, weights=1 / np.asarray(pd["difference_sd"]) ** 2).fit()
    k = X.shape[1]
    assert ch.tilt_p == pytest.approx(float(res.f_test(np.eye(k)[1:3]).pvalue), rel=1e-6)
    assert ch.modes_p == pytest.approx(float(res.f_test(np.eye(k)[3:]).pvalue), rel=1e-6)
    assert (ch.tilt_b, ch.tilt_c) == pytest.approx((res.params[1], res.params[2]), rel=1e-9)
