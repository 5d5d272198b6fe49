"""Robust-statistics and normal-quantile constants, named once."""
from __future__ import annotations

import numpy as np

#: sigma of a normal distribution per unit median absolute deviation, 1 / Phi^-1(3/4) = 1.482602...,
#: rounded to 1.4826 as commonly quoted; the profile's rejection thresholds were tuned with this value
MAD_TO_SIGMA = 1.4826

#: two-sided 95 % quantile of the standard normal, Phi^-1(0.975) (scipy.stats.norm.ppf(0.975))
Z95 = 1.959963984540054


def mad_sigma(x) -> float:
    """Robust sigma of ``x``: MAD_TO_SIGMA x median absolute deviation from the median."""
    x = np.asarray(x, dtype=float)
    return float(MAD_TO_SIGMA * np.median(np.abs(x - np.median(x))))
