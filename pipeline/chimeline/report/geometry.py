"""The shell geometry's outputs: plumbness.csv, roundness.csv, shell_deviation.csv, the ``geometry`` block of
profile.json, three figures (PNG bytes) and the report section (an HTML fragment).

Checks follow the settlement checks' rule: 'exceeds' only where the whole 95 % band lies past the tolerance,
'indeterminate' where it straddles it, 'acceptable' otherwise. The tolerances are the standard's construction
tolerances (from memory), used for assessment at the engineer's discretion; they never set the settlement verdict.
CSV lengths are in the run's output unit, named in each header (``height_m``); values keep full precision.
"""
from __future__ import annotations

import csv
import html
import io
from dataclasses import dataclass

import numpy as np

from ..core.robust import Z95
from ..evaluate.verdicts import SEVERITY, banded
from ..notices import CAUTION, GEOMETRY_TOLERANCES
from ..units import UNIT_LABELS, small_length, to_metres
from .cells import csv_cell, json_num
from .lengths import Lengths
from .mpl import BAND, INK, LIMIT, MUTED, new_figure, png_bytes

PLUMBNESS_CSV = "plumbness.csv"
ROUNDNESS_CSV = "roundness.csv"
DEVIATION_CSV = "shell_deviation.csv"


@dataclass(frozen=True)
class GeometryCheck:
    name: str
    verdict: str  # acceptable | exceeds | indeterminate
    governing: str  # the governing number, in words
    reasons: tuple  # str


def plumb_verdicts(pl) -> np.ndarray:
    """(n_h, n_lines) str: acceptable / exceeds / indeterminate, '' where the line is a gap."""
    return _verdicts(pl.total, pl.total_se, pl.tolerance)


def roundness_verdicts(ro) -> np.ndarray:
    return _verdicts(ro.deviation, ro.deviation_se, ro.tolerance)


def _verdicts(v, se, tol):
    ok = np.isfinite(v)
    ex, ind = banded(np.where(ok, v, 0.0), np.where(ok, se, 0.0), tol)
    out = np.where(ex, "exceeds", np.where(ind, "indeterminate", "acceptable")).astype(object)
    out[~ok] = ""
    return out


def geometry_checks(geo) -> list:
    """One check per tolerance: out-of-plumbness, radius at the standard's 0.3 m, radius at the other heights."""
    pl, ro = geo.plumb, geo.roundness
    checks = [_check("out-of-plumbness (API 653 10.5.2 / API 650 7.5.2, from memory)", pl.total, pl.total_se,
                     pl.tolerance, plumb_verdicts(pl), pl.azimuth_deg[None, :].repeat(len(pl.heights), 0),
                     pl.heights[:, None].repeat(len(pl.azimuth_deg), 1), pl.tolerance_rule)]
    at_std = np.isclose(ro.heights, 0.3, atol=1e-6)
    rv = roundness_verdicts(ro)
    az = ro.azimuth_deg[None, :].repeat(len(ro.heights), 0)
    hh = ro.heights[:, None].repeat(len(ro.azimuth_deg), 1)
    for name, rows in (("radius at 0.3 m above the bottom (API 650 7.5.3, from memory)", at_std),
                       ("radius at the other heights (the 0.3 m tolerance, for orientation)", ~at_std)):
        if rows.any():
            checks.append(_check(name, ro.deviation[rows], ro.deviation_se[rows], ro.tolerance, rv[rows], az[rows],
                                 hh[rows], ro.tolerance_rule))
    return checks


def _check(name, v, se, tol, verdicts, az, hh, rule) -> GeometryCheck:
    ok = np.isfinite(v)
    if not ok.any():
        return GeometryCheck(name, "indeterminate", "no values (the face was not seen)", (rule,))
    ratio = np.where(ok, np.abs(v) / tol, -1.0)
    k = np.unravel_index(int(np.argmax(ratio)), ratio.shape)
    verdict = max((x for x in verdicts[ok]), key=SEVERITY.get)
    gov = f"max ratio {ratio[k]:.2f} at {az[k]:.1f} deg, {hh[k]:.2f} m"
    n_ex, n_ind = int((verdicts == "exceeds").sum()), int((verdicts == "indeterminate").sum())
    reasons = [rule, f"{int(ok.sum())} values, {int((~ok).sum())} gaps; {n_ex} exceed, {n_ind} indeterminate"]
    return GeometryCheck(name, verdict, gov, tuple(reasons))


# ---------------------------------------------------------------------------
# CSV and JSON


def _csv(header, rows) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows(rows)
    return buf.getvalue()


def _unit_tag(unit: str) -> str:
    return unit  # m, mm, ft, us_ft, in: the suffix of every length column


def plumbness_csv(geo, L: Lengths) -> str:
    """One row per line and height: the offsets relative to the face at the reference height."""
    pl = geo.plumb
    u = _unit_tag(L.unit)
    v = plumb_verdicts(pl)
    header = ["azimuth_deg", f"height_{u}", f"offset_radial_{u}", f"offset_tangential_{u}", f"offset_total_{u}",
              f"tolerance_{u}", "ratio", f"offset_radial_se_{u}", f"offset_tangential_se_{u}", f"offset_total_se_{u}",
              "verdict", "course", "n_points", "n_stations"]
    rows = []
    for i, hh in enumerate(pl.heights):
        for j, a in enumerate(pl.azimuth_deg):
            t = pl.total[i, j]
            rows.append([csv_cell(a), csv_cell(L.length(hh)), csv_cell(L.length(pl.radial[i, j])), csv_cell(L.length(pl.tangential[i, j])),
                         csv_cell(L.length(t)), csv_cell(L.length(pl.tolerance)), csv_cell(t / pl.tolerance),
                         csv_cell(L.length(pl.radial_se[i, j])), csv_cell(L.length(pl.tangential_se[i, j])),
                         csv_cell(L.length(pl.total_se[i, j])), v[i, j], int(pl.course[i]), int(pl.n_points[i, j]),
                         int(pl.n_stations[i, j])])
    return _csv(header, rows)


def roundness_csv(geo, L: Lengths) -> str:
    """One row per azimuth bin and height: radius from the section's centre, deviation, tolerance."""
    ro = geo.roundness
    u = _unit_tag(L.unit)
    v = roundness_verdicts(ro)
    header = ["azimuth_deg", f"height_{u}", f"radius_{u}", f"deviation_{u}", f"tolerance_{u}", f"std_error_{u}",
              "ratio", "verdict", "n_points", f"deviation_se_{u}"]
    rows = []
    for i, hh in enumerate(ro.heights):
        for j, a in enumerate(ro.azimuth_deg):
            d = ro.deviation[i, j]
            rows.append([csv_cell(a), csv_cell(L.length(hh)), csv_cell(L.length(ro.radius[i, j])), csv_cell(L.length(d)),
                         csv_cell(L.length(ro.tolerance)), csv_cell(L.length(ro.radius_se[i, j])), csv_cell(abs(d) / ro.tolerance),
                         v[i, j], int(ro.n_points[i, j]), csv_cell(L.length(ro.deviation_se[i, j]))])
    return _csv(header, rows)


def deviation_csv(geo, L: Lengths) -> str:
    """The deviation map, one row per cell (empty deviation where the face was not seen)."""
    m = geo.deviation
    u = _unit_tag(L.unit)
    header = ["azimuth_deg", f"height_{u}", f"deviation_{u}", f"std_error_{u}", "n_points", "n_stations"]
    rows = [[csv_cell(a), csv_cell(L.length(hh)), csv_cell(L.length(m.deviation[i, j])), csv_cell(L.length(m.std_error[i, j])),
             int(m.n_points[i, j]), int(m.n_stations[i, j])]
            for i, hh in enumerate(m.heights) for j, a in enumerate(m.azimuth_deg)]
    return _csv(header, rows)


def geometry_summary(geo, L: Lengths, vertical_reference_sigma: float) -> dict:
    """The ``geometry`` block of profile.json (lengths in the output unit, full precision)."""
    pl, ro = geo.plumb, geo.roundness
    n = lambda v: json_num(L.length(v))  # noqa: E731
    out = {
        "units": L.unit,
        "heights": "above the junction plane (cosine fit of the profile) along the scan's up axis; azimuths as in "
                   "the profile",
        "max_out_of_plumb": None, "max_radius_deviation": None, "ovality": None,
        "checks": [{"name": c.name, "verdict": c.verdict, "governing": c.governing, "notes": list(c.reasons)}
                   for c in geometry_checks(geo)],
        "plumb_tolerance": {"value": n(pl.tolerance), "rule": pl.tolerance_rule,
                            "reference_height": n(pl.reference_height)},
        "radius_tolerance": {"value": n(ro.tolerance), "rule": ro.tolerance_rule, "diameter": n(ro.diameter),
                             "diameter_source": ro.diameter_source, "reference": ro.reference},
        "shell_top": n(geo.shell_top), "shell_height": n(geo.shell_height),
        "shell_height_source": geo.shell_height_source, "course_tops": [n(v) for v in geo.course_tops],
        "face_sigma": n(geo.face_sigma), "registration_sigma": n(geo.registration_sigma),
        "vertical_reference_sigma_rad": vertical_reference_sigma,
        "best_vertical_cylinder": {"radius": n(geo.deviation.cylinder_radius)},
        "face_points": {"in": geo.n_face, "kept": geo.n_kept},
        "note": GEOMETRY_TOLERANCES,
    }
    ok = np.isfinite(pl.total)
    if ok.any():
        ratio = np.where(ok, pl.total / pl.tolerance, -1.0)
        i, j = np.unravel_index(int(np.argmax(ratio)), ratio.shape)
        out["max_out_of_plumb"] = {
            "value": n(pl.total[i, j]), "std_error": n(pl.total_se[i, j]), "azimuth_deg": json_num(pl.azimuth_deg[j]),
            "height": n(pl.heights[i]), "radial": n(pl.radial[i, j]), "tangential": n(pl.tangential[i, j]),
            "tolerance": n(pl.tolerance), "ratio": json_num(ratio[i, j]), "verdict": plumb_verdicts(pl)[i, j]}
    ok = np.isfinite(ro.deviation)
    if ok.any():
        a = np.where(ok, np.abs(ro.deviation), -1.0)
        i, j = np.unravel_index(int(np.argmax(a)), a.shape)
        out["max_radius_deviation"] = {
            "value": n(ro.deviation[i, j]), "std_error": n(ro.deviation_se[i, j]), "azimuth_deg": json_num(ro.azimuth_deg[j]),
            "height": n(ro.heights[i]), "radius": n(ro.radius[i, j]), "tolerance": n(ro.tolerance),
            "ratio": json_num(a[i, j] / ro.tolerance), "verdict": roundness_verdicts(ro)[i, j]}
    per = [{"height": n(h), "amplitude": n(ro.ovality[i]), "std_error": n(ro.ovality_se[i]),
            "long_axis_deg": json_num(ro.ovality_axis_deg[i]), "diameter_difference": n(4 * ro.ovality[i]),
            "modes": {str(k + 2): n(v) for k, v in enumerate(ro.modes[i])}}
           for i, h in enumerate(ro.heights)]
    fin = np.isfinite(ro.ovality)
    if fin.any():
        k = int(np.nanargmax(ro.ovality))
        out["ovality"] = {"max_amplitude": n(ro.ovality[k]), "std_error": n(ro.ovality_se[k]), "height": n(ro.heights[k]),
                          "long_axis_deg": json_num(ro.ovality_axis_deg[k]),
                          "definition": "mode-2 amplitude a of the radius: r = R + a cos(2 (azimuth - long axis)); "
                                        "largest minus smallest diameter = 4 a", "per_height": per}
    return out


def geometry_files(res) -> dict:
    """{file name: text} of the geometry outputs of a run (empty without a geometry result)."""
    geo = res.geometry
    if geo is None:
        return {}
    L = Lengths(res)
    return {PLUMBNESS_CSV: plumbness_csv(geo, L), ROUNDNESS_CSV: roundness_csv(geo, L),
            DEVIATION_CSV: deviation_csv(geo, L)}


# ---------------------------------------------------------------------------
# figures


def map_limits(deviation) -> float:
    """Half-range of the map's colour scale (m): symmetric about zero, the 98th percentile of |deviation|."""
    fin = np.abs(deviation[np.isfinite(deviation)])
    return float(max(np.percentile(fin, 98), 1e-4)) if len(fin) else 1e-3


def deviation_map_png(geo, units) -> bytes:
    """Unrolled shell: deviation from the best vertical cylinder, diverging colours centred on zero, gaps grey."""
    import matplotlib

    k, u = small_length(units)
    f = to_metres(units)
    m = geo.deviation
    fig, ax = new_figure(10, 4.6)
    cmap = matplotlib.colormaps["RdBu_r"].with_extremes(bad="#d9d9d9")
    v = map_limits(m.deviation) * k
    h_top = (m.heights[-1] + (m.heights[1] - m.heights[0] if len(m.heights) > 1 else 0.25) / 2) / f
    im = ax.imshow(np.ma.masked_invalid(m.deviation * k), origin="lower", aspect="auto", cmap=cmap, vmin=-v, vmax=v,
                   extent=[0, 360, 0, h_top], interpolation="nearest")
    for t in geo.course_tops[:-1]:
        ax.axhline(t / f, color=INK, lw=0.5, ls=":")
    cb = fig.colorbar(im, ax=ax, pad=0.01)
    cb.set_label(f"radial deviation ({u}), outward +")
    ax.set_xlim(0, 360)
    ax.set_xticks(range(0, 361, 30))
    ax.set_xlabel("azimuth (deg)")
    ax.set_ylabel(f"height above the junction ({UNIT_LABELS.get(units, units)})")
    ax.set_title(f"shell face minus the best vertical cylinder (r = {m.cylinder_radius / f:.4f} "
                 f"{UNIT_LABELS.get(units, units)}); grey: not seen; dotted: course seams (config)", fontsize=8)
    return png_bytes(fig)


def _by_height(n_h):
    """(figure, axes, colour of height row i) for the per-height line plots."""
    import matplotlib

    fig, ax = new_figure(10, 3.8)
    cmap = matplotlib.colormaps["viridis"]
    return fig, ax, lambda i: cmap(i / max(n_h - 1, 1))


def _azimuth_axis(ax, xlabel, ylabel):
    ax.set_xticks(range(0, 361, 30))
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.grid(alpha=0.25, lw=0.5)


def plumbness_png(geo, units) -> bytes:
    k, u = small_length(units)
    f = to_metres(units)
    pl = geo.plumb
    fig, ax, colour = _by_height(len(pl.heights))
    for i in range(len(pl.heights)):
        ok = np.isfinite(pl.total[i])
        ax.errorbar(pl.azimuth_deg[ok], pl.total[i, ok] * k, yerr=Z95 * pl.total_se[i, ok] * k, fmt="o-", ms=3,
                    lw=0.8, color=colour(i), elinewidth=0.6,
                    label=f"{pl.heights[i] / f:.2f} {UNIT_LABELS.get(units, units)}")
    ax.axhline(pl.tolerance * k, color=LIMIT, ls="--", lw=1, label="tolerance")
    v = plumb_verdicts(pl)
    for mask, mk, lab in ((v == "exceeds", "x", "exceeds"), (v == "indeterminate", "s", "indeterminate")):
        if mask.any():
            ii, jj = np.nonzero(mask)
            ax.plot(pl.azimuth_deg[jj], pl.total[ii, jj] * k, mk, color=LIMIT, ms=7, mfc="none", label=lab)
    ax.set_xlim(-5, 360)
    ax.set_ylim(bottom=0)
    _azimuth_axis(ax, "azimuth of the plumb line (deg)", f"out-of-plumbness ({u})")
    ax.legend(fontsize=7, frameon=False, ncol=4, title="height (95 % bars)", title_fontsize=7)
    return png_bytes(fig)


def roundness_png(geo, units) -> bytes:
    k, u = small_length(units)
    f = to_metres(units)
    ro = geo.roundness
    fig, ax, colour = _by_height(len(ro.heights))
    for i in range(len(ro.heights)):
        ax.plot(ro.azimuth_deg, ro.deviation[i] * k, lw=0.9, color=colour(i),
                label=f"{ro.heights[i] / f:.2f} {UNIT_LABELS.get(units, units)}")
    ax.axhspan(-ro.tolerance * k, ro.tolerance * k, color=BAND, alpha=0.25, lw=0, label="tolerance band")
    ax.axhline(ro.tolerance * k, color=LIMIT, ls="--", lw=1)
    ax.axhline(-ro.tolerance * k, color=LIMIT, ls="--", lw=1)
    ax.axhline(0, color=MUTED, lw=0.6)
    ax.set_xlim(0, 360)
    _azimuth_axis(ax, "azimuth (deg)", f"radius deviation ({u})")
    ax.legend(fontsize=7, frameon=True, framealpha=0.85, edgecolor="none", ncol=7, loc="lower center",
              title="height above the junction", title_fontsize=7)
    return png_bytes(fig)


def geometry_figures(geo, units) -> dict:
    """{name: PNG bytes} of the geometry figures (plots/<name>.png)."""
    return {"shell_deviation": deviation_map_png(geo, units), "plumbness": plumbness_png(geo, units),
            "roundness": roundness_png(geo, units)}


# ---------------------------------------------------------------------------
# the report section


CAPTIONS = {
    "shell_deviation": "Deviation map: the shell face's radial deviation from the best vertical cylinder on the "
                       "unrolled shell (diverging colours centred on zero, colour bar in {u}); grey cells were not seen "
                       "(stair, nozzle and station shadows), never filled. A tilted shell shows as a cosine that grows "
                       "with height; course seams as horizontal steps.",
    "plumbness": "Out-of-plumbness of each vertical line relative to the face {ref} above the junction, at the top of "
                 "each course and of the shell, with 95 % bars; dashed: the tolerance.",
    "roundness": "Radius deviation around the shell at each measuring height; dashed: the +- tolerance (stated by the "
                 "standard at 0.3 m, drawn at every height for orientation); breaks are gaps.",
}


def geometry_section_html(geo, units, figures: dict, embed) -> str:
    """The report's geometry section. ``embed(png, alt, name)`` returns the ``<img>`` tag of a figure."""
    e = lambda x: html.escape(str(x))  # noqa: E731
    k, su = small_length(units)
    f = to_metres(units)
    ul = UNIT_LABELS.get(units, units)
    pl, ro = geo.plumb, geo.roundness
    out = ["<h2>Shell geometry: out-of-plumbness, roundness, deviation map</h2>",
           f"<div class='caution'><b>Construction tolerances, at the engineer's discretion.</b> {e(GEOMETRY_TOLERANCES)} "
           f"{e(CAUTION)}</div>",
           "<table><tr><th>check</th><th>verdict</th><th>governing number</th><th>notes</th></tr>"]
    for c in geometry_checks(geo):
        out.append(f"<tr><td>{e(c.name)}</td><td><span class='v v-{c.verdict}'>{e(c.verdict)}</span></td>"
                   f"<td>{e(c.governing)}</td><td>{'<br>'.join(e(r) for r in c.reasons)}</td></tr>")
    out.append("</table>")
    s = lambda v: "-" if v is None or not np.isfinite(v) else f"{v * k:.2f} {su}"  # noqa: E731
    rows = []
    ok = np.isfinite(pl.total)
    if ok.any():
        i, j = np.unravel_index(int(np.nanargmax(np.where(ok, pl.total, -1))), pl.total.shape)
        rows.append(("largest out-of-plumbness", f"{s(pl.total[i, j])} +- {s(pl.total_se[i, j])} (1 sigma) at "
                     f"{pl.azimuth_deg[j]:.0f} deg, {pl.heights[i] / f:.2f} {ul}: radial {s(pl.radial[i, j])}, "
                     f"tangential {s(pl.tangential[i, j])}; tolerance {s(pl.tolerance)}"))
    ok = np.isfinite(ro.deviation)
    if ok.any():
        i, j = np.unravel_index(int(np.nanargmax(np.where(ok, np.abs(ro.deviation), -1))), ro.deviation.shape)
        rows.append(("largest radius deviation", f"{s(ro.deviation[i, j])} +- {s(ro.deviation_se[i, j])} at "
                     f"{ro.azimuth_deg[j]:.1f} deg, {ro.heights[i] / f:.2f} {ul}; tolerance +-{s(ro.tolerance)} "
                     f"({ro.reference} radius)"))
    for i, hh in enumerate(ro.heights):
        if np.isfinite(ro.ovality[i]):
            rows.append((f"ovality at {hh / f:.2f} {ul}", f"{s(ro.ovality[i])} +- {s(ro.ovality_se[i])} (mode-2 "
                         f"amplitude; diameters differ by {s(4 * ro.ovality[i])}), long axis at "
                         f"{ro.ovality_axis_deg[i]:.0f} deg; {100 * ro.coverage[i]:.0f} % of the section seen"))
    rows.append(("shell height used", f"{geo.shell_height / f:.3f} {ul} ({geo.shell_height_source}); measured top "
                 f"{geo.shell_top / f:.3f} {ul} above the junction"))
    rows.append(("face noise, registration spread", f"{s(geo.face_sigma)} per point; {s(geo.registration_sigma)} "
                 f"between stations (radial)"))
    out.append("<table><tr><th>measurement</th><th></th></tr>"
               + "".join(f"<tr><td>{e(a)}</td><td>{e(b)}</td></tr>" for a, b in rows) + "</table>")
    for name, png in figures.items():
        cap = CAPTIONS.get(name, name).format(u=su, ref=f"{pl.reference_height / f:.2f} {ul}")
        out.append(f"<figure>{embed(png, cap, name)}<figcaption>{e(cap)}</figcaption></figure>")
    out.append("<p>Heights are measured along the scan's up axis from the junction plane (the cosine fit of the "
               "profile). Radial offsets are outward positive; tangential offsets point toward increasing azimuth. "
               "Lines or bins with too little shell face are gaps, not values.</p>")
    return "\n".join(out)
