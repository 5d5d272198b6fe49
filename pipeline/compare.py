"""QA: compare runs (scanner setups, or survey dates) by their noise and their profiles.

For each run: the per-point vertical noise with its interval, per station. Between runs: the F ratio of
the noise variances with its two-sided p-value and an interval for the sigma ratio, and a Brown-Forsythe
test (Levene's test about the median, scipy.stats) on the kept residuals. Profiles are compared on the
azimuths both have: the difference with its standard error (the datum uncertainties of both scans add
to the mean difference), and a chi-square consistency test of the point-to-point differences. With
survey dates, the mean difference is the settlement between them and its rate per year.
"""
from __future__ import annotations

import csv
import datetime
import json
import math
from pathlib import Path

import numpy as np
from scipy import stats

from .errors import InputError
from .io.atomic import staging_dir, write_json, write_text
from .units import to_metres


def load_run(run_dir) -> dict:
    d = Path(run_dir)
    pj = d / "profile.json"
    if not pj.exists():
        raise InputError(f"{d}: not a chimeline run folder (no profile.json)")
    try:
        js = json.loads(pj.read_text())
    except ValueError as exc:
        raise InputError(f"{pj}: not valid JSON ({exc})") from None
    f = to_metres(js["units"])
    rows = list(csv.DictReader((d / "profile.csv").open()))
    az = np.array([float(r["azimuth_deg"]) for r in rows])
    el = np.array([float(r["elevation"]) * f if r["elevation"] else np.nan for r in rows])
    se = np.array([float(r["std_error"]) * f if r["std_error"] else np.nan for r in rows])
    ok = np.array([r["status"] == "ok" for r in rows])
    res_path = d / "residuals.csv"
    resid = np.array([])
    resid_st = np.array([], dtype=int)
    if res_path.exists():
        rr = list(csv.DictReader(res_path.open()))
        resid = np.array([float(r["residual"]) * f for r in rr])
        resid_st = np.array([int(r["station"]) for r in rr])
    n = js["noise"]
    ci = n.get("ci95") or n.get("ci")
    return {"dir": str(d), "tag": js["tank"].get("tag") or d.name, "date": js["tank"].get("survey_date") or "",
            "sigma": n["sigma"] * f, "ci": (ci[0] * f, ci[1] * f), "dof": n["within_bin"]["dof"],
            "datum_sigma": (n.get("datum_sigma") or 0) * f,
            "stations": [{"station": s["station"], "sigma": s["within_bin"]["sigma"] * f if s["within_bin"] else None,
                          "ci": [c * f for c in s["within_bin"]["ci"]] if s["within_bin"] else None,
                          "dof": s["within_bin"]["dof"] if s["within_bin"] else 0} for s in n["stations"]],
            "az": az, "el": el, "se": se, "ok": ok, "resid": resid, "resid_station": resid_st,
            "center": js["shell"]["center"], "radius": js["shell"]["radius"] * f, "units": js["units"]}


def variance_ratio(s1, d1, s2, d2, conf=0.95):
    """F = s2^2 / s1^2 on (d2, d1) degrees of freedom: two-sided p and an interval for s2 / s1."""
    F = (s2 / s1) ** 2
    p = float(2 * min(stats.f.cdf(F, d2, d1), stats.f.sf(F, d2, d1)))
    a = (1 - conf) / 2
    lo = math.sqrt(F / stats.f.ppf(1 - a, d2, d1))
    hi = math.sqrt(F / stats.f.ppf(a, d2, d1))
    return {"sigma_ratio": s2 / s1, "F": F, "df": [d2, d1], "p_value": p, "ratio_ci95": [lo, hi]}


def profile_difference(a, b):
    """b minus a on a's bin centres where both are ok (b interpolated if its bins differ)."""
    xp = np.concatenate([b["az"] - 360, b["az"], b["az"] + 360])
    okb = np.tile(b["ok"] & np.isfinite(b["el"]), 3)
    eb = np.interp(a["az"], xp[okb], np.tile(b["el"], 3)[okb])
    sb = np.interp(a["az"], xp[okb], np.tile(b["se"], 3)[okb])
    step = np.median(np.diff(b["az"]))
    j = np.clip(np.searchsorted(xp[okb], a["az"]), 1, okb.sum() - 1)
    near = np.minimum(np.abs(xp[okb][j] - a["az"]), np.abs(xp[okb][j - 1] - a["az"])) <= 1.01 * step
    m = a["ok"] & np.isfinite(a["el"]) & near
    d = eb[m] - a["el"][m]
    sd = np.sqrt(a["se"][m] ** 2 + sb[m] ** 2)
    if len(d) < 3:
        return {"n_common": int(len(d))}
    w = 1 / sd ** 2
    mean = float((w * d).sum() / w.sum())
    mean_se = float(math.sqrt(1 / w.sum() + a["datum_sigma"] ** 2 + b["datum_sigma"] ** 2))
    chi2 = float((((d - mean) / sd) ** 2).sum())
    dof = len(d) - 1
    return {"n_common": int(len(d)), "mean_difference": mean, "mean_difference_se": mean_se,
            "rms_difference": float(np.sqrt(np.mean((d - mean) ** 2))),
            "consistency_chi2": chi2, "consistency_dof": dof, "consistency_p": float(stats.chi2.sf(chi2, dof)),
            "azimuth_deg": a["az"][m], "difference": d, "difference_sd": sd}


def compare_runs(dirs, alpha=0.05) -> dict:
    runs = [load_run(d) for d in dirs]
    if len(runs) < 2:
        raise InputError("compare needs at least two run folders")
    base = runs[0]
    pairs = []
    for r in runs[1:]:
        vr = variance_ratio(base["sigma"], base["dof"], r["sigma"], r["dof"])
        if len(base["resid"]) and len(r["resid"]):
            bf = stats.levene(base["resid"], r["resid"], center="median")
            vr["brown_forsythe"] = {"statistic": float(bf.statistic), "p_value": float(bf.pvalue)}
        vr["noise_differs"] = vr["p_value"] <= alpha
        same_tank = (math.hypot(r["center"][0] - base["center"][0], r["center"][1] - base["center"][1]) * to_metres(r["units"])
                     < 0.5 and abs(r["radius"] - base["radius"]) < 0.05)
        pd = profile_difference(base, r) if same_tank else {"n_common": 0, "note": "different tanks: profiles not compared"}
        if same_tank and base["date"] and r["date"] and "mean_difference" in pd:
            try:
                dt = (datetime.date.fromisoformat(r["date"]) - datetime.date.fromisoformat(base["date"])).days / 365.25
                if dt != 0:
                    pd["years"] = dt
                    pd["rate_per_year"] = pd["mean_difference"] / dt
                    pd["rate_per_year_se"] = pd["mean_difference_se"] / abs(dt)
            except ValueError:
                pass
        pairs.append({"reference": base["dir"], "run": r["dir"], "noise": vr, "profile": pd, "same_tank": same_tank})
    return {"runs": runs, "pairs": pairs, "alpha": alpha}


def write_compare(result, out_dir):
    from .report.compare_html import render_compare

    runs, pairs = result["runs"], result["pairs"]
    js = {"alpha": result["alpha"], "units_note": "all lengths in metres",
          "runs": [{"dir": r["dir"], "tag": r["tag"], "survey_date": r["date"], "sigma": r["sigma"], "ci95": list(r["ci"]),
                    "dof": r["dof"], "stations": r["stations"]} for r in runs],
          "pairs": [{"reference": p["reference"], "run": p["run"], "same_tank": p["same_tank"], "noise": p["noise"],
                     "profile": {k: v for k, v in p["profile"].items() if not isinstance(v, np.ndarray)}} for p in pairs]}
    with staging_dir(out_dir) as stage:
        write_json(stage / "compare.json", js)
        lines = ["run,station,sigma_m,ci95_lo_m,ci95_hi_m,dof"]
        for r in runs:
            lines.append(f"{r['dir']},all,{r['sigma']:.7f},{r['ci'][0]:.7f},{r['ci'][1]:.7f},{r['dof']}")
            for s in r["stations"]:
                if s["sigma"] is not None:
                    lines.append(f"{r['dir']},{s['station']},{s['sigma']:.7f},{s['ci'][0]:.7f},{s['ci'][1]:.7f},{s['dof']}")
        write_text(stage / "compare.csv", "\n".join(lines) + "\n")
        write_text(stage / "compare.html", render_compare(result))
    return js
