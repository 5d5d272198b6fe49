"""Shared test helpers: scene files as mappings, truth per bin, CLI invocation and failure checks."""
from __future__ import annotations

import copy
import os
import shutil
import subprocess
import sys
import tarfile
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
    """stdout and stderr of a CliRunner result: ``output`` holds both, interleaved, on every click version
    (click < 8.2 mixes stderr in by default; 8.2 keeps ``output`` as the mix and adds ``stdout``/``stderr``)."""
    return result.output or ""


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


CACHE = ROOT / "tests" / ".cache"


def laspy_corpus() -> list[Path]:
    """The LAS/LAZ files of laspy's own test data (its source distribution, the installed version), downloaded
    once into tests/.cache. Offline: the test is skipped, except in CI (env CI set), where it fails."""

    import laspy
    import pytest

    version = laspy.__version__
    folder = CACHE / f"laspy-{version}" / "tests" / "data"
    if not folder.is_dir():
        CACHE.mkdir(parents=True, exist_ok=True)
        sdist = CACHE / f"laspy-{version}.tar.gz"
        if not sdist.exists():
            base = [sys.executable, "-m", "pip", "download", "--no-deps", "--no-binary", ":all:", "-q",
                    "--disable-pip-version-check", f"laspy=={version}", "-d", str(CACHE)]
            # without build isolation pip needs laspy's build backend installed (the test extra has it): seconds
            # instead of a minute spent building an isolated environment
            r = subprocess.run(base + ["--no-build-isolation"], capture_output=True, text=True, timeout=300)
            if r.returncode != 0:
                r = subprocess.run(base, capture_output=True, text=True, timeout=300)
            if r.returncode != 0 or not sdist.exists():
                msg = f"cannot download laspy=={version}'s source distribution: {r.stderr.strip()[-300:]}"
                if os.environ.get("CI"):
                    pytest.fail(msg)
                pytest.skip(msg)
        with tarfile.open(sdist) as tar:
            members = [m for m in tar.getmembers() if m.name.startswith(f"laspy-{version}/tests/data/")
                       and m.isfile()]
            try:
                tar.extractall(CACHE, members=members, filter="data")
            except TypeError:  # Python without extraction filters (before 3.10.12 / 3.11.4)
                tar.extractall(CACHE, members=members)
    return sorted(p for p in folder.iterdir() if p.suffix.lower() in (".las", ".laz"))
def make_immutable(path, on: bool = True) -> bool:
    """chattr +i (or -i): a folder even root cannot write into (ext4 and others); False where chattr cannot."""
    import subprocess

    try:
        subprocess.run(["chattr", "+i" if on else "-i", str(path)], check=True, capture_output=True)
        return True
    except (OSError, subprocess.CalledProcessError):
        return False
