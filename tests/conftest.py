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
