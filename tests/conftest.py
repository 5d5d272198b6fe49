import json

import pytest

from tests.helpers import scene_mapping

_SIM_CACHE = {}


@pytest.fixture
def small_scene():
    from chimeline.synth import scene_from_mapping

    return scene_from_mapping(scene_mapping("small_tank.yaml"))


@pytest.fixture(scope="session")
def simulate(tmp_path_factory):
    """simulate(scene_file, seed, **overrides) -> (scan path, truth dict), cached for the session."""
    from chimeline.synth import run_synth, scene_from_mapping

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


@pytest.fixture(scope="module")
def small_scan(simulate):
    return simulate("small_tank.yaml", 77)


@pytest.fixture(scope="session")
def small_reference(simulate):
    """(scan path, RunResult) of small_tank.yaml seed 91 with the default config: the reference of the reader
    round trips, computed once per session."""
    from chimeline.config import load_config
    from chimeline.workflows.run import process_scan

    scan, _ = simulate("small_tank.yaml", 91)
    cfg, resolved, s = load_config()
    return scan, process_scan(scan, cfg, resolved, s)


# property-based tests (hypothesis): bounded, reproducible (derandomized), no example database in the tree
from hypothesis import HealthCheck, settings  # noqa: E402

settings.register_profile("chimeline", max_examples=60, deadline=None, derandomize=True, database=None,
                          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
settings.load_profile("chimeline")
