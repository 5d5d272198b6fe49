"""Templates for the hostile-input suite: a finished run, evaluation and compare folder, built once a session."""
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from tests.helpers import SCENES, invoke, write_csv


@dataclass(frozen=True)
class Templates:
    scan: Path  # a small simulated LAS scan
    run: Path  # chimeline run of it
    evaluation: Path  # chimeline evaluate of a 10-point survey
    compare: Path  # chimeline compare of the run with itself
    scans: Path  # a folder of files as synth leaves them
    survey: Path  # the 10-point survey (azimuth_deg, elevation)
    scene: Path  # a scene file


def survey_rows(n=10):
    az = np.arange(n) * 360.0 / n
    z = 10.0 + 0.02 * np.cos(np.radians(az - 40))
    return [(f"{a:.3f}", f"{e:.5f}") for a, e in zip(az, z)]


TANK = ["--set", "tank.diameter=30", "--set", "tank.shell_height=12", "--set", "tank.yield_strength=250 MPa",
        "--set", "evaluate.input_units=m"]


@pytest.fixture(scope="session")
def templates(simulate, tmp_path_factory):
    scan, _ = simulate("small_tank.yaml", 77)
    base = tmp_path_factory.mktemp("hostile_templates")
    invoke(["-q", "run", scan, "--out", base / "run", "--set", "output.plots=false"])
    survey = write_csv(base / "survey.csv", "azimuth_deg,elevation", survey_rows())
    invoke(["-q", "evaluate", survey, "--out", base / "evaluation", *TANK])
    invoke(["-q", "compare", base / "run", base / "run", "--out", base / "compare"])
    scans = base / "scans"
    scans.mkdir()
    (scans / "tank.las").write_bytes(b"LASF earlier scan")
    (scans / "tank.truth.json").write_text("{}")
    scene = base / "scene.yaml"
    shutil.copy(SCENES / "small_tank.yaml", scene)
    return Templates(scan=scan, run=base / "run", evaluation=base / "evaluation", compare=base / "compare",
                     scans=scans, survey=survey, scene=scene)
