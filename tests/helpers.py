"""Shared test helpers: scene files as mappings, truth per bin, CLI invocation and failure checks."""
from __future__ import annotations

import copy
import shutil
from pathlib import Path

import numpy as np
import yaml
from click.testing import CliRunner

ROOT = Path(__file__).resolve().parents[1]
SCENES = ROOT / "synthetic_scans"
CONFIGS = ROOT / "configs"


def scene_mapping(name: str, **overrides) -> dict:
    """A scene file from synthetic_scans/ as a mapping, with overrides (``a__b`` for nested keys)."""
    data = yaml.safe_load((SCENES / name).read_text())
    for key, val in overrides.items():
        node = data
        parts = key.split("__")
        for p in parts[:-1]:
            node = node.setdefault(p, {})
        node[parts[-1]] = copy.deepcopy(val)
    return data


def truth_bin_means(truth, profile_azimuth, width, z_origin=0.0):
    """Truth junction elevation averaged over each bin (the truth table is every 0.1 deg)."""
    taz = np.asarray(truth["junction"]["azimuth_deg"])
    tz = np.asarray(truth["junction"]["elevation"]) - z_origin
    out = []
    for a in profile_azimuth:
        d = np.mod(taz - a + 180, 360) - 180
        out.append(tz[np.abs(d) < width / 2].mean())
    return np.array(out)


def cli_output(result) -> str:
    """stdout and stderr of a CliRunner result, on every click version."""
    text = result.output or ""
    try:
        err = result.stderr
    except ValueError:  # older click: stderr not captured separately
        err = ""
    return text + ("" if err and err in text else (err or ""))


def invoke(args, *, ok=True):
    """Run the CLI in-process; with ``ok`` assert exit code 0."""
    from chimeline.cli import cli

    r = CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)
    if ok:
        assert r.exit_code == 0, cli_output(r)
    return r


def assert_fails(args, phrase, out: Path | None = None):
    """Exit code 2, ``phrase`` in the message, and nothing written to ``out``."""
    from chimeline.cli import cli

    r = CliRunner().invoke(cli, [str(a) for a in args])
    text = cli_output(r)
    assert r.exit_code == 2, text
    assert phrase in text, text
    assert "Traceback" not in text
    if out is not None:
        assert not out.exists() or not any(out.iterdir())
    return r


def write_csv(path: Path, header: str, rows) -> Path:
    path.write_text(header + "\n" + "\n".join(",".join(str(v) for v in r) for r in rows) + "\n")
    return path


def chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        p = shutil.which(name)
        if p:
            return p
    return None


def make_immutable(path, on: bool = True) -> bool:
    """chattr +i (or -i): a folder even root cannot write into (ext4 and others); False where chattr cannot."""
    import subprocess

    try:
        subprocess.run(["chattr", "+i" if on else "-i", str(path)], check=True, capture_output=True)
        return True
    except (OSError, subprocess.CalledProcessError):
        return False
