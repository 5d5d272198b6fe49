"""Scans unlike the easy ones: small seeded versions of the hard cases the randomized sweep
(scripts/sweep_profile.py) draws across wide ranges. Truth is moved to the scan's datum (the mean of the stations'
vertical registration errors, which no scan can observe). Seeds were not used while developing the stages."""
import json

import numpy as np
import pytest

from chimeline.config import load_config
from chimeline.core.robust import Z95
from chimeline.units import to_metres
from chimeline.workflows.run import process_scan
from tests.helpers import CONFIGS, invoke, truth_bin_means


def _run(scan, sets=(), config=None):
    cfg, resolved, src = load_config(config, [("profile.on_low_coverage", "flag"), *sets])
    return process_scan(scan, cfg, resolved, src)


def _errors(res, truth):
    f = to_metres(truth["units"])
    p = res.profile
    tb = truth_bin_means(truth, p.azimuth_deg, p.bin_width_deg, res.frame.origin[2]) * f
    datum = np.mean([s["vertical_bias_with_registration"] for s in truth["stations"]]) * f
    return p.elevation - tb - datum, p.status == "ok"


def _evidence_bins(truth):
    ev = truth["junction_evidence"]
    return (np.asarray(ev["plate_top"]) + np.asarray(ev["step_face"]) + np.asarray(ev["shell_foot"])) > 0


def test_noise_survives_heavy_mixed_pixels(simulate):
    """35 % of the returns straddling the crease and 60 % of those straddling the outer edge are mixed: the plain
    within-bin scatter runs well above the true noise, the robust interior estimate stays within 15 %, the
    contamination is reported, and the profile stays honest."""
    scan, truth = simulate("small_tank.yaml", 8301, stations={"ring_count": 4, "ring_distance": 7.0, "common": {
        "h_step_deg": 0.5, "v_step_deg": 0.5, "v_min_deg": -35, "range_noise": 0.002, "angular_noise_deg": 0.002,
        "crease_mixed_prob": 0.35, "edge_mixed_prob": 0.6, "band": {"h_step_deg": 0.12, "v_step_deg": 0.05}}})
    res = _run(scan)
    true_sigma = truth["noise"]["vertical_noise"]
    assert res.noise.sigma == pytest.approx(true_sigma, rel=0.15)
    # the plain within-bin scatter of what the scatter-based rejection keeps is farther off, and it is reported
    assert abs(res.noise.classical_sigma / true_sigma - 1) > abs(res.noise.sigma / true_sigma - 1)
    assert res.noise.contamination > 1.1
    e, ok = _errors(res, truth)
    assert ok.mean() >= 0.95 and np.sqrt(np.mean(e[ok] ** 2)) <= 0.002
    assert 0.90 <= np.mean(np.abs(e[ok]) <= Z95 * res.profile.std_error[ok]) <= 0.99


def test_thin_projection_returns_still_cover_the_circle(simulate):
    """A coarse region scan leaves a median of 2 projection-top returns per degree: bins of one to three points
    keep an honest standard error and stay usable, thin ones widen, and coverage of the bins with junction
    evidence stays >= 0.95 (the old rule of 4 points per bin would have kept well under half)."""
    scan, truth = simulate("small_tank.yaml", 8302, stations={"ring_count": 4, "ring_distance": 7.0, "common": {
        "h_step_deg": 0.5, "v_step_deg": 0.5, "v_min_deg": -35, "range_noise": 0.002, "angular_noise_deg": 0.002,
        "band": {"h_step_deg": 0.15, "v_step_deg": 0.15}}})
    assert np.median(truth["junction_evidence"]["plate_top"]) <= 3
    res = _run(scan)
    p = res.profile
    e, ok = _errors(res, truth)
    has = _evidence_bins(truth)
    assert ok[has].mean() >= 0.95
    assert (p.n_points >= 4).mean() < 0.5
    assert p.fusion.n_widened > 0 and np.nanmax(p.width_deg) > p.bin_width_deg
    assert np.all(p.width_deg[ok] <= res.config.profile.max_bin_width_deg + 1e-9)
    assert np.sqrt(np.mean(e[ok] ** 2)) <= 0.002 and abs(np.median(e[ok])) <= 0.001
    assert np.mean(np.abs(e[ok]) <= Z95 * p.std_error[ok]) >= 0.90


def test_merged_cloud_without_station_ids_carries_the_correlated_error(simulate, tmp_path):
    """Registration offsets of 2 mm per station in a merged cloud without station ids: nothing can be levelled,
    the correlated error is estimated from the data and carried in the standard error (the share of ok bins
    holding the truth within 1.96 SE rises clearly with it), and profile.json and the report say that station
    levelling was not possible. (With four stations that overlap little the estimate runs low: this scene
    reaches about 0.6, not the 0.9 aimed at; see DEVELOPERS.md.)"""
    scan, truth = simulate("small_tank.yaml", 8303, output={"format": "las14", "station_ids": False},
                           stations={"ring_count": 4, "ring_distance": 7.0, "common": {
                               "h_step_deg": 0.5, "v_step_deg": 0.5, "v_min_deg": -35, "range_noise": 0.002,
                               "angular_noise_deg": 0.002, "registration": {"translation": 0.002,
                                                                             "rotation_deg": 0.001},
                               "band": {"h_step_deg": 0.12, "v_step_deg": 0.05}}})
    res = _run(scan)
    n, p = res.noise, res.profile
    assert not n.station_ids and not p.leveled and n.correlated_sigma > 0.0005
    e, ok = _errors(res, truth)
    inside = np.mean(np.abs(e[ok]) <= Z95 * p.std_error[ok])
    without = np.sqrt(np.maximum(p.std_error ** 2 - n.correlated_sigma ** 2, 0))
    assert inside >= 0.5 and np.mean(np.abs(e[ok]) <= Z95 * without[ok]) < inside - 0.15
    assert np.median(p.std_error[ok]) < 2.5 * np.sqrt(np.mean(e[ok] ** 2))  # not just wide
    out = tmp_path / "run"
    invoke(["-q", "run", scan, "--out", out])
    js = json.loads((out / "profile.json").read_text())
    assert js["noise"]["station_leveling"].startswith("not possible")
    assert any("station levelling was not possible" in w for w in js["warnings"])
    assert "NOT POSSIBLE" in (out / "report.html").read_text()


def test_coarse_file_resolution_is_in_the_errors(simulate):
    """A LAS with a 1 cm scale and ~1 mm vertical noise: every elevation is rounded to the centimetre, which
    averaging cannot undo; the standard errors carry q^2/12 and the run warns once."""
    scan, truth = simulate("small_tank.yaml", 8304, output={"format": "las14", "scale": 0.01})
    res = _run(scan)
    q = 0.01
    assert res.noise.quantum == pytest.approx(q)
    assert sum("vertical resolution" in w for w in res.warnings) == 1
    e, ok = _errors(res, truth)
    assert np.all(res.profile.std_error[ok] >= 0.9 * q / np.sqrt(12))
    assert np.mean(np.abs(e[ok]) <= Z95 * res.profile.std_error[ok]) >= 0.90


def test_noisy_scanner_finds_the_projection(simulate):
    """5 mm range noise (several times that along the grazing rays on the plate) on a 60 mm projection: the
    width is found from the step face, the default config keeps >= 95 % of the circle ok, and so does
    configs/noisy_scanner.yaml."""
    scan, truth = simulate("small_tank.yaml", 8305, stations={"ring_count": 4, "ring_distance": 7.0, "common": {
        "h_step_deg": 0.5, "v_step_deg": 0.5, "v_min_deg": -35, "range_noise": 0.005, "angular_noise_deg": 0.002,
        "band": {"h_step_deg": 0.12, "v_step_deg": 0.05}}})
    for config in (None, CONFIGS / "noisy_scanner.yaml"):
        res = _run(scan, config=config)
        assert res.junction.projection_width == pytest.approx(truth["tank"]["projection_width"], abs=0.006)
        e, ok = _errors(res, truth)
        assert ok.mean() >= 0.95 and np.sqrt(np.mean(e[ok] ** 2)) <= 0.002
