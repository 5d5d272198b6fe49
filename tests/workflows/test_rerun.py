"""Rerun: changed keys and headline results; the scan found by the manifest's absolute path and SHA-256, or given
with --scan; a folder that is not a run, or the run itself as --out, is refused."""
import json
import os
from pathlib import Path

import pytest

from tests.helpers import assert_fails, cli_output, invoke


@pytest.fixture(scope="module")
def run_dir(simulate, tmp_path_factory):
    scan, _ = simulate("small_tank.yaml", 85)
    out = tmp_path_factory.mktemp("rerun") / "run"
    invoke(["-q", "run", scan, "--out", out, "--set", "tank.shell_height=6", "--set", "tank.yield_strength=250 MPa",
            "--set", "output.plots=false"])
    return out


def test_rerun_shows_changed_keys_and_results(run_dir, tmp_path):
    r = invoke(["-q", "rerun", run_dir, "--set", "profile.bin_width_deg=2", "--out", tmp_path / "new"])
    assert "profile.bin_width_deg: 1.0 -> 2" in r.output
    assert "noise sigma:" in r.output and "verdict:" in r.output
    rows = [r for r in (tmp_path / "new" / "profile.csv").read_text().splitlines() if not r.startswith("#")]
    assert len(rows) == 181


def test_rerun_of_a_non_run_folder(tmp_path):
    assert_fails(["rerun", tmp_path, "--out", tmp_path / "x"], "not a chimeline run folder", tmp_path / "x")


def test_rerun_set_typo_names_the_key_not_a_temporary_file(run_dir, tmp_path):
    r = assert_fails(["rerun", run_dir, "--set", "profile.bin_widht_deg=2", "--out", tmp_path / "x"],
                     "--set: unknown key 'profile.bin_widht_deg' (did you mean 'profile.bin_width_deg'?)", tmp_path / "x")
    assert "config.resolved.yaml" not in r.output and ".tmp" not in r.output


def _copy_run(run_dir, tmp_path):
    import shutil

    dst = tmp_path / "earlier"
    shutil.copytree(run_dir, dst)
    return dst


def _move_scan_in_manifest(run, new_path):
    m = json.loads((run / "manifest.json").read_text())
    m["inputs"][0]["path"] = str(new_path)
    (run / "manifest.json").write_text(json.dumps(m))
    return m["inputs"][0]["sha256"]


def test_rerun_from_another_folder_finds_the_scan_by_its_absolute_path(run_dir, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    invoke(["-q", "rerun", os.path.relpath(run_dir, tmp_path), "--out", "again", "--set", "profile.bin_width_deg=3"])
    m = json.loads((tmp_path / "again" / "manifest.json").read_text())
    earlier = json.loads((run_dir / "manifest.json").read_text())
    assert m["inputs"][0] == earlier["inputs"][0]  # same scan, same SHA-256
    assert m["inputs"][1]["role"] == "earlier_run" and m["inputs"][1]["path"] == str(run_dir)


def test_rerun_of_a_moved_scan_needs_scan_with_the_same_hash(run_dir, tmp_path, simulate):
    import shutil

    run = _copy_run(run_dir, tmp_path)
    scan = Path(json.loads((run / "manifest.json").read_text())["inputs"][0]["path"])
    moved = tmp_path / "archive" / "moved.las"
    moved.parent.mkdir()
    shutil.copy(scan, moved)
    sha = _move_scan_in_manifest(run, tmp_path / "gone" / scan.name)
    r = assert_fails(["rerun", run, "--out", tmp_path / "x"], "is no longer there; give the moved scan with --scan",
                     tmp_path / "x")
    assert sha[:16] in r.output
    invoke(["-q", "rerun", run, "--scan", moved, "--out", tmp_path / "new"])
    m = json.loads((tmp_path / "new" / "manifest.json").read_text())
    assert m["inputs"][0] == {"role": "scan", "path": str(moved), "sha256": sha}
    other, _ = simulate("small_tank.yaml", 77)  # another scan (shared with other tests): refused unless asked for
    assert_fails(["rerun", run, "--scan", other, "--out", tmp_path / "y"], "differs from the earlier run's input",
                 tmp_path / "y")
    r = invoke(["rerun", run, "--scan", other, "--allow-different-input", "--out", tmp_path / "y"])
    assert "warning: the scan differs from the earlier run's input" in cli_output(r)


def test_rerun_into_its_own_folder_is_refused(run_dir, tmp_path):
    before = sorted(p.name for p in run_dir.iterdir())
    assert_fails(["rerun", run_dir, "--out", run_dir], "is the run being rerun")
    assert sorted(p.name for p in run_dir.iterdir()) == before


def test_an_error_in_the_earlier_config_names_its_file(run_dir, tmp_path):
    run = _copy_run(run_dir, tmp_path)
    (run / "config.resolved.yaml").write_text("profile:\n  bin_width_deg: -1\n")
    assert_fails(["rerun", run, "--out", tmp_path / "x"], f"{run / 'config.resolved.yaml'}: 'profile.bin_width_deg'",
                 tmp_path / "x")
