"""Plan view and unrolled view of a scan (or a subsample of one), for looking at scans."""
from __future__ import annotations

import numpy as np

from ..core.rng import Purpose, stream
from .mpl import png_bytes, pyplot


def plot_scan(xyz, center, radius, *, station=None, base_z=None, title="", units="m", seed=0) -> bytes:
    """PNG bytes: plan view (left) and the base band unrolled by azimuth (right).

    xyz: (n, 3) in ``units`` relative to any origin, ``center`` (2,) in the same frame.
    """
    fig, (a1, a2) = pyplot().subplots(1, 2, figsize=(14, 6), gridspec_kw={"width_ratios": [1, 1.6]})
    rng = stream(seed, Purpose.SCAN_VIEW)
    idx = rng.permutation(len(xyz))[:200_000]
    p = xyz[idx]
    c = station[idx] if station is not None else p[:, 2]
    sc1 = a1.scatter(p[:, 0] - center[0], p[:, 1] - center[1], s=0.2, c=c, cmap="viridis", linewidths=0,
                     rasterized=True)
    fig.colorbar(sc1, ax=a1, shrink=0.8, label="station" if station is not None else f"z ({units})")
    t = np.linspace(0, 2 * np.pi, 721)
    a1.plot(radius * np.sin(t), radius * np.cos(t), color="#c03", lw=0.8)
    a1.set_aspect("equal")
    a1.set_xlabel(f"x - centre ({units})")
    a1.set_ylabel(f"y - centre ({units})")
    a1.set_title("plan view (colour: station)" if station is not None else "plan view (colour: z)")
    dx, dy = xyz[:, 0] - center[0], xyz[:, 1] - center[1]
    r = np.hypot(dx, dy)
    az = np.degrees(np.mod(np.arctan2(dx, dy), 2 * np.pi))
    z0 = base_z if base_z is not None else np.percentile(xyz[:, 2], 5)
    near = (np.abs(r - radius) < 0.4 + 0.6 * max(radius / 15, 0.05)) & (np.abs(xyz[:, 2] - z0) < 1.5)
    sc2 = a2.scatter(az[near], xyz[near, 2], s=0.3, c=(r[near] - radius), cmap="coolwarm", vmin=-0.1, vmax=0.4,
               linewidths=0, rasterized=True)
    fig.colorbar(sc2, ax=a2, shrink=0.8, label=f"distance outside the fitted shell ({units})")
    a2.set_xlim(0, 360)
    a2.set_xlabel("azimuth (degrees clockwise from +Y)")
    a2.set_ylabel(f"z ({units})")
    a2.set_title("base band unrolled (colour: distance outside the shell)")
    fig.suptitle(title)
    return png_bytes(fig, dpi=110)
