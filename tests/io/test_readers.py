"""Readers: every format gives the same coordinates; units come from the LAS CRS; feet are handled."""
import laspy
import numpy as np
import pytest

from chimeline.config import load_config
from chimeline.errors import InputError
from chimeline.io.readers import open_scan, wkt_units
from chimeline.workflows.run import process_scan


def _all(src):
    return np.concatenate([c.xyz for c in src.chunks(100_000)])


@pytest.mark.parametrize("fmt", ["laz", "ply", "xyz", "npy", "las12"])
def test_formats_read_the_same_points(simulate, fmt):
    ref_scan, _ = simulate("small_tank.yaml", 91)
    scan, _ = simulate("small_tank.yaml", 91, output={"format": fmt})
    a, b = _all(open_scan(ref_scan)), _all(open_scan(scan))
    assert a.shape == b.shape
    # LAS variants store the same 0.1 mm integers; PLY/npy keep full precision, text keeps 0.1 mm decimals
    tol = 0.0 if fmt in ("laz", "las12") else (1e-4 if fmt == "xyz" else 0.5e-4)
    assert np.abs(a - b).max() <= tol + 1e-9
    src = open_scan(scan)
    if fmt != "npy":
        assert src.has_source_id


def testwkt_units():
    assert wkt_units('PROJCS["x",UNIT["US survey foot",0.304800609601219]]') == "us_ft"
    assert wkt_units('PROJCS["x",UNIT["foot",0.3048]]') == "ft"
    assert wkt_units('PROJCS["x",UNIT["metre",1]]') == "m"


@pytest.mark.parametrize("units,factor", [("ft", 0.3048), ("us_ft", 1200 / 3937)])
def test_feet_scan_gives_feet_outputs(simulate, units, factor):
    scan, truth = simulate("small_tank.yaml", 92, output={"format": "las14", "units": units,
                                                        "georef_offset": [2000000.0, 700000.0, 100.0]})
    src = open_scan(scan)
    assert src.units_hint == units  # from the file's WKT
    cfg, resolved, s = load_config()
    res = process_scan(scan, cfg, resolved, s)
    assert res.frame.units == units and res.frame.units_source == "file CRS (WKT)"
    # internal metres; the truth radius is in feet
    assert res.shell.radius / factor == pytest.approx(truth["tank"]["outer_radius"], abs=0.003 / factor)


def test_units_conflict_is_an_error_unless_the_config_says_which_wins(simulate):
    scan, _ = simulate("small_tank.yaml", 92, output={"format": "las14", "units": "ft",
                                                     "georef_offset": [2000000.0, 700000.0, 100.0]})
    cfg, resolved, s = load_config(None, [("input.units", "us_ft")])
    with pytest.raises(InputError, match=r"input.units is 'us_ft' but the file's CRS .* says 'ft'.*units_priority"):
        process_scan(scan, cfg, resolved, s)
    cfg, resolved, s = load_config(None, [("input.units", "us_ft"), ("input.units_priority", "config")])
    res = process_scan(scan, cfg, resolved, s)
    assert any("says 'ft'" in w and "using 'us_ft'" in w for w in res.warnings)
    assert res.frame.units == "us_ft" and res.frame.units_source == "config"


def test_y_up_file_gives_the_same_profile(simulate, tmp_path):
    """A y-up file (x, up, -north), common in mesh tools, gives the z-up result with input.up_axis: y."""
    scan, _ = simulate("small_tank.yaml", 93)
    las = laspy.read(scan)
    x, y, z = np.asarray(las.x), np.asarray(las.y), np.asarray(las.z)
    arr = np.column_stack([x, z, -y, las.intensity, las.point_source_id]).astype(float)
    np.save(tmp_path / "yup.npy", arr)
    cfg, resolved, s = load_config()
    a = process_scan(scan, cfg, resolved, s)
    cfg2, resolved2, s2 = load_config(None, [("input.up_axis", "y")])
    b = process_scan(tmp_path / "yup.npy", cfg2, resolved2, s2)
    assert b.shell.radius == pytest.approx(a.shell.radius, abs=5e-4)
    ok = (a.profile.status == "ok") & (b.profile.status == "ok")
    assert ok.mean() > 0.9
    za = a.profile.elevation[ok] + a.frame.origin[2]
    zb = b.profile.elevation[ok] + b.frame.origin[1]
    assert np.median(np.abs(za - zb)) < 3e-4  # same junction at the same azimuths (sampling differs slightly)
