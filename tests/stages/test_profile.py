"""Profile stage: robust rejection and bin locations against constructed truth."""
import numpy as np

from chimeline.config import load_config
from chimeline.stages.profile import bin_junction
from tests.stages.junction_data import synthetic_junction


def test_profile_rejects_outliers_keeps_good_points():
    rng = np.random.default_rng(2)
    j, true, out = synthetic_junction(rng)
    cfg, _, _ = load_config()
    p = bin_junction(j, cfg.profile, 15.0)
    assert (~p.kept[out]).mean() > 0.9  # most gross outliers rejected
    assert p.kept[~out].mean() > 0.98  # and few good points lost
    centres = p.azimuth_deg
    err = p.elevation - (0.4 + 0.01 * np.cos(np.radians(centres)))
    assert np.abs(np.median(err)) < 1e-4 and np.sqrt(np.mean(err ** 2)) < 0.0006


def test_empty_bins_are_gaps_never_filled():
    rng = np.random.default_rng(3)
    j, _, _ = synthetic_junction(rng, outlier_frac=0.0)
    keep = ~((j.azimuth_deg > 100) & (j.azimuth_deg < 130))
    from dataclasses import replace

    j2 = replace(j, azimuth_deg=j.azimuth_deg[keep], z=j.z[keep], station=j.station[keep], radial=j.radial[keep])
    cfg, _, _ = load_config()
    p = bin_junction(j2, cfg.profile, 15.0)
    inner = (p.azimuth_deg > 100) & (p.azimuth_deg < 130)
    assert np.all(p.status[inner] == "empty") and np.all(np.isnan(p.elevation[inner]))
    assert p.gaps == ((100.0, 130.0),)
    assert np.all(p.status[~inner] == "ok")


def test_status_comes_from_the_standard_error_and_gaps_stay_empty():
    """Bins of one to three points get their own honest standard error and are ok when it is small enough (not
    'sparse' for want of four points); a bin whose standard error is too large widens and says so; an arc with
    no points at all stays a gap however wide the bins may grow."""
    from dataclasses import replace

    from chimeline.stages.fusion import fuse_evidence
    from chimeline.stages.noise import attach_uncertainty, estimate_noise

    rng = np.random.default_rng(5)
    j, _, _ = synthetic_junction(rng, per_bin=12, sigma=0.001, outlier_frac=0.0)
    bins = (j.azimuth_deg).astype(int)
    thin = (bins % 10 == 3)  # every tenth bin keeps two points only
    keep = ~thin | (np.arange(len(bins)) % 12 < 2)
    keep &= ~((j.azimuth_deg > 200) & (j.azimuth_deg < 230))  # a 30 degree gap
    j = replace(j, azimuth_deg=j.azimuth_deg[keep], z=j.z[keep], station=j.station[keep], radial=j.radial[keep])
    cfg, _, _ = load_config()
    p = bin_junction(j, cfg.profile, 15.0)
    n = estimate_noise(p, j, cfg.noise, cfg.profile.reject_k)
    q = fuse_evidence(attach_uncertainty(p, j, n), j, n, cfg.profile)
    two = q.n_points == 2
    assert two.sum() >= 30 and np.all(q.status[two] == "ok")
    assert np.all(q.std_error[two] <= cfg.profile.max_std_error)
    gap = (q.azimuth_deg > 201) & (q.azimuth_deg < 229)
    assert np.all(q.status[gap] == "empty") and np.all(np.isnan(q.elevation[gap]))
    # a tight limit: the two-point bins widen (width reported) to reach it; the gap still stays empty
    tight = replace(cfg.profile, max_std_error=float(np.median(q.std_error[~two & (q.status == "ok")])) * 1.05)
    r = fuse_evidence(attach_uncertainty(p, j, n), j, n, tight)
    assert np.all(r.width_deg[two & (r.status == "ok")] > r.bin_width_deg)
    assert np.all(r.status[gap] == "empty")
    assert set(np.unique(r.evidence[r.status == "ok"])) == {"top"}
