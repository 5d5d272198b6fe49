"""The minimum survey (from memory: API 653 Annex B / section 12): number of points and their spacing."""
from __future__ import annotations

import math

import numpy as np

from ..io.surveys import SurveyData
from ..units import FOOT


def minimum_points(diameter_m: float) -> int:
    """N >= D/10 with D in feet, at least 8, even (from memory: API 653 Annex B / section 12)."""
    n = max(8, math.ceil(diameter_m / FOOT / 10.0 - 1e-9))
    return n + (n % 2)


def adequacy(s: SurveyData, diameter_m: float) -> list:
    """Warnings on a conventional survey against the minimum survey (from memory: N >= D/10 ft, >= 8, even,
    uniformly spaced, at most 32 ft (9.75 m) apart along the circumference)."""
    if s.dense:
        return []
    out = []
    n = len(s.azimuth_deg)
    need = minimum_points(diameter_m)
    if n < need:
        out.append(f"{n} survey points; the minimum for a {diameter_m / FOOT:.0f} ft tank is {need} "
                   f"(D/10 in ft, at least 8, even)")
    if n % 2:
        out.append(f"{n} survey points is odd; the minimum survey asks for an even number")
    gaps = np.diff(np.concatenate([s.azimuth_deg, [s.azimuth_deg[0] + 360.0]]))
    arc = np.radians(gaps) * diameter_m / 2
    if arc.max() > 9.75 + 1e-6:
        k = int(np.argmax(arc))
        out.append(f"points {s.label[k]} and {s.label[(k + 1) % n]} are {arc.max():.2f} m "
                   f"({arc.max() / FOOT:.1f} ft) apart along the shell; the limit is 32 ft (9.75 m)")
    if gaps.max() - gaps.min() > 0.1 * gaps.mean():
        out.append(f"unequal spacing: {gaps.min():.1f} to {gaps.max():.1f} deg between points "
                   f"(the chord form of the deflection check is used)")
    return out
