"""report.html: one self-contained page (figures embedded as PNG data), readable on screen and printable."""
from __future__ import annotations

import base64
import html

import numpy as np
import yaml

from ..notices import CAUTION
from ..units import INCH, UNIT_LABELS, to_metres
from ..version import __version__
from . import figures as F

CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',Helvetica,Arial,sans-serif;color:#1d2b36;max-width:1080px;
margin:24px auto;padding:0 18px;line-height:1.4;font-size:14px}
h1{font-size:22px;margin:0 0 4px} h2{font-size:17px;border-bottom:1px solid #c9d1d8;padding-bottom:3px;margin-top:28px}
.sub{color:#55636f;margin:0 0 14px}
.caution{border:2px solid #1d2b36;padding:10px 14px;margin:14px 0;background:#f6f7f8}
table{border-collapse:collapse;margin:8px 0;width:100%} td,th{border-bottom:1px solid #dde3e8;padding:4px 8px;
text-align:left;vertical-align:top} th{background:#eef1f4;font-weight:600}
.v{font-weight:700;text-transform:uppercase;letter-spacing:.03em}
.v-acceptable{color:#1e6b3a} .v-exceeds{color:#a0261c} .v-indeterminate{color:#8a5a00}
.overall{font-size:18px;margin:8px 0}
figure{margin:14px 0;page-break-inside:avoid} figure img{max-width:100%;border:1px solid #e3e7eb}
figcaption{font-size:12px;color:#55636f}
pre{background:#f6f7f8;padding:8px;overflow:auto;font-size:11px;max-height:420px}
.warn li{color:#8a5a00}
@media print{body{max-width:none;margin:0;font-size:11px} pre{max-height:none} h2{page-break-after:avoid}}
"""


def embed_png(png: bytes, alt: str, name: str) -> str:
    b = base64.b64encode(png).decode("ascii")
    return f'<img alt="{html.escape(alt)}" data-plot="{name}" src="data:image/png;base64,{b}">'


def _e(x) -> str:
    return html.escape(str(x))


def _p(p) -> str:
    if p is None:
        return "-"
    return "< 1e-300" if p == 0 else f"{p:.3g}"


def _verdict(v) -> str:
    return f'<span class="v v-{v}">{_e(v)}</span>'


def _fmt_len(v_m, units, small=False):
    if v_m is None or not np.isfinite(v_m):
        return "-"
    if small:
        return f"{v_m * 1e3:.2f} mm" if units in ("m", "mm") else f"{v_m / INCH:.3f} in"
    return f"{v_m / to_metres(units):.4f} {units}"


def render_report(res=None, ev=None, units="m", figures=None, resolved=None, config_source="", input_info=None,
                  title_tag="") -> str:
    figures = figures or {}
    tag = title_tag or "(no tank tag)"
    date = ""
    if res is not None:
        date = res.config.tank.survey_date
    out = ["<!doctype html><html lang='en'><head><meta charset='utf-8'>",
           f"<title>chimeline report {_e(tag)}</title><style>{CSS}</style></head><body>",
           f"<h1>Shell settlement report: {_e(tag)}</h1>",
           f"<p class='sub'>survey date {_e(date or 'not given')} &middot; chimeline {__version__}</p>",
           f"<div class='caution'><b>Caution.</b> {_e(CAUTION)}</div>"]
    # ---- summary
    out.append("<h2>Summary</h2>")
    if ev is not None:
        out.append(f"<p class='overall'>Overall: {_verdict(ev.verdict)}</p>")
        out.append("<table><tr><th>criterion</th><th>verdict</th><th>governing number</th><th>where (deg)</th>"
                   "<th>notes</th></tr>")
        for c in ev.criteria:
            where = ", ".join(f"{a:.1f}-{b:.1f}" for a, b in c.azimuth_ranges[:8]) or "-"
            if len(c.azimuth_ranges) > 8:
                where += f" (+{len(c.azimuth_ranges) - 8} more)"
            out.append(f"<tr><td>{_e(c.name)}</td><td>{_verdict(c.verdict)}</td><td>{_e(c.governing)}</td>"
                       f"<td>{_e(where)}</td><td>{'<br>'.join(_e(r) for r in c.reasons)}</td></tr>")
        out.append("</table>")
        t = ev.tilt
        out.append("<table><tr><th>tilt plane</th><th></th></tr>"
                   f"<tr><td>amplitude (half peak-to-peak at the shell)</td><td>{_fmt_len(t.amplitude, units, True)}</td></tr>"
                   f"<tr><td>lowest at</td><td>{t.low_azimuth_deg:.1f} deg</td></tr>"
                   f"<tr><td>R^2 of the cosine fit (the standard's rule: >= {ev.settings.r2_min})</td>"
                   f"<td>{t.r_squared:.4f} ({'met' if t.r2_rule_met else 'not met'})</td></tr>"
                   f"<tr><td>F test of the cosine fit</td><td>F = {t.f_test.statistic:.4g}, p = {_p(t.f_test.p_value)}</td></tr>"
                   f"<tr><td>tilt terms within the Fourier model (K = {ev.fourier.order})</td><td>partial F p = "
                   f"{_p(ev.fourier.tilt_partial_f.p_value)}"
                   + (f"; chi-square vs measured noise p = {_p(ev.fourier.tilt_chi2.p_value)}" if ev.fourier.tilt_chi2 else "")
                   + f"</td></tr><tr><td>tilt plane exists (decided by {t.decided_by})</td><td>"
                   f"{'yes' if t.significant else 'no'}</td></tr></table>")
        out.append("<p>Out-of-plane settlement and the checks below do not depend on a small error of the scan's "
                   "vertical reference; the tilt and the elevations do, unless the scan is tied to survey control.</p>")
    else:
        out.append("<p>No evaluation: the config carries no tank data (tank.shell_height and tank.yield_strength). "
                   "The profile below is the scan-to-profile result only.</p>")
    if res is not None:
        n = res.noise
        out.append("<table><tr><th>measurement</th><th></th></tr>"
                   f"<tr><td>vertical noise per point (within-bin)</td><td>{_fmt_len(n.sigma, units, True)} "
                   f"(95 % CI {_fmt_len(n.ci[0], units, True)} - {_fmt_len(n.ci[1], units, True)})</td></tr>"
                   f"<tr><td>second estimator (neighbour pairs)</td><td>"
                   f"{_fmt_len(n.pairs.sigma, units, True) if n.pairs else '-'}; ratio "
                   f"{(n.within_bin.sigma / n.pairs.sigma) if n.pairs else float('nan'):.3f}, F test p = {_p(n.agreement_p)}: "
                   f"{'consistent (within the configured tolerance)' if n.agree else 'the estimators DISAGREE'}</td></tr>"
                   f"<tr><td>station vertical offsets (registration), spread</td><td>{_fmt_len(n.registration_sigma, units, True)}"
                   f" ({'removed from the profile' if res.profile.leveled else 'reported only'}); datum 1 sigma "
                   f"{_fmt_len(n.datum_sigma, units, True)}</td></tr>"
                   f"<tr><td>coverage of the circumference (ok bins)</td><td>{100 * res.profile.coverage:.1f} % of "
                   f"{len(res.profile.azimuth_deg)} bins of {res.profile.bin_width_deg:.3g} deg</td></tr>"
                   f"<tr><td>shell radius at the base</td><td>{_fmt_len(res.shell.radius, units)}</td></tr></table>")
    # ---- warnings
    warns = list(res.warnings if res is not None else []) + list(ev.warnings if ev is not None else [])
    out.append("<h2>Warnings</h2>")
    out.append("<ul class='warn'>" + "".join(f"<li>{_e(w)}</li>" for w in dict.fromkeys(warns)) + "</ul>" if warns
               else "<p>None.</p>")
    # ---- figures
    out.append("<h2>Figures</h2>")
    captions = {
        "plan": "Plan view: scan points (subsample), the fitted shell, and the profile bins by status around it.",
        "profile": "Junction elevation around the shell with its 95 % band and the tilt plane; shaded: gaps (no data, "
                   "never filled).",
        "out_of_plane": "Out-of-plane settlement (tilt plane removed) with the Fourier model and its band.",
        "deflection": "Deflection S_i against the allowable S_max (dashed); exceedances marked.",
        "curvature": "Curvature along the arc against the limit 11 Y / (E H) (dashed); verdict 'exceeds' only where the "
                     "whole band lies past the limit.",
        "arcs": "Settled arcs: depth below the chord against arc length, with the permissible table.",
        "noise": "Left: residuals of kept points about their bin; right: noise per station with 95 % intervals.",
        "shell": "Radial residuals of the shell by height: a first look at plumbness and roundness.",
    }
    for name, png in figures.items():
        out.append(f"<figure>{embed_png(png, captions.get(name, name), name)}<figcaption>{_e(captions.get(name, ''))}"
                   f"</figcaption></figure>")
    # ---- tables
    if ev is not None and ev.arcs:
        out.append("<h2>Settled arcs</h2><table><tr><th>from</th><th>to</th><th>arc length</th><th>depth</th>"
                   "<th>permissible</th><th>verdict</th></tr>")
        for a in sorted(ev.arcs, key=lambda r: -r.depth)[:15]:
            out.append(f"<tr><td>{a.start_deg:.1f}</td><td>{a.end_deg:.1f}</td><td>{_fmt_len(a.arc_length, units)}</td>"
                       f"<td>{_fmt_len(a.depth, units, True)}</td><td>{_fmt_len(a.permissible, units, True) if a.permissible else '-'}"
                       f"</td><td>{_e(a.verdict)}</td></tr>")
        out.append("</table>")
        if ev.arc_table.illustrative:
            out.append("<p><b>The permissible values come from an ILLUSTRATIVE demo table, not from the standard.</b></p>")
    if ev is not None and ev.decimation is not None and ev.decimation.runs:
        d = ev.decimation
        out.append(f"<h2>Decimation study: a {d.n_points}-point conventional survey of the same profile</h2>")
        out.append("<table><tr><th>start (deg)</th><th>R^2</th><th>tilt p</th><th>max S/S_max</th><th>verdict</th></tr>")
        for r in d.runs[:20]:
            out.append(f"<tr><td>{r.start_deg:.2f}</td><td>{r.r_squared:.3f}</td><td>{r.tilt_p_value:.3g}</td>"
                       f"<td>{r.max_deflection_ratio:.2f}</td><td>{_verdict(r.verdict)}</td></tr>")
        out.append("</table>")
    # ---- provenance
    out.append("<h2>Inputs and provenance</h2><table>")
    info = dict(input_info or {})
    for k, v in info.items():
        out.append(f"<tr><td>{_e(k)}</td><td>{_e(v)}</td></tr>")
    out.append(f"<tr><td>config</td><td>{_e(config_source)}</td></tr>")
    if res is not None:
        out.append(f"<tr><td>seed</td><td>{res.config.seed}</td></tr>")
    out.append("<tr><td>when, where, run time per stage</td><td>provenance.json beside this report (kept out of the "
               "report so that the same input and config give the same report)</td></tr>")
    out.append("</table>")
    if resolved is not None:
        out.append("<details open><summary>resolved config</summary><pre>" + _e(yaml.safe_dump(resolved, sort_keys=False))
                   + "</pre></details>")
    out.append(f"<p class='sub'>All azimuths in degrees clockwise from +Y of the scan frame. Lengths in "
               f"{_e(UNIT_LABELS.get(units, units))} unless marked.</p></body></html>")
    return "\n".join(out)


def run_figures(res, ev, units) -> dict:
    figs = {"plan": F.plan_view(res, units), "profile": F.profile_plot(res, ev, units)}
    if ev is not None:
        figs.update(out_of_plane=F.out_of_plane_plot(ev, units), deflection=F.deflection_plot(ev, units),
                    curvature=F.curvature_plot(ev, units), arcs=F.arcs_plot(ev, units))
    figs.update(noise=F.noise_plot(res, units), shell=F.shell_residual_plot(res, units))
    return figs


def evaluation_figures(ev, units) -> dict:
    return {"profile": F.survey_profile_plot(ev, units), "out_of_plane": F.out_of_plane_plot(ev, units),
            "deflection": F.deflection_plot(ev, units), "curvature": F.curvature_plot(ev, units),
            "arcs": F.arcs_plot(ev, units)}
