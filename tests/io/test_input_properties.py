"""Property-based tests (hypothesis) of the survey CSV reader and the LAS header checks: whatever the rows or the
damage to a LAS header, the reader returns valid data or raises one InputError/ConfigError, never another
exception."""
import io
import math

import laspy
import numpy as np
import pytest
from hypothesis import event, example, given
from hypothesis import strategies as st

from chimeline.config import EvaluateConfig
from chimeline.errors import ConfigError, InputError
from chimeline.io.readers import open_scan
from chimeline.io.surveys import read_survey

COLUMNS = ["azimuth_deg", "elevation", "label", "std_error", "status", "x", "y", "z", "point", "other"]
cells = (st.floats(allow_nan=True, allow_infinity=True).map(repr) | st.integers(-10**6, 10**6).map(str)
         | st.floats(0, 359.99).map(lambda v: f"{v:.3f}") | st.sampled_from(["", "ok", "empty", "nan", "1e308", "-0",
                                                                            "1,5", '"q"', "inf"])
         | st.text(max_size=8))


@st.composite
def survey_text(draw):
    header = draw(st.lists(st.sampled_from(COLUMNS), min_size=1, max_size=5, unique=True)
                  | st.sampled_from([["azimuth_deg", "elevation"], ["x", "y", "z"], ["point", "elevation"],
                                     ["azimuth_deg", "elevation", "label", "std_error"]]))
    n = draw(st.integers(0, 14))
    rows = [draw(st.lists(cells, min_size=max(0, len(header) - 2), max_size=len(header) + 1)) for _ in range(n)]
    sep = draw(st.sampled_from([",", ";"]))
    return sep.join(header) + "\n" + "\n".join(sep.join(r) for r in rows) + "\n"


@st.composite
def damaged_survey(draw):
    """A valid survey of one of the three layouts with up to two cells replaced by anything."""
    n = draw(st.integers(4, 16))
    az = np.sort(draw(st.lists(st.floats(0, 359.9), min_size=n, max_size=n, unique=True)))
    z = draw(st.lists(st.floats(-1e3, 1e3), min_size=n, max_size=n))
    layout = draw(st.sampled_from(["az", "xyz", "point"]))
    if layout == "az":
        rows = [["azimuth_deg", "elevation", "label"]] + [[f"{a:.4f}", repr(e), f"p{i}"] for i, (a, e) in
                                                            enumerate(zip(az, z))]
    elif layout == "xyz":
        rows = [["x", "y", "z"]] + [[repr(500 + 15 * math.sin(math.radians(a))), repr(900 + 15 * math.cos(
            math.radians(a))), repr(e)] for a, e in zip(az, z)]
    else:
        rows = [["point", "elevation"]] + [[str(i + 1), repr(e)] for i, e in enumerate(z)]
    for _ in range(draw(st.integers(0, 2))):
        r = draw(st.integers(1, n))
        c = draw(st.integers(0, len(rows[r]) - 1))
        if draw(st.booleans()):
            rows[r][c] = draw(cells)
        else:
            del rows[r][c:]  # a short row
    return "\n".join(",".join(r) for r in rows) + "\n"


@given(survey_text() | damaged_survey(), st.sampled_from(["m", "ft", "mm"]))
def test_any_survey_csv_is_read_or_refused_with_one_error(tmp_path, text, units):
    p = tmp_path / "s.csv"
    p.write_text(text)
    cfg = EvaluateConfig(input_units=units)
    try:
        s = read_survey(p, cfg)
    except (InputError, ConfigError) as exc:
        assert str(exc) and "\n" not in str(exc)
        event("refused")
        return
    event("read")
    assert len(s.azimuth_deg) >= 4 and np.all(np.diff(s.azimuth_deg) > 0)
    assert np.all((s.azimuth_deg >= 0) & (s.azimuth_deg < 360))
    assert np.all(np.isfinite(s.elevation)) and len(s.label) == len(s.elevation)
    if s.std_error is not None:
        assert np.all(s.std_error > 0)


@pytest.fixture(scope="module")
def small_las():
    """A 1 000-point LAS 1.4 file (bytes) with a WKT VLR, as the simulator writes them."""
    hdr = laspy.LasHeader(point_format=6, version="1.4")
    hdr.scales = np.array([1e-4, 1e-4, 1e-4])
    hdr.offsets = np.array([1000.0, 2000.0, 0.0])
    las = laspy.LasData(hdr)
    rng = np.random.default_rng(3)
    th = rng.uniform(0, 2 * np.pi, 1000)
    las.x = 1000 + 6 * np.sin(th)
    las.y = 2000 + 6 * np.cos(th)
    las.z = rng.uniform(0, 3, 1000)
    las.point_source_id = rng.integers(1, 4, 1000)
    buf = io.BytesIO()
    las.write(buf)
    return buf.getvalue()


@given(st.lists(st.tuples(st.integers(0, 400), st.integers(0, 255)), min_size=1, max_size=8),
       st.none() | st.integers(0, 40_000))
@example(edits=[(102, 0xAD)], cut=None)  # 11 million VLRs declared: laspy read them one by one for minutes
def test_a_damaged_las_header_is_read_or_refused(tmp_path, small_las, edits, cut):
    b = bytearray(small_las)
    for pos, val in edits:  # the public header block (375 bytes in LAS 1.4) and the start of the VLRs
        b[pos] = val
    if cut is not None:
        b = b[:cut]
    p = tmp_path / "s.las"
    p.write_bytes(bytes(b))
    try:
        src = open_scan(p)
        sample = src.sample(200, np.random.default_rng(0))
        n = sum(k for k, *_ in src.stream(300, 2, (-math.inf, math.inf), 7))
    except InputError as exc:
        assert str(exc).startswith(str(p)) and "\n" not in str(exc)
        event("refused")
        return
    event("read")
    assert n == src.n_points and len(sample.xyz) > 0
