"""Shell geometry outputs of a run: CSV files with units in the headers, profile.json keys, figures, the report
section, the switch, and one-line errors for bad geometry config."""
import csv
import io
import json
from types import SimpleNamespace

import numpy as np
import pytest
from PIL import Image

from chimeline.notices import CAUTION, GEOMETRY_TOLERANCES
from chimeline.report.geometry import deviation_map_png, map_limits
from tests.helpers import assert_fails, invoke

FOOT = 0.3048  # exact by definition (1959 agreement)
# the small test scan is sparse (0.5 deg steps): coarser bins and bands give every line and bin a value
TANK = ["--set", "tank.shell_height=6", "--set", "tank.yield_strength=250 MPa", "--set", "geometry.course_height=2",
        "--set", "geometry.azimuth_step_deg=3", "--set", "geometry.band_height=0.4", "--set", "geometry.min_points=5"]


@pytest.fixture(scope="module")
def runs(small_scan, tmp_path_factory):
    scan, _ = small_scan
    base = tmp_path_factory.mktemp("geo")
    invoke(["-q", "run", scan, "--out", base / "m"] + TANK)
    invoke(["-q", "run", scan, "--out", base / "ft", "--set", "output.length_unit=ft", "--set", "output.plots=false"]
           + TANK)
    return base


def _table(path):
    return list(csv.DictReader(io.StringIO(path.read_text())))


def test_files_headers_and_profile_json_keys(runs):
    d = runs / "m"
    pl, ro, dev = _table(d / "plumbness.csv"), _table(d / "roundness.csv"), _table(d / "shell_deviation.csv")
    assert list(pl[0])[:7] == ["azimuth_deg", "height_m", "offset_radial_m", "offset_tangential_m", "offset_total_m",
                               "tolerance_m", "ratio"]
    assert list(ro[0])[:5] == ["azimuth_deg", "height_m", "radius_m", "deviation_m", "tolerance_m"]
    assert list(dev[0])[:4] == ["azimuth_deg", "height_m", "deviation_m", "std_error_m"]
    assert len(pl) == 36 * len({r["height_m"] for r in pl})
    assert len(ro) == 120 * len({r["height_m"] for r in ro})
    geo = json.loads((d / "profile.json").read_text())["geometry"]
    top = geo["max_out_of_plumb"]
    totals = [float(r["offset_total_m"]) for r in pl if r["offset_total_m"]]
    ratios = [float(r["ratio"]) for r in pl if r["ratio"]]
    assert top["ratio"] == max(ratios)  # full precision: the same float in JSON and CSV
    assert top["value"] in totals
    assert top["tolerance"] == pytest.approx(0.06)  # H/100 of the 6 m shell (from memory of API 653 10.5.2)
    dmax = geo["max_radius_deviation"]
    assert abs(dmax["value"]) == max(abs(float(r["deviation_m"])) for r in ro if r["deviation_m"])
    assert geo["radius_tolerance"]["value"] == pytest.approx(0.5 * 0.0254)  # D 12 m < 40 ft: 1/2 in (from memory)
    assert geo["ovality"]["per_height"][0]["height"] == 0.3
    assert {c["verdict"] for c in geo["checks"]} <= {"acceptable", "exceeds", "indeterminate"}
    assert geo["note"] == GEOMETRY_TOLERANCES
    # gaps are empty cells, never numbers
    assert any(r["deviation_m"] == "" for r in dev)
    assert all((r["deviation_m"] == "") == (int(r["n_points"]) < 5) for r in dev)


def test_feet_output_converts_every_length(runs):
    m, ft = _table(runs / "m" / "roundness.csv"), _table(runs / "ft" / "roundness.csv")
    assert "radius_ft" in ft[0] and "height_ft" in ft[0]
    for a, b in zip(m[:50], ft[:50]):
        if a["radius_m"]:
            assert float(b["radius_ft"]) == pytest.approx(float(a["radius_m"]) / FOOT, rel=1e-12)
            assert float(b["height_ft"]) == pytest.approx(float(a["height_m"]) / FOOT, rel=1e-12)
    js = json.loads((runs / "ft" / "profile.json").read_text())["geometry"]
    assert js["units"] == "ft" and js["plumb_tolerance"]["value"] == pytest.approx(0.06 / FOOT)


def test_report_section_figures_and_caution(runs):
    html = (runs / "m" / "report.html").read_text()
    assert "Shell geometry" in html
    sec = html[html.index("Shell geometry"):]
    assert "at the engineer&#x27;s discretion" in sec or "at the engineer's discretion" in sec
    assert CAUTION.split(";")[0].replace("'", "&#x27;") in sec or CAUTION.split(";")[0] in sec
    for name in ("shell_deviation", "plumbness", "roundness"):
        assert f'data-plot="{name}"' in sec
        assert (runs / "m" / "plots" / f"{name}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_geometry_can_be_switched_off(small_scan, tmp_path):
    scan, _ = small_scan
    out = tmp_path / "off"
    invoke(["-q", "run", scan, "--out", out, "--set", "geometry.enabled=false", "--set", "output.plots=false"])
    assert not (out / "plumbness.csv").exists() and not (out / "shell_deviation.csv").exists()
    assert json.loads((out / "profile.json").read_text())["geometry"] is None


@pytest.mark.parametrize("key,value,phrase", [
    ("geometry.plumb_tolerance", "sideways", "'geometry.plumb_tolerance'"),
    ("geometry.radius_tolerance_table", "[[0, 0.0127], [50, 0.02], [40, 0.03]]", "'geometry.radius_tolerance_table'"),
    ("geometry.roundness_heights", "[0.01]", "'geometry.roundness_heights[0]'"),  # the element is named
    ("geometry.face_budget", "10", "'geometry.face_budget'"),
])
def test_bad_geometry_config_is_one_line_exit_2(small_scan, tmp_path, key, value, phrase):
    scan, _ = small_scan
    r = assert_fails(["run", scan, "--out", tmp_path / "o", "--set", f"{key}={value}"], phrase, tmp_path / "o")
    assert len([ln for ln in r.output.strip().splitlines() if ln.strip()]) == 1


def _fake(deviation):
    n_h, n_az = deviation.shape
    return SimpleNamespace(deviation=SimpleNamespace(deviation=deviation, heights=(np.arange(n_h) + 0.5) * 0.25,
                                                     azimuth_deg=(np.arange(n_az) + 0.5), cylinder_radius=15.0),
                           course_tops=np.array([6.0]))


def _pixels_near(img, rgb, tol=3):
    return int((np.abs(img[..., :3].astype(int) - np.asarray(rgb)[None, None, :]) <= tol).all(axis=-1).sum())


def test_deviation_map_colours_are_centred_on_zero_with_grey_gaps():
    """+4 mm on one half, -1 mm on the other: with a scale centred on zero the -1 mm half is a pale blue, the +4 mm
    half the deepest red, and the gaps grey (matplotlib's RdBu_r as the outside reference for the colours)."""
    import matplotlib

    dev = np.full((24, 360), 0.004)
    dev[:, 180:] = -0.001
    dev[10:14, 40:60] = np.nan
    assert map_limits(dev) == pytest.approx(0.004)
    img = np.asarray(Image.open(io.BytesIO(deviation_map_png(_fake(dev), "m"))).convert("RGB"))
    cmap = matplotlib.colormaps["RdBu_r"]
    as_rgb = lambda x: np.round(np.asarray(cmap(x)[:3]) * 255)  # noqa: E731
    assert _pixels_near(img, as_rgb(1.0)) > 20_000  # +4 mm = +v: the end of the scale
    assert _pixels_near(img, as_rgb(0.5 - 0.5 * 0.25)) > 20_000  # -1 mm = a quarter of the way to the blue end
    assert _pixels_near(img, as_rgb(0.0)) < 1_000  # the deepest blue only in the colour bar
    assert _pixels_near(img, (217, 217, 217), tol=1) > 1_000  # gaps
