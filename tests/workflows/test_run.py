"""chimeline run as a workflow: files written, reproducibility, flagged coverage, NaN handling."""
import json
import os
import subprocess
import sys

import laspy
import numpy as np
import pytest
import yaml

from tests.helpers import ROOT, assert_fails, invoke


def test_run_writes_profile_and_resolved_config(tmp_path, small_scan):
    scan, truth = small_scan
    out = tmp_path / "out"
    invoke(["-q", "run", str(scan), "--out", str(out), "--set", "profile.bin_width_deg=2"])
    names = {p.name for p in out.iterdir()}
    assert {"profile.csv", "profile.json", "config.resolved.yaml", "quicklook.png"} <= names
    rows = [r for r in (out / "profile.csv").read_text().splitlines() if not r.startswith("#")]
    assert rows[0].split(",")[:6] == ["azimuth_deg", "elevation_m", "std_error_m", "n_points", "n_rejected", "n_stations"]
    assert len(rows) == 1 + 180
    js = json.loads((out / "profile.json").read_text())
    for key in ("units", "shell", "noise", "input", "config", "software", "counts"):
        assert key in js
    assert "timings_s" not in js  # timings, time and host live in provenance.json only
    prov = json.loads((out / "provenance.json").read_text())
    assert prov["timings_s"]["total"] > 0 and prov["host"] and prov["created_utc"]
    assert js["shell"]["radius"] == pytest.approx(truth["tank"]["outer_radius"], abs=0.003)
    assert len(js["input"]["sha256"]) == 64
    assert "ci95" in js["noise"] and js["noise"]["ci95"][0] < js["noise"]["sigma"] < js["noise"]["ci95"][1]
    resolved = yaml.safe_load((out / "config.resolved.yaml").read_text())
    assert resolved["profile"]["bin_width_deg"] == 2
    # rerunning with the resolved config reproduces the profile exactly
    out2 = tmp_path / "out2"
    invoke(["-q", "run", str(scan), "--out", str(out2), "--config", str(out / "config.resolved.yaml")])
    assert (out2 / "profile.csv").read_text() == (out / "profile.csv").read_text()


def test_nan_coordinates_dropped_or_refused(tmp_path, small_scan):
    scan, _ = small_scan
    las = laspy.read(scan)
    xyz = np.column_stack([las.x, las.y, las.z, las.intensity, las.point_source_id]).astype(float)
    few = xyz.copy()
    few[::2000, 0] = np.nan
    np.save(tmp_path / "few.npy", few)
    invoke(["-q", "run", str(tmp_path / "few.npy"), "--out", str(tmp_path / "ok")])
    js = json.loads((tmp_path / "ok" / "profile.json").read_text())
    assert js["counts"]["nonfinite_dropped"] == len(few[::2000])
    many = xyz.copy()
    many[::20, 2] = np.inf
    np.save(tmp_path / "many.npy", many)
    assert_fails(["run", str(tmp_path / "many.npy"), "--out", str(tmp_path / "o")], "max_nonfinite_fraction",
                  tmp_path / "o")


def test_low_coverage_refused_or_flagged(tmp_path, simulate):
    scan, _ = simulate("small_tank.yaml", 79, stations={"ring_count": 1, "ring_distance": 7.0,
                                                          "common": {"h_step_deg": 0.5, "v_step_deg": 0.5,
                                                                     "v_min_deg": -35,
                                                                     "band": {"h_step_deg": 0.12, "v_step_deg": 0.05}}})
    assert_fails(["run", str(scan), "--out", str(tmp_path / "o")], "profile.min_coverage", tmp_path / "o")
    invoke(["-q", "run", str(scan), "--out", str(tmp_path / "f"), "--set", "profile.on_low_coverage=flag"])
    js = json.loads((tmp_path / "f" / "profile.json").read_text())
    assert any("min_coverage" in w for w in js["warnings"])


def test_same_input_and_config_give_the_same_bytes(tmp_path, small_scan, monkeypatch):
    """The same scan and config three times: in a fresh process, then twice in this one (state left by earlier
    figures once changed quicklook.png), the last from another working folder with a relative path. Every file is
    byte-identical (CSV, JSON, YAML, PNG, report.html, manifest.json) except the declared provenance record."""
    scan, _ = small_scan
    tank = ["--set", "tank.shell_height=6", "--set", "tank.yield_strength=250 MPa"]
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT / "pipeline"), os.environ.get("PYTHONPATH", "")]))
    subprocess.run([sys.executable, "-m", "chimeline", "-q", "run", str(scan), "--out", str(tmp_path / "a")] + tank,
                   check=True, env=env, capture_output=True)
    invoke(["-q", "run", scan, "--out", tmp_path / "b"] + tank)
    monkeypatch.chdir(scan.parent)
    invoke(["-q", "run", scan.name, "--out", tmp_path / "c"] + tank)
    files = sorted(p.relative_to(tmp_path / "a") for p in (tmp_path / "a").rglob("*") if p.is_file())
    assert {"report.html", "manifest.json", "provenance.json", "evaluation.json", "plots/profile.png",
            "quicklook.png", "plumbness.csv", "roundness.csv", "shell_deviation.csv"} <= {str(f) for f in files}
    for other in ("b", "c"):
        assert files == sorted(p.relative_to(tmp_path / other) for p in (tmp_path / other).rglob("*") if p.is_file())
        differ = [str(f) for f in files if (tmp_path / "a" / f).read_bytes() != (tmp_path / other / f).read_bytes()]
        assert differ == ["provenance.json"], other
    manifest = json.loads((tmp_path / "a" / "manifest.json").read_text())
    assert set(manifest["files"]) == {str(f) for f in files} - {"manifest.json", "provenance.json"}
    assert manifest["inputs"][0]["path"] == str(scan) and manifest["kind"] == "run"
