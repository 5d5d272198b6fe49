"""Constructed junction candidates with known truth, shared by the profile and noise tests."""
import numpy as np

from chimeline.stages.junction import Junction


def synthetic_junction(rng, n_bins=360, per_bin=12, sigma=0.001, outlier_frac=0.08):
    az = (np.repeat(np.arange(n_bins), per_bin) + rng.uniform(0, 1, n_bins * per_bin)) * 360 / n_bins
    true = 0.4 + 0.01 * np.cos(np.radians(az))
    z = true + rng.normal(0, sigma, len(az))
    out = rng.random(len(az)) < outlier_frac
    z[out] += rng.choice([-1, 1], out.sum()) * rng.uniform(0.006, 0.02, out.sum())  # mixed pixels and such
    st = rng.integers(1, 4, len(az))
    j = Junction(az, z, st, np.full(len(az), 0.02), np.zeros(1), np.zeros(1), 0.05, (0.006, 0.04), len(az), len(az),
                 len(az), 0.4)
    return j, true, out

