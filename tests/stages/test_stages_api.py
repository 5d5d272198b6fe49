"""Stage functions on plain arrays (the notebook API), against constructed truth."""
import numpy as np
import pytest

from pipeline import bin_junction, fit_shell, load_config
from pipeline.model import Junction
from pipeline.stages.noise import estimate_noise, truncation_factor


def _cylinder(rng, c=(3.0, -2.0), r=8.0, tilt=(0.002, -0.001), h=6.0, n=60000, noise=0.002):
    th = rng.uniform(0, 2 * np.pi, n)
    z = rng.uniform(0, h, n)
    ax = np.array([tilt[0], tilt[1], 1.0])
    ax /= np.linalg.norm(ax)
    # points on the tilted cylinder: a circle in the plane normal to the axis, carried along the axis
    u = np.cross(ax, [0, 1.0, 0])
    u /= np.linalg.norm(u)
    v = np.cross(ax, u)
    rr = r + rng.normal(0, noise, n)
    p = np.array([c[0], c[1], 0.0]) + np.outer(z, ax) + np.outer(rr * np.cos(th), u) + np.outer(rr * np.sin(th), v)
    ground = np.column_stack([rng.uniform(-20, 20, n // 2), rng.uniform(-20, 20, n // 2), rng.normal(0, 0.01, n // 2)])
    keep = np.hypot(ground[:, 0] - c[0], ground[:, 1] - c[1]) > r + 0.5
    return np.vstack([p, ground[keep]]), ax


def test_fit_shell_recovers_a_tilted_cylinder():
    rng = np.random.default_rng(0)
    pts, ax = _cylinder(rng)
    cfg, _, _ = load_config()
    fit = fit_shell(pts, cfg.shell, np.random.default_rng(1))
    assert fit.radius == pytest.approx(8.0, abs=0.002)
    # centre at the fit's reference height, projected back along the axis to z = 0
    c0 = fit.center - fit.axis * fit.center[2] / fit.axis[2]
    assert np.hypot(c0[0] - 3.0, c0[1] + 2.0) < 0.005
    assert np.degrees(np.arccos(abs(fit.axis @ ax))) < 0.05


def test_fit_shell_same_seed_same_result():
    rng = np.random.default_rng(0)
    pts, _ = _cylinder(rng)
    cfg, _, _ = load_config()
    a = fit_shell(pts, cfg.shell, np.random.default_rng(5))
    b = fit_shell(pts, cfg.shell, np.random.default_rng(5))
    assert a.radius == b.radius and np.array_equal(a.center, b.center)


def _junction(rng, n_bins=360, per_bin=12, sigma=0.001, outlier_frac=0.08):
    az = (np.repeat(np.arange(n_bins), per_bin) + rng.uniform(0, 1, n_bins * per_bin)) * 360 / n_bins
    true = 0.4 + 0.01 * np.cos(np.radians(az))
    z = true + rng.normal(0, sigma, len(az))
    out = rng.random(len(az)) < outlier_frac
    z[out] += rng.choice([-1, 1], out.sum()) * rng.uniform(0.006, 0.02, out.sum())  # mixed pixels and such
    st = rng.integers(1, 4, len(az))
    j = Junction(az, z, st, np.full(len(az), 0.02), np.zeros(1), np.zeros(1), 0.05, (0.006, 0.04), len(az), len(az),
                 len(az), 0.4)
    return j, true, out


def test_profile_rejects_outliers_and_noise_recovers_sigma():
    rng = np.random.default_rng(2)
    j, true, out = _junction(rng)
    cfg, _, _ = load_config()
    p = bin_junction(j, cfg.profile, 15.0)
    assert (~p.kept[out]).mean() > 0.9  # most gross outliers rejected
    assert p.kept[~out].mean() > 0.98  # and few good points lost
    centres = p.azimuth_deg
    err = p.elevation - (0.4 + 0.01 * np.cos(np.radians(centres)))
    assert np.abs(np.median(err)) < 1e-4 and np.sqrt(np.mean(err ** 2)) < 0.0006
    n = estimate_noise(p, j, cfg.noise, cfg.profile.reject_k)
    assert n.ci[0] <= 0.001 * 1.03 and n.ci[1] >= 0.001 * 0.97
    assert n.sigma == pytest.approx(0.001, rel=0.05)


def test_truncation_factor_matches_scipy_truncnorm():
    from scipy import stats

    for k in (2.0, 3.0, 3.5):
        assert truncation_factor(k) == pytest.approx(stats.truncnorm(-k, k).var(), rel=1e-10)
