"""Verdicts per criterion: 'exceeds' only where the whole 95 % band lies past the limit, 'indeterminate' where
the band straddles it, 'acceptable' otherwise; the overall verdict is the worst of the criteria."""
from __future__ import annotations

import numpy as np

from ..core.circular import run_ranges
from ..core.robust import Z95
from .results import Criterion

SEVERITY = {"acceptable": 0, "indeterminate": 1, "exceeds": 2}


def banded(value, sd, limit):
    """Per location: (exceeds, indeterminate) masks of |value| +- Z95 sd against ``limit``."""
    lo = np.abs(value) - Z95 * sd
    hi = np.abs(value) + Z95 * sd
    ex = lo > limit
    ind = (~ex) & (hi > limit)
    return ex, ind


def criterion(name, az, value, sd, limit, what, extra_reasons=(), force_indeterminate=False):
    """(Criterion, ratio, exceeds, indeterminate) of ``value`` (nan where not judged) against ``limit``."""
    ok = np.isfinite(value)
    ex, ind = banded(np.where(ok, value, 0), np.where(ok, sd, 0), limit)
    ex &= ok
    ind &= ok
    ratio = np.where(ok, np.abs(value) / limit, np.nan)
    k = int(np.nanargmax(ratio)) if ok.any() else 0
    gov = f"max {what} ratio {ratio[k]:.2f} at {az[k]:.1f} deg" if ok.any() else "no values"
    if ex.any():
        verdict, rng = "exceeds", run_ranges(az, ex)
    elif ind.any() or force_indeterminate:
        verdict, rng = "indeterminate", run_ranges(az, ind)
    else:
        verdict, rng = "acceptable", ()
    return Criterion(name, verdict, gov, rng, tuple(extra_reasons)), ratio, ex, ind


def arc_verdict(depth, depth_sd, permissible):
    lo, hi = depth - Z95 * depth_sd, depth + Z95 * depth_sd
    return "exceeds" if lo > permissible else ("indeterminate" if hi > permissible else "acceptable")


def overall(criteria) -> str:
    return max((c.verdict for c in criteria), key=SEVERITY.get)
