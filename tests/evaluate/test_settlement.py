"""Whole evaluations: verdicts follow the limit; a settled arc is found with its depth."""
import math

import numpy as np
import pytest

from chimeline.config import EvaluateConfig, TankConfig
from chimeline.evaluate import evaluate_survey, tank_data
from chimeline.evaluate.deflection import allowable
from chimeline.io.arctable import load_arc_table
from chimeline.io.surveys import SurveyData


def _survey(az, z, se=None, dense=False):
    az = np.asarray(az, float)
    return SurveyData(az, np.asarray(z, float), None if se is None else np.asarray(se, float),
                      tuple(str(i + 1) for i in range(len(az))), dense, "m", "test")


def _tank(D=30.0):
    return tank_data(TankConfig(diameter=D, shell_height="12 m", yield_strength="250 MPa"), "m")


def test_evaluate_verdicts_follow_the_limit():
    N = 10
    az = np.arange(N) * 36.0
    th = np.radians(az)
    tank = _tank()
    Smax = allowable(math.pi * 30 / N, 250e6, 200e9, 12.0)
    for amp, expected in [(0.2 * Smax, "acceptable"), (5.0 * Smax, "exceeds")]:
        z = 0.01 * np.cos(th) + amp / (1 - np.cos(2 * 2 * np.pi / N)) * np.cos(2 * th)
        ev = evaluate_survey(_survey(az, z, np.full(N, 0.0005)), tank, EvaluateConfig(), load_arc_table())
        assert ev.criteria[0].verdict == expected
        assert np.nanmax(ev.deflection.ratio) == pytest.approx(amp / Smax, rel=1e-6)


def test_settled_arc_found_with_its_depth():
    R = 15.0
    az = np.arange(0.25, 360, 0.5)
    th = np.radians(az)
    arc = R * np.angle(np.exp(1j * (th - np.radians(200))))
    dip = np.where(np.abs(arc) < 4.0, 0.02 * np.cos(np.pi * arc / 8.0) ** 2, 0)
    z = 0.4 - dip
    ev = evaluate_survey(_survey(az, z, np.full(len(az), 0.0003), dense=True), _tank(),
                         EvaluateConfig(min_wavelength=1.0, max_order=80), load_arc_table())
    deep = max(ev.arcs, key=lambda a: a.depth)
    assert deep.deepest_deg == pytest.approx(200, abs=1.5)
    assert deep.depth == pytest.approx(0.02, abs=0.003)
    assert "ILLUSTRATIVE" in " ".join(ev.criteria[2].reasons)
