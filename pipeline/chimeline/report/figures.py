"""The report's figures, one function each, returning PNG bytes. Plain axes, the length unit on every axis,
limits drawn as dashed lines and exceedances marked where they occur."""
from __future__ import annotations

import numpy as np

from ..core.robust import Z95
from ..units import UNIT_LABELS, small_length, to_metres
from .lengths import Lengths
from .mpl import BAND, GAP, INK, LIMIT, MEASURED, MUTED, new_figure, png_bytes, pyplot


def _ul(units):
    return UNIT_LABELS.get(units, units)


_fig = new_figure
_png = png_bytes


def _az_axis(ax):
    ax.set_xlim(0, 360)
    ax.set_xticks(range(0, 361, 30))
    ax.set_xlabel("azimuth (deg, clockwise from +Y)")
    ax.grid(alpha=0.25, lw=0.5)


def plan_view(res, units):
    fig, ax = _fig(5.5, 5.5)
    f = to_metres(units)
    s = res.shell
    ps = res.plot_sample
    if len(ps):
        ax.scatter((ps[:, 0] - s.center[0]) / f, (ps[:, 1] - s.center[1]) / f, s=0.2, c=MUTED, lw=0, rasterized=True)
    t = np.linspace(0, 2 * np.pi, 721)
    r = s.radius / f
    ax.plot(r * np.sin(t), r * np.cos(t), color=INK, lw=1.0, label=f"fitted shell r = {r:.3f} {_ul(units)}")
    p = res.profile
    th = np.radians(p.azimuth_deg)
    for status, col, lab in (("ok", MEASURED, "profile bins: ok"), ("sparse", "#d98c00", "sparse / suspect"),
                             ("empty", LIMIT, "no data (gap)")):
        m = p.status == status if status != "sparse" else np.isin(p.status, ["sparse", "suspect"])
        if m.any():
            ax.scatter(1.06 * r * np.sin(th[m]), 1.06 * r * np.cos(th[m]), s=4, color=col, label=lab)
    for o in s.others:
        ax.plot((o.center[0] - s.center[0]) / f + o.radius / f * np.sin(t),
                (o.center[1] - s.center[1]) / f + o.radius / f * np.cos(t), color=MUTED, ls="--", lw=1)
    ax.annotate("0", (0, 1.15 * r), ha="center", color=INK)
    ax.annotate("90", (1.15 * r, 0), va="center", color=INK)
    ax.set_aspect("equal")
    ax.set_xlabel(f"x - centre ({_ul(units)})")
    ax.set_ylabel(f"y - centre ({_ul(units)})")
    ax.legend(loc="lower left", fontsize=7, markerscale=2, frameon=False)
    return _png(fig)


def profile_plot(res, ev, units):
    fig, ax = _fig()
    L = Lengths(res)
    p = res.profile
    el = L.elevation(p.elevation)
    se = L.length(p.std_error)
    ok = p.status == "ok"
    ax.fill_between(p.azimuth_deg, np.where(ok, el - Z95 * se, np.nan), np.where(ok, el + Z95 * se, np.nan),
                    color=BAND, lw=0, label="95 % band")
    ax.plot(p.azimuth_deg, np.where(ok, el, np.nan), color=MEASURED, lw=1, label="junction elevation")
    if ev is not None:
        th = np.radians(np.arange(0, 360, 0.5))
        t = ev.tilt
        ax.plot(np.degrees(th), (t.a + t.b * np.cos(th) + t.c * np.sin(th)) / to_metres(units), color=INK, ls="--",
                lw=1, label=f"tilt plane (cosine fit, R^2 = {t.r_squared:.3f})")
    for g0, g1 in p.gaps:
        ax.axvspan(g0, g1 if g1 > g0 else 360, color=GAP, lw=0)
    if p.gaps:
        ax.axvspan(0, 0, color=GAP, label="gap: no data, not filled")
    _az_axis(ax)
    ax.set_ylabel(f"elevation ({_ul(units)})")
    ax.legend(fontsize=7, frameon=False, ncol=2)
    return _png(fig)


def _labels(ax, s, y, every=None):
    """Point labels of a survey beside its readings (every n-th for long surveys)."""
    if s.dense:
        return
    step = every or max(1, len(s.azimuth_deg) // 24)
    for i in range(0, len(s.azimuth_deg), step):
        ax.annotate(str(s.label[i]), (s.azimuth_deg[i], y[i]), fontsize=6, xytext=(2, 3), textcoords="offset points",
                    color=INK)


def _legend_below(ax, ncol=3):
    """Legends sit below the axes, never over the data."""
    ax.legend(fontsize=7, frameon=False, ncol=ncol, loc="upper left", bbox_to_anchor=(0, -0.2))


def survey_profile_plot(ev, units):
    fig, ax = _fig()
    f = to_metres(units)
    s = ev.survey
    ax.plot(s.azimuth_deg, s.elevation / f, "o" if not s.dense else "-", color=MEASURED, ms=4, lw=1,
            label="readings" if not s.dense else "junction elevation")
    _labels(ax, s, s.elevation / f)
    th = np.radians(np.arange(0, 360, 0.5))
    t = ev.tilt
    plane = t.a + t.b * np.cos(th) + t.c * np.sin(th)
    ax.plot(np.degrees(th), plane / f, color=INK, ls="--", lw=1, label=f"tilt plane (cosine fit, R^2 = {t.r_squared:.3f})")
    m = ev.model
    full = np.interp(m.azimuth_deg, np.degrees(th), plane, period=360) + m.value
    ax.plot(m.azimuth_deg, full / f, color=MEASURED, lw=0.8, alpha=0.7,
            label=f"Fourier model (K = {ev.fourier.order}, {'tilt from the cosine fit' if not s.dense else 'modes >= 2 added'})")
    _az_axis(ax)
    ax.set_ylabel(f"elevation ({_ul(units)})")
    _legend_below(ax)
    return _png(fig)


def out_of_plane_plot(ev, units):
    fig, ax = _fig()
    k, u = small_length(units)
    s = ev.survey
    grid, m, sd = ev.model.azimuth_deg, ev.model.value, ev.model.sd
    for dip in ev.dips:
        a, b = dip.start_deg, dip.end_deg
        for lo, hi in (((a, b),) if b >= a else ((a, 360.0), (0.0, b))):
            ax.axvspan(lo, hi, color=GAP, lw=0)
    if ev.dips:
        ax.axvspan(0, 0, color=GAP, label="local dip (screening)")
    ax.fill_between(grid, (m - Z95 * sd) * k, (m + Z95 * sd) * k, color=BAND, lw=0, label="Fourier model 95 % band")
    ax.plot(grid, m * k, color=INK, lw=1, label=f"Fourier model, modes 2..{ev.fourier.order}" if ev.fourier.order >= 2
            else "Fourier model: no mode above 1")
    ax.plot(s.azimuth_deg, ev.out_of_plane * k, "o" if not s.dense else ".", color=MEASURED, ms=3 if s.dense else 5,
            label="measured (tilt plane removed)")
    _labels(ax, s, ev.out_of_plane * k)
    ax.axhline(0, color=MUTED, lw=0.6)
    _az_axis(ax)
    ax.set_ylabel(f"out-of-plane settlement ({u})")
    _legend_below(ax)
    return _png(fig)


def deflection_plot(ev, units):
    fig, ax = _fig()
    k, u = small_length(units)
    s, d = ev.survey, ev.deflection
    ok = np.isfinite(d.S)
    ax.errorbar(s.azimuth_deg[ok], d.S[ok] * k, yerr=Z95 * d.S_sd[ok] * k, fmt="o" if not s.dense else ".",
                color=MEASURED, ms=3, elinewidth=0.5, capsize=0, label="deflection S_i (95 % bars)")
    _labels(ax, s, np.where(ok, d.S, 0) * k)
    ax.plot(s.azimuth_deg, d.allowable * k, color=LIMIT, ls="--", lw=1, label="allowable S_max (B.3.2.1)")
    ax.plot(s.azimuth_deg, -d.allowable * k, color=LIMIT, ls="--", lw=1)
    for mask, mk, lab in ((d.exceeds, "x", "exceeds"), (d.indeterminate, "s", "indeterminate")):
        if mask.any():
            ax.plot(s.azimuth_deg[mask], d.S[mask] * k, mk, color=LIMIT, ms=7, mfc="none", label=lab)
    ax.axhline(0, color=MUTED, lw=0.6)
    _az_axis(ax)
    ax.set_ylabel(f"deflection S ({u})")
    _legend_below(ax)
    return _png(fig)


def curvature_plot(ev, units):
    fig, ax = _fig()
    c = ev.curvature
    scale = to_metres(units)  # 1/m -> 1/unit
    if c.assessed:
        qs, qp = c.q_simultaneous, c.q_pointwise
        ax.fill_between(c.azimuth_deg, (c.kappa - qs * c.kappa_sd) * scale, (c.kappa + qs * c.kappa_sd) * scale,
                        color=BAND, alpha=0.45, lw=0, label="simultaneous 95 % band")
        ax.fill_between(c.azimuth_deg, (c.kappa - qp * c.kappa_sd) * scale, (c.kappa + qp * c.kappa_sd) * scale,
                        color=BAND, lw=0, label="pointwise 95 % band")
        ax.plot(c.azimuth_deg, c.kappa * scale, color=INK, lw=1,
                label=f"curvature smoothed at {c.smoothing / to_metres(units):.2f} {_ul(units)} (modes >= 2)")
        ex = c.exceeds
        if ex.any():
            ax.plot(c.azimuth_deg[ex], c.kappa[ex] * scale, ".", color=LIMIT, ms=4, label="band beyond the limit")
    else:
        ax.text(180, 0, "not assessed: no mode above 1 in the model", ha="center", va="bottom", fontsize=8, color=INK)
    ax.axhline(c.limit * scale, color=LIMIT, ls="--", lw=1, label="limit 11 Y / (E H) (screening)")
    ax.axhline(-c.limit * scale, color=LIMIT, ls="--", lw=1)
    if ev.curvature_sparse is not None:
        cs = ev.curvature_sparse
        ax.plot(cs.azimuth_deg, cs.kappa * scale, "o", color=MEASURED, ms=4, mfc="none",
                label="second difference at the survey points")
    _az_axis(ax)
    ax.set_ylabel(f"curvature (1/{_ul(units)})")
    ax.legend(fontsize=7, frameon=False, ncol=2, loc="upper left", bbox_to_anchor=(0, -0.22))
    return _png(fig)


def arcs_plot(ev, units):
    fig, ax = _fig(6, 3.8)
    f = to_metres(units)
    k, u = small_length(units)
    t = ev.arc_table
    if t.curve_arc_length is not None:
        lab = ("permissible, B.3.2.2 (ILLUSTRATIVE demo table)" if t.illustrative else
               "permissible, B.3.2.2 (user table)")
        ax.plot(t.curve_arc_length / f, t.curve_depth * k, color=LIMIT, ls="--", lw=1, label=lab)
    deepest = sorted(ev.arcs, key=lambda a: -a.depth)[:6]
    for a in ev.arcs:
        col = LIMIT if a.verdict == "exceeds" else (MEASURED if a.verdict in ("acceptable", "indeterminate") else MUTED)
        ax.errorbar(a.arc_length / f, a.depth * k, yerr=Z95 * a.depth_sd * k, fmt="o", color=col, ms=4,
                    elinewidth=0.6)
        if a in deepest:
            ax.annotate(f"{a.deepest_deg:.0f}", (a.arc_length / f, a.depth * k), fontsize=7,
                        xytext=(3, 3), textcoords="offset points")
    ax.set_xlabel(f"settled arc length ({_ul(units)})")
    ax.set_ylabel(f"depth below the chord ({u})")
    ax.grid(alpha=0.25, lw=0.5)
    if t.curve_arc_length is not None:
        ax.legend(fontsize=7, frameon=False)
    else:
        ax.text(0.02, 0.95, "no permissible table supplied: arcs not assessed", transform=ax.transAxes, fontsize=8,
                va="top", color=INK)
    ax.set_title("settled arcs (labels: azimuth of the deepest point of the six deepest, deg)", fontsize=8)
    return _png(fig)


def noise_plot(res, units):
    k, u = small_length(units)
    fig, (a1, a2) = pyplot().subplots(1, 2, figsize=(10, 3.4))
    for a in (a1, a2):
        a.spines["top"].set_visible(False)
        a.spines["right"].set_visible(False)
    r = res.profile.residual[np.isfinite(res.profile.residual)]
    sig = res.noise.sigma
    if len(r):
        lim = max(5 * sig, 1e-6)
        a1.hist(r * k, bins=60, range=(-lim * k, lim * k), color=BAND, edgecolor=MEASURED,
                lw=0.3, density=True, label="kept residuals")
        x = np.linspace(-lim, lim, 200)
        a1.plot(x * k, np.exp(-0.5 * (x / sig) ** 2) / (sig * np.sqrt(2 * np.pi)) / k, color=INK, lw=1,
                label=f"normal, sigma = {sig * k:.2f} {u}")
    a1.set_xlabel(f"residual about the bin line ({u})")
    a1.set_ylabel("density")
    a1.legend(fontsize=7, frameon=False)
    st = res.noise.stations
    y = np.arange(len(st))
    for j, (attr, col, lab, off) in enumerate((("within_bin", MEASURED, "within-bin", -0.12), ("pairs", INK, "pairs", 0.12))):
        xs, lo, hi, yy = [], [], [], []
        for i, s in enumerate(st):
            e = getattr(s, attr)
            if e is not None:
                xs.append(e.sigma * k)
                lo.append((e.sigma - e.ci[0]) * k)
                hi.append((e.ci[1] - e.sigma) * k)
                yy.append(i + off)
        if xs:
            a2.errorbar(xs, yy, xerr=[lo, hi], fmt="o", color=col, ms=4, capsize=2, label=lab)
    a2.axvspan(res.noise.ci[0] * k, res.noise.ci[1] * k, color=BAND, alpha=0.5, label="all stations, 95 % CI")
    a2.set_yticks(y)
    a2.set_yticklabels([f"station {s.station}" for s in st])
    a2.set_xlabel(f"vertical noise sigma ({u}), 95 % intervals")
    a2.legend(fontsize=7, frameon=False)
    return _png(fig)


def shell_residual_plot(res, units):
    fig, ax = _fig(6, 4)
    s = res.shell
    p = res.shell_sample
    k, u = small_length(units)
    f = to_metres(units)
    if len(p):
        h, rho, dx, dy = s.radial(p)
        r = rho - s.radius
        m = np.abs(r) < 0.08
        ax.scatter(r[m] * k, (h[m]) / f, s=0.5, c=MUTED, lw=0, rasterized=True)
        # median per 0.25 m of height
        hb = np.floor(h[m] / 0.25)
        for b in np.unique(hb):
            sel = hb == b
            if sel.sum() > 30:
                ax.plot(np.median(r[m][sel]) * k, (b + 0.5) * 0.25 / f, "o", color=MEASURED, ms=3)
    ax.axvline(0, color=INK, lw=0.6)
    ax.set_xlabel(f"radial residual from the fitted base radius ({u})")
    ax.set_ylabel(f"height above the junction ({_ul(units)})")
    ax.set_title("shell residuals by height (dots: medians per 0.25 m; courses step inward)", fontsize=8)
    ax.grid(alpha=0.25, lw=0.5)
    return _png(fig)
