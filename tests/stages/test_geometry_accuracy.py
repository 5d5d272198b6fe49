"""Shell geometry against simulator truth on the demo scene, on a seed not used while developing the stage
(20260615 and 1515 were).

Targets from the issue: out-of-plumbness and radius within 2 mm RMS, 95 % of values within 1.96 standard errors.
The radius carries the stations' registration shifts; their mean radial part (no scan can observe it without
survey control, as with the vertical datum) is reported by the truth file and printed, not removed.
"""
import numpy as np
import pytest

from chimeline.config import load_config
from chimeline.core.robust import Z95
from chimeline.synth import geometry as SG
from chimeline.synth import scene_from_mapping, shell_truth
from chimeline.workflows.run import process_scan
from tests.helpers import scene_mapping

SEED = 4242


@pytest.fixture(scope="module")
def demo(simulate):
    scan, truth = simulate("demo_tank.yaml", SEED)
    scene = scene_from_mapping(scene_mapping("demo_tank.yaml", seed=SEED))
    cfg, resolved, src = load_config(None, [("geometry.course_height", 2.44), ("tank.shell_height", 12.2)])
    return process_scan(scan, cfg, resolved, src), scene, truth


def test_plumbness_within_2_mm_rms_and_honest_errors(demo):
    res, scene, _ = demo
    pl = res.geometry.plumb
    t = shell_truth.plumbness(scene, pl.azimuth_deg, pl.heights, pl.reference_height)
    ok = np.isfinite(pl.total)
    assert ok.mean() > 0.6  # the stair, the nozzles and the top strip nearest each station leave gaps
    for k in ("radial", "tangential", "total"):
        e = (getattr(pl, k) - t[f"offset_{k}"])[ok]
        assert np.sqrt(np.mean(e ** 2)) < 0.002, k
    e = (pl.total - t["offset_total"])[ok]
    assert np.mean(np.abs(e) <= Z95 * pl.total_se[ok]) >= 0.93
    e = (pl.radial - t["offset_radial"])[ok]
    assert np.mean(np.abs(e) <= Z95 * pl.radial_se[ok]) >= 0.93
    # the lean is real and large against the errors: about 23 mm over the shell at the top
    assert np.nanmax(pl.total) > 0.02


def test_radius_within_2_mm_rms_and_honest_errors(demo):
    res, scene, _ = demo
    ro = res.geometry.roundness
    tr = shell_truth.radius(scene, ro.azimuth_deg, ro.heights)
    ok = np.isfinite(ro.radius)
    assert ok.mean() > 0.8
    e = (ro.radius - tr)[ok]
    assert np.sqrt(np.mean(e ** 2)) < 0.002
    assert np.mean(np.abs(e) <= Z95 * ro.radius_se[ok]) >= 0.95


def test_ovality_grows_with_height_as_simulated(demo):
    res, scene, _ = demo
    ro = res.geometry.roundness
    true = SG.Tank(scene.tank, scene.settlement).ovality_amplitude(ro.heights + scene.settlement.uniform)
    assert np.all(np.abs(ro.ovality - true) <= np.maximum(3 * ro.ovality_se, 0.0005))
    np.testing.assert_allclose(ro.ovality_axis_deg, scene.tank.ovality.azimuth_deg, atol=6.0)
    # growth: the top section is more oval than the bottom one by about growth x height (0.5 mm/m x 10.7 m)
    assert ro.ovality[-1] - ro.ovality[0] == pytest.approx(0.0005 * (ro.heights[-1] - ro.heights[0]), abs=0.0015)


def test_deviation_map_shows_course_steps_stair_and_nozzle(demo):
    res, scene, _ = demo
    m = res.geometry.deviation
    steps = np.asarray(scene.tank.course_radius_steps)
    for k in range(1, len(steps)):  # seams at k x 2.44 m above the unsettled base: 35 mm above the junction plane
        seam = k * scene.tank.course_height - scene.settlement.uniform
        below = np.argmin(np.abs(m.heights - (seam - 0.375)))
        above = np.argmin(np.abs(m.heights - (seam + 0.375)))
        jump = np.nanmedian(m.deviation[above] - m.deviation[below])
        # the step, plus the lean's cosine and the ovality growth over 0.75 m (zero median around the shell)
        assert jump == pytest.approx(steps[k] - steps[k - 1], abs=0.0008), k
    # the 0.3 m nozzle at 62 deg, 0.7 m up: its own cell is not shell face
    j = np.argmin(np.abs(m.azimuth_deg - 62.5))
    i = np.argmin(np.abs(m.heights - 0.625))
    assert np.isnan(m.deviation[i, j]) or m.n_points[i, j] < np.nanmedian(m.n_points[i])
    # gaps are gaps: cells without enough face are nan, never filled
    assert np.isnan(m.deviation).any()
    assert np.all(np.isnan(m.deviation) == (m.n_points < res.config.geometry.min_points))
