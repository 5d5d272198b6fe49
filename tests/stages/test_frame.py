"""Frame: origin removal, units, up axis and the azimuth convention."""
import numpy as np
import pytest

from chimeline.config import FrameConfig, InputConfig
from chimeline.stages.frame import make_frame, tie_azimuth_zero


def _frame(**kw):
    fc = FrameConfig(**{k: v for k, v in kw.items() if k in ("azimuth_reference_deg", "azimuth_direction", "origin")})
    ic = InputConfig(**{k: v for k, v in kw.items() if k in ("units", "up_axis")})
    return make_frame(np.array([[612345.12, 5234567.89, 40.0]] * 3), None, ic, fc, [])


def test_azimuth_clockwise_from_plus_y_by_default():
    f = _frame()
    dx = np.array([0.0, 1.0, 0.0, -1.0])
    dy = np.array([1.0, 0.0, -1.0, 0.0])
    np.testing.assert_allclose(f.azimuth_deg(dx, dy), [0, 90, 180, 270])


def test_azimuth_reference_and_direction():
    f = _frame(azimuth_reference_deg=90.0)
    np.testing.assert_allclose(f.azimuth_deg(np.array([1.0, 0.0]), np.array([0.0, -1.0])), [0, 90])
    g = _frame(azimuth_direction="ccw")
    np.testing.assert_allclose(g.azimuth_deg(np.array([1.0, -1.0]), np.array([0.0, 0.0])), [270, 90])


def test_georeferenced_origin_removed_before_float_work():
    f = _frame()
    np.testing.assert_array_equal(f.origin, [612345.0, 5234568.0, 40.0])
    p = f.to_local(np.array([[612345.12, 5234567.89, 40.5]]))
    np.testing.assert_allclose(p, [[0.12, -0.11, 0.5]], atol=1e-9)


@pytest.mark.parametrize("units,factor", [("ft", 0.3048), ("us_ft", 1200 / 3937), ("mm", 0.001)])
def test_units_scale_to_metres(units, factor):
    f = _frame(units=units)
    p = f.to_local(f.origin[None, :] + np.array([[10.0, 0, 0]]))
    assert p[0, 0] == pytest.approx(10 * factor, rel=1e-12)


def test_file_xy_to_local_inverts_to_file_xy():
    f = _frame(units="us_ft")
    xy = np.array([612400.5, 5234500.25])
    np.testing.assert_allclose(f.to_file_xy(f.file_xy_to_local(xy)), xy, rtol=0, atol=1e-9)
    assert f.up_origin_m() == pytest.approx(40.0 * 1200 / 3937, rel=1e-15)


@pytest.mark.parametrize("direction", ["cw", "ccw"])
def test_azimuth_zero_tied_to_a_feature(direction):
    """frame.azimuth_zero_at: the feature's azimuth is 0 and the implied reference angle is reported."""
    from types import SimpleNamespace

    f = _frame(azimuth_direction=direction)
    centre_file = np.array([612345.0 + 3.0, 5234568.0 - 2.0])
    shell = SimpleNamespace(center=np.array([3.0, -2.0, 0.0]), radius=10.0)
    feature = centre_file + np.array([10.0, 10.0])  # north-east of the centre: 45 deg clockwise from +Y
    g = tie_azimuth_zero(f, shell, feature)
    assert g.azimuth_reference_deg == pytest.approx(45.0)
    d = g.file_xy_to_local(feature) - shell.center[:2]
    assert g.azimuth_deg(d[0], d[1]) == pytest.approx(0.0, abs=1e-9)
    east = np.array([1.0, 0.0])
    assert g.azimuth_deg(*east) == pytest.approx(45.0 if direction == "cw" else 315.0)
