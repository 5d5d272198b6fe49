"""CLI: help, exit codes, one-line errors, and nothing written on failure (click's CliRunner)."""

import laspy
import numpy as np

from tests.helpers import assert_fails, cli_output, invoke


def test_help_lists_every_command_with_the_caution():
    r = invoke(["--help"])
    for cmd in ("synth", "demo", "run", "evaluate", "compare", "rerun"):
        assert f"  {cmd} " in r.output, cmd
    assert "qualified tank engineer or authorized inspector" in r.output
    assert "governing edition of the standard" in r.output


def test_missing_file(tmp_path):
    assert_fails(["run", str(tmp_path / "nope.las"), "--out", str(tmp_path / "o")], "scan file not found", tmp_path / "o")


def test_unknown_extension(tmp_path):
    f = tmp_path / "scan.dwg"
    f.write_bytes(b"xxxx")
    assert_fails(["run", str(f), "--out", str(tmp_path / "o")], "unknown scan extension", tmp_path / "o")


def test_empty_file(tmp_path):
    f = tmp_path / "scan.las"
    f.write_bytes(b"")
    assert_fails(["run", str(f), "--out", str(tmp_path / "o")], "empty", tmp_path / "o")


def test_truncated_las(tmp_path, small_scan):
    scan, _ = small_scan
    f = tmp_path / "cut.las"
    f.write_bytes(scan.read_bytes()[: scan.stat().st_size // 2])
    assert_fails(["run", str(f), "--out", str(tmp_path / "o")], "truncated", tmp_path / "o")


def test_corrupt_laz(tmp_path, simulate):
    scan, _ = simulate("small_tank.yaml", 78, output={"format": "laz"})
    b = bytearray(scan.read_bytes())
    n = len(b)
    for i in range(n // 2, n // 2 + 50000):
        b[i] = (b[i] * 7 + 13) % 256
    f = tmp_path / "bad.laz"
    f.write_bytes(bytes(b))
    assert_fails(["run", str(f), "--out", str(tmp_path / "o")], "corrupt", tmp_path / "o")


def test_no_cylinder(tmp_path):
    rng = np.random.default_rng(0)
    xy = rng.uniform(-20, 20, (50000, 2))
    z = 0.01 * rng.normal(size=50000)
    np.save(tmp_path / "flat.npy", np.column_stack([xy, z]))
    assert_fails(["run", str(tmp_path / "flat.npy"), "--out", str(tmp_path / "o")], "shell:", tmp_path / "o")


def test_wrong_units_suggests_the_fitting_unit(tmp_path, small_scan):
    scan, _ = small_scan
    las = laspy.read(scan)
    xyz = np.column_stack([las.x, las.y, las.z]) * 1000.0  # the same tank in millimetres
    np.savetxt(tmp_path / "mm.xyz", xyz[::3], fmt="%.1f")
    r = assert_fails(["run", str(tmp_path / "mm.xyz"), "--out", str(tmp_path / "o")], "input.units", tmp_path / "o")
    assert "mm" in r.output


def test_unwritable_output(tmp_path, small_scan):
    scan, _ = small_scan
    blocker = tmp_path / "afile"
    blocker.write_text("x")
    assert_fails(["run", str(scan), "--out", str(blocker / "sub")], "output", blocker / "sub")


def test_bad_config_key_names_the_key(tmp_path, small_scan):
    scan, _ = small_scan
    r = assert_fails(["run", str(scan), "--out", str(tmp_path / "o"), "--set", "profile.bin_widht_deg=2"],
                      "profile.bin_width_deg", tmp_path / "o")
    assert "unknown key 'profile.bin_widht_deg'" in r.output


def test_malformed_set_is_a_usage_error(tmp_path, small_scan):
    scan, _ = small_scan
    assert_fails(["run", scan, "--out", tmp_path / "o", "--set", "novalue"], "KEY=VALUE", tmp_path / "o")


def test_open3d_that_cannot_load_is_one_line(tmp_path, small_scan, monkeypatch):
    """A machine without Debian's libusb-1.0-0: the open3d import fails with OSError; the user gets one line."""
    import builtins

    real = builtins.__import__

    def broken(name, *a, **k):
        if name == "open3d":
            raise OSError("libusb-1.0.so.0: cannot open shared object file: No such file or directory")
        return real(name, *a, **k)

    monkeypatch.setattr(builtins, "__import__", broken)
    scan, _ = small_scan
    r = assert_fails(["run", scan, "--out", tmp_path / "o"], "sudo apt-get install libusb-1.0-0", tmp_path / "o")
    assert "libusb-1.0.so.0" in r.output


def test_every_command_help_says_what_it_writes():
    assert "report.html, plots/*.png" in invoke(["run", "--help"]).output
    assert "evaluation.json, evaluation.csv" in invoke(["evaluate", "--help"]).output
    assert "compare.html" in invoke(["compare", "--help"]).output


def test_verbose_shows_stage_details(tmp_path, small_scan):
    scan, _ = small_scan
    r = invoke(["-v", "run", scan, "--out", tmp_path / "o", "--set", "output.plots=false"])
    for phrase in ("DEBUG junction: ring", "DEBUG noise: per station", "INFO profile: ", "INFO junction: "):
        assert phrase in cli_output(r), phrase
    assert cli_output(r).count("INFO junction: ") == 1
