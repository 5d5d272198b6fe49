"""Scan -> profile accuracy against simulator truth, on seeds not used while tuning (101, 5, 20260615 were)."""
import numpy as np
import pytest

from chimeline.core.robust import Z95

from chimeline.config import load_config
from chimeline.workflows.run import process_scan
from tests.helpers import scene_mapping, truth_bin_means


def _run(scan, sets=()):
    cfg, resolved, src = load_config(None, list(sets))
    return process_scan(scan, cfg, resolved, src)


def _errors(res, truth, datum=True):
    """Profile minus truth. With ``datum``, truth is moved to the scan's vertical datum: the mean of the
    stations' vertical registration errors, which no scan can observe without survey control."""
    p = res.profile
    tb = truth_bin_means(truth, p.azimuth_deg, p.bin_width_deg, res.frame.origin[2])
    if datum:
        tb = tb + np.mean([s["vertical_bias_with_registration"] for s in truth["stations"]])
    ok = p.status == "ok"
    return p.elevation - tb, ok


@pytest.fixture(scope="module")
def clean(simulate):
    scan, truth = simulate("clean_tank.yaml", 404)
    return _run(scan), truth


@pytest.fixture(scope="module")
def typical(simulate):
    scan, truth = simulate("typical_tank.yaml", 303)
    return _run(scan), truth


def test_clean_scene_bias_rmse_radius(clean):
    res, truth = clean
    e, ok = _errors(res, truth, datum=False)
    assert abs(np.median(e[ok])) <= 0.0005
    assert np.sqrt(np.mean(e[ok] ** 2)) <= 0.001
    assert abs(res.shell.radius - truth["tank"]["outer_radius"]) <= 0.002


def test_typical_scene_bias_rmse_coverage(typical):
    res, truth = typical
    e, ok = _errors(res, truth, datum=False)  # absolute: includes the unobservable datum error
    assert abs(np.median(e[ok])) <= 0.002
    assert np.sqrt(np.mean(e[ok] ** 2)) <= 0.003
    assert ok.mean() >= 0.95


@pytest.mark.parametrize("which", ["clean", "typical"])
def test_noise_sigma_matches_truth(which, request):
    res, truth = request.getfixturevalue(which)
    true_sigma = truth["noise"]["vertical_noise"]
    assert res.noise.sigma == pytest.approx(true_sigma, rel=0.15)
    # the second, independent estimator agrees too
    assert res.noise.pairs.sigma == pytest.approx(true_sigma, rel=0.2)
    assert res.noise.agree


@pytest.mark.parametrize("which", ["clean", "typical"])
def test_standard_errors_are_honest(which, request):
    """Share of ok bins whose truth lies within +-1.96 std_error: 0.90-0.99 (registration modelled per station)."""
    res, truth = request.getfixturevalue(which)
    e, ok = _errors(res, truth)
    inside = np.abs(e[ok]) <= Z95 * res.profile.std_error[ok]
    assert 0.90 <= inside.mean() <= 0.99


def test_station_offsets_recovered(typical):
    """Relative vertical registration offsets per station match the injected ones (to ~0.5 mm)."""
    res, truth = typical
    true = np.array([s["vertical_bias_with_registration"] for s in truth["stations"]])
    true = true - true.mean()
    est = np.array([res.profile.station_offset[s["point_source_id"]] for s in truth["stations"]])
    assert np.abs(est - true).max() < 0.0005
    assert res.noise.datum_sigma > 0


def test_occluded_arc_is_a_gap_not_filled(simulate):
    scan, truth = simulate("occluded_tank.yaml", 505)
    res = _run(scan)
    p = res.profile
    hidden = [g for g in truth["projection_coverage"]["gaps"] if g["end_deg"] - g["start_deg"] > 10]
    assert hidden, "the scene should hide an arc"
    g = hidden[0]
    inner = (p.azimuth_deg > g["start_deg"] + 1) & (p.azimuth_deg < g["end_deg"] - 1)
    assert np.all(p.status[inner] == "empty")
    assert np.all(np.isnan(p.elevation[inner]))
    assert any(a <= g["start_deg"] + 2 and b >= g["end_deg"] - 2 for a, b in p.gaps)


def test_hinted_tank_is_chosen(simulate):
    scan, truth = simulate("two_tanks.yaml", 606)
    res = _run(scan, [("tank.center_hint", [0.0, 0.0])])
    c = res.frame.to_file_xy(res.shell.center[:2])
    assert np.hypot(*(c - np.array(truth["tank"]["center"][:2]))) < 0.01
    assert res.shell.radius == pytest.approx(10.0, abs=0.003)
    assert len(res.shell.others) >= 1
    assert any(abs(o.radius - 12.0) < 0.05 for o in res.shell.others)


def test_same_seed_same_profile(simulate):
    scan, _ = simulate("typical_tank.yaml", 303)
    a, b = _run(scan), _run(scan)
    np.testing.assert_array_equal(a.profile.elevation, b.profile.elevation)
    assert a.noise.sigma == b.noise.sigma


def test_berm_foundation(simulate):
    """A soil berm instead of a ringwall: the plate edge drops onto a slope, not a step."""
    scan, truth = simulate("typical_tank.yaml", 707, tank={**_tank_of("typical_tank.yaml"),
                                                            "foundation": {"type": "berm", "outer_offset": 0.3}})
    res = _run(scan)
    e, ok = _errors(res, truth)
    assert ok.mean() >= 0.95
    assert np.sqrt(np.mean(e[ok] ** 2)) <= 0.001
    assert res.noise.sigma == pytest.approx(truth["noise"]["vertical_noise"], rel=0.15)


def _tank_of(name):
    return scene_mapping(name)["tank"]
