"""The report's content as plain data (strings, numbers, rows), in the order the document shows it.

``report_context`` turns a run and/or an evaluation into the mapping the Jinja2 template renders; it computes
nothing new: every number comes from the result objects, formatted for people (machine outputs keep full
precision in JSON and CSV).
"""
from __future__ import annotations


import numpy as np
import yaml

from ..evaluate.adequacy import MAX_SPACING, minimum_points
from ..notices import CAUTION, VERTICAL_REFERENCE
from ..units import FOOT, UNIT_LABELS, small_length, to_metres
from ..version import __version__
from .console import p_text, r2_rule_text

CAPTIONS = {
    "plan": "Plan view: scan points (subsample), the fitted shell, and the profile bins by status around it.",
    "profile": "Junction elevation around the shell with its 95 % band and the tilt plane; shaded: gaps (no data, "
               "never filled).",
    "out_of_plane": "Out-of-plane settlement (tilt plane removed) with the Fourier model's modes k >= 2 and its 95 % "
                    "band; local dips found by the screening are shaded.",
    "deflection": "B.3.2.1: deflection S_i with 95 % bars against the allowable S_max (dashed); exceedances marked.",
    "curvature": "Screening: curvature of the model smoothed at the deflection spacing against 11 Y / (E H) (dashed), "
                 "with pointwise and simultaneous 95 % bands; informs, never decides.",
    "arcs": "B.3.2.2: settled arcs, depth below the chord against arc length, with the permissible table.",
    "noise": "Left: residuals of kept points about their bin; right: noise per station with 95 % intervals.",
    "shell": "Radial residuals of the shell by height: a first look at plumbness and roundness.",
}


class _Fmt:
    def __init__(self, units):
        self.units = units
        self.f = to_metres(units)
        self.k, self.small = small_length(units)
        self.label = UNIT_LABELS.get(units, units)

    def length(self, v_m, digits=4):
        if v_m is None or not np.isfinite(v_m):
            return "-"
        return f"{v_m / self.f:.{digits}f} {self.label}"

    def small_len(self, v_m, digits=1):
        if v_m is None or not np.isfinite(v_m):
            return "-"
        d = digits + (1 if self.small == "in" else 0)  # an inch is 25 mm: one more decimal keeps the precision
        return f"{v_m * self.k:.{d}f} {self.small}"


def _num(v, spec=".3g"):
    return "-" if v is None or not np.isfinite(v) else format(v, spec)


def _ranges(rr, limit=8):
    s = ", ".join(f"{a:.1f}-{b:.1f}" for a, b in rr[:limit]) or "-"
    return s + (f" (+{len(rr) - limit} more)" if len(rr) > limit else "")


def _criterion_row(c):
    return {"name": c.name, "clause": c.clause or "screening", "verdict": c.shown, "ratio": _num(c.ratio),
            "upper": _num(c.ratio_upper95), "uncertainty": c.uncertainty or c.governing, "governing": c.governing,
            "where": _ranges(c.azimuth_ranges) if c.azimuth_ranges else
            ("-" if c.at_deg is None else f"largest at {c.at_deg:.1f}"), "notes": list(c.reasons),
            "coverage": "-" if c.evidence_coverage is None else f"{100 * c.evidence_coverage:.1f} %"}


def report_context(res=None, ev=None, units="m", figures=None, resolved=None, config_source="", input_info=None,
                   title_tag="", png_uri=None) -> dict:
    """Everything report.html shows. ``png_uri`` turns PNG bytes into a data URI (the template embeds it)."""
    fm = _Fmt(units)
    tank_cfg = (resolved or {}).get("tank", {}) if resolved else {}
    kind = "evaluation" if ev is not None else "profile"
    if ev is not None and res is None:
        title = "Shell settlement evaluation of a " + ("scan profile" if ev.survey.dense else "level survey")
    elif ev is not None:
        title = "Shell settlement evaluation from a laser scan"
    else:
        title = "Junction profile from a laser scan (no settlement evaluation)"
    ctx = {"title": title, "kind": kind, "tag": title_tag or "(no tank tag)", "site": tank_cfg.get("site") or "",
           "survey_date": tank_cfg.get("survey_date") or "not given", "version": __version__, "caution": CAUTION,
           "units_label": fm.label, "input": dict(input_info or {}), "config_source": config_source,
           "vertical_reference": VERTICAL_REFERENCE}
    ctx["figures"] = [{"name": n, "caption": CAPTIONS.get(n, n), "src": png_uri(png) if png_uri else ""}
                      for n, png in (figures or {}).items()]
    if ev is not None:
        ctx.update(_evaluation(ev, fm, res))
    if res is not None:
        ctx["measurement"] = _measurement(res, fm)
    warns = list(res.warnings if res is not None else []) + list(ev.warnings if ev is not None else [])
    ctx["warnings"] = list(dict.fromkeys(warns))
    prov = [("software", f"chimeline {__version__}"), ("config", config_source)]
    if res is not None:
        prov += [("input SHA-256", res.input_sha256), ("seed", str(res.config.seed))]
    ctx["provenance"] = prov + [(k, str(v)) for k, v in (input_info or {}).items() if k not in ("sha256",)]
    ctx["resolved_yaml"] = yaml.safe_dump(resolved, sort_keys=False) if resolved is not None else ""
    return ctx


def _evaluation(ev, fm, res) -> dict:
    tk, t, st = ev.tank, ev.tilt, ev.settings
    gov = next((c for c in ev.criteria if c.name == ev.governing), None)
    out = {"verdict": ev.verdict, "governing": ev.governing,
           "governing_is_standard": bool(gov is not None and gov.clause),
           "governing_clause": gov.clause if gov is not None else None,
           "r2_rule": r2_rule_text(ev), "illustrative": ev.arc_table.illustrative,
           "standard": [_criterion_row(c) for c in ev.criteria if c.clause is not None],
           "screening": [_criterion_row(c) for c in ev.criteria if c.clause is None]}
    L = st.deflection_spacing
    smax_L = 11.0 * L ** 2 * tk.yield_strength / (2.0 * tk.youngs_modulus * tk.shell_height)
    src_d = "fitted shell" if tk.diameter_source == "fitted" else "config (tank.diameter)"
    out["tank_rows"] = [
        ("diameter D", fm.length(tk.diameter, 3), src_d),
        ("shell height H", fm.length(tk.shell_height, 3), "config (tank.shell_height)"),
        ("yield strength Y", f"{tk.yield_strength / 1e6:.1f} MPa ({tk.yield_strength / 6894.757293168e3:.1f} ksi)",
         "config (tank.yield_strength)"),
        ("Young's modulus E", f"{tk.youngs_modulus / 1e9:.1f} GPa ({tk.youngs_modulus / 6894.757293168e6:.2f}e6 psi)",
         "config (tank.youngs_modulus)"),
        ("roof", tk.roof, "config (tank.roof)"),
    ]
    out["limit_rows"] = [
        ("deflection spacing L", st.deflection_L, "B.3.2.1"),
        ("S_max = 11 L^2 Y / (2 E H) at that L", fm.small_len(smax_L, 2), "B.3.2.1 (from memory)"),
        ("curvature limit 11 Y / (E H)", f"{ev.curvature.limit * to_metres(fm.units):.4g} per {fm.label}",
         "screening (equivalent curvature form)"),
        ("minimum survey", f"{minimum_points(tk.diameter)} points, at most {MAX_SPACING:.2f} m "
                           f"({MAX_SPACING / FOOT:.0f} ft) apart", "from memory (Annex B)"),
        ("R^2 acceptance of the cosine fit", f">= {st.r2_min}", "from memory"),
        ("evidence needed per check", f"{100 * st.min_evidence_coverage:.0f} % of the circumference",
         "evaluate.min_evidence_coverage"),
        ("permissible settled-arc table", ev.arc_table.title or ev.arc_table.source, "evaluate.arc_table"),
    ]
    out["tilt_rows"] = [
        ("amplitude (half peak-to-peak at the shell)", fm.small_len(t.amplitude, 1)),
        ("lowest at", f"{t.low_azimuth_deg:.1f} deg"),
        ("R^2 of the cosine fit", f"{t.r_squared:.4f} ({'meets' if t.r2_rule_met else 'below'} {st.r2_min})"),
        ("overall F test of the cosine fit", f"F = {t.f_test.statistic:.4g}, {p_text(t.f_test.p_value)}"),
        (f"{ev.fourier.tilt_partial_f.name} (K = {ev.fourier.order})", p_text(ev.fourier.tilt_partial_f.p_value)),
        ("a tilt plane exists (95 %)", f"{'yes' if t.significant else 'no'}, decided by the {t.decided_by}"),
        ("Fourier model", ev.fourier.selection),
    ]
    if ev.fourier.tilt_chi2 is not None:
        out["tilt_rows"].insert(5, ("tilt against the measured noise (chi-square)", p_text(ev.fourier.tilt_chi2.p_value)))
    s, d = ev.survey, ev.deflection
    k = fm.k
    if not s.dense:
        rows = []
        for i in range(len(s.azimuth_deg)):
            rows.append({"label": s.label[i], "az": f"{s.azimuth_deg[i]:.2f}",
                         "z": f"{s.elevation[i] / fm.f:.4f}", "u": f"{ev.out_of_plane[i] * k:.1f}",
                         "S": _num(d.S[i] * k, ".2f"), "smax": _num(d.allowable[i] * k, ".2f"),
                         "ratio": _num(d.ratio[i], ".3f"), "worst": False})
        order = np.argsort(-np.nan_to_num(d.ratio, nan=-1))[:3]
        for i in order:
            rows[int(i)]["worst"] = True
        out["points"] = rows
    else:
        out["worst"] = _worst_dense(ev, fm)
    arcs = sorted(ev.arcs, key=lambda a: (-(a.ratio if a.ratio is not None else -1), -a.depth))
    out["arcs"] = [{"from": f"{a.start_deg:.1f}", "to": f"{a.end_deg:.1f}", "length": fm.length(a.arc_length, 2),
                    "depth": fm.small_len(a.depth, 1), "sd": fm.small_len(a.depth_sd, 1),
                    "permissible": fm.small_len(a.permissible, 1) if a.permissible is not None else "-",
                    "ratio": _num(a.ratio, ".3f"), "verdict": a.verdict} for a in arcs[:15]]
    out["arcs_more"] = max(0, len(arcs) - 15)
    out["dips"] = [{"where": f"{x.start_deg:.1f}-{x.end_deg:.1f}", "deepest": f"{x.deepest_deg:.1f}",
                    "length": fm.length(x.length, 2), "depth": fm.small_len(x.depth, 1),
                    "allow": fm.small_len(x.allowable, 2), "ratio": f"{x.ratio:.2f}"} for x in ev.dips]
    dd = ev.decimation
    if dd is not None and dd.runs:
        mr, r2 = dd.max_deflection_ratio, dd.r_squared
        out["decimation"] = {
            "n": dd.n_points, "starts": len(dd.runs),
            "ratio": f"{mr['min']:.2f} / {mr['median']:.2f} / {mr['max']:.2f}",
            "r2": f"{r2['min']:.3f} / {r2['median']:.3f} / {r2['max']:.3f}",
            "verdicts": ", ".join(f"{v}: {n}" for v, n in dd.verdicts.items() if n)}
        r2min = ev.settings.r2_min
        low = sum(r.r_squared < r2min for r in dd.runs)
        if low and ev.tilt.r2_rule_met:  # the dense profile passes the rule; a conventional survey might not
            out["decimation"]["r2_note"] = (
                f"{low} of {len(dd.runs)} sampled surveys have R^2 below {r2min}: a conventional {dd.n_points}-point "
                f"survey of this tank could find B.3.2.1 not applicable where this profile does not")
    return out


def _worst_dense(ev, fm, n=10):
    """The worst locations of each check of a dense profile."""
    k = fm.k
    d = ev.deflection
    out = []
    r = np.nan_to_num(d.ratio, nan=-1)
    idx = []
    for i in np.argsort(-r):  # distinct locations: at least 2 degrees apart
        if r[i] < 0 or len(idx) >= n:
            break
        if all(abs((ev.survey.azimuth_deg[i] - ev.survey.azimuth_deg[j] + 180) % 360 - 180) >= 2 for j in idx):
            idx.append(i)
    out.append({"check": "deflection (B.3.2.1)", "rows": [
        (f"{ev.survey.azimuth_deg[i]:.1f}", f"S = {d.S[i] * k:.2f} {fm.small}", f"S_max = {d.allowable[i] * k:.2f} "
         f"{fm.small}", f"{d.ratio[i]:.3f}") for i in idx]})
    c = ev.curvature
    if c.assessed:
        rc = np.nan_to_num(np.abs(c.kappa) / c.limit, nan=-1)
        idx = []
        for i in np.argsort(-rc):
            if rc[i] < 0 or len(idx) >= n:
                break
            if all(abs((c.azimuth_deg[i] - c.azimuth_deg[j] + 180) % 360 - 180) >= 2 for j in idx):
                idx.append(i)
        per = to_metres(fm.units)
        out.append({"check": "curvature at the deflection spacing (screening)", "rows": [
            (f"{c.azimuth_deg[i]:.1f}", f"kappa = {c.kappa[i] * per:.3g} per {fm.label}",
             f"limit {c.limit * per:.3g}", f"{rc[i]:.3f}") for i in idx]})
    return out


def _measurement(res, fm) -> list:
    n, p, s = res.noise, res.profile, res.shell
    rows = [("vertical noise per point (within-bin)",
             f"{fm.small_len(n.sigma, 2)} (95 % CI {fm.small_len(n.ci[0], 2)} - {fm.small_len(n.ci[1], 2)})")]
    if n.pairs is not None:
        ratio = n.within_bin.sigma / n.pairs.sigma
        if n.agreement_p is not None and n.agreement_p < 0.05:
            words = (f"the two estimators differ statistically (F test {p_text(n.agreement_p)}) by {100 * abs(ratio - 1):.0f} %"
                     + (", within the configured tolerance" if n.agree else ": the noise estimate is in doubt"))
        else:
            words = f"the two estimators agree (F test {p_text(n.agreement_p)})"
        rows.append(("second estimator (neighbour pairs)", f"{fm.small_len(n.pairs.sigma, 2)}; ratio {ratio:.3f}: {words}"))
    if getattr(n, "station_ids", True):
        rows.append(("station vertical offsets (registration), spread",
                     f"{fm.small_len(n.registration_sigma, 2)} ({'removed from the profile' if p.leveled else 'reported only'});"
                     f" datum 1 sigma {fm.small_len(n.datum_sigma, 2)}"))
    else:
        rows.append(("station levelling", "NOT POSSIBLE: the scan carries no station ids. The correlated (registration) "
                     f"error estimated from the data, {fm.small_len(n.correlated_sigma, 2)}, is in every standard error"))
    if np.isfinite(getattr(n, "contamination", np.nan)) and n.contamination > 1.0:
        rows.append(("mixed pixels", f"plain within-bin scatter {fm.small_len(n.classical_sigma, 2)}, "
                     f"{100 * (n.contamination - 1):.0f} % above the robust noise estimate"))
    if getattr(n, "quantum", 0) > 0:
        rows.append(("file vertical resolution", f"{fm.small_len(n.quantum, 2)}; rounding error of a bin mean that "
                     f"averaging cannot remove {fm.small_len(n.quantization_bias_sigma, 2)}"))
    fu = getattr(p, "fusion", None)
    if fu is not None:
        kinds = "; ".join(f"{k.kind}: offset to the top {fm.small_len(k.offset, 2)}, scatter {fm.small_len(k.sigma, 2)}"
                          for k in fu.kinds) or "top only"
        counts = ", ".join(f"{k} {v}" for k, v in fu.counts.items())
        rows.append(("junction evidence per bin", f"{counts} ({kinds}); {fu.n_widened} bins widened (up to "
                     f"{fu.max_width_deg:.3g} deg); ok = standard error at most {fm.small_len(fu.max_std_error, 2)}"))
    ok = int((p.status == "ok").sum())
    rows.append(("coverage of the circumference (ok bins)",
                 f"{100 * p.coverage:.1f} % ({ok} of {len(p.azimuth_deg)} bins of {p.bin_width_deg:.3g} deg)"))
    rows.append(("gaps (no data, never filled)", _ranges(tuple(p.gaps)) + " deg" if p.gaps else "none"))
    cx, cy = res.frame.to_file_xy(s.center[:2])
    rows.append(("shell centre (scan coordinates)", f"{cx:.3f}, {cy:.3f} {res.frame.units}"))
    rows.append(("shell radius at the base", fm.length(s.radius)))
    rows.append(("azimuth convention", f"degrees {'clockwise' if res.frame.azimuth_direction == 'cw' else 'counter-clockwise'}"
                 f" from {res.frame.azimuth_reference_deg:.3f} deg (clockwise from +Y of the scan frame)"))
    rows.append(("vertical reference", VERTICAL_REFERENCE))
    return rows
