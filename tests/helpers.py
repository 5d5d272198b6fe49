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


def laspy_corpus() -> list[Path]:
    """The LAS/LAZ files of laspy's own test data (tests/data in its source distribution, for the installed
    version), downloaded once with pip into tests/.cache/. Skips the calling test when the download fails
    (offline), except in CI (env CI set), where it fails."""
    import importlib.metadata

    import pytest

    version = importlib.metadata.version("laspy")
    cache = ROOT / "tests" / ".cache" / f"laspy-{version}-data"
    if not (cache / ".complete").exists():
        dl = ROOT / "tests" / ".cache" / "download"
        dl.mkdir(parents=True, exist_ok=True)
        r = subprocess.run([sys.executable, "-m", "pip", "download", "--no-deps", "--no-binary", ":all:",
                            f"laspy=={version}", "-d", str(dl), "-q", "--disable-pip-version-check"],
                           capture_output=True, text=True, timeout=600)
        sdist = dl / f"laspy-{version}.tar.gz"
        if r.returncode != 0 or not sdist.exists():
            msg = f"could not download laspy {version}'s source distribution (offline?): {r.stderr.strip()[-300:]}"
            if os.environ.get("CI"):
                pytest.fail(msg)
            pytest.skip(msg)
        cache.mkdir(parents=True, exist_ok=True)
        with tarfile.open(sdist) as tf:
            for m in tf.getmembers():
                parts = Path(m.name).parts
                if m.isfile() and "tests" in parts and "data" in parts and m.name.lower().endswith((".las", ".laz")):
                    with tf.extractfile(m) as src:
                        (cache / "_".join(parts[parts.index("data") + 1:])).write_bytes(src.read())
        (cache / ".complete").touch()
    return sorted(p for p in cache.iterdir() if p.suffix.lower() in (".las", ".laz"))
