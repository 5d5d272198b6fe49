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
