"""Units from the CRS (pyproj): WKT and GeoTIFF keys, horizontal and vertical apart, geographic systems refused.

Outside references: the EPSG registry's unit of each system, as pyproj's database gives it (EPSG:2223 NAD83 /
Arizona Central (ft) in international feet, EPSG:2263 NAD83 / New York Long Island (ftUS), EPSG:6360 NAVD88 height
(ftUS), EPSG:32618 UTM 18N in metres); GeoTIFF key ids and unit codes from the GeoTIFF specification (1024 model
type, 3072 projected system, 3076 linear unit, 4096 vertical system, 4099 vertical unit; 9001 metre, 9002 foot,
9003 US survey foot), from memory.
"""
import numpy as np
import pyproj
import pytest
from laspy import VLR

from chimeline.config import load_config
from chimeline.errors import InputError
from chimeline.io.crs import units_from_geokeys, units_from_wkt, wkt_units
from chimeline.io.readers import open_scan
from chimeline.units import US_SURVEY_FOOT
from chimeline.workflows.run import process_scan
from tests.io import formats


def _wkt(code, version=pyproj.enums.WktVersion.WKT1_GDAL):
    return pyproj.CRS.from_user_input(code).to_wkt(version)


@pytest.mark.parametrize("code,h,v", [
    ("EPSG:2223", "ft", None), ("EPSG:2263", "us_ft", None), ("EPSG:32618", "m", None),
    ("EPSG:32618+6360", "m", "us_ft"), ("EPSG:2263+6360", "us_ft", "us_ft"), ("EPSG:32618+5703", "m", "m")])
def test_units_from_wkt1_and_wkt2(code, h, v):
    for version in (pyproj.enums.WktVersion.WKT1_GDAL, pyproj.enums.WktVersion.WKT2_2019):
        u = units_from_wkt(_wkt(code, version))
        assert (u.horizontal, u.vertical) == (h, v), version


def test_local_wkt_and_the_text_fallback():
    assert units_from_wkt('LOCAL_CS["site",LOCAL_DATUM["d",0],UNIT["US survey foot",0.304800609601219],'
                          'AXIS["E",EAST],AXIS["N",NORTH]]').horizontal == "us_ft"
    assert wkt_units('PROJCS["x",UNIT["foot",0.3048]]') == "ft"
    assert wkt_units('garbage UNIT["metre",1]') == "m"


@pytest.mark.parametrize("code", ["EPSG:4326", "EPSG:4979", "EPSG:4326+5703", "EPSG:4978"])
def test_geographic_systems_are_refused(code):
    with pytest.raises(InputError, match="projected or local frame"):
        units_from_wkt(_wkt(code, pyproj.enums.WktVersion.WKT2_2019))


def test_geotiff_keys():
    g = units_from_geokeys(formats.geokeys((1024, 1), (3072, 2223)))
    assert (g.horizontal, g.vertical) == ("ft", None)
    g = units_from_geokeys(formats.geokeys((1024, 1), (3072, 32767), (3076, 9003), (4096, 32767), (4099, 9001)))
    assert (g.horizontal, g.vertical) == ("us_ft", "m")
    g = units_from_geokeys(formats.geokeys((1024, 1), (3072, 32618), (4096, 6360)))
    assert (g.horizontal, g.vertical) == ("m", "us_ft")
    with pytest.raises(InputError, match="geographic"):
        units_from_geokeys(formats.geokeys((1024, 2), (2048, 4326)))
    g = units_from_geokeys(formats.geokeys((1024, 1), (3072, 32767), (3076, 9005)))  # Clarke's foot
    assert g.horizontal is None and "Clarke" in g.unknown_unit


def _geokey_vlr(*keys):
    return VLR("LASF_Projection", 34735, "GeoKeyDirectoryTag", formats.geokeys(*keys))


def _wkt_vlr(code):
    return VLR("LASF_Projection", 2112, "OGC WKT", _wkt(code).encode() + b"\x00")


def test_geotiff_keyed_las_in_feet_is_read_in_feet(simulate, tmp_path):
    scan, truth = simulate("small_tank.yaml", 92, output={"format": "las14", "units": "ft",
                                                        "georef_offset": [2000000.0, 700000.0, 100.0]})
    path = formats.las_like(scan, tmp_path / "ft_geotiff.las", vlrs=[_geokey_vlr((1024, 1), (3072, 2223))])
    src = open_scan(path)
    assert src.crs.source == "GeoTIFF keys" and src.units_hint == "ft"
    cfg, resolved, s = load_config()
    res = process_scan(path, cfg, resolved, s)
    assert res.frame.units == "ft" and res.frame.units_source == "file CRS (GeoTIFF keys)"
    assert res.shell.radius / 0.3048 == pytest.approx(truth["tank"]["outer_radius"], abs=0.003 / 0.3048)


def test_compound_crs_metres_in_plan_and_us_feet_in_height(small_reference, tmp_path):
    """The same scan with heights in US survey feet under a compound CRS gives the metre scan's profile."""
    scan, a = small_reference
    path = formats.las_like(scan, tmp_path / "compound.las", scale_z=1 / US_SURVEY_FOOT,
                            vlrs=[_wkt_vlr("EPSG:32618+6360")])
    cfg, resolved, s = load_config()
    b = process_scan(path, cfg, resolved, s)
    assert (b.frame.units_horizontal, b.frame.units) == ("m", "us_ft")
    assert b.shell.radius == pytest.approx(a.shell.radius, abs=2e-4)
    ok = (a.profile.status == "ok") & (b.profile.status == "ok")
    assert ok.mean() > 0.95
    za = a.profile.elevation[ok] + a.frame.up_origin_m()
    zb = b.profile.elevation[ok] + b.frame.up_origin_m()
    assert np.median(np.abs(za - zb)) < 1e-4  # within the file's 0.1 mm scale (z re-quantised in feet)
    # the config may not contradict the file without saying which wins
    cfg2, resolved2, s2 = load_config(None, [("input.units_vertical", "m")])
    with pytest.raises(InputError, match=r"input.units_vertical is 'm' but the file's CRS .* says 'us_ft' for the "
                                         r"vertical axis"):
        process_scan(path, cfg2, resolved2, s2)
