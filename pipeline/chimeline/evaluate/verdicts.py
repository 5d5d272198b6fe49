"""Verdicts. The standard's checks show their result as the clause prescribes (ratio <= 1 passes) and beside it
the measurement uncertainty: 'exceeds' needs the exceedance to stand beyond that uncertainty (the 95 % lower
bound of the ratio above 1); a ratio above 1 whose lower bound is not is 'indeterminate' (exceedance within
measurement uncertainty); a ratio at most 1 whose upper bound is above 1 passes with 'margin within measurement
uncertainty'. Too little evidence (coverage below the configured share of the circumference) makes a check
indeterminate. Only the standard's checks set the overall verdict."""
from __future__ import annotations

import numpy as np

from ..core.circular import run_ranges
from ..core.robust import Z95
from .results import Criterion

SEVERITY = {"acceptable": 0, "indeterminate": 1, "exceeds": 2}


def bounds(value, sd, allowable, q):
    """(ratio, lower, upper) per location of |value| +- q sd against ``allowable`` (nan where not judged)."""
    v = np.abs(np.asarray(value, dtype=float))
    sd = np.asarray(sd, dtype=float)
    ratio = v / allowable
    return ratio, (v - q * sd) / allowable, (v + q * sd) / allowable


def judge(name, az, ratio, lower, upper, *, clause=None, what="ratio", reasons=(), coverage=None,
          min_coverage=0.0, force_indeterminate=None) -> Criterion:
    """A criterion from per-location ratios and their 95 % bounds (nan where not judged)."""
    ok = np.isfinite(ratio)
    reasons = list(reasons)
    if not ok.any():
        return Criterion(name, "indeterminate", "no values to judge", (), tuple(reasons + ["no location could be "
                         "judged"]), clause=clause, evidence_coverage=coverage)
    r = np.where(ok, ratio, -np.inf)
    k = int(np.argmax(r))
    rmax, up, lo = float(ratio[k]), float(np.nanmax(upper)), float(np.nanmax(lower))
    exceeds = ok & (lower > 1.0)
    over = ok & (ratio > 1.0)
    if exceeds.any():
        verdict, where = "exceeds", run_ranges(az, exceeds)
        unc = f"exceedance beyond measurement uncertainty (95 % lower bound of the ratio {lo:.3g} > 1)"
    elif over.any():
        verdict, where = "indeterminate", run_ranges(az, over)
        unc = (f"exceedance within measurement uncertainty: ratio {rmax:.3g} > 1 but its 95 % lower bound "
               f"{lo:.3g} is not")
    else:
        verdict, where = "acceptable", ()
        unc = (f"margin within measurement uncertainty: the 95 % upper bound {up:.3g} is above 1"
               if up > 1.0 else f"the 95 % upper bound {up:.3g} also passes")
    if coverage is not None and coverage < min_coverage and verdict != "exceeds":
        verdict = "indeterminate"
        reasons.append(f"evidence covers {100 * coverage:.1f} % of the circumference, below "
                       f"evaluate.min_evidence_coverage = {100 * min_coverage:.0f} %")
    if force_indeterminate and verdict == "acceptable":
        verdict = "indeterminate"
        reasons.append(force_indeterminate)
    gov = f"max {what} {rmax:.3g} at {az[k]:.1f} deg (95 % upper bound {up:.3g})"
    return Criterion(name, verdict, gov, where, tuple(reasons), clause=clause, ratio=rmax, ratio_upper95=up,
                     ratio_lower95=lo, uncertainty=unc, evidence_coverage=coverage, at_deg=float(az[k]))


def overall(criteria) -> tuple[str, str]:
    """(verdict, governing check) from the standard's checks that could be made."""
    deciding = [c for c in criteria if c.decides]
    if not deciding:
        why = "; ".join(f"{c.name}: {c.verdict}" for c in criteria if c.clause is not None)
        return "indeterminate", f"none of the standard's checks could be made ({why})"
    worst = max(deciding, key=lambda c: (SEVERITY[c.verdict], c.ratio if c.ratio is not None else -1.0))
    return worst.verdict, worst.name


def banded(value, sd, limit):
    """Per location: (exceeds, indeterminate) masks of |value| +- Z95 sd against ``limit`` (construction
    tolerances of the shell geometry use this band rule)."""
    lo = np.abs(value) - Z95 * np.asarray(sd)
    hi = np.abs(value) + Z95 * np.asarray(sd)
    ex = lo > limit
    return ex, (~ex) & (hi > limit)
