"""The minimum survey (from memory: N >= D/10 ft, >= 8, even, <= 32 ft apart)."""
import numpy as np

from chimeline.evaluate.adequacy import adequacy, minimum_points
from chimeline.io.surveys import SurveyData

FT = 0.3048


def _survey(az, z, se=None, dense=False):
    az = np.asarray(az, float)
    return SurveyData(az, np.asarray(z, float), None if se is None else np.asarray(se, float),
                      tuple(str(i + 1) for i in range(len(az))), dense, "m", "test")


def test_minimum_points():
    assert minimum_points(30.0) == 10  # 98.4 ft -> 10
    assert minimum_points(10.0) == 8
    assert minimum_points(100 * FT) == 10
    assert minimum_points(101 * FT) == 12  # 10.1 -> 11 -> even 12


def test_adequacy_warnings():
    s = _survey(np.arange(0, 360, 45.0), np.zeros(8))
    w = adequacy(s, 60.0)  # 197 ft: needs 20, and 45 deg is 23.6 m apart
    assert any("minimum" in x for x in w) and any("32 ft" in x for x in w)
    assert adequacy(_survey(np.arange(0, 360, 36.0), np.zeros(10)), 30.0) == []
