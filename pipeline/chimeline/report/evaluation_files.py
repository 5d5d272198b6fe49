"""Evaluation files: evaluation.json, evaluation.csv (per point) and fe_out_of_plane.csv (FE boundary condition)."""
from __future__ import annotations

import csv
import io
from dataclasses import asdict
from pathlib import Path

import numpy as np
import yaml

from ..config import config_hash
from ..io.atomic import json_text
from ..io.runfiles import CONFIG_YAML, EVALUATION_JSON
from ..notices import CAUTION
from ..units import UNIT_LABELS, to_metres
from ..version import __version__
from .cells import csv_cell, json_num
from .console import r2_rule_text
from .html import evaluation_figures, render_report


def _test(t):
    if t is None:
        return None
    return {"name": t.name, "statistic": json_num(t.statistic), "p_value": json_num(t.p_value), "df": list(t.df),
            "reject_null": t.reject}


def _criterion(c) -> dict:
    d = {"name": c.name}
    if c.clause is not None:
        d["clause"] = c.clause
    else:
        d["screening"] = True  # informs, never sets the overall verdict: its "exceeds" is read as the flag raised
        d["flag"] = c.shown
    d.update({"verdict": c.verdict, "ratio": json_num(c.ratio), "ratio_upper95": json_num(c.ratio_upper95),
              "ratio_lower95": json_num(c.ratio_lower95), "uncertainty": c.uncertainty, "governing": c.governing,
              "azimuth_ranges_deg": [[json_num(a), json_num(b)] for a, b in c.azimuth_ranges],
              "evidence_coverage": json_num(c.evidence_coverage), "largest_ratio_at_deg": json_num(c.at_deg),
              "notes": list(c.reasons)})
    return d


def evaluation_summary(ev, units) -> dict:
    f = to_metres(units)
    L = lambda v: json_num(np.asarray(v) / f)  # noqa: E731
    t, F, s = ev.tilt, ev.fourier, ev.survey
    d = ev.deflection
    pts = []
    cs = ev.curvature_sparse
    for i in range(len(s.azimuth_deg)):
        row = {"azimuth_deg": json_num(s.azimuth_deg[i]), "label": s.label[i], "elevation": L(s.elevation[i]),
               "out_of_plane": L(ev.out_of_plane[i]), "deflection": L(d.S[i]),
               "deflection_sd": L(d.S_sd[i]), "allowable": L(d.allowable[i]), "ratio": json_num(d.ratio[i])}
        if cs is not None:  # second-difference curvature at the survey points, per unit length
            row["curvature_second_difference"] = json_num(cs.kappa[i] * f)
        pts.append(row)
    tk = ev.tank
    c = ev.curvature
    lo_pw, hi_pw = c.kappa - c.q_pointwise * c.kappa_sd, c.kappa + c.q_pointwise * c.kappa_sd
    lo_s, hi_s = c.kappa - c.q_simultaneous * c.kappa_sd, c.kappa + c.q_simultaneous * c.kappa_sd
    fin = np.isfinite(c.kappa)
    out = {
        "units": units, "units_label": UNIT_LABELS.get(units, units),
        "software": {"name": "chimeline", "version": __version__},
        "caution": CAUTION,
        "verdict": ev.verdict,
        "governing": ev.governing,
        "verdict_basis": "the overall verdict comes from the standard's checks (B.3.2.1, B.3.2.2) only; screening "
                         "flags inform and never set it; exceeds needs the exceedance to stand beyond the measurement "
                         "uncertainty (95 % lower bound of the ratio above 1)",
        "criteria": [_criterion(x) for x in ev.criteria],
        "input": {"source": s.source, "dense": s.dense, "n_points": len(s.azimuth_deg), "bins_without_value": s.n_dropped},
        "tank": {"diameter": L(tk.diameter), "diameter_source": tk.diameter_source, "shell_height": L(tk.shell_height),
                 "yield_strength_MPa": json_num(tk.yield_strength / 1e6), "youngs_modulus_GPa": json_num(tk.youngs_modulus / 1e9),
                 "roof": tk.roof},
        "tilt": {"r_squared": json_num(t.r_squared), "r2_min": ev.settings.r2_min, "r2_rule_met": t.r2_rule_met,
                 "r2_rule": r2_rule_text(ev), "p_value": json_num(t.p_value), "decided_by": t.decided_by,
                 "significant": t.significant, "cosine_f_test": _test(t.f_test),
                 "amplitude": L(t.amplitude), "low_azimuth_deg": json_num(t.low_azimuth_deg),
                 "coefficients": {"a": L(t.a), "b_cos": L(t.b), "c_sin": L(t.c)},
                 "note": "R^2 is what the standard asks; the p-value says whether a tilt plane is statistically real"},
        "modes": {"order": F.order, "selection": F.selection, "weighted": F.weighted, "max_order_allowed": F.max_order_allowed,
                  "hac_lags": F.hac_lags,
                  "coefficients": [{"k": (i + 1) // 2, "term": "const" if i == 0 else ("cos" if i % 2 else "sin"),
                                    "value": L(F.coef[i]), "std_error": L(F.std_err[i])} for i in range(len(F.coef))],
                  "tilt_partial_f": _test(F.tilt_partial_f), "tilt_chi2_vs_noise": _test(F.tilt_chi2),
                  "df_resid": F.df_resid},
        "out_of_plane_reference": ev.out_of_plane_reference,
        "curvature": {"assessed": c.assessed, "limit_per_m": json_num(c.limit), "smoothing_m": json_num(c.smoothing),
                      "max_abs_per_m": json_num(np.nanmax(np.abs(c.kappa))) if fin.any() else None,
                      "max_ratio": json_num(np.nanmax(np.abs(c.kappa)) / c.limit) if fin.any() else None,
                      "q_pointwise": json_num(c.q_pointwise), "q_simultaneous": json_num(c.q_simultaneous),
                      "curve": {"azimuth_deg": [json_num(v) for v in c.azimuth_deg],
                                "kappa_per_m": [json_num(v) for v in c.kappa],
                                "kappa_sd_per_m": [json_num(v) for v in c.kappa_sd],
                                "pointwise95_per_m": [[json_num(a), json_num(b)] for a, b in zip(lo_pw, hi_pw)],
                                "simultaneous95_per_m": [[json_num(a), json_num(b)] for a, b in zip(lo_s, hi_s)]}},
        "model": {"note": "out-of-plane modes k >= 2 of the Fourier model on the evaluation grid, with 1 sigma",
                  "azimuth_deg": [json_num(v) for v in ev.model.azimuth_deg], "out_of_plane": [L(v) for v in ev.model.value],
                  "sd": [L(v) for v in ev.model.sd]},
        "arcs": [_arc(a, f) for a in ev.arcs],
        "arc_table": {"title": ev.arc_table.title, "source": ev.arc_table.source,
                      "illustrative": ev.arc_table.illustrative},
        "dips": [{"start_deg": json_num(x.start_deg), "end_deg": json_num(x.end_deg), "length": L(x.length), "depth": L(x.depth),
                  "deepest_deg": json_num(x.deepest_deg), "depth_sd": L(x.depth_sd), "threshold": L(x.threshold),
                  "allowable": L(x.allowable), "ratio": json_num(x.ratio)} for x in ev.dips],
        "points": pts,
        "survey_adequacy": list(ev.adequacy),
        "warnings": list(ev.warnings),
        "settings": {k: (json_num(v) if isinstance(v, float) else v) for k, v in asdict(ev.settings).items()},
    }
    if ev.decimation is not None:
        dd = ev.decimation
        if dd.runs:
            dec = {"n_points": dd.n_points, "starts": len(dd.runs), "max_deflection_ratio": dd.max_deflection_ratio,
                   "r_squared": dd.r_squared, "verdicts": dd.verdicts}
        else:
            dec = {"n_points": dd.n_points, "note": dd.note}
        dec["runs"] = [{"start_deg": r.start_deg, "r_squared": r.r_squared, "tilt_p_value": r.tilt_p_value,
                        "tilt_amplitude": L(r.tilt_amplitude), "max_deflection_ratio": r.max_deflection_ratio,
                        "verdict": r.verdict, "deflection_verdict": r.deflection_verdict} for r in dd.runs]
        out["decimation"] = dec
    return out


def _arc(a, f) -> dict:
    return {"start_deg": json_num(a.start_deg), "end_deg": json_num(a.end_deg), "arc_length": json_num(a.arc_length / f),
            "depth": json_num(a.depth / f), "deepest_deg": json_num(a.deepest_deg), "depth_sd": json_num(a.depth_sd / f),
            "permissible": json_num(a.permissible / f) if a.permissible is not None else None, "verdict": a.verdict,
            "ratio": json_num(a.ratio), "ratio_upper95": json_num(a.ratio_upper95)}


def _suffix(units) -> str:
    return units


def evaluation_csv(ev, units) -> str:
    f = to_metres(units)
    u = _suffix(units)
    s, d = ev.survey, ev.deflection
    buf = io.StringIO()
    buf.write(f"# chimeline evaluation per point; lengths in {UNIT_LABELS.get(units, units)}; azimuth in degrees "
              f"clockwise from +Y; ratio = |deflection| / allowable (B.3.2.1)\n# Caution: {CAUTION}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["azimuth_deg", "label", f"elevation_{u}", f"out_of_plane_{u}", f"deflection_{u}",
                f"deflection_sd_{u}", f"allowable_{u}", "ratio", "status"])
    for i in range(len(s.azimuth_deg)):
        st = "exceeds" if d.exceeds[i] else ("indeterminate" if d.indeterminate[i] else
                                             ("acceptable" if np.isfinite(d.ratio[i]) else "no neighbours"))
        vals = [s.elevation[i], ev.out_of_plane[i], d.S[i], d.S_sd[i], d.allowable[i]]
        w.writerow([csv_cell(s.azimuth_deg[i]), s.label[i]] + [csv_cell(v / f) for v in vals] + [csv_cell(d.ratio[i]), st])
    return buf.getvalue()


def fe_csv(ev, units) -> str:
    """Out-of-plane settlement per azimuth for a finite element boundary condition."""
    f = to_metres(units)
    u = _suffix(units)
    s = ev.survey
    R = ev.tank.radius
    buf = io.StringIO()
    buf.write(f"# out-of-plane settlement of the shell base (tilt plane removed: {ev.out_of_plane_reference}); "
              f"lengths in {UNIT_LABELS.get(units, units)}; azimuth clockwise from +Y; radius {R / f!r}\n"
              f"# Caution: {CAUTION}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["azimuth_deg", f"arc_length_{u}", f"x_{u}", f"y_{u}", f"out_of_plane_{u}", f"std_error_{u}"])
    se = s.std_error if s.std_error is not None else np.full(len(s.azimuth_deg), np.nan)
    for a, uu, e in zip(s.azimuth_deg, ev.out_of_plane, se):
        th = np.radians(a)
        w.writerow([csv_cell(a), csv_cell(R * th / f), csv_cell(R * np.sin(th) / f), csv_cell(R * np.cos(th) / f), csv_cell(uu / f), csv_cell(e / f)])
    return buf.getvalue()


def evaluation_run_files(ev, units) -> dict:
    """The evaluation's files inside a run folder."""
    return {EVALUATION_JSON: json_text(evaluation_summary(ev, units)), "evaluation.csv": evaluation_csv(ev, units),
            "fe_out_of_plane.csv": fe_csv(ev, units)}


def evaluation_outputs(ev, units, *, resolved, config_source, input_path: Path, input_sha256: str) -> dict:
    """Every file of an evaluation folder (``chimeline evaluate``): {relative path: text or PNG bytes}."""
    js = evaluation_summary(ev, units)
    js["input"]["sha256"] = input_sha256
    js["config"] = {"source": config_source, "sha256": config_hash(resolved)}
    files = {CONFIG_YAML: "# resolved config of this evaluation\n" + yaml.safe_dump(resolved, sort_keys=False),
             EVALUATION_JSON: json_text(js), "evaluation.csv": evaluation_csv(ev, units),
             "fe_out_of_plane.csv": fe_csv(ev, units)}
    figs = evaluation_figures(ev, units)
    for name, png in figs.items():
        files[f"plots/{name}.png"] = png
    info = {"input": str(input_path), "sha256": input_sha256, "points": len(ev.survey.azimuth_deg),
            "kind of input": "dense profile (one value per azimuth bin)" if ev.survey.dense else "level survey"}
    tag = (resolved or {}).get("tank", {}).get("tag") or Path(input_path).stem
    files["report.html"] = render_report(None, ev, units, figs, resolved, config_source, info, tag)
    return files
