"""ASCII, PCD and PLY parsing details: column maps, header rows after comments, count lines, field-name case,
LZF, endianness, 32-bit float precision."""
import numpy as np
import pytest

from chimeline.config import ColumnsConfig, InputConfig, load_config
from chimeline.errors import ConfigError, InputError
from chimeline.io.pcd import lzf_decompress
from chimeline.io.readers import open_scan
from chimeline.stages.frame import make_frame, precision_warnings
from chimeline.config import FrameConfig
from tests.io import formats

RNG = np.random.default_rng(11)
XYZ = np.round(RNG.uniform(-30, 30, (1000, 3)), 4)
ST = np.repeat(np.arange(1, 5), 250)


def _read(path, cfg=None):
    src = open_scan(path, cfg)
    parts = list(src.chunks(300))  # several chunks
    xyz = np.concatenate([c.xyz for c in parts])
    sid = np.concatenate([c.source_id for c in parts]) if src.has_source_id else None
    return src, xyz, sid


def test_xyz_rgb_takes_no_colour_for_a_station(tmp_path):
    p = tmp_path / "a.txt"
    np.savetxt(p, np.column_stack([XYZ, RNG.integers(0, 255, (1000, 3))]), fmt="%.4f")
    src, xyz, sid = _read(p)
    assert not src.has_source_id and np.allclose(xyz, XYZ, atol=1e-9)
    cfg = InputConfig(columns=ColumnsConfig(x=0, y=1, z=2, station=4))
    src, xyz, sid = _read(p, cfg)
    assert src.has_source_id and len(np.unique(sid)) > 31  # the column asked for, whatever it holds


def test_column_map_and_header_names(tmp_path):
    p = tmp_path / "b.csv"
    body = "\n".join(f"{s},{z},{x},{y},9" for (x, y, z), s in zip(XYZ.tolist(), ST.tolist()))
    p.write_text("# exported by a survey tool\n# second comment\nscan_id,Z,X,Y,flag\n" + body + "\n")
    src, xyz, sid = _read(p)  # names in a header row after comments
    assert src.has_source_id and np.allclose(xyz, XYZ) and np.array_equal(sid, ST)
    cfg, _, _ = load_config(None, [("input.columns", {"x": 2, "y": 3, "z": 1, "station": 0})])
    src, xyz, sid = _read(p, cfg.input)
    assert np.allclose(xyz, XYZ) and np.array_equal(sid, ST)
    with pytest.raises(ConfigError, match="input.columns"):
        load_config(None, [("input.columns", {"x": 0, "y": 0, "z": 2})])


def test_bad_row_names_its_line(tmp_path):
    p = tmp_path / "c.xyz"
    lines = [f"{a} {b} {c}" for a, b, c in XYZ.tolist()]
    lines[500] = "1.0 two 3.0"
    p.write_text("# x y z\n" + "\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"c.xyz: row 502: expected numbers in columns 0, 1, 2"):
        _read(p)


def test_pts_with_count_lines_between_blocks(tmp_path):
    p = tmp_path / "d.pts"
    rows = [f"{a:.4f} {b:.4f} {c:.4f} -300 10 20 30" for a, b, c in XYZ.tolist()]
    p.write_text("600\n" + "\n".join(rows[:600]) + "\n400\n" + "\n".join(rows[600:]) + "\n")
    src, xyz, sid = _read(p)
    assert len(xyz) == 1000 and np.allclose(xyz, XYZ) and not src.has_source_id


@pytest.mark.parametrize("data", ["ascii", "binary", "binary_compressed"])
@pytest.mark.parametrize("upper", [True, False])
def test_pcd_any_case_any_data(tmp_path, data, upper):
    p = formats.write_pcd(tmp_path / "e.pcd", XYZ, ST, data=data, upper=upper)
    src, xyz, sid = _read(p)
    assert np.allclose(xyz, XYZ, atol=0) and np.array_equal(sid, ST)


def test_pcd_nan_points_are_missing_returns(tmp_path):
    xyz = XYZ.copy()
    xyz[::10] = np.nan
    src, got, _ = _read(formats.write_pcd(tmp_path / "f.pcd", xyz, ST))
    assert len(got) == 900 and src.skipped_counts == {"no_return": 100}


def test_lzf_back_references():
    # literal "abc", then a back reference of length 6 at distance 3 (overlapping): "abcabcabc"
    assert lzf_decompress(bytes([2]) + b"abc" + bytes([(4 << 5) | 0, 2]), 9) == b"abcabcabc"
    with pytest.raises(ValueError):
        lzf_decompress(bytes([(1 << 5), 9]), 3)


@pytest.mark.parametrize("endian", ["big", "little"])
def test_binary_ply_with_station(tmp_path, endian):
    src, xyz, sid = _read(formats.write_ply(tmp_path / "g.ply", XYZ, ST, endian=endian))
    assert np.array_equal(xyz, XYZ) and np.array_equal(sid, ST)


def test_ascii_ply(tmp_path):
    p = tmp_path / "h.ply"
    rows = "\n".join(f"{a} {b} {c} {s}" for (a, b, c), s in zip(XYZ.tolist(), ST.tolist()))
    p.write_text(f"ply\nformat ascii 1.0\nelement vertex 1000\nproperty double x\nproperty double y\n"
                 f"property double z\nproperty int scan_index\nend_header\n{rows}\n")
    src, xyz, sid = _read(p)
    assert np.array_equal(xyz, XYZ) and np.array_equal(sid, ST)


def test_float32_with_large_offsets_is_flagged(tmp_path):
    """Float32 spacing at 5 234 567 m is 0.5 m (IEEE 754 single precision: 24-bit significand)."""
    geo = XYZ + np.array([612345.0, 5234567.0, 40.0])
    src = open_scan(formats.write_ply(tmp_path / "i.ply", geo, ST, coord="float"))
    assert src.storage == "float32"
    src.sample(500, np.random.default_rng(0))
    assert src.coordinate_quantum.tolist() == [0.0625, 0.5, np.spacing(np.float32(70.0))]
    frame = make_frame(geo, None, InputConfig(), FrameConfig(), [])
    w = precision_warnings(src.coordinate_quantum, src.storage, frame, 0.002)
    assert len(w) == 1 and "32-bit floats" in w[0] and "500 mm" in w[0]  # heights near 40 m: fine steps
    w = precision_warnings(src.coordinate_quantum * [1, 1, 1e4], src.storage, frame, 0.002)
    assert len(w) == 2 and "coarse against the measured noise" in w[1]
    # a LAS scale of 1 mm against 2 mm noise adds 2 % to the variance: no warning; 10 mm does
    assert precision_warnings(np.array([1e-3] * 3), "", frame, 0.002) == []
    assert "steps of 10 mm" in precision_warnings(np.array([1e-2] * 3), "", frame, 0.002)[0]


def test_npy_column_map(tmp_path):
    p = tmp_path / "j.npy"
    np.save(p, np.column_stack([XYZ, RNG.integers(0, 255, 1000), ST]))
    src, xyz, sid = _read(p)
    assert not src.has_source_id  # no guessing
    src, xyz, sid = _read(p, InputConfig(columns=ColumnsConfig(station=4)))
    assert np.array_equal(xyz, XYZ) and np.array_equal(sid, ST)
