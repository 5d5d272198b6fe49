"""The fleet read back from finished folders, for survey evaluations (no Dask needed): two level surveys of one
invented tank three years apart give a history whose uniform and tilt change match the injected ones within their
uncertainty, in metres whatever unit the surveys were in, and whose extrapolation is labelled."""
import numpy as np
import pytest

from chimeline.units import FOOT
from chimeline.workflows.evaluate import evaluate_file
from chimeline.workflows.fleet import read_fleet_row, tank_histories
from tests.helpers import write_csv

TANK = [("tank.diameter", 30.0), ("tank.shell_height", 12.0), ("tank.yield_strength", "250 MPa")]


def _survey(path, n, uniform, tilt, low, mode2, rng, sd, unit=1.0):
    az = np.arange(n) * 360.0 / n
    th = np.radians(az)
    z = 10.0 + uniform - tilt * np.cos(th - np.radians(low)) + mode2 * np.cos(2 * th) + sd * rng.standard_normal(n)
    return write_csv(path, "azimuth_deg,elevation", [(f"{a:.4f}", repr(float(e / unit))) for a, e in zip(az, z)])


@pytest.mark.parametrize("unit_name, unit", [("m", 1.0), ("ft", FOOT)])
def test_survey_history_in_metres(tmp_path, unit_name, unit):
    rng = np.random.default_rng(31)
    out = tmp_path / "fleet"
    dates = ("2021-04-01", "2024-04-01")
    # 7 mm more uniform settlement, the tilt from 15 to 25 mm lowest at 200 deg, ovalisation from 4 to 9 mm
    specs = ((0.0, 0.015, 4e-3), (-0.007, 0.025, 9e-3))
    sets = TANK + [("evaluate.input_units", unit_name)]
    for date, (u, t, m2) in zip(dates, specs):
        f = _survey(tmp_path / f"s{date}.csv", 24, u, t, 200, m2, rng, 0.0015, unit)
        evaluate_file(f, out / "TK-A" / date, None, sets + [("tank.tag", "TK-A"), ("tank.survey_date", date)])
    rows = [read_fleet_row(out, "TK-A", d, "evaluate", "done") for d in dates]
    assert rows[1].tilt_amplitude == pytest.approx(0.025, abs=0.003)  # converted to metres
    (h,) = tank_histories(out, rows)
    (iv,) = h.intervals
    ch = iv.change
    assert ch is not None, iv.note
    assert ch.years == pytest.approx(3.0, abs=0.01)
    assert abs(ch.mean - (-0.007)) < 3 * ch.mean_se
    assert abs(ch.tilt_amplitude - 0.010) < 3 * ch.tilt_amplitude_se + 1e-4
    assert abs(ch.tilt_low_azimuth_deg - 200) < 10
    assert ch.modes_p is not None and ch.modes_p < 0.01  # the ovalisation grew by 5 mm
    # the tilt amplitude rate from the two evaluations: 10 mm in 3 years
    assert iv.tilt_amplitude_rate == pytest.approx(0.010 / 3, abs=3 * iv.tilt_amplitude_rate_se + 3e-4)
    assert np.allclose(ch.difference_se, 0.0015 * np.sqrt(2), rtol=0.6)  # both surveys' estimated reading error
    ex = iv.extrapolation
    if ex is None:
        assert h.extrapolation_note.startswith("no extrapolation")
    else:
        assert "linear extrapolation" in ex.method
        assert (ex.status == "extrapolated") == ex.significant or ex.status == "reached"


def test_registration_unobserved_only_for_several_stations_without_a_datum_spread():
    from chimeline.workflows.fleet import registration_unobserved

    assert registration_unobserved({"stations": [{}, {}, {}], "datum_sigma": 0.0})
    assert not registration_unobserved({"stations": [{}, {}, {}], "datum_sigma": 2e-4})
    assert not registration_unobserved({"stations": [{}], "datum_sigma": 0.0})  # one station: nothing to register
