"""Geometry stage on analytic shells (closed-form truth, no simulator), the face sampler and the tolerances."""
import dataclasses
import math
from types import SimpleNamespace

import numpy as np
import pytest

from chimeline.config import GeometryConfig
from chimeline.core.robust import Z95
from chimeline.stages.frame import Frame
from chimeline.stages.geometry import FaceSampler, measure_geometry, plumb_tolerance, radius_tolerance
from chimeline.stages.shell import ShellFit

INCH, FOOT = 0.0254, 0.3048  # exact by definition (1959 international yard and pound agreement)
R, H = 12.0, 10.0
TILT, TILT_AZ = 2.0e-3, 70.0  # rad, direction the top leans toward (deg clockwise from +Y)
OVAL0, OVAL_GROWTH, OVAL_AZ = 0.006, 0.0004, 25.0  # m, m per m, deg
STEPS = (0.0, -0.003, -0.006, -0.008)  # m per course of 2.5 m


def _shell():
    return ShellFit(center=np.zeros(3), axis=np.array([0.0, 0.0, 1.0]), radius=R, radius_mean=R, rms_residual=0.001,
                    n_inliers=1000, coverage=1.0, n_trials=1, n_candidates=1000, z_min=0.0, z_max=H)


def _frame(direction="cw", reference=0.0):
    return Frame(origin=np.zeros(3), units="m", metres_per_unit=1.0, up_axis="z", azimuth_reference_deg=reference,
                 azimuth_direction=direction, units_source="config")


def _profile(frame):
    """A flat junction at z = 0 (the shell leans, its base does not settle)."""
    az = np.arange(0.5, 360, 1.0)
    return SimpleNamespace(azimuth_deg=az, elevation=np.zeros(len(az)), status=np.array(["ok"] * len(az)))


def _true_rho(th, z):
    """Closed form: horizontal distance from the vertical through the base centre to the face (first order in the
    lean: the section at height z is the base section moved by z * TILT toward TILT_AZ)."""
    lean = z * TILT * np.cos(th - math.radians(TILT_AZ))
    oval = (OVAL0 + OVAL_GROWTH * z) * np.cos(2 * (th - math.radians(OVAL_AZ)))
    step = np.asarray(STEPS)[np.clip((z // 2.5).astype(int), 0, len(STEPS) - 1)]
    return R + lean + oval + step


def _cloud(n=400_000, sigma=0.001, seed=1, n_stations=4, hole=None, clutter=0):
    rng = np.random.default_rng(seed)
    th = rng.uniform(0, 2 * np.pi, n)
    z = rng.uniform(0.0, H, n)
    rho = _true_rho(th, z) + rng.normal(0, sigma, n)
    pts = np.column_stack([rho * np.sin(th), rho * np.cos(th), z])
    st = (np.degrees(th) // (360 / n_stations)).astype(np.int64) + 1
    if hole is not None:  # an arc never seen (a stair or an occluder)
        a = np.degrees(th)
        keep = ~((a > hole[0]) & (a < hole[1]))
        pts, st = pts[keep], st[keep]
    if clutter:  # stair treads and pipes: points 8-14 cm outside the face over an arc
        tc = np.radians(rng.uniform(200, 230, clutter))
        zc = rng.uniform(0, H, clutter)
        rc = _true_rho(tc, zc) + rng.uniform(0.08, 0.14, clutter)
        pts = np.vstack([pts, np.column_stack([rc * np.sin(tc), rc * np.cos(tc), zc])])
        st = np.concatenate([st, np.ones(clutter, np.int64)])
    return pts, st


def _cfg(**kw):
    """No vertical reference or registration error in these clouds unless a test adds them."""
    kw = {"vertical_reference_sigma": 0.0, "registration_sigma_prior": 0.0, **kw}
    return dataclasses.replace(GeometryConfig(), course_height=2.5, **kw)


@pytest.fixture(scope="module")
def analytic():
    pts, st = _cloud()
    fr = _frame()
    return measure_geometry(pts, st, _shell(), fr, _profile(fr), _cfg(), shell_height=H)


def test_plumbness_matches_the_closed_form(analytic):
    """Radial: face at height minus face at 0.3 m; tangential: z TILT sin toward increasing azimuth."""
    pl = analytic.plumb
    th = np.radians(pl.azimuth_deg)
    h, h0 = pl.heights[:, None], pl.reference_height
    radial = _true_rho(th[None, :], h + 0 * th) - _true_rho(th, np.full_like(th, h0))[None, :]
    tangential = -(h - h0) * TILT * np.sin(th - math.radians(TILT_AZ))[None, :]
    assert np.isfinite(pl.radial).all() and np.isfinite(pl.tangential).all()
    e_r, e_t = pl.radial - radial, pl.tangential - tangential
    assert np.sqrt(np.mean(e_r ** 2)) < 0.0003
    assert np.sqrt(np.mean(e_t ** 2)) < 0.0002
    assert np.mean(np.abs(e_r) <= Z95 * pl.radial_se) >= 0.9
    # a row's tangential values share one centre difference (a 2-vector): bound them all (Rayleigh tail 3e-4)
    assert np.all(np.abs(e_t) <= 4 * pl.tangential_se)
    np.testing.assert_allclose(pl.total, np.hypot(pl.radial, pl.tangential))
    # course tops every 2.5 m, then the shell top; bands end 0.1 m below each
    np.testing.assert_allclose(pl.heights[:3], [2.3, 4.8, 7.3])
    assert pl.course.tolist()[:3] == [1, 2, 3]


def test_roundness_matches_the_closed_form(analytic):
    ro = analytic.roundness
    th = np.radians(ro.azimuth_deg)
    # radius from the section's own centre: the lean term is a centre shift and drops out
    oval = (OVAL0 + OVAL_GROWTH * ro.heights[:, None]) * np.cos(2 * (th[None, :] - math.radians(OVAL_AZ)))
    step = np.asarray(STEPS)[np.clip((ro.heights // 2.5).astype(int), 0, 3)][:, None]
    true = R + oval + step
    e = ro.radius - true
    assert np.isfinite(ro.radius).mean() > 0.99
    assert np.sqrt(np.nanmean(e ** 2)) < 0.0003
    assert np.nanmean(np.abs(e) <= Z95 * ro.radius_se) >= 0.9
    # auto heights: 0.3 m (the standard's 1 ft) and each course's mid-height
    np.testing.assert_allclose(ro.heights[:4], [0.3, 1.25, 3.75, 6.25])
    # ovality = mode-2 amplitude, long axis at OVAL_AZ
    np.testing.assert_allclose(ro.ovality, OVAL0 + OVAL_GROWTH * ro.heights, atol=4 * ro.ovality_se.max() + 5e-5)
    np.testing.assert_allclose(ro.ovality_axis_deg, OVAL_AZ, atol=1.0)
    np.testing.assert_allclose(ro.deviation, ro.radius - ro.reference_radius[:, None])


def test_deviation_map_shows_lean_steps_and_gaps():
    pts, st = _cloud(hole=(100, 130))
    fr = _frame()
    g = measure_geometry(pts, st, _shell(), fr, _profile(fr), _cfg(), shell_height=H)
    m = g.deviation
    a = m.azimuth_deg
    assert np.isnan(m.deviation[:, (a > 101) & (a < 129)]).all()  # never filled
    assert np.isfinite(m.deviation[:, (a < 95) | (a > 135)]).mean() > 0.99
    # course seams: the row median steps by the radius step (-3 mm at 2.5 m)
    below, above = np.argmin(np.abs(m.heights - 2.375)), np.argmin(np.abs(m.heights - 2.625))
    assert np.nanmedian(m.deviation[above] - m.deviation[below]) == pytest.approx(-0.003, abs=0.0005)
    # plumb lines and bins inside the hole are gaps
    pl, ro = g.plumb, g.roundness
    assert np.isnan(pl.radial[:, (pl.azimuth_deg > 100) & (pl.azimuth_deg < 130)]).all()
    assert np.isnan(ro.radius[:, (ro.azimuth_deg > 101) & (ro.azimuth_deg < 129)]).all()


def test_clutter_outside_the_face_does_not_move_it(analytic):
    pts, st = _cloud(clutter=60_000)
    fr = _frame()
    g = measure_geometry(pts, st, _shell(), fr, _profile(fr), _cfg(), shell_height=H)
    d = g.roundness.radius - analytic.roundness.radius
    assert np.nanmax(np.abs(d)) < 0.002  # at most noise: no 8-14 cm pull toward the treads


def test_azimuth_convention_changes_labels_not_the_shell(analytic):
    """ccw from a 90 deg reference: the same physical lines, tangential sign toward increasing (ccw) azimuth."""
    pts, st = _cloud()
    fr = _frame("ccw", 90.0)
    g = measure_geometry(pts, st, _shell(), fr, _profile(fr), _cfg(), shell_height=H)
    a_cw = np.mod(90.0 - g.plumb.azimuth_deg, 360)  # the same line in the clockwise-from-+Y convention
    j = np.searchsorted(analytic.plumb.azimuth_deg, a_cw)
    np.testing.assert_allclose(g.plumb.radial, analytic.plumb.radial[:, j], atol=0.0008)
    np.testing.assert_allclose(g.plumb.tangential, -analytic.plumb.tangential[:, j], atol=0.0005)
    np.testing.assert_allclose(np.mod(90.0 - g.roundness.ovality_axis_deg, 180), OVAL_AZ, atol=1.0)


def test_more_noise_gives_honest_larger_errors():
    pts, st = _cloud(n=150_000, sigma=0.004, seed=7)
    fr = _frame()
    g = measure_geometry(pts, st, _shell(), fr, _profile(fr), _cfg(), shell_height=H)
    ro = g.roundness
    oval = (OVAL0 + OVAL_GROWTH * ro.heights[:, None]) * np.cos(2 * (np.radians(ro.azimuth_deg)[None, :]
                                                                     - math.radians(OVAL_AZ)))
    step = np.asarray(STEPS)[np.clip((ro.heights // 2.5).astype(int), 0, 3)][:, None]
    e = ro.radius - (R + oval + step)
    z = e / ro.radius_se
    assert 0.85 < np.nanstd(z) < 1.2
    assert g.face_sigma == pytest.approx(0.004, rel=0.15)


def _registered_cloud(shifts, seed=11, n=400_000):
    """Stations spread around the tank, each seeing +-60 deg of arc (neighbours overlap) with its points moved by
    its own plan shift (a registration error)."""
    rng = np.random.default_rng(seed)
    pts, _ = _cloud(n=n, seed=seed)
    k = len(shifts)
    centre = np.arange(k) * 360.0 / k
    th = np.degrees(np.arctan2(pts[:, 0], pts[:, 1])) % 360
    sees = np.abs((th[:, None] - centre[None, :] + 180) % 360 - 180) < 60
    pick = np.argmax(sees * rng.random((len(th), k)), axis=1)  # one of the stations that see the point
    out = pts.copy()
    out[:, :2] += np.asarray(shifts)[pick]
    return out, pick + 1


def test_station_shifts_cancel_in_plumbness_and_are_covered_in_the_radius():
    rng = np.random.default_rng(4)
    shifts = rng.normal(0, 0.002, (6, 2))
    pts, st = _registered_cloud(shifts)
    fr = _frame()
    g = measure_geometry(pts, st, _shell(), fr, _profile(fr), _cfg(registration_sigma_prior=0.002), shell_height=H)
    # the spread is estimated from the overlaps: per-axis sigma 2 mm, within its sampling error (6 stations)
    assert g.registration_pairs >= 5
    assert 0.001 < g.registration_sigma_raw < 0.0035
    # per-station differences: a station's 2 mm shift cancels in the radial out-of-plumbness (what is left is the
    # noise of windows shared by two stations: 0.37 mm RMS on this cloud without shifts)
    pl = g.plumb
    th = np.radians(pl.azimuth_deg)
    radial = _true_rho(th[None, :], pl.heights[:, None] + 0 * th) - _true_rho(th, np.full_like(th, 0.3))[None, :]
    e_pl = pl.radial - radial
    assert np.sqrt(np.nanmean(e_pl ** 2)) < 0.0006
    assert np.nanmean(np.abs(e_pl) <= Z95 * pl.radial_se) >= 0.9
    # the radius carries the shifts of the stations that saw it, and its standard error says so (relative to the
    # common radial shift, which no scan can observe)
    ro = g.roundness
    true = R + (OVAL0 + OVAL_GROWTH * ro.heights[:, None]) * np.cos(2 * (np.radians(ro.azimuth_deg)[None, :]
                                                                        - math.radians(OVAL_AZ)))
    true = true + np.asarray(STEPS)[np.clip((ro.heights // 2.5).astype(int), 0, 3)][:, None]
    e = ro.radius - true
    e = e - np.nanmean(e)
    assert np.nanmean(np.abs(e) <= Z95 * ro.radius_se) >= 0.9
    assert np.nanmax(np.abs(e)) > 0.001  # the shifts are really there
    # the shifts of six stations put a mode-2 pattern into the sections: the ovality's error must say so
    err = ro.ovality - (OVAL0 + OVAL_GROWTH * ro.heights)
    assert np.all(np.abs(err) <= 3 * ro.ovality_se) and np.abs(err).max() > 1e-4


def test_face_sampler_is_bounded_uniform_and_seeded():
    shell = _shell()
    cfg = dataclasses.replace(GeometryConfig(), face_budget=10_000)
    sample, _ = _cloud(n=20_000, seed=3)
    # the detection sample says ~half the points are on the face, but every streamed point is: the sampler must
    # halve its share to stay within twice the budget
    sample = np.vstack([sample, sample * 3.0])

    def feed(seed):
        fs = FaceSampler(sample, shell, cfg, n_total=400_000, seed=seed)
        peak = 0
        for c in range(20):
            p, st = _cloud(n=20_000, seed=100 + c)
            fs(p, np.full(len(p), c, np.int64))
            peak = max(peak, fs.n_kept)
        return fs, peak

    fs, peak = feed(5)
    pts, sid = fs.points()
    assert peak <= 2 * cfg.face_budget and fs.n_halved >= 1
    assert cfg.face_budget / 2 <= len(pts) <= 2 * cfg.face_budget
    share = np.bincount(sid, minlength=20)
    assert share.min() > 0.6 * share.mean() and share.max() < 1.4 * share.mean()  # early chunks thinned alike
    again, _ = feed(5)
    np.testing.assert_array_equal(again.points()[0], pts)
    assert not np.array_equal(feed(6)[0].points()[0][:100], pts[:100])


def test_tolerances_from_memory():
    """From memory of API 653 10.5.2 / API 650 7.5.2 (plumbness) and API 650 7.5.3 (radius): verify against the
    governing edition. The inch and foot are exact (1959 agreement)."""
    cfg = GeometryConfig()
    assert plumb_tolerance(cfg, 12.2)[0] == pytest.approx(0.122)  # H/100 below the cap
    assert plumb_tolerance(cfg, 15.0)[0] == pytest.approx(5 * INCH)  # capped at 5 in
    new = dataclasses.replace(cfg, plumb_tolerance="new_construction")
    assert plumb_tolerance(new, 12.2)[0] == pytest.approx(0.061)
    assert plumb_tolerance(dataclasses.replace(cfg, plumb_tolerance=0.05), 12.2)[0] == 0.05
    for d_ft, tol_in in ((39.9, 0.5), (40.0, 0.75), (149.9, 0.75), (150.0, 1.0), (249.9, 1.0), (250.0, 1.25),
                         (400.0, 1.25)):
        assert radius_tolerance(cfg, d_ft * FOOT) == pytest.approx(tol_in * INCH), d_ft
