"""quicklook.png of a run: the base unrolled by azimuth with the profile, and a plan view."""
from __future__ import annotations

import numpy as np

from ..core.robust import Z95
from .lengths import Lengths
from .mpl import png_bytes, pyplot


def quicklook(res) -> bytes:
    """Unrolled azimuth-elevation view of the base (points, profile, band) and plan view with the fitted circle."""
    plt = pyplot()
    L = Lengths(res)
    fig = plt.figure(figsize=(15, 6.5))
    gs = fig.add_gridspec(1, 2, width_ratios=[2.2, 1])
    ax = fig.add_subplot(gs[0])
    s = res.shell
    rp = res.ring_sample
    if len(rp):
        h, rho, dx, dy = s.radial(rp)
        az = res.frame.azimuth_deg(dx, dy)
        d = rho - s.radius
        near = (d > -0.02) & (d < 0.15)
        ax.scatter(az[near], L.elevation(rp[near, 2]), s=0.4, c="#9aa4ad", linewidths=0, rasterized=True,
                   label="points near the base (0-150 mm outside the shell)")
    p = res.profile
    el = L.elevation(p.elevation)
    se = L.length(p.std_error)
    ok = p.status == "ok"
    ax.fill_between(p.azimuth_deg, np.where(ok, el - Z95 * se, np.nan), np.where(ok, el + Z95 * se, np.nan),
                    color="#1f5fa8", alpha=0.35, lw=0, label="95 % band")
    ax.plot(p.azimuth_deg, np.where(ok, el, np.nan), color="#1f5fa8", lw=1.0, label="junction profile (ok bins)")
    other = (p.status != "ok") & np.isfinite(el)
    ax.plot(p.azimuth_deg[other], el[other], "x", color="#d98c00", ms=4, label="sparse / suspect bins")
    for g0, g1 in p.gaps:
        ax.axvspan(g0, g1 if g1 > g0 else 360, color="#f2c6c6", alpha=0.6, lw=0)
    if p.gaps:
        ax.axvspan(0, 0, color="#f2c6c6", alpha=0.6, label="gap (no data, not filled)")
    fin = el[np.isfinite(el)]
    if len(fin):
        lo, hi = np.percentile(fin, [0, 100])
        pad = max(hi - lo, 0.01 / L.f) * 0.6
        ax.set_ylim(lo - pad, hi + pad)
    ax.set_xlim(0, 360)
    ax.set_xticks(range(0, 361, 30))
    ax.set_xlabel("azimuth (deg)")
    ax.set_ylabel(f"elevation ({L.unit})")
    ax.set_title("junction elevation, unrolled")
    ax.legend(loc="upper right", fontsize=8, markerscale=4)
    ax.grid(alpha=0.3)
    a2 = fig.add_subplot(gs[1])
    ps = res.plot_sample
    if len(ps):
        a2.scatter(L.length(ps[:, 0] - s.center[0]), L.length(ps[:, 1] - s.center[1]), s=0.2, c="#9aa4ad",
                   linewidths=0, rasterized=True)
    t = np.linspace(0, 2 * np.pi, 721)
    r = L.length(s.radius)
    a2.plot(r * np.sin(t), r * np.cos(t), color="#c0392b", lw=1, label=f"fitted shell, r = {r:.3f} {L.unit}")
    okaz = np.radians(p.azimuth_deg[ok])
    a2.scatter(1.08 * r * np.sin(okaz), 1.08 * r * np.cos(okaz), s=2, color="#1f5fa8", label="ok bins")
    for o in s.others:
        a2.plot(L.length(o.center[0] - s.center[0]) + L.length(o.radius) * np.sin(t),
                L.length(o.center[1] - s.center[1]) + L.length(o.radius) * np.cos(t), color="#7f8c8d", lw=1, ls="--")
    a2.set_aspect("equal")
    a2.set_xlabel(f"x - centre ({L.unit})")
    a2.set_ylabel(f"y - centre ({L.unit})")
    a2.set_title("plan view")
    a2.legend(loc="upper right", fontsize=8)
    tag = res.config.tank.tag or res.scan_path.stem
    fig.suptitle(f"{tag}: noise sigma {L.length(res.noise.sigma) * (1000 if L.unit == 'm' else 1):.2f} "
                 f"{'mm' if L.unit == 'm' else L.unit}, coverage {100 * p.coverage:.1f} %")
    return png_bytes(fig, dpi=110)
