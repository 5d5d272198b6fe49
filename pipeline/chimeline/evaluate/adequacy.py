"""The minimum survey (from memory: API 653 Annex B / section 12): N >= D/10 with D in feet, at least 8, an even
number, uniformly spaced, at most 32 ft (9.75 m) apart along the circumference. Shortfalls are notes; only a gap
between readings longer than the maximum spacing leaves the deflection check without evidence."""
from __future__ import annotations

import math

import numpy as np

from ..io.surveys import SurveyData
from ..units import FOOT

#: m, the largest spacing of readings along the shell (32 ft, from memory)
MAX_SPACING = 32 * FOOT


def minimum_points(diameter_m: float) -> int:
    """N >= D/10 with D in feet, at least 8, even (from memory: API 653 Annex B / section 12)."""
    n = max(8, math.ceil(diameter_m / FOOT / 10.0 - 1e-9))
    return n + (n % 2)


def max_gap_arc(s: SurveyData, radius: float) -> tuple[float, int]:
    """(longest arc between consecutive readings in m, index of the reading before it)."""
    gaps = np.diff(np.concatenate([s.azimuth_deg, [s.azimuth_deg[0] + 360.0]]))
    k = int(np.argmax(gaps))
    return float(np.radians(gaps[k]) * radius), k


def adequacy(s: SurveyData, diameter_m: float) -> list:
    """Notes on a conventional survey against the minimum survey."""
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
    gap, k = max_gap_arc(s, diameter_m / 2)
    if gap > MAX_SPACING + 1e-6:
        out.append(f"points {s.label[k]} and {s.label[(k + 1) % n]} are {gap:.2f} m ({gap / FOOT:.1f} ft) apart "
                   f"along the shell; the limit is 32 ft (9.75 m)")
    gaps = np.diff(np.concatenate([s.azimuth_deg, [s.azimuth_deg[0] + 360.0]]))
    if gaps.max() - gaps.min() > 0.1 * gaps.mean():
        out.append(f"unequal spacing: {gaps.min():.1f} to {gaps.max():.1f} deg between points "
                   f"(the chord form of the deflection check is used)")
    return out
