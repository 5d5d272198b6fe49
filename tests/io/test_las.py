"""LAS/LAZ robustness: header sanity against the file, decoder panics, counts that disagree with the data,
classes and withheld points skipped, the detection sample the same for LAS and LAZ."""
import struct

import laspy
import numpy as np
import pytest

from chimeline.config import InputConfig
from chimeline.errors import InputError
from chimeline.io import las as las_module
from chimeline.io.readers import open_scan
from tests.io import formats


@pytest.fixture(scope="module")
def small_las(simulate):
    scan, _ = simulate("small_tank.yaml", 91)
    return scan


def _patched(src, dst, offset, fmt, value):
    b = bytearray(src.read_bytes())
    struct.pack_into(fmt, b, offset, value)
    dst.write_bytes(b)
    return dst


def test_a_billion_vlrs_is_refused_at_once(small_las, tmp_path):
    bad = _patched(small_las, tmp_path / "vlrs.las", 100, "<I", 1_000_000_000)
    with pytest.raises(InputError, match=r"claims 1000000000 VLRs, but only \d+ bytes"):
        open_scan(bad)


def test_a_vlr_running_past_the_point_data_is_refused(small_las, tmp_path):
    header_size = struct.unpack_from("<H", small_las.read_bytes(), 94)[0]
    bad = _patched(small_las, tmp_path / "vlrlen.las", header_size + 20, "<H", 60000)
    with pytest.raises(InputError, match="VLR 1 of 1 runs past the point data"):
        open_scan(bad)


def test_a_header_count_smaller_than_the_data_names_both(small_las, tmp_path):
    n = laspy.open(small_las).header.point_count
    bad = _patched(small_las, tmp_path / "half.las", 247, "<Q", n // 2)  # LAS 1.4 point count
    with pytest.raises(InputError, match=f"header says {n // 2} points but the file holds {n} point records"):
        open_scan(bad)
    bad = _patched(small_las, tmp_path / "more.las", 247, "<Q", n + 10)
    with pytest.raises(InputError, match=f"truncated: the header says {n + 10} points"):
        open_scan(bad)


def test_a_laz_header_count_against_its_chunk_table(small_las, tmp_path):
    laz = tmp_path / "a.laz"
    laspy.read(small_las).write(laz)
    n = laspy.open(laz).header.point_count
    bad = _patched(laz, tmp_path / "half.laz", 247, "<Q", n // 3)
    with pytest.raises(InputError, match=f"header says {n // 3} points but the LAZ chunk table lists"):
        open_scan(bad)


class FakePanic(BaseException):
    """What a Rust panic looks like from Python: not an Exception."""


def test_decoder_panics_become_one_input_error(small_las, tmp_path, monkeypatch):
    laz = tmp_path / "p.laz"
    laspy.read(small_las).write(laz)
    src = open_scan(laz)

    def boom(self, n):
        raise FakePanic("called `Option::unwrap()` on a `None` value")

    monkeypatch.setattr(laspy.LasReader, "read_points", boom)
    with pytest.raises(InputError, match=r"corrupt or truncated LAS/LAZ data after 0 of .*unwrap"):
        list(src.chunks(100_000))
    with pytest.raises(InputError, match="corrupt or truncated"):
        src.sample(1000, np.random.default_rng(0))


def test_ctrl_c_is_not_swallowed(small_las, tmp_path, monkeypatch):
    laz = tmp_path / "c.laz"
    laspy.read(small_las).write(laz)
    src = open_scan(laz)

    def stop(self, n):
        raise KeyboardInterrupt

    monkeypatch.setattr(laspy.LasReader, "read_points", stop)
    with pytest.raises(KeyboardInterrupt):
        list(src.chunks(100_000))


def test_las_and_laz_give_the_same_sample(small_las, tmp_path):
    laz = tmp_path / "s.laz"
    laspy.read(small_las).write(laz)
    a = open_scan(small_las).sample(100_000, np.random.default_rng(3))
    b = open_scan(laz).sample(100_000, np.random.default_rng(3))
    assert len(a.xyz) > 90_000 and np.array_equal(a.xyz, b.xyz) and np.array_equal(a.source_id, b.source_id)


def test_noise_classes_and_withheld_points_are_skipped_and_counted(small_las, tmp_path):
    xyz, st = formats.scan_points(small_las)
    n = len(xyz)
    cls = np.full(n, 2, np.uint8)
    cls[::50] = 7
    cls[1::70] = 18
    wh = np.zeros(n, bool)
    wh[2::90] = True
    wh[::50 * 9] = True  # some class-7 points are withheld too: counted once, as class 7
    path = formats.las_like(small_las, tmp_path / "cls.las", classification=cls, withheld=wh)
    src = open_scan(path)
    kept = sum(len(c.xyz) for c in src.chunks(100_000))
    drop7, drop18 = cls == 7, cls == 18
    drop_w = wh & ~drop7 & ~drop18
    assert src.skipped_counts == {"class_7": int(drop7.sum()), "class_18": int(drop18.sum()),
                                  "withheld": int(drop_w.sum())}
    assert kept == n - drop7.sum() - drop18.sum() - drop_w.sum()
    cfg = InputConfig(skip_classes=(), skip_withheld=False)
    assert sum(len(c.xyz) for c in open_scan(path, cfg).chunks(100_000)) == n
    # LAS 1.2 formats keep the class and the withheld flag in one byte
    old = tmp_path / "cls12.las"
    las = laspy.read(path)
    las12 = laspy.convert(las, point_format_id=1, file_version="1.2")
    las12.write(old)
    src = open_scan(old)
    assert sum(len(c.xyz) for c in src.chunks(100_000)) == kept and src.skipped_counts["withheld"] == drop_w.sum()


def test_layout_reads_the_header_without_laspy(small_las):
    lay = las_module.read_layout(small_las)
    h = laspy.open(small_las).header
    assert (lay.n_points, lay.offset_to_points, lay.point_format, lay.record_length) == (
        h.point_count, h.offset_to_point_data, h.point_format.id, h.point_format.size)
