"""Several input files for one scan: one file per station (ids from the file order) and tiles; profile.json
records every file, its hash, the skipped points and the share decoded."""
import hashlib
import json

import laspy
import numpy as np
import pytest

from chimeline.config import load_config
from chimeline.io.readers import expand_inputs, open_scans
from chimeline.workflows.run import process_scan
from tests.helpers import assert_fails, invoke
from tests.io import formats


@pytest.fixture(scope="module")
def per_station(simulate, tmp_path_factory):
    """The small scan split into one ASCII file per station (no station column) and into two LAS tiles."""
    scan, _ = simulate("small_tank.yaml", 91)
    xyz, st = formats.scan_points(scan)
    d = tmp_path_factory.mktemp("multi")
    (d / "stations").mkdir()
    for s in np.unique(st):
        np.savetxt(d / "stations" / f"st{s:02d}.xyz", xyz[st == s], fmt="%.4f")
    las = laspy.read(scan)
    west = las.x < np.median(las.x)
    for name, m in (("tile_w.las", west), ("tile_e.las", ~west)):
        t = laspy.LasData(las.header)
        t.points = las.points[m]
        t.write(d / name)
    return scan, xyz, st, d


def test_one_file_per_station_gets_station_ids_from_the_file_order(per_station, tmp_path):
    scan, xyz, st, d = per_station
    files = expand_inputs([d / "stations"])
    assert [f.name for f in files] == [f"st{s:02d}.xyz" for s in np.unique(st)]
    src = open_scans(files)
    sid = np.concatenate([c.source_id for c in src.chunks(200_000)])
    assert np.array_equal(np.bincount(sid), np.bincount(st))  # file k holds station k's points
    out = tmp_path / "run"
    invoke(["-q", "run", d / "stations", "--out", out, "--set", "output.plots=false"])
    js = json.loads((out / "profile.json").read_text())
    assert len(js["input"]["paths"]) == len(files) and len(js["noise"]["stations"]) == len(files)
    each = [hashlib.sha256(f.read_bytes()).hexdigest() for f in files]
    assert js["input"]["sha256_files"] == each
    assert js["input"]["sha256"] == hashlib.sha256("\n".join(each).encode()).hexdigest()


def test_tiles_keep_their_station_ids_and_give_the_single_file_profile(per_station, small_reference):
    scan, xyz, st, d = per_station
    a = small_reference[1]
    cfg, resolved, s = load_config()
    b = process_scan([d / "tile_w.las", d / "tile_e.las"], cfg, resolved, s)
    assert b.n_points_read == a.n_points_read and b.scan_paths == (d / "tile_w.las", d / "tile_e.las")
    ok = (a.profile.status == "ok") & (b.profile.status == "ok")
    assert ok.mean() > 0.95
    d_mm = np.abs(a.profile.elevation[ok] - b.profile.elevation[ok])
    # another sample (windows per tile) and another face thinning order: within the standard errors
    assert np.median(d_mm) <= 1e-4 and np.quantile(d_mm / a.profile.std_error[ok], 0.99) < 1.0
    assert {x.station for x in b.noise.stations} == {x.station for x in a.noise.stations}


def test_bad_inputs_in_a_list_are_one_line(per_station, tmp_path):
    _, _, _, d = per_station
    assert_fails(["run", d / "tile_w.las", d / "nope.las", "--out", tmp_path / "o"], "nope.las: scan file not found",
                 tmp_path / "o")
    assert_fails(["run", str(d / "*.e57"), "--out", tmp_path / "o"], "no scan file matches the pattern", tmp_path / "o")
