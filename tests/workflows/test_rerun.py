"""Rerun: changed keys and headline results; a folder that is not a run is refused."""
import pytest

from tests.helpers import assert_fails, invoke


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
    rows = (tmp_path / "new" / "profile.csv").read_text().splitlines()
    assert len(rows) == 181


def test_rerun_of_a_non_run_folder(tmp_path):
    assert_fails(["rerun", tmp_path, "--out", tmp_path / "x"], "not a chimeline run folder", tmp_path / "x")


def test_rerun_set_typo_names_the_key_not_a_temporary_file(run_dir, tmp_path):
    r = assert_fails(["rerun", run_dir, "--set", "profile.bin_widht_deg=2", "--out", tmp_path / "x"],
                     "--set: unknown key 'profile.bin_widht_deg' (did you mean 'profile.bin_width_deg'?)", tmp_path / "x")
    assert "config.resolved.yaml" not in r.output and ".tmp" not in r.output
