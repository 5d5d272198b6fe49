"""Run folders: one typed writer format and one reader; round trips and clean errors on damaged folders."""
import dataclasses
import json

import numpy as np
import pytest

from chimeline.errors import InputError
from chimeline.io.runfiles import ProfileTable, ResidualTable, read_run_folder
from tests.helpers import invoke


def _table():
    n = 6
    el = np.array([10.123456, np.nan, 10.2, 10.25, 10.3, 10.1])
    return ProfileTable(azimuth_deg=np.arange(n) * 60.0 + 30, elevation=el,
                        std_error=np.where(np.isfinite(el), 0.0012, np.nan), n_points=np.array([5, 0, 3, 9, 9, 1]),
                        n_rejected=np.array([1, 0, 0, 2, 0, 0]), n_stations=np.array([2, 0, 1, 3, 3, 1]),
                        n_eff=np.where(np.isfinite(el), 4.0, np.nan), scale=np.array([0.001, np.nan, 0.002, 0.0015, 0.001, np.nan]),
                        status=np.array(["ok", "empty", "sparse", "ok", "ok", "sparse"]))


def test_profile_table_round_trip():
    t = _table()
    text = t.to_csv()
    lines = text.splitlines()
    assert lines[0].startswith("#") and "qualified tank engineer" in lines[1]
    assert lines[2].startswith("azimuth_deg,elevation_m,std_error_m,n_points,n_rejected,n_stations,n_eff,scale_m")
    back = ProfileTable.from_csv(text, "x.csv")
    np.testing.assert_array_equal(back.elevation, t.elevation)  # full precision: bit for bit
    np.testing.assert_array_equal(back.status, t.status)
    assert back.units == "m"
    ft = dataclasses.replace(t, units="us_ft").to_csv()
    assert "elevation_us_ft" in ft and ProfileTable.from_csv(ft, "f.csv").units == "us_ft"
    np.testing.assert_array_equal(back.n_points, t.n_points)
    assert back.to_csv() == text


def test_residual_table_round_trip():
    t = ResidualTable(azimuth_deg=np.array([1.5, 2.25]), station=np.array([1, 3]), bin=np.array([1, 2]),
                      residual=np.array([0.0004, -0.0011]))
    back = ResidualTable.from_csv(t.to_csv(), "r.csv")
    np.testing.assert_allclose(back.residual, t.residual)
    np.testing.assert_array_equal(back.station, t.station)


def test_read_run_folder(simulate, tmp_path):
    scan, truth = simulate("small_tank.yaml", 96)
    out = tmp_path / "run"
    invoke(["-q", "run", scan, "--out", out, "--set", "output.plots=false"])
    rf = read_run_folder(out, need_config=True)
    assert rf.units == "m" and rf.metres_per_unit == 1.0
    assert rf.config["profile"]["bin_width_deg"] == 1.0
    assert len(rf.profile.azimuth_deg) == 360 and rf.residuals is not None and rf.evaluation is None
    assert rf.get("shell", "radius") == pytest.approx(truth["tank"]["outer_radius"], abs=0.003)
    assert rf.get("no", "such", default="x") == "x"


def test_damaged_folders_give_one_clean_error(tmp_path):
    with pytest.raises(InputError, match="not a chimeline run folder"):
        read_run_folder(tmp_path)
    (tmp_path / "profile.json").write_text("{not json")
    with pytest.raises(InputError, match="not valid JSON"):
        read_run_folder(tmp_path)
    (tmp_path / "profile.json").write_text(json.dumps({"units": "cubits"}))
    with pytest.raises(InputError, match="'units'"):
        read_run_folder(tmp_path)
    (tmp_path / "profile.json").write_text(json.dumps({"units": "m"}))
    with pytest.raises(InputError, match="no profile.csv"):
        read_run_folder(tmp_path)
    (tmp_path / "profile.csv").write_text("azimuth_deg,elevation_m\n1,2\n")
    with pytest.raises(InputError, match="missing column"):
        read_run_folder(tmp_path)
