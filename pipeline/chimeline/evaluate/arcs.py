"""Arc-length check: settled arcs between successive local highs of the out-of-plane curve.

A settled arc runs between two successive local maxima of the out-of-plane settlement; its depth is the
largest distance of the curve below the chord joining the two highs. The permissible depth for its arc
length comes from a user-supplied table (the standard gives it as charts); chimeline ships only an
ILLUSTRATIVE demo table, labelled as such wherever it is used.
"""
from __future__ import annotations

import numpy as np


def settled_arcs(theta_deg, u, radius, min_depth=0.0):
    """Arcs between successive local highs of u on a closed ring (theta increasing, uniform or not)."""
    th = np.asarray(theta_deg, dtype=float)
    u = np.asarray(u, dtype=float)
    n = len(u)
    if n < 3:
        return []
    hi = np.nonzero((u >= np.roll(u, 1)) & (u > np.roll(u, -1)))[0]
    if len(hi) < 1:
        return []
    out = []
    for j in range(len(hi)):
        a, b = hi[j], hi[(j + 1) % len(hi)]
        idx = np.arange(a, b + 1) if b > a else np.concatenate([np.arange(a, n), np.arange(0, b + 1)])
        t = th[idx].copy()
        t = np.where(t < t[0], t + 360.0, t)
        if len(hi) == 1:
            t[-1] = t[0] + 360.0
        s = np.radians(t - t[0]) * radius
        L = s[-1]
        if L <= 0:
            continue
        chord = u[idx[0]] + (u[idx[-1]] - u[idx[0]]) * s / L
        below = chord - u[idx]
        k = int(np.argmax(below))
        if below[k] <= min_depth:
            continue
        out.append({"start_deg": float(np.mod(t[0], 360)), "end_deg": float(np.mod(t[-1], 360)),
                    "arc_length": float(L), "depth": float(below[k]), "deepest_deg": float(np.mod(t[k], 360))})
    return out
