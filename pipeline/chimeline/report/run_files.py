"""A run folder's files as text and bytes: profile.csv, profile.json, config.resolved.yaml, residuals.csv,
quicklook.png, plots/, report.html and, with an evaluation, its files."""
from __future__ import annotations

import numpy as np
import yaml

from ..version import __version__
from ..config import config_hash
from ..io.atomic import json_text
from ..io.runfiles import CONFIG_YAML, PROFILE_CSV, PROFILE_JSON, RESIDUALS_CSV, ProfileTable, ResidualTable
from ..notices import CAUTION, VERTICAL_REFERENCE
from ..units import UNIT_LABELS
from .evaluation_files import evaluation_run_files
from .geometry import geometry_figures, geometry_files, geometry_summary
from .html import render_report, run_figures
from .lengths import Lengths
from .quicklook import quicklook


def _num(v, digits=6):
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return None
    return round(float(v), digits)


def profile_table(res) -> ProfileTable:
    """The profile in output units and scan-datum elevations."""
    L = Lengths(res)
    p = res.profile
    return ProfileTable(azimuth_deg=p.azimuth_deg, elevation=L.elevation(p.elevation), std_error=L.length(p.std_error),
                        n_points=p.n_points, n_rejected=p.n_rejected, n_stations=p.n_stations, n_eff=p.n_eff,
                        scale=L.length(p.scale), status=p.status, units=L.unit, evidence=p.evidence,
                        width_deg=p.width_deg)


def _estimate(e, L):
    if e is None:
        return None
    return {"sigma": _num(L.length(e.sigma), 7), "ci": [_num(L.length(e.ci[0]), 7), _num(L.length(e.ci[1]), 7)],
            "dof": e.dof, "n_points": e.n_points}


def profile_summary(res) -> dict:
    L = Lengths(res)
    s, fr, n, p, j = res.shell, res.frame, res.noise, res.profile, res.junction
    status_counts = {k: int((p.status == k).sum()) for k in ("ok", "sparse", "suspect", "empty")}
    tilt_deg = float(np.degrees(np.arccos(min(1.0, abs(s.axis[2])))))
    return {
        "units": L.unit,
        "units_label": UNIT_LABELS.get(L.unit, L.unit),
        "software": {"name": "chimeline", "version": __version__},
        "tank": {"tag": res.config.tank.tag, "survey_date": res.config.tank.survey_date},
        "input": {"path": str(res.scan_path), "sha256": res.input_sha256, "n_points_read": res.n_points_read,
                  "units": fr.units, "units_source": fr.units_source, "units_horizontal": fr.units_horizontal,
                  "units_vertical": fr.units, "paths": [str(p) for p in res.scan_paths or (res.scan_path,)],
                  "sha256_files": list(res.input_sha256_files),
                  "decoded_fraction": res.counts.get("decoded_fraction"),
                  "skipped_points": res.counts.get("skipped", {})},
        "config": {"source": res.config_source, "sha256": config_hash(res.resolved), "seed": res.config.seed},
        "frame": {"origin": fr.origin.tolist(), "origin_units": fr.units if fr.units == fr.units_horizontal else
                  [fr.units if i == (2 if fr.up_axis == "z" else 1) else fr.units_horizontal for i in range(3)],
                  "up_axis": fr.up_axis,
                  "azimuth": f"degrees {'clockwise' if fr.azimuth_direction == 'cw' else 'counter-clockwise'} from "
                             f"{fr.azimuth_reference_deg:g} deg (0 = +Y of the scan frame), in [0, 360)"},
        "shell": {"center": [_num(v) for v in L.xy(s.center[:2], fr)], "base_elevation": _num(L.elevation(s.center[2])),
                  "radius": _num(L.length(s.radius)), "radius_mean_all_courses": _num(L.length(s.radius_mean)),
                  "axis": [_num(v, 9) for v in s.axis], "axis_tilt_deg": _num(tilt_deg, 5),
                  "rms_residual": _num(L.length(s.rms_residual), 7), "n_inliers": s.n_inliers,
                  "coverage": _num(s.coverage, 4), "ransac_trials": s.n_trials, "selection": s.selection,
                  "other_cylinders": [{"center": [_num(v) for v in L.xy(o.center, fr)], "radius": _num(L.length(o.radius)),
                                       "n_inliers": o.n_inliers, "coverage": _num(o.coverage, 3)} for o in s.others]},
        "junction": {"projection_width": _num(L.length(j.projection_width)) if j.projection_width else None,
                     "radial_window": [_num(L.length(v)) for v in j.radial_window],
                     "edge_smear": _num(L.length(j.edge_smear)) if j.edge_smear else None,
                     "foot_returns": len(j.foot.z) if j.foot is not None else 0,
                     "step_face_returns": len(j.step.z) if j.step is not None else 0,
                     "method": "top of the bottom-plate projection next to the shell face: radial window (outer "
                               "edge from the step face's pile of returns or a fit of the plate-level share with "
                               "its noise), per-sector height mode prior, height gate; also the shell foot and "
                               "the step face's top edge"},
        "profile": {"n_bins": len(p.azimuth_deg), "bin_width_deg": _num(p.bin_width_deg, 6),
                    "coverage_ok": _num(p.coverage, 4), "status_counts": status_counts,
                    "gaps_deg": [[_num(a, 4), _num(b, 4)] for a, b in p.gaps],
                    **_evidence_summary(p, L)},
        "noise": {"sigma": _num(L.length(n.sigma), 7), "ci95" if abs(n.confidence - 0.95) < 1e-9 else "ci":
                  [_num(L.length(n.ci[0]), 7), _num(L.length(n.ci[1]), 7)], "confidence": n.confidence,
                  "method": n.method, "within_bin": _estimate(n.within_bin, L), "pairs": _estimate(n.pairs, L),
                  "agreement_p": _num(n.agreement_p, 6), "estimators_agree": n.agree,
                  "registration_sigma": _num(L.length(n.registration_sigma), 7),
                  "registration_residual_sigma": _num(L.length(n.registration_residual_sigma), 7),
                  "datum_sigma": _num(L.length(n.datum_sigma), 7),
                  "stations_leveled": bool(res.profile.leveled),
                  "station_leveling": _leveling_text(res),
                  "adopted_estimator": n.adopted, "pairs_source": n.pairs_source, "interior_only": n.interior,
                  "classical_sigma": _num(L.length(n.classical_sigma), 7),
                  "contamination_ratio": _num(n.contamination, 4),
                  "correlated_sigma": _num(L.length(n.correlated_sigma), 7),
                  "quantization": {"resolution": _num(L.length(n.quantum), 9),
                                   "bias_sigma": _num(L.length(n.quantization_bias_sigma), 7)},
                  "stations": [{"station": st.station, "within_bin": _estimate(st.within_bin, L),
                                "pairs": _estimate(st.pairs, L), "vertical_offset": _num(L.length(st.offset), 7),
                                "vertical_offset_se": _num(L.length(st.offset_se), 7)} for st in n.stations]},
        "counts": res.counts,
        "warnings": list(res.warnings),
        "vertical_reference": VERTICAL_REFERENCE,
        "geometry": (geometry_summary(res.geometry, L, res.config.geometry.vertical_reference_sigma)
                     if res.geometry is not None else None),
        "caution": CAUTION,
    }


def _leveling_text(res) -> str:
    n, p = res.noise, res.profile
    if not n.station_ids:
        return ("not possible: the scan carries no station ids; the correlated (registration) error estimated from "
                "the data is in every standard error (correlated_sigma)")
    if p.leveled:
        return "relative station vertical offsets estimated from shared bins and removed"
    return "station offsets reported, not removed" if len(p.station_offset) else "one station: nothing to level"


def _evidence_summary(p, L) -> dict:
    """profile.json keys on the evidence joined per bin (per-bin lists follow the bins of profile.csv)."""
    f = p.fusion
    if f is None:
        return {}
    return {"max_std_error": _num(L.length(f.max_std_error), 7), "max_bin_width_deg": _num(f.max_width_deg, 6),
            "bins_widened": f.n_widened, "evidence_counts": {str(k): int(v) for k, v in f.counts.items()},
            "evidence_kinds": [{"kind": k.kind, "offset_to_top": _num(L.length(k.offset), 7),
                                "sigma": _num(L.length(k.sigma), 7), "bins_with_top": k.n_pairs, "bins": k.n_bins}
                               for k in f.kinds],
            "kind_conflicts": f.n_conflicts, "top_roughness": _num(f.roughness, 4),
            "evidence": [str(e) for e in p.evidence], "width_deg": [_num(w, 6) for w in p.width_deg],
            "evidence_method": "per bin, projection-top mean, shell-foot lower edge and step-face upper edge, tied "
                               "to the top by measured offsets and joined by inverse variance; status ok when the "
                               "standard error is at most max_std_error, widening a thin bin up to "
                               "max_bin_width_deg (never across a gap)"}


def residual_table(res) -> ResidualTable:
    """Kept junction points' residuals about their bin line, per station (for QA comparisons)."""
    L = Lengths(res)
    p, j = res.profile, res.junction
    k = np.nonzero(p.kept)[0]
    return ResidualTable(azimuth_deg=j.azimuth_deg[k], station=j.station[k], bin=p.bin_index[k],
                         residual=L.length(p.residual[k]), units=L.unit)


def run_outputs(res) -> dict:
    """Every file of a run folder: {relative path: text or PNG bytes}."""
    files = {PROFILE_CSV: profile_table(res).to_csv(), PROFILE_JSON: json_text(profile_summary(res)),
             CONFIG_YAML: "# resolved config of this run: rerun with  chimeline run SCAN --config "
                          "config.resolved.yaml\n" + yaml.safe_dump(res.resolved, sort_keys=False)}
    if res.config.output.plots:
        files["quicklook.png"] = quicklook(res)
    if res.evaluation is not None:
        files.update(evaluation_run_files(res.evaluation, res.out_units))
    files[RESIDUALS_CSV] = residual_table(res).to_csv()
    files.update(geometry_files(res))
    figs = run_figures(res, res.evaluation, res.out_units) if res.config.output.plots else {}
    gfigs = geometry_figures(res.geometry, res.out_units) if res.geometry is not None and res.config.output.plots else {}
    for name, png in {**figs, **gfigs}.items():
        files[f"plots/{name}.png"] = png
    more = len(res.scan_paths) - 1
    info = {"scan": str(res.scan_path) + (f" and {more} more file{'s' if more > 1 else ''}" if more > 0 else ""),
            "sha256": res.input_sha256, "points read": res.n_points_read,
            "scan units": f"{res.frame.units} ({res.frame.units_source})" if res.frame.units_horizontal ==
                          res.frame.units else f"{res.frame.units_horizontal} in plan, {res.frame.units} in "
                                              f"height ({res.frame.units_source})",
            "local origin (scan units)": ", ".join(f"{v:.3f}" for v in res.frame.origin)}
    files["report.html"] = render_report(res, res.evaluation, res.out_units, figs, res.resolved,
                                         res.config_source, info, res.config.tank.tag or res.scan_path.stem,
                                         geometry_figures=gfigs)
    return files
