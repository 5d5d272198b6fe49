"""chimeline evaluate: inputs, outputs, and bad inputs (one-line error naming the row or key, exit 2, no output)."""
import json

import numpy as np
import pytest

from tests.helpers import assert_fails, invoke, write_csv

TANK = ["--set", "tank.diameter=30", "--set", "tank.shell_height=12", "--set", "tank.yield_strength=250 MPa",
        "--set", "evaluate.input_units=m"]


def _survey_rows(n=10, start=0.0):
    az = start + np.arange(n) * 360.0 / n
    z = 10.0 + 0.02 * np.cos(np.radians(az - 40)) + 0.003 * np.cos(2 * np.radians(az))
    return [(f"{a:.3f}", f"{e:.5f}") for a, e in zip(az, z)]


def test_sparse_survey_outputs(tmp_path):
    f = write_csv(tmp_path / "s.csv", "azimuth_deg,elevation", _survey_rows())
    out = tmp_path / "o"
    invoke(["-q", "evaluate", str(f), "--out", str(out)] + TANK)
    js = json.loads((out / "evaluation.json").read_text())
    for k in ("r_squared", "p_value", "amplitude", "low_azimuth_deg", "significant"):
        assert k in js["tilt"]
    assert js["tilt"]["amplitude"] == pytest.approx(0.02, abs=0.001)
    assert js["tilt"]["low_azimuth_deg"] == pytest.approx(220, abs=2)
    assert len(js["points"]) == 10 and {"azimuth_deg", "out_of_plane", "deflection", "allowable", "ratio"} <= set(js["points"][0])
    # the B.3.2.1 check by hand (numpy): U = z minus the cosine fit, S_i = U_i - (U_i-1 + U_i+1) / 2,
    # S_max = 11 L^2 Y / (2 E H) with L = pi D / N (equal spacing)
    az = np.array([float(a) for a, _ in _survey_rows()])
    z = np.array([float(e) for _, e in _survey_rows()])
    th = np.radians(az)
    X = np.column_stack([np.ones(10), np.cos(th), np.sin(th)])
    U = z - X @ np.linalg.lstsq(X, z, rcond=None)[0]
    S = U - (np.roll(U, 1) + np.roll(U, -1)) / 2
    smax = 11 * (np.pi * 30 / 10) ** 2 * 250e6 / (2 * 200e9 * 12)
    assert max(p["ratio"] for p in js["points"]) == pytest.approx(np.abs(S).max() / smax, abs=1e-4)
    assert js["criteria"][0]["verdict"] == "acceptable" and js["verdict"] == "acceptable"
    assert js["units"] == "m"
    assert "curvature_second_difference" in js["points"][0]
    rows = [ln for ln in (out / "evaluation.csv").read_text().splitlines() if not ln.startswith("#")]
    assert len(rows) == 11 and rows[0].startswith("azimuth_deg,label,elevation_m,out_of_plane_m,deflection_m")
    # full precision: the CSV's ratio equals the JSON's to the last bit
    assert [float(r.split(",")[7]) for r in rows[1:]] == [p["ratio"] for p in js["points"]]
    fe = (out / "fe_out_of_plane.csv").read_text().splitlines()
    assert fe[0].startswith("#") and "qualified tank engineer" in fe[1]
    assert fe[2].startswith("azimuth_deg,arc_length_m,x_m,y_m,out_of_plane_m,std_error_m")


def test_xyz_and_numbered_surveys(tmp_path):
    az = np.arange(12) * 30.0
    th = np.radians(az)
    rows = [(f"{15 * np.sin(t) + 100:.4f}", f"{15 * np.cos(t) + 200:.4f}", f"{10 + 0.01 * np.cos(t):.5f}") for t in th]
    invoke(["-q", "evaluate", str(write_csv(tmp_path / "xyz.csv", "x,y,z", rows)), "--out", str(tmp_path / "a")] + TANK)
    a = json.loads((tmp_path / "a" / "evaluation.json").read_text())
    got = np.sort(np.array([p["azimuth_deg"] for p in a["points"]]))
    d = np.abs(np.mod(got[:, None] - az[None, :] + 180, 360) - 180).min(axis=1)
    assert d.max() < 1e-3  # the centre was fitted to the points
    rows = [(i + 1, f"{10 + 0.01 * np.cos(t):.5f}") for i, t in enumerate(th)]
    invoke(["-q", "evaluate", str(write_csv(tmp_path / "n.csv", "point,elevation", rows)), "--out", str(tmp_path / "b")] + TANK)
    b = json.loads((tmp_path / "b" / "evaluation.json").read_text())
    assert b["tilt"]["amplitude"] == pytest.approx(a["tilt"]["amplitude"], rel=1e-3)


def test_inadequate_survey_is_warned_and_indeterminate(tmp_path):
    f = write_csv(tmp_path / "s.csv", "azimuth_deg,elevation", _survey_rows(8))
    out = tmp_path / "o"
    invoke(["-q", "evaluate", str(f), "--out", str(out), "--set", "tank.diameter=60", "--set", "tank.shell_height=12",
         "--set", "tank.yield_strength=250 MPa", "--set", "evaluate.input_units=m"])
    js = json.loads((out / "evaluation.json").read_text())
    assert js["survey_adequacy"]
    assert js["criteria"][0]["verdict"] == "indeterminate"


def test_dense_profile_from_run_with_decimation(tmp_path, simulate):
    scan, truth = simulate("small_tank.yaml", 81)
    run = tmp_path / "run"
    invoke(["-q", "run", str(scan), "--out", str(run), "--set", "tank.shell_height=6", "--set",
         "tank.yield_strength=250 MPa", "--set", "evaluate.decimate=8"])
    js = json.loads((run / "evaluation.json").read_text())
    assert js["input"]["dense"] and js["modes"]["order"] >= 2
    assert js["tilt"]["amplitude"] == pytest.approx(truth["settlement"]["tilt_amplitude"], abs=0.002)
    assert js["tilt"]["low_azimuth_deg"] == pytest.approx(truth["settlement"]["tilt_low_azimuth_deg"], abs=5)
    assert js["decimation"]["n_points"] == 8 and js["decimation"]["runs"]
    # the same profile through evaluate, units from the sibling profile.json
    out = tmp_path / "ev"
    invoke(["-q", "evaluate", str(run / "profile.csv"), "--out", str(out), "--set", "tank.shell_height=6",
         "--set", "tank.diameter=12", "--set", "tank.yield_strength=250 MPa", "--decimate", "8"])
    js2 = json.loads((out / "evaluation.json").read_text())
    assert js2["tilt"]["r_squared"] == pytest.approx(js["tilt"]["r_squared"], rel=1e-4)  # CSV keeps 0.01 mm


@pytest.mark.parametrize("rows,phrase", [
    ([("0", "10.0"), ("90", "10.01"), ("180", "10.0")], "at least 4"),
    ([("0", "10.0"), ("90", "10.01"), ("90", "10.0"), ("270", "10.0"), ("300", "10.0")], "duplicate azimuth"),
    ([("0", "10.0"), ("90", "nan"), ("180", "10.0"), ("270", "10.0")], "row 3"),
    ([("0", "10.0"), ("90", "10.0"), ("400", "10.0"), ("270", "10.0")], "row 4: azimuth_deg 400.0 is outside"),
    ([("0", "10.0"), ("90", "abc"), ("180", "10.0"), ("270", "10.0")], "row 3: 'elevation' is not a number"),
])
def test_bad_survey_rows(tmp_path, rows, phrase):
    f = write_csv(tmp_path / "s.csv", "azimuth_deg,elevation", rows)
    assert_fails(["evaluate", str(f), "--out", str(tmp_path / "o")] + TANK, phrase, tmp_path / "o")


@pytest.mark.parametrize("drop,phrase", [("tank.shell_height", "'tank.shell_height' is missing"),
                                        ("tank.yield_strength", "'tank.yield_strength' is missing")])
def test_missing_tank_data(tmp_path, drop, phrase):
    f = write_csv(tmp_path / "s.csv", "azimuth_deg,elevation", _survey_rows())
    args = [a for i, a in enumerate(TANK) if not (a.startswith(drop) or (i + 1 < len(TANK) and TANK[i + 1].startswith(drop)))]
    assert_fails(["evaluate", str(f), "--out", str(tmp_path / "o")] + args, phrase, tmp_path / "o")


def test_units_problems(tmp_path):
    f = write_csv(tmp_path / "s.csv", "azimuth_deg,elevation", _survey_rows())
    base = ["evaluate", str(f), "--out", str(tmp_path / "o"), "--set", "tank.diameter=30", "--set", "tank.shell_height=12"]
    assert_fails(base + ["--set", "tank.yield_strength=250 MPa"], "evaluate.input_units", tmp_path / "o")
    assert_fails(base + ["--set", "tank.yield_strength=250", "--set", "evaluate.input_units=m"], "needs a unit", tmp_path / "o")
    assert_fails(base + ["--set", "tank.yield_strength=250 kPa", "--set", "evaluate.input_units=m"], "= 0.25 MPa is outside a plausible range of 100-1000 MPa",
           tmp_path / "o")
    (tmp_path / "profile.json").write_text(json.dumps({"units": "ft"}))
    assert_fails(base + ["--set", "tank.yield_strength=250 MPa", "--set", "evaluate.input_units=m"], "says units 'ft'",
           tmp_path / "o")


def test_numbered_survey_keeps_a_missing_point_missing(tmp_path):
    """Twelve points around the tank, point 7 lost: with evaluate.survey_points = 12 the others keep their azimuths."""
    rows = [(i, f"{10 + 0.02 * np.cos(np.radians((i - 1) * 30.0 - 40)):.5f}") for i in range(1, 13) if i != 7]
    f = write_csv(tmp_path / "n.csv", "point,elevation", rows)
    invoke(["-q", "evaluate", f, "--out", tmp_path / "a", "--set", "evaluate.survey_points=12"] + TANK)
    js = json.loads((tmp_path / "a" / "evaluation.json").read_text())
    assert [p["azimuth_deg"] for p in js["points"]] == [(i - 1) * 30.0 for i in range(1, 13) if i != 7]
    assert_fails(["evaluate", f, "--out", tmp_path / "b", "--set", "evaluate.survey_points=10"] + TANK,
                 "beyond evaluate.survey_points = 10", tmp_path / "b")


def test_console_gives_the_standard_the_r2_rule_and_the_screening_in_three_lines(tmp_path):
    f = write_csv(tmp_path / "s.csv", "azimuth_deg,elevation", _survey_rows())
    r = invoke(["evaluate", f, "--out", tmp_path / "o"] + TANK)
    lines = r.output.splitlines()
    i = next(k for k, ln in enumerate(lines) if ln.startswith("standard's checks: "))
    assert lines[i].startswith("standard's checks: ACCEPTABLE, governed by deflection (B.3.2.1)")
    assert lines[i + 1].startswith("R^2 rule: R^2 = ")
    assert lines[i + 2].startswith("screening (informs, never decides): ")
    assert "qualified tank engineer" in r.output


def test_evaluation_json_contract(tmp_path):
    f = write_csv(tmp_path / "s.csv", "azimuth_deg,elevation", _survey_rows())
    invoke(["-q", "evaluate", f, "--out", tmp_path / "o"] + TANK)
    js = json.loads((tmp_path / "o" / "evaluation.json").read_text())
    assert js["verdict"] in ("acceptable", "exceeds", "indeterminate") and js["governing"]
    std = [c for c in js["criteria"] if "clause" in c]
    assert [c["clause"] for c in std] == ["B.3.2.1", "B.3.2.2"]
    assert all(c.get("screening") is True for c in js["criteria"] if "clause" not in c)
    for c in js["criteria"]:
        assert {"name", "verdict", "ratio", "ratio_upper95", "azimuth_ranges_deg", "notes"} <= set(c)
    assert {"r_squared", "r2_rule_met", "p_value", "decided_by"} <= set(js["tilt"])
    assert js["tilt"]["r2_rule_met"] == (js["tilt"]["r_squared"] >= 0.9)
    curve = js["curvature"]["curve"]
    assert len(curve["azimuth_deg"]) == len(curve["kappa_per_m"]) == len(js["model"]["out_of_plane"]) == 720
    assert "qualified tank engineer" in js["caution"]
