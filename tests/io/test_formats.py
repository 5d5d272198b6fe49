"""Round trips: one simulated scan written in every format gives the same points and the same profile.

The reference is the simulator's LAS 1.4 file (0.1 mm scale). Formats that keep the points in the same order read
the same detection sample (windows on 50 000-point boundaries), so their profiles equal the LAS profile within the
file's scale. COPC stores the points in octree order, so its sample and face thinning differ; PTX and E57 store
each station in its own frame, so coordinates come back through a pose with rounding, and PTS text is rounded to
0.05 mm: for these the median difference stays within the scale and 99 % of the ok bins within one standard error.
"""
import numpy as np
import pytest

from chimeline.config import load_config
from chimeline.io.copc_writer import las_to_copc
from chimeline.io.readers import open_scan
from chimeline.workflows.run import process_scan
from tests.io import formats

SCALE = 1e-4  # m, the simulator's LAS scale


@pytest.fixture(scope="module")
def reference(small_reference, tmp_path_factory):
    scan, res = small_reference
    xyz, st = formats.scan_points(scan)
    return scan, res, xyz, st, tmp_path_factory.mktemp("formats")


def _write(fmt, ref):
    scan, _, xyz, st, d = ref
    if fmt == "laz":
        import laspy

        laspy.read(scan).write(d / "a.laz")
        return d / "a.laz"
    if fmt == "copc":
        return las_to_copc(scan, d / "a.copc.laz", node_points=20_000)
    if fmt == "ply_be":
        return formats.write_ply(d / "a.ply", xyz, st, endian="big")
    if fmt == "pcd_upper":
        return formats.write_pcd(d / "a.pcd", xyz, st, data="binary")
    if fmt == "pts":
        return formats.write_pts(d / "a.pts", xyz)
    if fmt == "ptx":
        return formats.write_ptx(d / "a.ptx", xyz, st)
    if fmt == "e57":
        return formats.write_e57(d / "a.e57", xyz, st)
    raise AssertionError(fmt)


@pytest.mark.parametrize("fmt", ["laz", "ply_be", "pcd_upper", "pts", "ptx", "e57", "copc"])
def test_every_format_gives_the_same_points_and_profile(reference, fmt):
    scan, ref, xyz, st, _ = reference
    path = _write(fmt, reference)
    src = open_scan(path)
    got = np.concatenate([c.xyz for c in src.chunks(200_000)])
    assert len(got) == len(xyz)
    # same points: exactly for LAS containers and binary doubles, within the writer's precision otherwise
    key = lambda a: a[np.lexsort(np.round(a / SCALE).T)]  # noqa: E731
    tol = {"pts": 0.5e-4, "ptx": 2e-6, "e57": 1e-5}.get(fmt, 1e-9)  # pye57 writes 32-bit floats (4 um at 40 m)
    assert np.abs(key(got) - key(xyz)).max() <= tol
    if fmt in ("ply_be", "pcd_upper", "ptx", "e57", "copc", "laz"):
        assert src.has_source_id  # the station property / block / scan / point source id
        sid = np.concatenate([c.source_id for c in src.chunks(200_000)])
        assert sorted(np.unique(sid)) == sorted(np.unique(st))
    else:
        assert not src.has_source_id  # PTS: no column is taken for a station by guessing
    cfg, resolved, s = load_config(None, [("profile.station_leveling", "report")] if fmt == "pts" else [])
    res = process_scan(path, cfg, resolved, s)
    if fmt == "pts":  # without stations the levelling differs; compare with the LAS run made the same way
        cfg, resolved, s = load_config(None, [("profile.station_leveling", "report")])
        ref = process_scan(scan, cfg, resolved, s)
    if fmt == "copc":  # only the octree nodes that meet the base band are decoded
        assert 0.3 < res.counts["decoded_fraction"] < 1.0
        assert res.n_points_read == round(res.counts["decoded_fraction"] * len(xyz))
    else:
        assert res.n_points_read == ref.n_points_read and res.counts["decoded_fraction"] == 1.0
    a, b = ref.profile, res.profile
    ok = (a.status == "ok") & (b.status == "ok")
    assert ok.mean() > 0.95
    d = np.abs(a.elevation[ok] - b.elevation[ok])
    if fmt in ("copc", "ptx", "e57", "pts"):
        # COPC: other sample; PTX/E57: coordinates moved through each station's pose differ by ~1e-9 m; PTS: text
        # rounded to 0.05 mm. Any of these is enough to flip a rejection decision in a marginal bin, and the noise
        # rounds re-reject with the measured noise, so one flipped point moves a bin by a fraction of its SE
        assert np.median(d) <= SCALE and np.quantile(d / a.std_error[ok], 0.99) < 1.0
        assert (a.status == b.status).mean() > 0.98
    else:
        assert d.max() <= SCALE and (a.status == b.status).all()
