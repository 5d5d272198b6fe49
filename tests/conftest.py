import copy
from pathlib import Path

import pytest
import yaml

ROOT = Path(__file__).resolve().parents[1]
SCENES = ROOT / "synthetic_scans"


def scene_mapping(name: str, **overrides) -> dict:
    """A scene file from synthetic_scans/ as a mapping, with dotted-key overrides."""
    data = yaml.safe_load((SCENES / name).read_text())
    for key, val in overrides.items():
        node = data
        parts = key.split("__")
        for p in parts[:-1]:
            node = node.setdefault(p, {})
        node[parts[-1]] = copy.deepcopy(val)
    return data


@pytest.fixture
def small_scene():
    from pipeline.synth import scene_from_mapping

    return scene_from_mapping(scene_mapping("small_tank.yaml"))


_SIM_CACHE = {}


@pytest.fixture(scope="session")
def simulate(tmp_path_factory):
    """simulate(scene_file, seed, **overrides) -> (scan path, truth dict), cached for the session."""
    import json

    from pipeline.synth import run_synth, scene_from_mapping

    def _sim(name, seed, **overrides):
        key = (name, seed, tuple(sorted((k, repr(v)) for k, v in overrides.items())))
        if key not in _SIM_CACHE:
            m = scene_mapping(name, **overrides)
            m["seed"] = seed
            out = tmp_path_factory.mktemp(name.replace(".yaml", ""))
            res = run_synth(scene_from_mapping(m), out)
            _SIM_CACHE[key] = (res.scan_path, json.loads(res.truth_path.read_text()))
        return _SIM_CACHE[key]

    return _sim


def truth_bin_means(truth, profile_azimuth, width, z_origin=0.0):
    """Truth junction elevation averaged over each bin (truth table is every 0.1 deg)."""
    import numpy as np

    taz = np.asarray(truth["junction"]["azimuth_deg"])
    tz = np.asarray(truth["junction"]["elevation"]) - z_origin
    out = []
    for a in profile_azimuth:
        d = np.mod(taz - a + 180, 360) - 180
        out.append(tz[np.abs(d) < width / 2].mean())
    return np.array(out)
