"""Simulator truth: hits lie on the analytic surfaces, truth tables match the formula, files round-trip."""
import hashlib
import json
import math

import laspy
import numpy as np
import pytest

from chimeline.synth import collect, run_synth, scene_from_mapping, shell_truth, truth_junction
from chimeline.synth import geometry as G
from chimeline.workflows.synth import demo_scene_path
from tests.helpers import SCENES, scene_mapping

US_FT = 1200.0 / 3937.0  # US survey foot, exact by definition (NIST; 1893 Mendenhall order)
INTL_FT = 0.3048  # international foot, exact by definition (1959 agreement)


@pytest.fixture(scope="module")
def small():
    scene = scene_from_mapping(scene_mapping("small_tank.yaml"))
    return scene, collect(scene)


def test_noise_free_hits_lie_on_their_surfaces(small):
    scene, d = small
    tank = d["simulator"].tank
    lab, p = d["label"], d["xyz_true"]
    q = tank.to_tank(p)
    az = G.azimuth(q[:, 0], q[:, 1])
    rho = np.hypot(q[:, 0], q[:, 1])
    top = lab == G.PLATE_TOP
    assert top.sum() > 300
    assert np.abs(q[top, 2] - tank.u(az[top])).max() < 1e-6
    assert np.all((rho[top] >= tank.r_base(az[top]) - 1e-6) & (rho[top] <= tank.r_base(az[top]) + tank.w + 1e-6))
    sh = lab == G.SHELL
    assert np.abs(rho[sh] - tank.r_shell(az[sh], q[sh, 2])).max() < 1e-5
    assert np.all(q[sh, 2] >= tank.u(az[sh]) - 1e-6)
    gr = lab == G.GROUND
    g = d["simulator"].ground
    assert np.abs(p[gr, 2] - g.height(p[gr, 0], p[gr, 1])).max() < 1e-6


def test_measured_points_stay_within_injected_noise(small):
    scene, d = small
    p = scene.stations.common
    ok = ~np.isin(d["label"], [G.MIXED, G.BUSH])
    err = np.linalg.norm(d["xyz_unregistered"][ok] - d["xyz_true"][ok], axis=1)
    rng = np.array([np.linalg.norm(d["xyz_true"][ok][i] - d["simulator"].stations[s].position)
                    for i, s in enumerate(d["station"][ok][:2000])])
    # grazing incidence inflates the range sigma by at most 1 + gain * (1/0.05 - 1)
    sigma_max = p.range_noise * (1 + p.incidence_noise_gain * 19) + rng.max() * math.radians(p.angular_noise_deg) * 2
    assert err.max() < 6 * sigma_max
    # typical error is the injected range sigma, not more
    assert np.median(err) < 3 * p.range_noise


def test_mixed_pixels_float_between_surfaces(small):
    scene, d = small
    mixed = d["label"] == G.MIXED
    assert mixed.sum() > 50
    o = np.array([d["simulator"].stations[s].position for s in d["station"][mixed]])
    r_meas = np.linalg.norm(d["xyz_unregistered"][mixed] - o, axis=1)
    r_true = np.linalg.norm(d["xyz_true"][mixed] - o, axis=1)
    # mixed returns are displaced along the beam by more than the noise (depth-edge straddling)
    assert np.median(np.abs(r_meas - r_true)) > 0.01


def test_truth_table_matches_settlement_formula(small):
    scene, _ = small
    az = np.arange(0, 360, 0.1)
    th = np.radians(az)
    s = scene.settlement
    # the scene's formula written out independently of geometry.py
    z = (scene.tank.base_elevation + s.uniform - s.tilt.amplitude * np.cos(th - np.radians(s.tilt.low_azimuth_deg))
         + sum(m.amplitude * np.cos(m.k * (th - np.radians(m.phase_deg))) for m in s.modes))
    dip = s.dips[0]
    arc = scene.tank.radius * np.angle(np.exp(1j * (th - np.radians(dip.center_deg))))
    z = z - np.where(np.abs(arc) < dip.arc_length / 2, dip.depth * np.cos(np.pi * arc / dip.arc_length) ** 2, 0)
    np.testing.assert_allclose(truth_junction(scene, az), z, atol=1e-12)


def test_geometry_agrees_with_truth_table(small):
    """Noise-free projection-top hits near the shell sit at the truth elevation of their azimuth."""
    scene, d = small
    top = d["label"] == G.PLATE_TOP
    p = d["xyz_true"][top]
    az = np.degrees(G.azimuth(p[:, 0] - scene.tank.center[0], p[:, 1] - scene.tank.center[1]))
    dz = p[:, 2] - truth_junction(scene, az)
    # the plate is level across its width except for the tilt slope (amplitude / R per metre of width)
    slope = scene.settlement.tilt.amplitude / scene.tank.radius
    assert np.abs(dz).max() < slope * scene.tank.projection.width + 2e-5


def test_truth_file_noise_and_coverage(tmp_path, small_scene):
    res = run_synth(small_scene, tmp_path)
    t = json.loads(res.truth_path.read_text())
    n = t["noise"]
    # recorded vertical noise matches the noise geometry predicted from the injected sigmas
    # (sigma_z^2 = (sigma_r sin e)^2 + (r sigma_a cos e)^2); sampling error of an RMS is ~1/sqrt(2n)
    n_top = sum(s["projection_points"] for s in t["stations"])
    assert abs(n["vertical_noise"] / n["vertical_noise_predicted"] - 1) < 4 / math.sqrt(2 * n_top)
    assert t["projection_coverage"]["fraction_1deg"] > 0.9
    assert len(t["junction"]["azimuth_deg"]) == 3600
    assert t["label_counts"]["plate_top"] == n_top


def test_occluder_leaves_a_gap(tmp_path):
    base = scene_mapping("small_tank.yaml")
    base["clutter"] = {"bushes": [{"position": [6.3 * math.sin(math.radians(45)), 6.3 * math.cos(math.radians(45))],
                                   "radius": 0.6}]}
    base["stations"]["ring_count"] = 0
    base["stations"]["extra"] = [{"azimuth_deg": 45, "distance_from_shell": 7.0}]
    res = run_synth(scene_from_mapping(base), tmp_path)
    gaps = res.truth["projection_coverage"]["gaps"]
    # the bush at 45 degrees hides the projection behind it from the only station
    assert any(g["start_deg"] <= 45 <= g["end_deg"] and g["end_deg"] - g["start_deg"] > 3 for g in gaps)
    # the same scene without the bush sees the projection at 45 degrees
    base["clutter"] = {}
    res2 = run_synth(scene_from_mapping(base), tmp_path / "b")
    assert not any(g["start_deg"] <= 45 <= g["end_deg"] and g["end_deg"] - g["start_deg"] > 1
                   for g in res2.truth["projection_coverage"]["gaps"])


@pytest.mark.parametrize("fmt", ["las14", "las12", "laz"])
def test_las_round_trip(tmp_path, fmt):
    m = scene_mapping("small_tank.yaml")
    m["output"] = {"format": fmt, "georef_offset": [612000.0, 5234000.0, 30.0]}
    scene = scene_from_mapping(m)
    d = collect(scene)
    res = run_synth(scene, tmp_path)
    las = laspy.read(res.scan_path)  # laspy (with lazrs for LAZ) as the outside reader
    assert las.header.version.minor == (2 if fmt == "las12" else 4)
    xyz = np.column_stack([las.x, las.y, las.z])
    exp = d["xyz"] + np.array([612000.0, 5234000.0, 30.0])
    assert len(xyz) == len(exp)
    assert np.abs(xyz - exp).max() <= 0.5e-4 + 1e-9  # the file's scale is 0.1 mm
    np.testing.assert_array_equal(np.asarray(las.point_source_id), d["station"] + 1)


def test_ply_round_trip_with_open3d(tmp_path):
    import open3d as o3d

    m = scene_mapping("small_tank.yaml")
    m["output"] = {"format": "ply"}
    scene = scene_from_mapping(m)
    d = collect(scene)
    res = run_synth(scene, tmp_path)
    pc = o3d.io.read_point_cloud(str(res.scan_path))
    np.testing.assert_allclose(np.asarray(pc.points), d["xyz"], rtol=0, atol=1e-9)


@pytest.mark.parametrize("units,factor", [("ft", INTL_FT), ("us_ft", US_FT)])
def test_feet_scenes_carry_the_right_factor(tmp_path, units, factor):
    m = scene_mapping("small_tank.yaml")
    m["output"] = {"format": "las14", "units": units}
    scene = scene_from_mapping(m)
    d = collect(scene)
    res = run_synth(scene, tmp_path)
    las = laspy.read(res.scan_path)
    np.testing.assert_allclose(np.asarray(las.x), d["xyz"][:, 0] / factor, atol=0.6e-4)
    assert res.truth["tank"]["outer_radius"] == pytest.approx(6.0 / factor, rel=1e-12)
    wkt = [v for v in las.header.vlrs if hasattr(v, "string")][0].string
    assert ("US survey foot" in wkt) == (units == "us_ft")


def test_same_seed_same_bytes(tmp_path):
    m = scene_mapping("small_tank.yaml")
    a = run_synth(scene_from_mapping(m), tmp_path / "a")
    b = run_synth(scene_from_mapping(m), tmp_path / "b")
    h = [hashlib.sha256(p.read_bytes()).hexdigest() for p in (a.scan_path, b.scan_path)]
    assert h[0] == h[1]
    m["seed"] = 12
    c = run_synth(scene_from_mapping(m), tmp_path / "c")
    assert hashlib.sha256(c.scan_path.read_bytes()).hexdigest() != h[0]


def test_demo_scene_is_packaged_verbatim():
    assert demo_scene_path().read_text() == (SCENES / "demo_tank.yaml").read_text()


def _leaning_scene(**tank):
    m = scene_mapping("small_tank.yaml")
    m["tank"].update(tank)
    return scene_from_mapping(m)


def test_shell_truth_agrees_with_the_ray_cast_hits():
    """The truth's face distance (solved on the analytic shell) reproduces the noise-free shell hits."""
    scene = _leaning_scene(ovality={"amplitude": 0.006, "azimuth_deg": 30, "growth": 0.001})
    d = collect(scene)
    tank = d["simulator"].tank
    sh = d["label"] == G.SHELL
    p = d["xyz_true"][sh]
    th = G.azimuth(p[:, 0] - tank.c0[0], p[:, 1] - tank.c0[1])
    rho = np.hypot(p[:, 0] - tank.c0[0], p[:, 1] - tank.c0[1])
    err = np.abs(shell_truth.face_distance(tank, tank.c0[:2], th, p[:, 2]) - rho)
    # the ray caster iterates a fixed number of times; a handful of grazing hits stop short by < 0.2 mm
    assert np.percentile(err, 99.9) < 1e-6 and err.max() < 2e-4


def test_shell_truth_of_a_leaning_cylinder_has_the_closed_form():
    """A rigidly tilted circular shell (no ovality, no course steps): the section at height h is the base section
    moved by h tan(a) toward the low side, so radial = dh tan(a) cos(theta - low), tangential = -dh tan(a)
    sin(theta - low), to first order in the lean a (second-order terms R a^2 and dh^2 a^2 / 2R: < 0.1 mm here)."""
    scene = _leaning_scene(course_radius_steps=[0.0])
    s = scene.settlement.tilt
    tan_a = math.tan(math.asin(s.amplitude / scene.tank.radius))
    az = np.arange(0, 360, 15.0)
    th = np.radians(az - s.low_azimuth_deg)
    h = np.array([1.0, 3.5, 5.5])
    t = shell_truth.plumbness(scene, az, h, 0.3)
    dh = (h - 0.3)[:, None]
    np.testing.assert_allclose(t["offset_radial"], dh * tan_a * np.cos(th), atol=1e-4)
    np.testing.assert_allclose(t["offset_tangential"], -dh * tan_a * np.sin(th), atol=1e-4)
    r = shell_truth.radius(scene, az, h)
    np.testing.assert_allclose(r, scene.tank.radius, atol=1e-4)


def test_shell_truth_radius_follows_ovality_growth_and_course_steps():
    scene = _leaning_scene(ovality={"amplitude": 0.004, "azimuth_deg": 50, "growth": 0.002})
    az = np.arange(0.5, 360, 30.0)
    h = np.array([0.3, 1.0, 3.0, 5.0])
    r = shell_truth.radius(scene, az, h)
    z_tank = h + scene.settlement.uniform  # heights above the settled junction; the courses start at the unsettled base
    steps = np.asarray(scene.tank.course_radius_steps)[np.clip((z_tank // scene.tank.course_height).astype(int), 0, 2)]
    expect = (scene.tank.radius + steps[:, None]
              + (0.004 + 0.002 * z_tank)[:, None] * np.cos(2 * np.radians(az - 50.0))[None, :])
    np.testing.assert_allclose(r, expect, atol=1e-4)  # the lean adds only second-order terms (R a^2) here


def test_truth_file_carries_the_shell_geometry(tmp_path, small_scene):
    res = run_synth(small_scene, tmp_path)
    g = json.loads(res.truth_path.read_text())["geometry"]
    pl, ro = g["plumbness"], g["roundness"]
    assert len(pl["offset_total"]) == len(pl["heights"]) and len(pl["offset_total"][0]) == len(pl["azimuth_deg"]) == 36
    np.testing.assert_allclose(np.hypot(pl["offset_radial"], pl["offset_tangential"]), pl["offset_total"])
    assert ro["heights"][0] == 0.3 and len(ro["radius"][0]) == 360
    again = shell_truth.radius(small_scene, ro["azimuth_deg"], ro["heights"])
    np.testing.assert_allclose(ro["radius"], again)
    # the small tank (tilt 0.02 m over a 6 m radius) leans about 18 mm at the top band relative to 0.3 m; on the side
    # away from the lean the top course's 6 mm inward step adds to it
    lean = 0.02 / 6.0 * (pl["heights"][-1] - 0.3)
    assert max(map(max, pl["offset_total"])) == pytest.approx(lean + 0.006, rel=0.03)


def _near_base(d):
    """Returns near the main tank's base: (mask, height above the junction, distance outside the shell)."""
    tank = d["simulator"].tank
    q = tank.to_tank(d["xyz_unregistered"])
    az = G.azimuth(q[:, 0], q[:, 1])
    h = q[:, 2] - tank.u(az)
    out = np.hypot(q[:, 0], q[:, 1]) - tank.r_base(az)
    return (np.abs(h) < 0.1) & (out > -0.03) & (out < tank.w + 0.1), h, out


def test_footprint_mixing_at_the_crease_and_the_edge():
    """Heavy mixing at the shell/plate crease and the plate's outer edge: many more mixed returns at the base,
    each between the two surfaces its footprint straddles; with both probabilities 0 the scan is unchanged."""
    base = scene_mapping("small_tank.yaml")
    plain = collect(scene_from_mapping(base))
    zero = collect(scene_from_mapping(scene_mapping("small_tank.yaml", stations__common__crease_mixed_prob=0.0,
                                                    stations__common__edge_mixed_prob=0.0)))
    np.testing.assert_array_equal(plain["xyz"], zero["xyz"])
    heavy = collect(scene_from_mapping(scene_mapping("small_tank.yaml", stations__common__crease_mixed_prob=0.35,
                                                     stations__common__edge_mixed_prob=0.6)))
    near0, _, _ = _near_base(plain)
    near1, h, out = _near_base(heavy)
    mixed0 = (plain["label"] == G.MIXED) & near0
    mixed1 = (heavy["label"] == G.MIXED) & near1
    assert mixed1.sum() > 5 * max(mixed0.sum(), 1)
    # the same rays are cast in the same order: mixing changes labels and ranges, not the rays
    assert len(heavy["xyz"]) == len(plain["xyz"])
    np.testing.assert_array_equal(heavy["xyz_true"], plain["xyz_true"])
    # a return mixed at the crease or the edge lies between the surfaces: no higher above the plate than twice
    # a footprint (6.4 mm at 7 m here), no lower than the foundation under the edge (8 mm) by more than the noise
    new = mixed1 & (plain["label"] != G.MIXED)
    tk = heavy["simulator"].tank
    assert np.percentile(h[new], 99) < 0.015 and np.percentile(h[new], 1) > -(tk.thk + 0.01)
    # returns on the plate top that are not mixed keep the injected noise: the truth's plate-top noise does not
    # grow with the mixing (it counts unmixed returns only)
    top0 = plain["label"] == G.PLATE_TOP
    top1 = heavy["label"] == G.PLATE_TOP
    rms = [np.sqrt(np.mean((d["xyz_unregistered"][m, 2] - d["xyz_true"][m, 2]) ** 2)) for d, m in
           ((plain, top0), (heavy, top1))]
    assert rms[1] == pytest.approx(rms[0], rel=0.25)


@pytest.mark.parametrize("fmt", ["las14", "xyz"])
def test_merged_output_without_station_ids(tmp_path, fmt):
    from chimeline.io.readers import open_scan

    m = scene_mapping("small_tank.yaml")
    m["output"] = {"format": fmt, "station_ids": False}
    res = run_synth(scene_from_mapping(m), tmp_path)
    src = open_scan(res.scan_path)
    sid = next(src.chunks(10 ** 8)).source_id
    assert sid is None or not np.any(sid)  # no station ids: the readers give none (or all 0)
    if fmt == "las14":
        assert not np.any(np.asarray(laspy.read(res.scan_path).point_source_id))
    else:
        assert res.scan_path.read_text().splitlines()[1].count(" ") == 3  # x y z intensity
    assert res.truth["station_ids"] is False


def test_coarse_file_scale(tmp_path):
    """output.scale sets the LAS scale factor: every coordinate lies on the grid (laspy as the outside reader)."""
    m = scene_mapping("small_tank.yaml")
    m["output"] = {"format": "las14", "scale": 0.01}
    res = run_synth(scene_from_mapping(m), tmp_path)
    las = laspy.read(res.scan_path)
    np.testing.assert_allclose(las.header.scales, [0.01] * 3)
    z = np.asarray(las.z)
    assert np.abs(z / 0.01 - np.round(z / 0.01)).max() < 1e-6
    assert res.truth["coordinate_scale"] == 0.01


def test_truth_counts_junction_evidence(tmp_path, small_scene):
    """The truth's evidence table holds the plate-top returns of every 1-degree bin, and the step face and
    the shell foot (within 10 mm of the junction) where they were hit."""
    res = run_synth(small_scene, tmp_path)
    ev = res.truth["junction_evidence"]
    assert sum(ev["plate_top"]) == res.truth["label_counts"]["plate_top"]
    assert sum(ev["step_face"]) == res.truth["label_counts"]["plate_edge"]
    assert 0 < sum(ev["shell_foot"]) < res.truth["label_counts"]["shell"]
    assert ev["fraction_1deg"] > 0.9
