"""Shell stage on plain arrays: a tilted cylinder with ground is recovered; same seed, same fit."""
import numpy as np
import pytest

from chimeline.config import load_config
from chimeline.stages.shell import fit_shell


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
