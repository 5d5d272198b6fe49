"""Noise stage: sigma and its interval on constructed data; the truncation correction against scipy."""
import numpy as np
import pytest
from scipy import stats

from chimeline.config import load_config
from chimeline.stages.noise import attach_uncertainty, estimate_noise, truncation_factor
from chimeline.stages.profile import bin_junction
from tests.stages.junction_data import synthetic_junction


def test_noise_recovers_sigma_with_an_interval():
    rng = np.random.default_rng(2)
    j, true, out = synthetic_junction(rng)
    cfg, _, _ = load_config()
    p = bin_junction(j, cfg.profile, 15.0)
    n = estimate_noise(p, j, cfg.noise, cfg.profile.reject_k)
    assert n.ci[0] <= 0.001 * 1.03 and n.ci[1] >= 0.001 * 0.97
    assert n.sigma == pytest.approx(0.001, rel=0.05)
    assert n.pairs.sigma == pytest.approx(0.001, rel=0.08) and n.agree


def test_standard_errors_follow_the_points_per_bin():
    """SE^2 = sum_j n_j sigma_j^2 / n^2 (+ registration terms): with per-station sigma ~ 1 mm and offsets
    removed, a bin of n points has an SE near 1 mm / sqrt(n)."""
    rng = np.random.default_rng(4)
    j, _, _ = synthetic_junction(rng, outlier_frac=0.0)
    cfg, _, _ = load_config()
    p = bin_junction(j, cfg.profile, 15.0)
    n = estimate_noise(p, j, cfg.noise, cfg.profile.reject_k)
    q = attach_uncertainty(p, j, n)
    ok = q.status == "ok"
    ratio = q.std_error[ok] / (n.sigma / np.sqrt(q.n_points[ok]))
    assert np.median(ratio) == pytest.approx(1.0, abs=0.1)
    assert np.all(np.isnan(p.std_error)) and np.all(np.isfinite(q.std_error[ok]))


def test_truncation_factor_matches_scipy_truncnorm():
    for k in (2.0, 3.0, 3.5):
        assert truncation_factor(k) == pytest.approx(stats.truncnorm(-k, k).var(), rel=1e-10)


def test_rounding_variance_terms_match_monte_carlo():
    """Values mu + N(0, s^2) rounded to steps q, mu uniform: the variance over mu of the mean rounding error
    (b^2, what no averaging removes) and the mean within-cell variance g(s) = s^2 + q^2/12 - b^2 match a Monte
    Carlo; g is inverted by scanner_sigma. (b^2 -> q^2/12 as s -> 0: Sheppard's q^2/12 for a dithered value.)"""
    from chimeline.stages.noise import quantized_var, rounding_bias_var, scanner_sigma

    rng = np.random.default_rng(7)
    q = 1.0
    mu = rng.uniform(0, q, 4000)
    for s in (0.05, 0.15, 0.3, 0.6):
        y = np.round((mu[:, None] + rng.normal(0, s, (4000, 400))) / q) * q
        within = y.var(axis=1, ddof=1).mean()
        # the sample mean of 400 draws adds within / 400 of its own sampling variance
        b2 = (y.mean(axis=1) - mu).var() - within / 400
        assert rounding_bias_var(s, q) == pytest.approx(b2, rel=0.08, abs=1e-4)
        assert quantized_var(s, q) == pytest.approx(within, rel=0.03)
        assert scanner_sigma(float(np.sqrt(quantized_var(s, q))), q) == pytest.approx(s, rel=1e-6)
    assert rounding_bias_var(0.0, q) == pytest.approx(q ** 2 / 12, rel=0.02)


def test_robust_sigma_resists_broad_contamination_and_keeps_its_interval():
    """The truncated maximum-likelihood sigma: on normal data its 95 % interval (chi-square on the effective
    degrees of freedom) covers the truth about 95 % of the time; with 20 % of broad contamination it stays near
    sigma while the plain RMS does not."""
    from chimeline.stages.noise import _robust_estimate

    rng = np.random.default_rng(11)
    cover = []
    for _ in range(400):
        e = _robust_estimate(rng.normal(0, 1.0, 300), 300, 0.95, 0.0)
        cover.append(e.ci[0] <= 1.0 <= e.ci[1])
    assert 0.92 <= np.mean(cover) <= 0.98
    x = rng.normal(0, 1.0, 5000)
    bad = rng.random(5000) < 0.2
    x[bad] = rng.uniform(-8, 8, bad.sum())
    assert _robust_estimate(x, 5000, 0.95, 0.0).sigma == pytest.approx(1.0, rel=0.12)
    assert np.sqrt(np.mean(x ** 2)) > 1.8
