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
