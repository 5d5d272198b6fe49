"""Settlement evaluation against outside references: statsmodels, scipy.stats, the standard's formula
(from memory, values in shared domain notes section 6) and exact identities of the trigonometric fit."""
import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from pipeline.config import EvaluateConfig, TankConfig
from pipeline.evaluate import evaluate_survey, tank_data
from pipeline.evaluate.deflection import allowable, chord_deflection, curvature_limit, second_difference_curvature
from pipeline.evaluate.fourier import curvature, design, fit_fourier
from pipeline.evaluate.inputs import adequacy, minimum_points
from pipeline.evaluate.results import SurveyData
from pipeline.evaluate.tilt import fit_tilt

FT = 0.3048
PSI = 6894.757293168  # Pa per psi (NIST SP 811)


def _survey(az, z, se=None, dense=False):
    az = np.asarray(az, float)
    return SurveyData(az, np.asarray(z, float), None if se is None else np.asarray(se, float),
                      tuple(str(i + 1) for i in range(len(az))), dense, "m", "test")


# --- statsmodels as the reference for the fits -------------------------------------------------


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


def test_fourier_wls_matches_statsmodels():
    rng = np.random.default_rng(2)
    az = np.sort(rng.uniform(0, 360, 200))
    th = np.radians(az)
    se = rng.uniform(0.0008, 0.003, 200)
    z = 0.5 + 0.01 * np.cos(th) + 0.003 * np.sin(2 * th) + 0.002 * np.cos(4 * th) + se * rng.normal(size=200)
    f = fit_fourier(az, z, se, 15.0, selection="fixed", order=6)
    X = design(th, 6)
    ref = sm.WLS(z, X, weights=1 / se ** 2).fit()
    np.testing.assert_allclose(f.coef, ref.params, rtol=1e-9, atol=1e-14)
    np.testing.assert_allclose(f.std_err, ref.bse, rtol=1e-9)
    # partial F test of the tilt terms, as statsmodels' linear-restriction F test
    R = np.zeros((2, X.shape[1]))
    R[0, 1] = R[1, 2] = 1
    ft = ref.f_test(R)
    assert f.tilt_partial_f.statistic == pytest.approx(float(ft.fvalue), rel=1e-9)
    assert f.tilt_partial_f.p_value == pytest.approx(float(ft.pvalue), rel=1e-9)


def test_decisions_agree_with_scipy_quantiles():
    """p <= alpha exactly when F >= F_(1-alpha)(2, N-3) (scipy.stats quantile)."""
    for n, r2 in [(8, 0.69), (8, 0.71), (12, 0.48), (12, 0.50), (24, 0.24), (24, 0.26)]:
        th = np.linspace(0, 2 * np.pi, n, endpoint=False)
        rng = np.random.default_rng(n)
        e = rng.normal(size=n)
        X = np.column_stack([np.ones(n), np.cos(th), np.sin(th)])
        e = e - X @ np.linalg.lstsq(X, e, rcond=None)[0]  # orthogonal to the fit
        e *= math.sqrt((1 - r2) / r2 * (0.0001 * n / 2) / (e @ e))  # SSE = SSR (1 - R^2) / R^2
        z = 0.01 * np.cos(th) + e
        t = fit_tilt(np.degrees(th), z)
        assert t.r_squared == pytest.approx(r2, rel=1e-6)
        crit = stats.f.ppf(0.95, 2, n - 3)
        assert t.f_test.reject == (t.f_test.statistic >= crit)


@pytest.mark.parametrize("n,r2_at_005", [(8, 0.70), (12, 0.49), (24, 0.25)])
def test_r2_that_gives_p_005(n, r2_at_005):
    """Derived check values (shared domain notes section 5): p = (1 - R^2)^((N-3)/2)."""
    r2 = 1 - 0.05 ** (2 / (n - 3))
    assert r2 == pytest.approx(r2_at_005, abs=0.005)
    f = (r2 / 2) / ((1 - r2) / (n - 3))
    assert stats.f.sf(f, 2, n - 3) == pytest.approx(0.05, rel=1e-9)


def test_r2_09_at_n8_gives_p_3e3():
    f = (0.9 / 2) / (0.1 / 5)
    assert stats.f.sf(f, 2, 5) == pytest.approx(3.2e-3, rel=0.02)
    assert 0.1 ** 2.5 == pytest.approx(3.2e-3, rel=0.02)


# --- the standard's allowable (from memory), worked values of the domain notes -----------------


def test_smax_worked_values_us_units():
    # L = 20 ft, Y = 30 ksi, E = 29e6 psi, H = 40 ft -> 0.0569 ft (0.68 in)
    s = allowable(20 * FT, 30e3 * PSI, 29e6 * PSI, 40 * FT) / FT
    assert s == pytest.approx(0.0569, abs=0.0001)
    # D = 100 ft, N = 10, H = 40 ft, Y = 36 ksi -> 0.1685 ft (2.02 in)
    L = math.pi * 100 / 10
    assert L == pytest.approx(31.416, abs=0.001)
    s = allowable(L * FT, 36e3 * PSI, 29e6 * PSI, 40 * FT) / FT
    assert s == pytest.approx(0.1685, abs=0.0002)


def test_smax_worked_value_si():
    # D = 30 m, N = 10 (L = 9.425 m), H = 12 m, Y = 250 MPa, E = 200 GPa -> 50.9 mm (derived from the formula)
    s = allowable(math.pi * 30 / 10, 250e6, 200e9, 12.0)
    assert s * 1000 == pytest.approx(50.9, abs=0.1)


def test_tank_data_parses_units():
    t = tank_data(TankConfig(diameter="100 ft", shell_height="40 ft", yield_strength="36 ksi",
                             youngs_modulus="29e6 psi"), "m")
    assert t.diameter == pytest.approx(30.48)
    assert t.yield_strength == pytest.approx(36e3 * PSI, rel=1e-9)
    assert t.youngs_modulus == pytest.approx(29e6 * PSI, rel=1e-9)


# --- exact identities of the second difference ------------------------------------------------


def test_equal_spacing_deflection_is_minus_half_kappa_L2():
    kappa, L = 0.002, 3.0
    s = np.arange(-5, 6) * L
    u = kappa * s ** 2 / 2
    S, _, L1, L2 = chord_deflection(s, u, circumference=1e9)
    assert S[5] == pytest.approx(-kappa * L ** 2 / 2, rel=1e-12)
    # unequal spacing: the chord form gives -kappa L1 L2 / 2
    s2 = np.array([-2.0, 0.0, 5.0])
    u2 = kappa * s2 ** 2 / 2
    S2, _, a, b = chord_deflection(s2, u2, circumference=1e9)
    assert S2[1] == pytest.approx(-kappa * 2.0 * 5.0 / 2, rel=1e-12)
    assert second_difference_curvature(s2, u2, 1e9)[1] == pytest.approx(kappa, rel=1e-12)


@pytest.mark.parametrize("n_mode,N", [(2, 8), (3, 12), (4, 16), (1, 8)])
def test_pure_mode_deflection_factor(n_mode, N):
    """A mode n sampled at N equal steps gives S_i = (1 - cos n Delta) U_i (tilt n = 1 leaks 29 % at N = 8)."""
    th = np.arange(N) * 2 * np.pi / N
    R = 10.0
    U = 0.01 * np.cos(n_mode * th + 0.3)
    S, _, _, _ = chord_deflection(R * th, U, circumference=2 * np.pi * R)
    np.testing.assert_allclose(S, (1 - np.cos(n_mode * 2 * np.pi / N)) * U, atol=1e-15)
    if n_mode == 1 and N == 8:
        assert 1 - np.cos(2 * np.pi / 8) == pytest.approx(0.29, abs=0.005)


def test_noise_variance_of_deflection_is_1_5_sigma2():
    rng = np.random.default_rng(3)
    sig = 0.002
    U = rng.normal(0, sig, (20000, 12))
    S = U - 0.5 * (np.roll(U, 1, axis=1) + np.roll(U, -1, axis=1))
    assert S.var() == pytest.approx(1.5 * sig ** 2, rel=0.02)
    _, sd, _, _ = chord_deflection(np.arange(12.0), U[0], np.full(12, sig), circumference=12.0)
    assert sd[0] == pytest.approx(math.sqrt(1.5) * sig, rel=1e-12)


@pytest.mark.parametrize("L_over_lambda", [0.05, 0.2, 0.4])
def test_second_difference_bias_on_a_sinusoid(L_over_lambda):
    """Second-difference curvature / true curvature = 2 (1 - cos x) / x^2 with x = 2 pi L / lambda."""
    lam = 20.0
    L = L_over_lambda * lam
    s = np.array([-L, 0.0, L])
    u = np.cos(2 * np.pi * s / lam)
    k_est = second_difference_curvature(s, u, 1e9)[1]
    k_true = -(2 * np.pi / lam) ** 2
    x = 2 * np.pi * L / lam
    assert k_est / k_true == pytest.approx(2 * (1 - np.cos(x)) / x ** 2, rel=1e-12)


# --- the case where the R^2 rule misleads -------------------------------------------------------


def test_16_point_survey_strong_tilt_and_mode3():
    N = 16
    th = np.arange(N) * 2 * np.pi / N
    rng = np.random.default_rng(4)
    z = 0.025 * np.cos(th - 0.5) + 0.04 * np.cos(3 * th + 0.2) + rng.normal(0, 0.0015, N)
    s = _survey(np.degrees(th), z)
    t = fit_tilt(s.azimuth_deg, s.elevation)
    f = fit_fourier(s.azimuth_deg, s.elevation, None, 15.0, selection="nested_f")
    assert t.r_squared < 0.5  # well below the standard's 0.9
    assert f.order >= 3
    assert f.tilt_partial_f.p_value < 1e-6  # the tilt is unmistakable once mode 3 is in the model


# --- dense profiles with known modes ------------------------------------------------------------


def test_known_modes_recovered_and_curvature_band_covers_truth():
    """Coefficients within 3 SE; the 95 % curvature band covers the true curvature at >= 90 % of azimuths
    (averaged over 20 seeds: along one curve the misses are correlated, so one seed says little)."""
    R = 15.0
    az = np.arange(0.5, 360, 1.0)
    th = np.radians(az)
    true = {0: (0.4, 0), 1: (0.02, -0.01), 2: (0.004, 0.002), 3: (-0.003, 0.001), 5: (0.0015, 0.0)}
    z = np.zeros_like(th)
    for k, (a, b) in true.items():
        z += a * np.cos(k * th) + (b * np.sin(k * th) if k else 0)
    se = np.full(len(az), 0.0008)
    grid = np.arange(0, 360, 0.5)
    g = np.radians(grid)
    k_true = -sum((k / R) ** 2 * (a * np.cos(k * g) + b * np.sin(k * g)) for k, (a, b) in true.items() if k >= 2)
    cover, within3 = [], []
    for seed in range(20):
        rng = np.random.default_rng(100 + seed)
        z_obs = z + rng.normal(0, 0.0008, len(az))
        f = fit_fourier(az, z_obs, se, R, selection="bic", max_order_cap=20, min_wavelength=3.0)
        assert f.order >= 5
        for k, (a, b) in true.items():
            within3.append(abs(f.coef[max(2 * k - 1, 0)] - a) < 3 * f.std_err[max(2 * k - 1, 0)])
            if k:
                within3.append(abs(f.coef[2 * k] - b) < 3 * f.std_err[2 * k])
        kap, sd = curvature(f, grid, R)
        cover.append(np.mean(np.abs(kap - k_true) <= 1.96 * sd))
    assert np.mean(within3) >= 0.98
    assert np.mean(cover) >= 0.9


def test_chi2_tilt_test_uses_known_noise():
    az = np.arange(0.5, 360, 1.0)
    th = np.radians(az)
    rng = np.random.default_rng(6)
    se = np.full(len(az), 0.001)
    z = 0.0004 * np.cos(th) + rng.normal(0, 0.001, len(az))
    f = fit_fourier(az, z, se, 10.0, selection="fixed", order=3, noise_known=True)
    bt = f.coef[1:3]
    x2 = bt @ np.linalg.solve(f.cov_unscaled[1:3, 1:3], bt)
    assert f.tilt_chi2.statistic == pytest.approx(x2, rel=1e-12)
    assert f.tilt_chi2.reject == (x2 > stats.chi2.ppf(0.95, 2))


# --- survey adequacy (from memory: N >= D/10 ft, >= 8, even, <= 32 ft apart) ----------------------


def test_minimum_points():
    assert minimum_points(30.0) == 10  # 98.4 ft -> 10
    assert minimum_points(10.0) == 8
    assert minimum_points(100 * FT) == 10
    assert minimum_points(101 * FT) == 12  # 10.1 -> 11 -> even 12


def test_adequacy_warnings():
    s = _survey(np.arange(0, 360, 45.0), np.zeros(8))
    w = adequacy(s, 60.0)  # 197 ft: needs 20, and 45 deg is 23.6 m apart
    assert any("minimum" in x for x in w) and any("32 ft" in x for x in w)
    assert adequacy(_survey(np.arange(0, 360, 36.0), np.zeros(10)), 30.0) == []


# --- whole evaluation -----------------------------------------------------------------------------


def _tank(D=30.0):
    return tank_data(TankConfig(diameter=D, shell_height="12 m", yield_strength="250 MPa"), "m")


def test_evaluate_verdicts_follow_the_limit():
    N = 10
    az = np.arange(N) * 36.0
    th = np.radians(az)
    tank = _tank()
    Smax = allowable(math.pi * 30 / N, 250e6, 200e9, 12.0)
    for amp, expected in [(0.2 * Smax, "acceptable"), (5.0 * Smax, "exceeds")]:
        z = 0.01 * np.cos(th) + amp / (1 - np.cos(2 * 2 * np.pi / N)) * np.cos(2 * th)
        ev = evaluate_survey(_survey(az, z, np.full(N, 0.0005)), tank, EvaluateConfig())
        assert ev.criteria[0].verdict == expected
        assert np.nanmax(ev.deflection["ratio"]) == pytest.approx(amp / Smax, rel=1e-6)


def test_settled_arc_found_with_its_depth():
    R = 15.0
    az = np.arange(0.25, 360, 0.5)
    th = np.radians(az)
    arc = R * np.angle(np.exp(1j * (th - np.radians(200))))
    dip = np.where(np.abs(arc) < 4.0, 0.02 * np.cos(np.pi * arc / 8.0) ** 2, 0)
    z = 0.4 - dip
    ev = evaluate_survey(_survey(az, z, np.full(len(az), 0.0003), dense=True), _tank(),
                         EvaluateConfig(min_wavelength=1.0, max_order=80))
    deep = max(ev.arcs, key=lambda a: a["depth"])
    assert deep["deepest_deg"] == pytest.approx(200, abs=1.5)
    assert deep["depth"] == pytest.approx(0.02, abs=0.003)
    assert "ILLUSTRATIVE" in " ".join(ev.criteria[2].reasons)


def test_curvature_limit_value():
    assert curvature_limit(250e6, 200e9, 12.0) == pytest.approx(11 * 250 / 200e3 / 12, rel=1e-12)
