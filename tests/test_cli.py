"""CLI: exit codes, files written, and nothing written on failure (click's CliRunner)."""
import json

import numpy as np
import pytest
import yaml
from click.testing import CliRunner

from pipeline.cli import cli


@pytest.fixture(scope="module")
def small_scan(simulate):
    return simulate("small_tank.yaml", 77)


def _run(args):
    return CliRunner().invoke(cli, args, catch_exceptions=False)


def test_help_is_readable():
    r = _run(["--help"])
    assert r.exit_code == 0
    for cmd in ("synth", "demo", "run", "evaluate"):
        assert cmd in r.output
    assert "qualified tank engineer" in r.output


def test_run_writes_profile_and_resolved_config(tmp_path, small_scan):
    scan, truth = small_scan
    out = tmp_path / "out"
    r = _run(["-q", "run", str(scan), "--out", str(out), "--set", "profile.bin_width_deg=2"])
    assert r.exit_code == 0, r.output
    names = {p.name for p in out.iterdir()}
    assert {"profile.csv", "profile.json", "config.resolved.yaml", "quicklook.png"} <= names
    rows = (out / "profile.csv").read_text().splitlines()
    assert rows[0].split(",")[:6] == ["azimuth_deg", "elevation", "std_error", "n_points", "n_rejected", "n_stations"]
    assert len(rows) == 1 + 180
    js = json.loads((out / "profile.json").read_text())
    for key in ("units", "shell", "noise", "input", "config", "software", "counts", "timings_s"):
        assert key in js
    assert js["shell"]["radius"] == pytest.approx(truth["tank"]["outer_radius"], abs=0.003)
    assert len(js["input"]["sha256"]) == 64
    assert "ci95" in js["noise"] and js["noise"]["ci95"][0] < js["noise"]["sigma"] < js["noise"]["ci95"][1]
    resolved = yaml.safe_load((out / "config.resolved.yaml").read_text())
    assert resolved["profile"]["bin_width_deg"] == 2
    # rerunning with the resolved config reproduces the profile exactly
    out2 = tmp_path / "out2"
    r = _run(["-q", "run", str(scan), "--out", str(out2), "--config", str(out / "config.resolved.yaml")])
    assert r.exit_code == 0
    assert (out2 / "profile.csv").read_text() == (out / "profile.csv").read_text()


def _assert_fails(args, phrase, out):
    r = CliRunner().invoke(cli, args)
    assert r.exit_code == 2, r.output
    msg = r.stderr if hasattr(r, "stderr") else r.output
    assert phrase in (r.output + (msg or "")), r.output
    assert not out.exists() or not any(out.iterdir())
    return r


def test_missing_file(tmp_path):
    _assert_fails(["run", str(tmp_path / "nope.las"), "--out", str(tmp_path / "o")], "scan file not found", tmp_path / "o")


def test_unknown_extension(tmp_path):
    f = tmp_path / "scan.dwg"
    f.write_bytes(b"xxxx")
    _assert_fails(["run", str(f), "--out", str(tmp_path / "o")], "unknown scan extension", tmp_path / "o")


def test_empty_file(tmp_path):
    f = tmp_path / "scan.las"
    f.write_bytes(b"")
    _assert_fails(["run", str(f), "--out", str(tmp_path / "o")], "empty", tmp_path / "o")


def test_truncated_las(tmp_path, small_scan):
    scan, _ = small_scan
    f = tmp_path / "cut.las"
    f.write_bytes(scan.read_bytes()[: scan.stat().st_size // 2])
    _assert_fails(["run", str(f), "--out", str(tmp_path / "o")], "truncated", tmp_path / "o")


def test_corrupt_laz(tmp_path, simulate):
    scan, _ = simulate("small_tank.yaml", 78, output={"format": "laz"})
    b = bytearray(scan.read_bytes())
    n = len(b)
    for i in range(n // 2, n // 2 + 50000):
        b[i] = (b[i] * 7 + 13) % 256
    f = tmp_path / "bad.laz"
    f.write_bytes(bytes(b))
    _assert_fails(["run", str(f), "--out", str(tmp_path / "o")], "corrupt", tmp_path / "o")


def test_nan_coordinates_dropped_or_refused(tmp_path, small_scan):
    import laspy

    scan, _ = small_scan
    las = laspy.read(scan)
    xyz = np.column_stack([las.x, las.y, las.z, las.intensity, las.point_source_id]).astype(float)
    few = xyz.copy()
    few[::2000, 0] = np.nan
    np.save(tmp_path / "few.npy", few)
    r = _run(["-q", "run", str(tmp_path / "few.npy"), "--out", str(tmp_path / "ok")])
    assert r.exit_code == 0
    js = json.loads((tmp_path / "ok" / "profile.json").read_text())
    assert js["counts"]["nonfinite_dropped"] == len(few[::2000])
    many = xyz.copy()
    many[::20, 2] = np.inf
    np.save(tmp_path / "many.npy", many)
    _assert_fails(["run", str(tmp_path / "many.npy"), "--out", str(tmp_path / "o")], "max_nonfinite_fraction",
                  tmp_path / "o")


def test_no_cylinder(tmp_path):
    rng = np.random.default_rng(0)
    xy = rng.uniform(-20, 20, (50000, 2))
    z = 0.01 * rng.normal(size=50000)
    np.save(tmp_path / "flat.npy", np.column_stack([xy, z]))
    _assert_fails(["run", str(tmp_path / "flat.npy"), "--out", str(tmp_path / "o")], "shell:", tmp_path / "o")


def test_low_coverage_refused_or_flagged(tmp_path, simulate):
    scan, _ = simulate("small_tank.yaml", 79, stations={"ring_count": 1, "ring_distance": 7.0,
                                                          "common": {"h_step_deg": 0.5, "v_step_deg": 0.5,
                                                                     "v_min_deg": -35,
                                                                     "band": {"h_step_deg": 0.12, "v_step_deg": 0.05}}})
    _assert_fails(["run", str(scan), "--out", str(tmp_path / "o")], "profile.min_coverage", tmp_path / "o")
    r = _run(["-q", "run", str(scan), "--out", str(tmp_path / "f"), "--set", "profile.on_low_coverage=flag"])
    assert r.exit_code == 0
    js = json.loads((tmp_path / "f" / "profile.json").read_text())
    assert any("min_coverage" in w for w in js["warnings"])


def test_wrong_units_suggests_the_fitting_unit(tmp_path, small_scan):
    import laspy

    scan, _ = small_scan
    las = laspy.read(scan)
    xyz = np.column_stack([las.x, las.y, las.z]) * 1000.0  # the same tank in millimetres
    np.savetxt(tmp_path / "mm.xyz", xyz[::3], fmt="%.1f")
    r = _assert_fails(["run", str(tmp_path / "mm.xyz"), "--out", str(tmp_path / "o")], "input.units", tmp_path / "o")
    assert "mm" in r.output


def test_unwritable_output(tmp_path, small_scan):
    scan, _ = small_scan
    blocker = tmp_path / "afile"
    blocker.write_text("x")
    _assert_fails(["run", str(scan), "--out", str(blocker / "sub")], "output", blocker / "sub")


def test_bad_config_key_names_the_key(tmp_path, small_scan):
    scan, _ = small_scan
    r = _assert_fails(["run", str(scan), "--out", str(tmp_path / "o"), "--set", "profile.bin_widht_deg=2"],
                      "profile.bin_width_deg", tmp_path / "o")
    assert "unknown key 'profile.bin_widht_deg'" in r.output


def test_malformed_set_is_a_usage_error(tmp_path, small_scan):
    scan, _ = small_scan
    r = CliRunner().invoke(cli, ["run", str(scan), "--out", str(tmp_path / "o"), "--set", "novalue"])
    assert r.exit_code == 2
    assert "KEY=VALUE" in r.output
