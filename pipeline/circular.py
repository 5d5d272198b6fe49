"""Helpers for quantities on a closed ring (azimuth bins)."""
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
