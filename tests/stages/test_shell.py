"""Shell stage on plain arrays: a tilted cylinder with ground is recovered; same seed, same fit."""
import numpy as np
import pytest

from click.testing import CliRunner

from chimeline.cli import cli
from chimeline.config import load_config
from chimeline.errors import StageError
from chimeline.stages.shell import fit_shell
from tests.helpers import cli_output, laspy_corpus


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


def test_a_weak_arc_is_not_a_tank():
    """A short arc of a big circle (a wall, a curb, a pipe rack) with few inliers and little coverage of the
    circle is refused with one line naming the thresholds, before any later stage runs."""
    rng = np.random.default_rng(3)
    th = rng.uniform(0, np.radians(20), 3000)  # 20 degrees of a 15 m circle: 6 % of the circle
    z = rng.uniform(0, 3, 3000)
    arc = np.column_stack([15 * np.cos(th), 15 * np.sin(th), z]) + rng.normal(0, 0.003, (3000, 3))
    ground = np.column_stack([rng.uniform(-5, 20, 20000), rng.uniform(-5, 20, 20000), rng.normal(0, 0.01, 20000)])
    cfg, _, _ = load_config()
    with pytest.raises(StageError) as e:
        fit_shell(np.vstack([arc, ground]), cfg.shell, np.random.default_rng(1))
    msg = str(e.value)
    assert msg.startswith("shell: no tank shell found") and "shell.min_coverage" in msg
    assert "\n" not in msg
    # the same arc around the whole circle is a shell
    th2 = rng.uniform(0, 2 * np.pi, 6000)
    ring = np.column_stack([15 * np.cos(th2), 15 * np.sin(th2), rng.uniform(0, 3, 6000)])
    fit = fit_shell(np.vstack([ring, ground]), cfg.shell, np.random.default_rng(1))
    assert fit.radius == pytest.approx(15.0, abs=0.01) and fit.coverage > 0.9


def test_real_scans_of_other_things_are_refused(tmp_path):
    """Every LAS/LAZ file laspy ships for its own tests (terrain, vegetation, a plane, COPC tiles: no tanks)
    is refused with one line on stderr and exit 2, never a traceback; a found 'shell' would be a false tank."""
    files = laspy_corpus()
    assert len(files) >= 10
    for f in files:
        r = CliRunner().invoke(cli, ["-q", "run", str(f), "--out", str(tmp_path / f.stem)])
        text = cli_output(r)
        assert r.exit_code == 2, f"{f.name}: exit {r.exit_code}: {text}"
        assert "Traceback" not in text and r.exception is None or isinstance(r.exception, SystemExit), f.name
        lines = [ln for ln in text.strip().splitlines() if ln.strip()]
        assert len(lines) == 1, f"{f.name}: {text}"
        assert not (tmp_path / f.stem).exists() or not any((tmp_path / f.stem).iterdir())
