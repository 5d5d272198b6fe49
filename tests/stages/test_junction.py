"""Junction stage on a simulated scan: candidates sit on the projection top; the ring filter bounds the face."""
import numpy as np
import pytest

from chimeline.config import load_config
from chimeline.workflows.run import process_scan


def _run(scan, sets=()):
    cfg, resolved, src = load_config(None, list(sets))
    return process_scan(scan, cfg, resolved, src)


@pytest.fixture(scope="module")
def small(simulate):
    scan, truth = simulate("small_tank.yaml", 95)
    return scan, truth, _run(scan)


def test_candidates_lie_on_the_projection_top(small):
    _, truth, res = small
    j = res.junction
    taz = np.asarray(truth["junction"]["azimuth_deg"])
    tz = np.asarray(truth["junction"]["elevation"]) - res.frame.origin[2]
    t_at = np.interp(j.azimuth_deg, np.concatenate([taz - 360, taz, taz + 360]), np.tile(tz, 3))
    dz = j.z - t_at
    assert abs(np.median(dz)) < 0.002  # registration errors of a few mm per station are in it
    assert np.mean(np.abs(dz - np.median(dz)) < 0.01) > 0.95
    # the projection's width (50 mm in the scene) was found and the window stops short of its edge
    assert j.projection_width == pytest.approx(truth["tank"]["projection_width"], abs=0.011)
    assert j.radial_window[1] < truth["tank"]["projection_width"]


def test_ring_filter_keeps_a_bounded_share_of_the_face(small):
    scan, _, res = small
    thin = _run(scan, [("junction.face_budget", 10_000)])
    assert thin.counts["face_keep_fraction"] < res.counts["face_keep_fraction"]
    assert thin.counts["ring"] < res.counts["ring"]
    # the profile does not depend on how much of the face is kept
    ok = (thin.profile.status == "ok") & (res.profile.status == "ok")
    assert ok.mean() > 0.9
    assert np.median(np.abs(thin.profile.elevation[ok] - res.profile.elevation[ok])) < 2e-4
