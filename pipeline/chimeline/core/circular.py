"""Helpers for quantities on a closed ring (azimuth bins, sectors, survey points around a tank)."""
from __future__ import annotations

import numpy as np


def true_runs(flag) -> list[tuple[int, int]]:
    """Runs of consecutive true entries of a circular boolean array, as (first, one-past-last) indices.

    One-past-last may exceed len(flag) for a run that wraps; an all-true array is one run (0, n).
    """
    flag = np.asarray(flag, bool)
    n = len(flag)
    if not flag.any():
        return []
    if flag.all():
        return [(0, n)]
    k0 = int(np.argmin(flag))  # a false entry: start scanning after it
    out, start = [], None
    for s in range(1, n + 1):
        i = (k0 + s) % n
        if flag[i] and start is None:
            start = k0 + s
        elif not flag[i] and start is not None:
            out.append((start % n, start % n + (k0 + s - start)))
            start = None
    return out


def run_ranges(values, flag) -> tuple[tuple[float, float], ...]:
    """(first, last) ``values`` of each circular run where ``flag`` is true; everything flagged is (0, 360)."""
    values = np.asarray(values)
    n = len(values)
    if n and np.all(flag):
        return ((0.0, 360.0),)
    return tuple((float(values[a]), float(values[(b - 1) % n])) for a, b in true_runs(flag))


def gap_arcs(empty, width_deg: float, digits: int | None = 6) -> list[tuple[float, float]]:
    """Arcs of consecutive empty cells of ``width_deg`` as (start, end) degrees; end < start across 0."""
    n = len(empty)
    out = []
    for a, b in true_runs(empty):
        s, e = a * width_deg, (b if b <= n else b - n) * width_deg
        out.append((round(s, digits), round(e, digits)) if digits is not None else (s, e))
    return out


def angle_diff_deg(a, b):
    """a - b wrapped to [-180, 180) degrees."""
    return np.mod(np.asarray(a) - np.asarray(b) + 180.0, 360.0) - 180.0


def interp_periodic(x, xp, fp, period: float = 360.0):
    """Linear interpolation on a ring: ``xp`` increasing within one period, values wrap around."""
    xp = np.asarray(xp, dtype=float)
    fp = np.asarray(fp)
    return np.interp(x, np.concatenate([xp - period, xp, xp + period]), np.concatenate([fp, fp, fp]))


def interp_sectors(az, per_sector, sector_width_deg: float):
    """Values given at sector centres ((k + 0.5) x width), interpolated on the ring at azimuths ``az``."""
    n = len(per_sector)
    return interp_periodic(az, (np.arange(n) + 0.5) * sector_width_deg, per_sector)


def fill_circular(v) -> np.ndarray:
    """Fill NaN entries of a circular array by linear interpolation between the finite ones."""
    v = np.asarray(v, dtype=float)
    ok = np.isfinite(v)
    if ok.all() or not ok.any():
        return v
    n = len(v)
    x = np.arange(n)
    return interp_periodic(x, x[ok], v[ok], period=n)


def sector_slices(az, sector_deg: float):
    """Index arrays of the points in each sector of about ``sector_deg`` (a whole number per turn), and its width."""
    n_sec = int(round(360.0 / sector_deg))
    sec_w = 360.0 / n_sec
    sec = (np.asarray(az) / sec_w).astype(np.int64) % n_sec
    order = np.argsort(sec, kind="stable")
    bounds = np.searchsorted(sec[order], np.arange(n_sec + 1))
    return [order[bounds[k]:bounds[k + 1]] for k in range(n_sec)], sec_w


def near_sample(x, xp_sorted, max_dist: float, period: float = 360.0) -> np.ndarray:
    """True where ``x`` lies within ``max_dist`` of one of the sorted positions ``xp_sorted`` on the ring."""
    xp = np.asarray(xp_sorted, dtype=float)
    if len(xp) == 0:
        return np.zeros(np.shape(x), bool)
    ext = np.concatenate([xp - period, xp, xp + period])
    j = np.clip(np.searchsorted(ext, x), 1, len(ext) - 1)
    d = np.minimum(np.abs(ext[j] - x), np.abs(ext[j - 1] - x))
    return d <= max_dist
