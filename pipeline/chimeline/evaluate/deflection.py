"""The B.3.2.1 deflection check and its curvature form.

S_i = U_i - (U_{i-1} + U_{i+1}) / 2 for equal spacing; for unequal spacing S_i is the deviation of U_i
from the chord through its neighbours, S_i = U_i - (U_{i-1} (s_{i+1} - s_i) + U_{i+1} (s_i - s_{i-1})) /
(s_{i+1} - s_{i-1}). A circular arc of curvature kappa gives S = -kappa L1 L2 / 2, so the allowable
S_max = 11 L^2 Y / (2 E H) is used with L^2 = L1 L2 (L1, L2: arcs to the neighbours), which keeps the
check equal to the curvature limit |kappa| <= 11 Y / (E H) for any spacing.
"""
from __future__ import annotations

import numpy as np


def allowable(L, Y, E, H):
    """S_max = 11 L^2 Y / (2 E H) (consistent units; L, H in m and Y, E in Pa give m)."""
    return 11.0 * np.asarray(L, dtype=float) ** 2 * Y / (2.0 * E * H)


def curvature_limit(Y, E, H):
    """|kappa| limit 11 Y / (E H), 1/m."""
    return 11.0 * Y / (E * H)


def chord_deflection(s, u, sd=None, circumference=None):
    """S_i, its 1-sigma, and the arcs L1, L2 to the circular neighbours, for points at arc positions s (m).

    ``sd`` are 1-sigma of u (independent); ``circumference`` closes the ring (neighbours wrap around).
    """
    s = np.asarray(s, dtype=float)
    u = np.asarray(u, dtype=float)
    n = len(u)
    C = circumference if circumference is not None else s[-1] - s[0]
    prev_i = np.roll(np.arange(n), 1)
    next_i = np.roll(np.arange(n), -1)
    L1 = np.mod(s - s[prev_i], C)
    L2 = np.mod(s[next_i] - s, C)
    w_prev = L2 / (L1 + L2)
    w_next = L1 / (L1 + L2)
    S = u - (w_prev * u[prev_i] + w_next * u[next_i])
    S_sd = None
    if sd is not None:
        sd = np.asarray(sd, dtype=float)
        S_sd = np.sqrt(sd ** 2 + (w_prev * sd[prev_i]) ** 2 + (w_next * sd[next_i]) ** 2)
    return S, S_sd, L1, L2


def second_difference_curvature(s, u, circumference):
    """kappa_i = 2 ((u_{i+1} - u_i) / L2 - (u_i - u_{i-1}) / L1) / (L1 + L2) for unequal spacing (1/m)."""
    S, _, L1, L2 = chord_deflection(s, u, None, circumference)
    return -2.0 * S / (L1 * L2)


def window_deflection(s_grid, u_grid, sd_grid, L, circumference):
    """Dense profile: S at every bin against the neighbours +-L of arc away (linear interpolation, nan in gaps)."""
    s_grid = np.asarray(s_grid, dtype=float)
    ok = np.isfinite(u_grid)
    xs = s_grid[ok]
    xp = np.concatenate([xs - circumference, xs, xs + circumference])
    up = np.tile(u_grid[ok], 3)
    sp = np.tile(sd_grid[ok], 3)

    def at(x):
        v = np.interp(x, xp, up)
        e = np.interp(x, xp, sp)
        # a neighbour inside a gap (no ok bin within one bin width) is missing
        j = np.searchsorted(xp, x)
        j = np.clip(j, 1, len(xp) - 1)
        gap = np.minimum(np.abs(xp[j] - x), np.abs(xp[j - 1] - x))
        step = np.median(np.diff(xs)) if len(xs) > 1 else np.inf
        return np.where(gap <= 1.01 * step, v, np.nan), e

    um, em = at(s_grid - L)
    upl, ep = at(s_grid + L)
    S = u_grid - 0.5 * (um + upl)
    S_sd = np.sqrt(sd_grid ** 2 + 0.25 * em ** 2 + 0.25 * ep ** 2)
    return S, S_sd
