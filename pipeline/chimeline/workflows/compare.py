"""QA: compare runs (scanner setups, or survey dates) by their noise and their profiles.

For each run: the per-point vertical noise with its interval, per station. Between runs (the first is the
reference): the noise variance ratio test, a Brown-Forsythe test on the kept residuals and, for the same
tank, the profile difference with its consistency test; with survey dates, the settlement rate per year.
The statistics are in ``evaluate.comparison``; run folders are read through ``io.runfiles``.
"""
from __future__ import annotations

import datetime
import math
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..evaluate.comparison import (CONSISTENCY_NOTE, brown_forsythe, equivalence, noise_in_words, profile_difference,
                                   variance_ratio)
from ..io.atomic import check_writable, staging_dir, write_files
from ..io.runfiles import read_run_folder
from ..report.compare_html import compare_outputs
from ..report.console import p_text
from ..units import to_metres


def load_run(run_dir) -> dict:
    """A run folder's noise, stations, profile and residuals, every length in metres."""
    rf = read_run_folder(run_dir)
    d = rf.path
    f = rf.metres_per_unit
    n = rf.get("noise", default={}) or {}
    try:
        ci = n.get("ci95") or n.get("ci")
        stations = [{"station": s["station"], "sigma": s["within_bin"]["sigma"] * f if s["within_bin"] else None,
                     "ci": [c * f for c in s["within_bin"]["ci"]] if s["within_bin"] else None,
                     "dof": s["within_bin"]["dof"] if s["within_bin"] else 0} for s in n.get("stations", [])]
        setup = (rf.config.get("input") or {}).get("setup") or ""
        out = {"dir": str(d), "tag": rf.get("tank", "tag") or "", "date": rf.get("tank", "survey_date") or "",
               "setup": setup, "name": setup or rf.get("tank", "survey_date") or d.name,
               "sigma": n["sigma"] * f, "ci": (ci[0] * f, ci[1] * f), "dof": n["within_bin"]["dof"],
               "datum_sigma": (n.get("datum_sigma") or 0) * f, "stations": stations,
               "center": rf.summary["shell"]["center"], "radius": rf.summary["shell"]["radius"] * f,
               "units": rf.units}
    except (KeyError, TypeError, IndexError) as exc:
        raise InputError(f"{d / 'profile.json'}: missing or malformed entry {exc}") from None
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
    runs = [load_run(d) for d in dirs]
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
    check_writable(out_dir)
    files, js = compare_outputs(result)
    with staging_dir(Path(out_dir)) as stage:
        write_files(stage, files)
    return js
