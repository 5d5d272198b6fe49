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
from .html import evaluation_figures, render_report


def _n(v, d=7):
    if v is None:
        return None
    v = float(v)
    return round(v, d) if np.isfinite(v) else None


def _test(t):
    if t is None:
        return None
    return {"name": t.name, "statistic": _n(t.statistic, 6), "p_value": float(f"{t.p_value:.6g}"),
            "df": list(t.df), "reject_null": t.reject}


def evaluation_summary(ev, units) -> dict:
    f = to_metres(units)
    L = lambda v: _n(np.asarray(v) / f)
    t, F, s = ev.tilt, ev.fourier, ev.survey
    d = ev.deflection
    pts = []
    cs = ev.curvature_sparse
    for i in range(len(s.azimuth_deg)):
        row = {"azimuth_deg": _n(s.azimuth_deg[i], 4), "label": s.label[i], "elevation": L(s.elevation[i]),
               "out_of_plane": L(ev.out_of_plane[i]), "deflection": L(d.S[i]),
               "deflection_sd": L(d.S_sd[i]), "allowable": L(d.allowable[i]), "ratio": _n(d.ratio[i], 4)}
        if cs is not None:  # second-difference curvature at the survey points, per unit length
            row["curvature_second_difference"] = _n(cs.kappa[i] * f, 9)
        pts.append(row)
    tk = ev.tank
    crit = [{"name": c.name, "verdict": c.verdict, "governing": c.governing,
             "azimuth_ranges_deg": [[_n(a, 2), _n(b, 2)] for a, b in c.azimuth_ranges], "notes": list(c.reasons)}
            for c in ev.criteria]
    out = {
        "units": units, "units_label": UNIT_LABELS.get(units, units),
        "software": {"name": "chimeline", "version": __version__},
        "input": {"source": s.source, "dense": s.dense, "n_points": len(s.azimuth_deg), "bins_without_value": s.n_dropped},
        "tank": {"diameter": L(tk.diameter), "diameter_source": tk.diameter_source, "shell_height": L(tk.shell_height),
                 "yield_strength_MPa": _n(tk.yield_strength / 1e6, 3), "youngs_modulus_GPa": _n(tk.youngs_modulus / 1e9, 3),
                 "roof": tk.roof},
        "tilt": {"r_squared": _n(t.r_squared, 6), "p_value": float(f"{t.f_test.p_value:.6g}"), "f_test": _test(t.f_test),
                 "amplitude": L(t.amplitude), "low_azimuth_deg": _n(t.low_azimuth_deg, 3), "significant": t.significant,
                 "decided_by": t.decided_by, "r2_rule_met": t.r2_rule_met,
                 "coefficients": {"a": L(t.a), "b_cos": L(t.b), "c_sin": L(t.c)},
                 "note": "R^2 is what the standard asks; the p-value says whether a tilt plane is statistically real"},
        "modes": {"order": F.order, "selection": F.selection, "weighted": F.weighted, "max_order_allowed": F.max_order_allowed,
                  "coefficients": [{"k": (i + 1) // 2, "term": "const" if i == 0 else ("cos" if i % 2 else "sin"),
                                    "value": L(F.coef[i]), "std_error": L(F.std_err[i])} for i in range(len(F.coef))],
                  "tilt_partial_f": _test(F.tilt_partial_f), "tilt_chi2_vs_noise": _test(F.tilt_chi2),
                  "df_resid": F.df_resid},
        "out_of_plane_reference": ev.out_of_plane_reference,
        "curvature": {"limit_per_m": _n(ev.curvature.limit, 9),
                      "max_abs_per_m": _n(np.nanmax(np.abs(ev.curvature.kappa)), 9),
                      "max_ratio": _n(np.nanmax(np.abs(ev.curvature.kappa)) / ev.curvature.limit, 4)},
        "arcs": [_arc(a, f) for a in ev.arcs],
        "arc_table": {"title": ev.arc_table.title, "source": ev.arc_table.source,
                      "illustrative": ev.arc_table.illustrative},
        "criteria": crit,
        "verdict": ev.verdict,
        "points": pts,
        "survey_adequacy": list(ev.adequacy),
        "warnings": list(ev.warnings),
        "settings": asdict(ev.settings),
        "caution": CAUTION,
    }
    if ev.decimation is not None:
        d = ev.decimation
        if d.runs:
            dec = {"n_points": d.n_points, "starts": len(d.runs), "max_deflection_ratio": d.max_deflection_ratio,
                   "r_squared": d.r_squared, "verdicts": d.verdicts}
        else:
            dec = {"n_points": d.n_points, "note": d.note}
        dec["runs"] = [{"start_deg": r.start_deg, "r_squared": r.r_squared, "tilt_p_value": r.tilt_p_value,
                        "tilt_amplitude": L(r.tilt_amplitude), "max_deflection_ratio": r.max_deflection_ratio,
                        "verdict": r.verdict, "deflection_verdict": r.deflection_verdict} for r in d.runs]
        out["decimation"] = dec
    return out


def _arc(a, f) -> dict:
    row = {"start_deg": _n(a.start_deg, 4), "end_deg": _n(a.end_deg, 4), "arc_length": _n(a.arc_length / f),
           "depth": _n(a.depth / f), "deepest_deg": _n(a.deepest_deg, 4), "depth_sd": _n(a.depth_sd / f),
           "permissible": _n(a.permissible / f) if a.permissible is not None else None, "verdict": a.verdict}
    if a.ratio is not None:
        row["ratio"] = _n(a.ratio, 4)
    return row


def evaluation_csv(ev, units) -> str:
    f = to_metres(units)
    s, d = ev.survey, ev.deflection
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["azimuth_deg", "label", "elevation", "out_of_plane", "deflection", "deflection_sd", "allowable",
                "ratio", "status"])
    for i in range(len(s.azimuth_deg)):
        st = "exceeds" if d.exceeds[i] else ("indeterminate" if d.indeterminate[i] else
                                             ("acceptable" if np.isfinite(d.ratio[i]) else "no neighbours"))
        vals = [s.elevation[i], ev.out_of_plane[i], d.S[i], d.S_sd[i], d.allowable[i]]
        w.writerow([f"{s.azimuth_deg[i]:.4f}", s.label[i]] + [f"{v / f:.6f}" if np.isfinite(v) else "" for v in vals]
                   + [f"{d.ratio[i]:.4f}" if np.isfinite(d.ratio[i]) else "", st])
    return buf.getvalue()


def fe_csv(ev, units) -> str:
    """Out-of-plane settlement per azimuth for a finite element boundary condition."""
    f = to_metres(units)
    s = ev.survey
    R = ev.tank.radius
    buf = io.StringIO()
    buf.write(f"# out-of-plane settlement of the shell base (tilt plane removed: {ev.out_of_plane_reference}); "
              f"lengths in {UNIT_LABELS.get(units, units)}; azimuth clockwise from +Y; radius {R / f:.4f}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["azimuth_deg", "arc_length", "x", "y", "out_of_plane", "std_error"])
    se = s.std_error if s.std_error is not None else np.full(len(s.azimuth_deg), np.nan)
    for a, u, e in zip(s.azimuth_deg, ev.out_of_plane, se):
        th = np.radians(a)
        w.writerow([f"{a:.4f}", f"{R * th / f:.4f}", f"{R * np.sin(th) / f:.4f}", f"{R * np.cos(th) / f:.4f}",
                    f"{u / f:.6f}", f"{e / f:.6f}" if np.isfinite(e) else ""])
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
            "dense profile": ev.survey.dense}
    tag = (resolved or {}).get("tank", {}).get("tag") or Path(input_path).stem
    files["report.html"] = render_report(None, ev, units, figs, resolved, config_source, info, tag)
    return files
