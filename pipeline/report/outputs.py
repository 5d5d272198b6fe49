"""Writes a run's files: profile.csv, profile.json, config.resolved.yaml, quicklook.png (+ evaluation files)."""
from __future__ import annotations

import csv
import io
import logging
from pathlib import Path

import numpy as np
import yaml

from .. import __version__
from ..config import config_hash
from ..io.atomic import write_json, write_text
from ..units import UNIT_LABELS, to_metres

log = logging.getLogger(__name__)

PROFILE_COLUMNS = ["azimuth_deg", "elevation", "std_error", "n_points", "n_rejected", "n_stations", "n_eff",
                   "scale", "status"]


class Lengths:
    """Local metres -> output units, and local elevations -> scan-datum elevations in output units."""

    def __init__(self, res):
        self.unit = res.out_units
        self.f = to_metres(self.unit)
        fr = res.frame
        up = 2 if fr.up_axis == "z" else 1
        self.z0 = fr.origin[up] * fr.metres_per_unit
        self.origin_m = fr.origin * fr.metres_per_unit

    def length(self, v):
        return np.asarray(v, dtype=float) / self.f

    def elevation(self, z_local):
        return (np.asarray(z_local, dtype=float) + self.z0) / self.f

    def xy(self, xy_local, frame):
        if frame.up_axis == "z":
            return (np.asarray(xy_local[:2]) + self.origin_m[:2]) / self.f
        return np.array([xy_local[0] + self.origin_m[0], -xy_local[1] + self.origin_m[2]]) / self.f


def _num(v, digits=6):
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return None
    return round(float(v), digits)


def profile_csv_text(res) -> str:
    L = Lengths(res)
    p = res.profile
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(PROFILE_COLUMNS)
    el = L.elevation(p.elevation)
    se = L.length(p.std_error)
    sc = L.length(p.scale)
    for i in range(len(p.azimuth_deg)):
        fin = np.isfinite(el[i])
        w.writerow([f"{p.azimuth_deg[i]:.4f}", f"{el[i]:.5f}" if fin else "", f"{se[i]:.6f}" if fin else "",
                    int(p.n_points[i]), int(p.n_rejected[i]), int(p.n_stations[i]),
                    f"{p.n_eff[i]:.2f}" if np.isfinite(p.n_eff[i]) else "",
                    f"{sc[i]:.6f}" if np.isfinite(sc[i]) else "", p.status[i]])
    return buf.getvalue()


def _estimate(e, L):
    if e is None:
        return None
    return {"sigma": _num(L.length(e.sigma), 7), "ci": [_num(L.length(e.ci[0]), 7), _num(L.length(e.ci[1]), 7)],
            "dof": e.dof, "n_points": e.n_points}


def profile_summary(res) -> dict:
    from ..runner import CAUTION

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
                  "units": fr.units, "units_source": fr.units_source},
        "config": {"source": res.config_source, "sha256": config_hash(res.resolved), "seed": res.config.seed},
        "frame": {"origin": fr.origin.tolist(), "origin_units": fr.units, "up_axis": fr.up_axis,
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
                     "method": "top of the bottom-plate projection next to the shell face: radial window, "
                               "per-sector height mode prior, height gate"},
        "profile": {"n_bins": len(p.azimuth_deg), "bin_width_deg": _num(p.bin_width_deg, 6),
                    "coverage_ok": _num(p.coverage, 4), "status_counts": status_counts,
                    "gaps_deg": [[_num(a, 4), _num(b, 4)] for a, b in p.gaps]},
        "noise": {"sigma": _num(L.length(n.sigma), 7), "ci95" if abs(n.confidence - 0.95) < 1e-9 else "ci":
                  [_num(L.length(n.ci[0]), 7), _num(L.length(n.ci[1]), 7)], "confidence": n.confidence,
                  "method": n.method, "within_bin": _estimate(n.within_bin, L), "pairs": _estimate(n.pairs, L),
                  "agreement_p": _num(n.agreement_p, 6), "estimators_agree": n.agree,
                  "registration_sigma": _num(L.length(n.registration_sigma), 7),
                  "registration_residual_sigma": _num(L.length(n.registration_residual_sigma), 7),
                  "datum_sigma": _num(L.length(n.datum_sigma), 7),
                  "stations_leveled": bool(res.profile.leveled),
                  "stations": [{"station": st.station, "within_bin": _estimate(st.within_bin, L),
                                "pairs": _estimate(st.pairs, L), "vertical_offset": _num(L.length(st.offset), 7),
                                "vertical_offset_se": _num(L.length(st.offset_se), 7)} for st in n.stations]},
        "counts": res.counts,
        "timings_s": {k: round(v, 3) for k, v in res.timings.items()},
        "warnings": list(res.warnings),
        "vertical_reference": "elevations, tilt and base elevation rely on the scanners' levelling and the "
                              "registration unless the scan is tied to survey control; out-of-plane settlement "
                              "does not depend on a small tilt error",
        "caution": CAUTION,
    }


def residuals_csv_text(res) -> str:
    """Kept junction points' residuals about their bin line, per station (for QA comparisons)."""
    L = Lengths(res)
    p, j = res.profile, res.junction
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["azimuth_deg", "station", "bin", "residual"])
    k = np.nonzero(p.kept)[0]
    for i in k:
        w.writerow([f"{j.azimuth_deg[i]:.4f}", int(j.station[i]), int(p.bin_index[i]), f"{L.length(p.residual[i]):.7f}"])
    return buf.getvalue()


def write_run_outputs(res, stage: Path) -> None:
    stage = Path(stage)
    write_text(stage / "profile.csv", profile_csv_text(res))
    write_json(stage / "profile.json", profile_summary(res))
    write_text(stage / "config.resolved.yaml",
               "# resolved config of this run: rerun with  chimeline run SCAN --config config.resolved.yaml\n"
               + yaml.safe_dump(res.resolved, sort_keys=False))
    if res.config.output.plots:
        from .plots import quicklook

        quicklook(res, stage / "quicklook.png")
    if res.evaluation is not None:
        from ..evaluate.outputs import write_evaluation_outputs

        write_evaluation_outputs(res.evaluation, stage, run=res)
    write_text(stage / "residuals.csv", residuals_csv_text(res))
    if res.config.output.plots:
        from .html import render_report, run_figures

        figs = run_figures(res, res.evaluation, res.out_units)
        (stage / "plots").mkdir(exist_ok=True)
        for name, png in figs.items():
            (stage / "plots" / f"{name}.png").write_bytes(png)
        info = {"scan": str(res.scan_path), "sha256": res.input_sha256, "points read": res.n_points_read,
                "scan units": f"{res.frame.units} ({res.frame.units_source})",
                "local origin (scan units)": ", ".join(f"{v:.3f}" for v in res.frame.origin)}
        write_text(stage / "report.html", render_report(res, res.evaluation, res.out_units, figs, res.resolved,
                                                         res.config_source, info, res.config.tank.tag or res.scan_path.stem))
