"""The fleet's files: fleet.csv and fleet.json (one row per job), <tag>/history.json and history.csv (each tank's
settlement between consecutive surveys) and index.html (a sortable table linking every report, a site plan of
the georeferenced tanks, the histories). Machine files keep full precision, lengths in metres; the page says mm.
"""
from __future__ import annotations

import csv
import io
import math

from ..core.robust import Z95
from ..io.atomic import json_text
from ..notices import CAUTION, ILLUSTRATIVE_TABLE, VERTICAL_REFERENCE
from ..version import __version__
from .cells import csv_cell, json_num
from .console import month_text, p_text
from .html import png_data_uri, template_env
from .mpl import BAND, INK, MEASURED, MUTED, new_figure, png_bytes

FLEET_COLUMNS = ("tag", "survey_date", "kind", "status", "verdict", "governing", "max_ratio", "max_ratio_upper95",
                 "tilt_amplitude_m", "tilt_low_azimuth_deg", "noise_sigma_m", "coverage", "center_x_m", "center_y_m",
                 "radius_m", "arc_table_illustrative", "error", "folder", "report")
HISTORY_COLUMNS = ("from_date", "to_date", "years", "azimuth_deg", "difference_m", "difference_se_m",
                   "rate_m_per_year", "rate_se_m_per_year", "out_of_plane_change_m", "out_of_plane_change_se_m",
                   "out_of_plane_rate_m_per_year", "out_of_plane_rate_se_m_per_year")
#: plan colours by verdict (the legend says each in words)
PLAN_COLOURS = {"acceptable": "#1e6b3a", "indeterminate": "#c98a00", "exceeds": "#a0261c", "not evaluated": "#8a96a0"}
HISTORY_SCOPE = ("uniform and tilt changes rest on both scans' vertical reference (scanner levelling and "
                 "registration) unless the scans are tied to survey control; out-of-plane changes do not")


def _row_dict(r) -> dict:
    return {"tag": r.tag, "survey_date": r.survey_date, "kind": r.kind, "status": r.status, "verdict": r.verdict,
            "governing": r.governing, "max_ratio": json_num(r.max_ratio), "max_ratio_upper95": json_num(r.max_ratio_upper95),
            "tilt_amplitude_m": json_num(r.tilt_amplitude), "tilt_low_azimuth_deg": json_num(r.tilt_low_azimuth_deg),
            "noise_sigma_m": json_num(r.noise_sigma), "coverage": json_num(r.coverage),
            "center_x_m": json_num(r.center[0]) if r.center else None, "center_y_m": json_num(r.center[1]) if r.center else None,
            "radius_m": json_num(r.radius), "arc_table_illustrative": r.illustrative, "error": r.error, "folder": r.folder,
            "report": r.report}


def fleet_csv(rows) -> str:
    buf = io.StringIO()
    buf.write("# chimeline fleet: one row per job; lengths in metres (suffix _m), azimuth in degrees clockwise from "
              "each scan's reference; max_ratio: the largest ratio of the standard's checks (<= 1 passes)\n")
    buf.write(f"# Caution: {CAUTION}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(FLEET_COLUMNS)
    for r in rows:
        d = _row_dict(r)
        w.writerow([csv_cell(d[k]) if d[k] is not None else "" for k in FLEET_COLUMNS])
    return buf.getvalue()


def _change_dict(ch) -> dict:
    az, oop, se = ch.largest_out_of_plane
    return {"n_common": int(len(ch.azimuth_deg)),
            "uniform": {"mean_difference": json_num(ch.mean), "mean_difference_se": json_num(ch.mean_se),
                        "rate_per_year": json_num(ch.rate(ch.mean)), "rate_se": json_num(ch.rate(ch.mean_se)),
                        "consistency_p": json_num(ch.consistency_p)},
            "tilt_change": {"b_cos": json_num(ch.tilt_b), "c_sin": json_num(ch.tilt_c),
                            "covariance": [[json_num(v) for v in row] for row in ch.tilt_cov],
                            "amplitude": json_num(ch.tilt_amplitude), "amplitude_se": json_num(ch.tilt_amplitude_se),
                            "low_azimuth_deg": json_num(ch.tilt_low_azimuth_deg), "p_value": json_num(ch.tilt_p),
                            "amplitude_rate_per_year": json_num(ch.rate(ch.tilt_amplitude)),
                            "amplitude_rate_se": json_num(ch.rate(ch.tilt_amplitude_se))},
            "out_of_plane_change": {"largest": {"azimuth_deg": json_num(az), "change": json_num(oop), "change_se": json_num(se),
                                                "rate_per_year": json_num(ch.rate(oop)), "rate_se": json_num(ch.rate(se))},
                                    "shape_change_p_value": json_num(ch.modes_p),
                                    "model": f"Fourier order {ch.model_order}: {ch.model_selection}"},
            "per_azimuth": {"azimuth_deg": [json_num(v) for v in ch.azimuth_deg],
                            "difference": [json_num(v) for v in ch.difference],
                            "difference_se": [json_num(v) for v in ch.difference_se],
                            "rate_per_year": [json_num(v) for v in ch.rate(ch.difference)],
                            "rate_se": [json_num(v) for v in ch.rate(ch.difference_se)],
                            "out_of_plane_change": [json_num(v) for v in ch.out_of_plane],
                            "out_of_plane_change_se": [json_num(v) for v in ch.out_of_plane_se]}}


def _extrapolation_dict(ex) -> dict:
    return {"check": ex.check, "status": ex.status, "ratio_from": json_num(ex.ratio_from), "ratio_from_se": json_num(ex.ratio_from_se),
            "ratio_to": json_num(ex.ratio_to), "ratio_to_se": json_num(ex.ratio_to_se), "rate_per_year": json_num(ex.rate_per_year),
            "rate_se": json_num(ex.rate_se), "significant": ex.significant, "years_to_limit": json_num(ex.years_to_limit),
            "years_ci95": [json_num(v) for v in ex.years_ci95] if ex.years_ci95 else None,
            "years_se_delta_method": json_num(ex.years_se), "date": ex.date,
            "date_ci95": list(ex.date_ci95) if ex.date_ci95 else None, "method": ex.method}


def history_json(h) -> str:
    out = {"tag": h.tag, "units": "m", "rates": "per year (365.25 days); lengths in metres",
           "sign": "differences are the later survey minus the earlier: negative = the junction settled",
           "scope": HISTORY_SCOPE, "vertical_reference": VERTICAL_REFERENCE, "caution": CAUTION,
           "software": {"name": "chimeline", "version": __version__},
           "surveys": [{"survey_date": s.survey_date, "folder": s.folder, "kind": s.kind, "verdict": s.verdict,
                        "governing": s.governing, "max_ratio": json_num(s.max_ratio),
                        "tilt_amplitude": json_num(s.tilt_amplitude), "tilt_low_azimuth_deg": json_num(s.tilt_low_azimuth_deg)}
                       for s in h.surveys],
           "intervals": []}
    for iv in h.intervals:
        d = {"from_date": iv.from_date, "to_date": iv.to_date, "years": json_num(iv.years), "note": iv.note,
             "caveat": iv.caveat,
             "tilt_amplitude_rate_per_year": json_num(iv.tilt_amplitude_rate),
             "tilt_amplitude_rate_se": json_num(iv.tilt_amplitude_rate_se)}
        if iv.change is not None:
            d.update(_change_dict(iv.change))
        if iv.extrapolation is not None:
            d["extrapolation"] = _extrapolation_dict(iv.extrapolation)
            d["extrapolation"]["arc_table_illustrative"] = bool(h.surveys and h.surveys[-1].illustrative
                                                                and "B.3.2.2" in iv.extrapolation.check)
        out["intervals"].append(d)
    out["extrapolation_note"] = h.extrapolation_note
    return json_text(out)


def history_csv(h) -> str:
    buf = io.StringIO()
    buf.write(f"# chimeline settlement history of {h.tag}: per pair of consecutive surveys and azimuth, the later "
              f"minus the earlier junction elevation; lengths in metres, rates per year; se: 1 sigma\n")
    buf.write(f"# {HISTORY_SCOPE}\n# Caution: {CAUTION}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(HISTORY_COLUMNS)
    for iv in h.intervals:
        ch = iv.change
        if ch is None:
            continue
        for i in range(len(ch.azimuth_deg)):
            w.writerow([iv.from_date, iv.to_date, csv_cell(ch.years), csv_cell(ch.azimuth_deg[i]), csv_cell(ch.difference[i]),
                        csv_cell(ch.difference_se[i]), csv_cell(ch.difference[i] / ch.years), csv_cell(ch.difference_se[i] / ch.years),
                        csv_cell(ch.out_of_plane[i]), csv_cell(ch.out_of_plane_se[i]), csv_cell(ch.out_of_plane[i] / ch.years),
                        csv_cell(ch.out_of_plane_se[i] / ch.years)])
    return buf.getvalue()


def fleet_json(rows, histories, manifest: str) -> str:
    counts = {s: sum(r.status == s for r in rows) for s in ("done", "skipped", "failed")}
    return json_text({"caution": CAUTION, "software": {"name": "chimeline", "version": __version__},
                      "manifest": manifest, "units": "m",
                      "units_note": "lengths in metres; azimuths in degrees clockwise from each scan's reference",
                      "status_counts": counts, "jobs": [_row_dict(r) for r in rows],
                      "histories": [{"tag": h.tag, "history": f"{h.tag}/history.json",
                                     "surveys": [s.survey_date for s in h.surveys]} for h in histories]})


# ---------------------------------------------------------------------------
# index.html


def _mm(v, digits=1, signed=False):
    if v is None or not math.isfinite(v):
        return "-"
    return f"{v * 1e3:{'+' if signed else ''}.{digits}f}"


def _plan(rows) -> dict | None:
    """Tank circles to scale in an SVG frame (x east, y north), each tag's latest survey with a result."""
    latest = {}
    for r in rows:
        if r.has_result and r.georeferenced and r.radius:
            if r.tag not in latest or r.survey_date > latest[r.tag].survey_date:
                latest[r.tag] = r
    if not latest:
        return None
    pts = list(latest.values())
    xs = [p.center[0] for p in pts]
    ys = [p.center[1] for p in pts]
    rmax = max(p.radius for p in pts)
    x0, x1 = min(xs) - rmax * 2, max(xs) + rmax * 2
    y0, y1 = min(ys) - rmax * 2, max(ys) + rmax * 2
    span = max(x1 - x0, y1 - y0)
    cx, cy = (x0 + x1) / 2, (y0 + y1) / 2
    x0, x1, y0, y1 = cx - span / 2, cx + span / 2, cy - span / 2, cy + span / 2
    size = 520.0
    k = size / span
    bar = 10 ** math.floor(math.log10(span / 4))
    for m in (5, 2):
        if m * bar <= span / 3:
            bar *= m
            break
    circles = []
    for p in sorted(pts, key=lambda p: p.tag):
        v = p.verdict or "not evaluated"
        circles.append({"x": f"{(p.center[0] - x0) * k:.2f}", "y": f"{(y1 - p.center[1]) * k:.2f}",
                        "r": f"{max(p.radius * k, 2.0):.2f}", "colour": PLAN_COLOURS.get(v, PLAN_COLOURS["not evaluated"]),
                        "tag": p.tag, "verdict": v, "date": p.survey_date, "report": p.report,
                        "label_y": f"{(y1 - p.center[1]) * k - max(p.radius * k, 2.0) - 4:.2f}"})
    used = sorted({c["verdict"] for c in circles}, key=list(PLAN_COLOURS).index)
    others = sorted({r.tag for r in rows} - set(latest))
    return {"size": f"{size:.0f}", "circles": circles, "bar_px": f"{bar * k:.2f}", "bar_text": f"{bar:g} m",
            "legend": [{"verdict": v, "colour": PLAN_COLOURS[v]} for v in used], "origin": f"{x0:.1f} E, {y0:.1f} N",
            "not_shown": others}


def _history_fig(iv) -> bytes:
    ch = iv.change
    fig, axes = new_figure(9, 4.6, nrows=2, sharex=True)
    for ax, val, se, what in ((axes[0], ch.difference, ch.difference_se, "elevation change"),
                              (axes[1], ch.out_of_plane, ch.out_of_plane_se, "out-of-plane change")):
        r, rs = val / ch.years * 1e3, se / ch.years * 1e3
        ax.fill_between(ch.azimuth_deg, r - Z95 * rs, r + Z95 * rs, color=BAND, lw=0, label="95 % band")
        ax.plot(ch.azimuth_deg, r, ".", color=MEASURED, ms=3, label=f"{what} per year")
        ax.axhline(0, color=MUTED, lw=0.8)
        ax.set_ylabel(f"{what}\n(mm per year)")
        ax.legend(fontsize=7, frameon=False, loc="lower right")
        ax.grid(alpha=0.25, lw=0.5)
    axes[0].axhline(ch.rate(ch.mean) * 1e3, color=INK, ls="--", lw=1)
    axes[1].set_xlim(0, 360)
    axes[1].set_xlabel("azimuth (deg)")
    return png_bytes(fig)


def _interval_view(iv, illustrative: bool = False) -> dict:
    ch = iv.change
    d = {"from": iv.from_date, "to": iv.to_date, "years": f"{iv.years:.2f}", "note": iv.note, "fig": None, "n": None,
         "extrapolation": None, "method": "", "caveat": iv.caveat[:1].upper() + iv.caveat[1:]}
    if ch is not None:
        az, oop, se = ch.largest_out_of_plane
        d.update(n=len(ch.azimuth_deg),
                 uniform=f"{_mm(ch.mean, 2, True)} ± {_mm(ch.mean_se, 2)} mm ({_mm(ch.rate(ch.mean), 2, True)} ± "
                         f"{_mm(ch.rate(ch.mean_se), 2)} mm per year)",
                 tilt=f"{_mm(ch.tilt_amplitude)} ± {_mm(ch.tilt_amplitude_se)} mm lowering toward "
                      f"{ch.tilt_low_azimuth_deg:.0f} deg ({_mm(ch.rate(ch.tilt_amplitude), 2)} mm per year; "
                      f"change {'significant' if ch.tilt_p <= 0.05 else 'not significant'}, {p_text(ch.tilt_p)})",
                 tilt_rate=(f"{_mm(iv.tilt_amplitude_rate, 2, True)} ± {_mm(iv.tilt_amplitude_rate_se, 2)} mm per year"
                            if iv.tilt_amplitude_rate is not None else "-"),
                 oop=f"largest {_mm(oop, 1, True)} ± {_mm(se)} mm at {az:.1f} deg ({_mm(ch.rate(oop), 2, True)} ± "
                     f"{_mm(ch.rate(se), 2)} mm per year)",
                 shape=("shape change " + ("significant" if ch.modes_p <= 0.05 else "not significant") +
                        f" ({p_text(ch.modes_p)}, Wald test of the modes k >= 2)") if ch.modes_p is not None else
                       "no out-of-plane mode in the difference model (order 1)",
                 fig=png_data_uri(_history_fig(iv)))
    ex = iv.extrapolation
    if ex is not None:
        rate = f"{ex.rate_per_year:+.4f} ± {ex.rate_se:.4f} per year"
        if ex.status == "extrapolated":
            text = (f"Linear extrapolation: at the current rate ({ex.check}: ratio {ex.ratio_from:.3f} -> "
                    f"{ex.ratio_to:.3f}, {rate}) the ratio would reach 1 around {month_text(ex.date)} (95 % "
                    f"interval {month_text(ex.date_ci95[0])} to {month_text(ex.date_ci95[1])}, Fieller; {ex.years_to_limit:.1f} years after the "
                    f"latest survey).")
        elif ex.status == "reached":
            text = f"{ex.check}: the ratio {ex.ratio_to:.3f} of the latest survey is already at or above 1."
        else:
            text = (f"No extrapolation: the governing ratio ({ex.check}: {ex.ratio_from:.3f} -> {ex.ratio_to:.3f}, "
                    f"{rate}) is {ex.status} (an extrapolation needs a rate whose 95 % interval excludes zero).")
        if illustrative and "B.3.2.2" in ex.check:
            text += f" The ratio is against the {ILLUSTRATIVE_TABLE}."
        d["extrapolation"] = text
        d["method"] = ex.method[0].upper() + ex.method[1:]
    return d


def _rows_view(rows) -> list:
    out = []
    for r in rows:
        ratio = (f"{r.max_ratio:.3f}" + (f" ({r.max_ratio_upper95:.3f})" if r.max_ratio_upper95 is not None else "")
                 if r.max_ratio is not None else "-")
        out.append({"tag": r.tag, "date": r.survey_date, "kind": r.kind, "status": r.status,
                    "verdict": r.verdict or "-", "illustrative": r.illustrative, "governing": r.governing or "-",
                    "ratio": ratio,
                    "ratio_sort": "" if r.max_ratio is None else f"{r.max_ratio!r}",
                    "tilt": (f"{_mm(r.tilt_amplitude)} mm at {r.tilt_low_azimuth_deg:.0f} deg"
                             if r.tilt_amplitude is not None else "-"),
                    "tilt_sort": "" if r.tilt_amplitude is None else f"{r.tilt_amplitude!r}",
                    "noise": _mm(r.noise_sigma, 2), "noise_sort": "" if r.noise_sigma is None else f"{r.noise_sigma!r}",
                    "coverage": f"{100 * r.coverage:.1f} %" if r.coverage is not None else "-",
                    "coverage_sort": "" if r.coverage is None else f"{r.coverage!r}",
                    "report": r.report, "folder": r.folder, "error": r.error})
    return out


def render_index(rows, histories, manifest: str) -> str:
    hist = []
    for h in histories:
        illus = bool(h.surveys) and h.surveys[-1].illustrative
        hist.append({"tag": h.tag, "intervals": [_interval_view(iv, illus) for iv in h.intervals],
                     "surveys": _rows_view(h.surveys),
                     "note": h.extrapolation_note[:1].upper() + h.extrapolation_note[1:]})
    counts = {s: sum(r.status == s for r in rows) for s in ("done", "skipped", "failed")}
    verdicts = {}
    for r in rows:
        if r.has_result:
            verdicts[r.verdict or "not evaluated"] = verdicts.get(r.verdict or "not evaluated", 0) + 1
    return template_env().get_template("fleet.html.j2").render(
        version=__version__, caution=CAUTION, manifest=manifest, rows=_rows_view(rows), counts=counts,
        verdicts=verdicts, n_tanks=len({r.tag for r in rows}), plan=_plan(rows), histories=hist,
        scope=HISTORY_SCOPE, illustrative=ILLUSTRATIVE_TABLE if any(r.illustrative for r in rows) else "")


def fleet_outputs(rows, histories, *, manifest: str) -> dict:
    """{path relative to the batch folder: text} of the fleet files and each tank's history."""
    files = {"fleet.csv": fleet_csv(rows), "fleet.json": fleet_json(rows, histories, manifest),
             "index.html": render_index(rows, histories, manifest)}
    for h in histories:
        files[f"{h.tag}/history.json"] = history_json(h)
        files[f"{h.tag}/history.csv"] = history_csv(h)
    return files

