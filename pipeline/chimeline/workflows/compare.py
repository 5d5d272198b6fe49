"""QA: compare runs (scanner setups, or survey dates) by their noise and their profiles.

For each run: the per-point vertical noise with its interval, per station. Between runs (the first is the
reference): the noise variance ratio test, a Brown-Forsythe test on the kept residuals and, for the same
tank, the profile difference with its consistency test; with survey dates, the settlement rate per year.
The statistics are in ``evaluate.comparison``; run folders are read through ``io.runfiles``.
"""
from __future__ import annotations

import datetime
import hashlib
import math
import os
import time
from pathlib import Path

import numpy as np

from ..config import EvaluateConfig, config_hash
from ..errors import ConfigError, InputError, clip_repr
from ..evaluate.comparison import (CONSISTENCY_NOTE, brown_forsythe, equivalence, noise_in_words, profile_difference,
                                   variance_ratio)
from ..io.atomic import OutputSlot
from ..io.runfiles import (KIND_COMPARE, MANIFEST_JSON, FolderInput, kind_guard, provenance_record, read_run_folder,
                           with_manifest)
from ..report.compare_html import compare_outputs
from ..report.console import p_text
from ..units import to_metres


class _Bad(Exception):
    """A malformed profile.json entry (turned into one InputError naming the file)."""


def _number(v, what, *, positive=False, nonnegative=False) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise _Bad(f"'{what}' must be a finite number, got {clip_repr(v, 40)}")
    if (positive and v <= 0) or (nonnegative and v < 0):
        raise _Bad(f"'{what}' must be {'> 0' if positive else '>= 0'}, got {clip_repr(v, 40)}")
    return float(v)


def _estimate(e, what, f, need_dof=True):
    """(sigma, ci, dof) of a noise estimate, lengths in metres, validated; dof None when not needed."""
    if not isinstance(e, dict):
        raise _Bad(f"'{what}' must be a mapping")
    ci = e.get("ci95", e.get("ci"))
    if not isinstance(ci, (list, tuple)) or len(ci) != 2:
        raise _Bad(f"'{what}.ci' must be two numbers")
    dof = e.get("dof")
    if need_dof and (isinstance(dof, bool) or not isinstance(dof, int) or dof < 1):
        raise _Bad(f"'{what}.dof' must be a whole number >= 1, got {clip_repr(dof, 40)}")
    return (_number(e.get("sigma"), f"{what}.sigma", positive=True) * f,
            tuple(_number(c, f"{what}.ci", positive=True) * f for c in ci), dof if need_dof else None)


def load_run(run_dir) -> dict:
    """A run folder's noise, stations, profile and residuals, every length in metres."""
    rf = read_run_folder(run_dir)
    d = rf.path
    f = rf.metres_per_unit
    n = rf.get("noise", default={})
    try:
        if not isinstance(n, dict):
            raise _Bad("'noise' must be a mapping")
        sigma, ci, _ = _estimate(n, "noise", f, need_dof=False)
        _, _, dof = _estimate(n.get("within_bin"), "noise.within_bin", f)
        stations = []
        for i, st in enumerate(n.get("stations") or []):
            wb = st.get("within_bin") if isinstance(st, dict) else None
            s_sigma, s_ci, s_dof = _estimate(wb, f"noise.stations[{i}].within_bin", f) if wb else (None, None, 0)
            stations.append({"station": st.get("station") if isinstance(st, dict) else i, "sigma": s_sigma,
                             "ci": list(s_ci) if s_ci else None, "dof": s_dof})
        shell = rf.summary.get("shell")
        center = shell.get("center") if isinstance(shell, dict) else None
        if not isinstance(center, (list, tuple)) or len(center) != 2:
            raise _Bad("'shell.center' must be two numbers")
        tank = rf.summary.get("tank") if isinstance(rf.summary.get("tank"), dict) else {}
        inp = rf.config.get("input") if isinstance(rf.config.get("input"), dict) else {}
        setup, date = str(inp.get("setup") or ""), str(tank.get("survey_date") or "")
        out = {"dir": str(d), "tag": str(tank.get("tag") or ""), "date": date, "setup": setup,
               "name": setup or date or d.name, "sigma": sigma, "ci": ci, "dof": dof,
               "datum_sigma": _number(n.get("datum_sigma") or 0, "noise.datum_sigma", nonnegative=True) * f,
               "stations": stations, "center": [_number(c, "shell.center") for c in center],
               "radius": _number(shell.get("radius"), "shell.radius", positive=True) * f, "units": rf.units}
    except _Bad as exc:
        raise InputError(f"{d / 'profile.json'}: {exc}") from None
    mp = d / MANIFEST_JSON
    out["input"] = FolderInput("run", os.path.abspath(d),
                               hashlib.sha256(mp.read_bytes()).hexdigest() if rf.manifest is not None else None)
    p = rf.profile
    out.update(az=p.azimuth_deg, el=p.elevation * f, se=p.std_error * f, ok=p.status == "ok")
    if rf.residuals is not None:
        out.update(resid=rf.residuals.residual * f, resid_station=rf.residuals.station)
    else:
        out.update(resid=np.array([]), resid_station=np.array([], dtype=int))
    return out


def profile_change(base: dict, r: dict) -> tuple[bool, dict]:
    """(same tank, profile difference of run ``r`` minus run ``base``) of two ``load_run`` mappings; with survey
    dates on both, the rate per year of the mean difference. Runs are the same tank when their shell centres lie
    within 0.5 m and their radii within 0.05 m (so both scans are in one coordinate frame)."""
    same_tank = (math.hypot(r["center"][0] - base["center"][0], r["center"][1] - base["center"][1])
                 * to_metres(r["units"]) < 0.5 and abs(r["radius"] - base["radius"]) < 0.05)
    if same_tank:
        pd = profile_difference(base["az"], base["el"], base["se"], base["ok"], base["datum_sigma"],
                                r["az"], r["el"], r["se"], r["ok"], r["datum_sigma"])
    else:
        pd = {"n_common": 0, "note": "different tanks: profiles not compared"}
    if same_tank and base["date"] and r["date"] and "mean_difference" in pd:
        try:
            dt = (datetime.date.fromisoformat(r["date"]) - datetime.date.fromisoformat(base["date"])).days / 365.25
            if dt != 0:
                pd["years"] = dt
                pd["rate_per_year"] = pd["mean_difference"] / dt
                pd["rate_per_year_se"] = pd["mean_difference_se"] / abs(dt)
        except ValueError:
            pass
    if "consistency_p" in pd:
        pd["consistency_note"] = CONSISTENCY_NOTE
    return same_tank, pd


def compare_runs(dirs, alpha=0.05, margin=0.1) -> dict:
    md = EvaluateConfig.__dataclass_fields__["alpha"].metadata
    if isinstance(alpha, bool) or not isinstance(alpha, (int, float)) or not md["min"] <= alpha <= md["max"]:
        raise ConfigError(f"--alpha must be a significance level in [{md['min']}, {md['max']}], got {clip_repr(alpha)}")
    if isinstance(margin, bool) or not isinstance(margin, (int, float)) or not 1e-3 <= margin <= 10.0:
        raise ConfigError(f"--margin must be a share in [0.001, 10], got {clip_repr(margin)}")
    runs = [load_run(d) for d in dirs]
    if len({r["name"] for r in runs}) < len(runs):  # equal setups or dates cannot tell the runs apart: folders can
        names = [Path(r["dir"]).name for r in runs]
        if len(set(names)) < len(runs):
            names = [str(Path(r["dir"]).resolve()) for r in runs]
        for r, nm in zip(runs, names):
            r["name"] = f"{r['name']} ({nm})" if r["name"] != Path(r["dir"]).name else nm
    if len(runs) < 2:
        raise InputError("compare needs at least two run folders")
    base = runs[0]
    pairs = []
    for r in runs[1:]:
        vr = variance_ratio(base["sigma"], base["dof"], r["sigma"], r["dof"])
        if len(base["resid"]) and len(r["resid"]):
            vr["brown_forsythe"] = brown_forsythe(base["resid"], r["resid"])
        vr["noise_differs"] = vr["p_value"] <= alpha
        eq = equivalence(base["sigma"], base["dof"], r["sigma"], r["dof"], margin, alpha)
        eq["alpha"] = alpha
        vr["equivalence"] = eq
        vr["added_in_quadrature"] = math.sqrt(max(0.0, r["sigma"] ** 2 - base["sigma"] ** 2))
        vr["in_words"] = noise_in_words(base["name"], r["name"], base["sigma"], r["sigma"], vr, eq, p_text)
        by_id = {x["station"]: x for x in base["stations"] if x["sigma"]}
        vr["stations"] = [dict(station=x["station"], **variance_ratio(by_id[x["station"]]["sigma"],
                                                                      by_id[x["station"]]["dof"], x["sigma"], x["dof"]))
                          for x in r["stations"] if x["sigma"] and x["station"] in by_id and x["dof"] and
                          by_id[x["station"]]["dof"]]
        same_tank, pd = profile_change(base, r)
        pairs.append({"reference": base["dir"], "run": r["dir"], "noise": vr, "profile": pd, "same_tank": same_tank})
    return {"runs": runs, "pairs": pairs, "alpha": alpha, "margin": margin}


def write_compare(result, out_dir) -> dict:
    """Publish the compare folder (compare.json, compare.csv, compare.html, manifest, provenance)."""
    t0 = time.perf_counter()
    with OutputSlot(out_dir, guard=kind_guard(KIND_COMPARE), inputs=[r["dir"] for r in result["runs"]]) as slot:
        files, js = compare_outputs(result)
        settings = config_hash({"alpha": result["alpha"], "margin": result.get("margin")})
        slot.publish(with_manifest(files, KIND_COMPARE, [r["input"] for r in result["runs"]], settings,
                                   provenance_record("compare", {"total": time.perf_counter() - t0},
                                                     recovered=slot.recovered)))
    return js
