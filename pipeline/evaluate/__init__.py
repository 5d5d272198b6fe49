"""Settlement evaluation of a junction profile or a conventional survey (config section ``evaluate``).

``evaluate_survey(survey, tank, cfg)`` runs: tilt plane (single cosine, R^2 and F test), Fourier
regression with a stated order criterion and tests of the tilt terms, out-of-plane settlement, the
B.3.2.1 deflection check (chord form for unequal spacing), curvature against 11 Y / (E H) with a
confidence band, settled arcs against a permissible table, and verdicts per criterion.
"""
from __future__ import annotations

import logging
import math

import numpy as np

from ..config import EvaluateConfig, TankConfig
from ..errors import ConfigError
from ..units import parse_quantity
from . import arcs as A
from .deflection import allowable, chord_deflection, curvature_limit, second_difference_curvature, window_deflection
from .fourier import curvature, evaluate_model, fit_fourier
from .inputs import adequacy, minimum_points, read_survey
from .results import Criterion, Evaluation, SurveyData, TankData
from .tilt import fit_tilt

log = logging.getLogger(__name__)
Z95 = 1.959963984540054

__all__ = ["evaluate_survey", "tank_data", "read_survey", "SurveyData", "TankData", "Evaluation"]


def tank_data(tc: TankConfig, length_unit: str, fitted_diameter_m: float | None = None) -> TankData:
    """Tank data from the config; bare lengths are in ``length_unit``; stresses need a unit."""
    if tc.diameter is not None:
        D = parse_quantity(tc.diameter, "length", _pint_unit(length_unit), "tank.diameter")
        src = "config"
    elif fitted_diameter_m is not None:
        D, src = fitted_diameter_m, "fitted"
    else:
        raise ConfigError("tank.diameter is missing: give the nominal diameter (e.g. '100 ft') for a survey")
    for key, val in (("tank.shell_height", tc.shell_height), ("tank.yield_strength", tc.yield_strength)):
        if val is None:
            raise ConfigError(f"'{key}' is missing: the settlement evaluation needs it (e.g. "
                              f"{'40 ft' if 'height' in key else '36 ksi or 250 MPa'})")
    H = parse_quantity(tc.shell_height, "length", _pint_unit(length_unit), "tank.shell_height")
    for key, val in (("tank.yield_strength", tc.yield_strength), ("tank.youngs_modulus", tc.youngs_modulus)):
        if isinstance(val, (int, float)) and not isinstance(val, bool):
            raise ConfigError(f"'{key}' needs a unit, e.g. '36 ksi', '250 MPa' or '29e6 psi'; got {val!r}")
    Y = parse_quantity(tc.yield_strength, "stress", "Pa", "tank.yield_strength")
    E = parse_quantity(tc.youngs_modulus, "stress", "Pa", "tank.youngs_modulus")
    for key, v, lo, hi in (("tank.diameter", D, 1.0, 200.0), ("tank.shell_height", H, 1.0, 50.0),
                           ("tank.yield_strength", Y, 100e6, 1000e6), ("tank.youngs_modulus", E, 100e9, 300e9)):
        if not lo <= v <= hi:
            raise ConfigError(f"'{key}' = {v:.4g} (SI) is outside a plausible range [{lo:.3g}, {hi:.3g}] for a steel "
                              f"tank; check its unit")
    return TankData(diameter=D, radius=D / 2, shell_height=H, yield_strength=Y, youngs_modulus=E, roof=tc.roof,
                    diameter_source=src)


def _pint_unit(u):
    return {"us_ft": "survey_foot", "ft": "foot", "m": "meter", "mm": "millimeter", "in": "inch"}[u]


def _ranges(az, flag):
    """Contiguous azimuth ranges (first, last azimuth) where ``flag`` is true (circular)."""
    from ..circular import true_runs

    az = np.asarray(az)
    n = len(az)
    if np.all(flag):
        return ((0.0, 360.0),)
    return tuple((float(az[a]), float(az[(b - 1) % n])) for a, b in true_runs(flag))


def _banded_verdict(value, sd, limit):
    """Per location: exceeds where the 95 % band lies past the limit, indeterminate where it straddles it."""
    lo = np.abs(value) - Z95 * sd
    hi = np.abs(value) + Z95 * sd
    ex = lo > limit
    ind = (~ex) & (hi > limit)
    return ex, ind


def _criterion(name, az, value, sd, limit, what, extra_reasons=(), force_indeterminate=False):
    ok = np.isfinite(value)
    ex, ind = _banded_verdict(np.where(ok, value, 0), np.where(ok, sd, 0), limit)
    ex &= ok
    ind &= ok
    ratio = np.where(ok, np.abs(value) / limit, np.nan)
    k = int(np.nanargmax(ratio)) if ok.any() else 0
    gov = f"max {what} ratio {ratio[k]:.2f} at {az[k]:.1f} deg" if ok.any() else "no values"
    if ex.any():
        verdict, rng = "exceeds", _ranges(az, ex)
    elif ind.any() or force_indeterminate:
        verdict, rng = "indeterminate", _ranges(az, ind)
    else:
        verdict, rng = "acceptable", ()
    return Criterion(name, verdict, gov, rng, tuple(extra_reasons)), ratio, ex, ind


def evaluate_survey(s: SurveyData, tank: TankData, cfg: EvaluateConfig) -> Evaluation:
    warnings = []
    R = tank.radius
    C = 2 * math.pi * R
    az = s.azimuth_deg
    z = s.elevation
    sd_pts = s.std_error
    if sd_pts is None:
        sd_pts = np.full(len(z), cfg.survey_std_error)
        warnings.append(f"no std_error in the input: readings taken as {cfg.survey_std_error * 1000:.1f} mm "
                        f"(1 sigma, evaluate.survey_std_error)")
    # 1. tilt plane
    tilt = fit_tilt(az, z, alpha=cfg.alpha, r2_min=cfg.r2_min, rule=cfg.tilt_rule)
    # 2. Fourier regression
    sel = cfg.order_selection
    if sel == "auto":
        sel = "bic" if s.dense else "nested_f"
    four = fit_fourier(az, z, s.std_error, R, selection=sel, order=cfg.order, max_order_cap=cfg.max_order,
                       min_wavelength=cfg.min_wavelength, alpha=cfg.alpha, noise_known=s.noise_sigma is not None)
    # 3. out-of-plane settlement
    th = np.radians(az)
    if s.dense:
        plane = four.coef[0] + four.coef[1] * np.cos(th) + four.coef[2] * np.sin(th)
        ref = "Fourier model terms k = 0 and 1 (weighted)"
    else:
        plane = tilt.a + tilt.b * np.cos(th) + tilt.c * np.sin(th)
        ref = "single cosine fit (the standard's tilt plane)"
    u = z - plane
    # 4. deflection check
    Y, E, H = tank.yield_strength, tank.youngs_modulus, tank.shell_height
    adequ = adequacy(s, tank.diameter)
    s_arc = np.radians(az) * R
    if s.dense:
        if cfg.deflection_spacing == "auto":
            L = C / minimum_points(tank.diameter)
            how_L = f"minimum-survey spacing pi D / {minimum_points(tank.diameter)} = {L:.2f} m"
        else:
            L = float(cfg.deflection_spacing)
            how_L = f"evaluate.deflection_spacing = {L:.2f} m"
        S, S_sd = window_deflection(s_arc, u, sd_pts, L, C)
        L1 = L2 = np.full(len(u), L)
    else:
        S, S_sd, L1, L2 = chord_deflection(s_arc, u, sd_pts, C)
        how_L = "arc to each neighbour (L^2 = L1 L2)"
    Smax = allowable(np.sqrt(L1 * L2), Y, E, H)
    reasons = [f"L: {how_L}"]
    if not s.dense and not tilt.r2_rule_met:
        reasons.append(f"R^2 = {tilt.r_squared:.3f} < {cfg.r2_min}: the standard's cosine-fit acceptance is not met")
    if adequ:
        reasons.append("survey inadequate: " + "; ".join(adequ))
    force = bool(adequ) and not s.dense
    crit_def, ratio, ex, ind = _criterion("deflection (B.3.2.1)", az, S / Smax, S_sd / Smax, 1.0, "S/S_max",
                                          reasons, force_indeterminate=force)
    deflection = {"S": S, "S_sd": S_sd, "allowable": Smax, "ratio": ratio, "L1": L1, "L2": L2,
                  "exceeds": ex, "indeterminate": ind}
    # 5. curvature
    klim = curvature_limit(Y, E, H)
    grid = np.arange(0.0, 360.0, cfg.curvature_step_deg)
    kap, ksd = curvature(four, grid, R)
    if s.dense and len(az):
        # only where the data are: a gap wider than 3 bins is not judged
        d = np.abs(np.mod(grid[:, None] - az[None, :] + 180, 360) - 180).min(axis=1)
        step = np.median(np.diff(az)) if len(az) > 1 else 1.0
        far = d > 3 * step
        kap = np.where(far, np.nan, kap)
    kreasons = [f"Fourier model K = {four.order} ({four.selection}); limit 11 Y / (E H) = {klim:.3e} 1/m"]
    crit_k, kratio, kex, kind = _criterion("curvature (Fourier model)", grid, kap, ksd, klim, "|kappa|/limit", kreasons)
    curv = {"azimuth_deg": grid, "kappa": kap, "kappa_sd": ksd, "limit": klim, "exceeds": kex, "indeterminate": kind}
    curv_sparse = None
    if not s.dense:
        kk = second_difference_curvature(s_arc, u, C)
        curv_sparse = {"azimuth_deg": az, "kappa": kk, "limit": klim}
    # 6. settled arcs
    table = A.load_table(cfg.arc_table)
    if s.dense:
        ugrid, usd = evaluate_model(four, grid, k_min=2)
        arc_list = A.settled_arcs(grid, ugrid, R)
        sd_of = lambda deg: float(np.interp(deg, grid, usd, period=360))
    else:
        arc_list = A.settled_arcs(az, u, R)
        sd_of = lambda deg: float(np.median(sd_pts)) * math.sqrt(1.5)
    curve = A.permissible(table, tank.roof, tank.diameter)
    arc_rows, a_ex, a_ind = [], False, False
    for a in arc_list:
        row = dict(a)
        row["depth_sd"] = sd_of(a["deepest_deg"])
        if curve is None or not (curve[0][0] <= a["arc_length"] <= curve[0][-1]):
            row["permissible"] = None
            row["verdict"] = "outside table"
        else:
            perm = float(np.interp(a["arc_length"], curve[0], curve[1]))
            row["permissible"] = perm
            lo, hi = a["depth"] - Z95 * row["depth_sd"], a["depth"] + Z95 * row["depth_sd"]
            row["verdict"] = "exceeds" if lo > perm else ("indeterminate" if hi > perm else "acceptable")
            row["ratio"] = a["depth"] / perm
        a_ex |= row["verdict"] == "exceeds"
        a_ind |= row["verdict"] == "indeterminate"
        arc_rows.append(row)
    judged = [r for r in arc_rows if r.get("permissible") is not None]
    areasons = [f"table: {table['title'] or table['source']}"]
    if table["illustrative"]:
        areasons.append("ILLUSTRATIVE demo table, not the standard's values: this verdict is a demonstration only")
    if curve is None:
        areasons.append(f"no curve in the table for roof '{tank.roof}' and D = {tank.diameter:.1f} m")
    if judged:
        worst = max(judged, key=lambda r: r["ratio"])
        gov = f"deepest arc {worst['depth'] * 1000:.1f} mm over {worst['arc_length']:.1f} m at {worst['deepest_deg']:.0f} deg (ratio {worst['ratio']:.2f})"
    else:
        gov = "no settled arc inside the table's range"
    averdict = "exceeds" if a_ex else ("indeterminate" if a_ind or curve is None else "acceptable")
    crit_a = Criterion("settled arcs (arc-length method)", averdict, gov,
                       tuple((r["start_deg"], r["end_deg"]) for r in arc_rows if r["verdict"] in ("exceeds", "indeterminate")),
                       tuple(areasons))
    criteria = [crit_def, crit_k, crit_a]
    order = {"acceptable": 0, "indeterminate": 1, "exceeds": 2}
    overall = max((c.verdict for c in criteria), key=order.get)
    settings = {"order_selection": sel, "tilt_rule": cfg.tilt_rule, "alpha": cfg.alpha, "r2_min": cfg.r2_min,
                "deflection_L": how_L}
    log.info("evaluate: tilt %.1f mm (R^2 %.3f, p %.2g), K = %d, verdict %s", tilt.amplitude * 1e3,
             tilt.r_squared, tilt.f_test.p_value, four.order, overall)
    return Evaluation(survey=s, tank=tank, tilt=tilt, fourier=four, out_of_plane=u, out_of_plane_reference=ref,
                      deflection=deflection, curvature=curv, curvature_sparse=curv_sparse, arcs=arc_rows,
                      arc_table={"title": table["title"], "source": table["source"],
                                 "illustrative": table["illustrative"]},
                      criteria=criteria, verdict=overall, adequacy=adequ, warnings=warnings + adequ,
                      settings=settings)


def decimate(s: SurveyData, n: int, start_deg: float) -> SurveyData | None:
    """An n-point conventional survey sampled from a dense profile (linear between bins; None if a point is in a gap)."""
    az = np.mod(start_deg + np.arange(n) * 360.0 / n, 360.0)
    step = float(np.median(np.diff(s.azimuth_deg)))
    xp = np.concatenate([s.azimuth_deg - 360, s.azimuth_deg, s.azimuth_deg + 360])
    zp = np.tile(s.elevation, 3)
    ep = np.tile(s.std_error, 3) if s.std_error is not None else None
    j = np.clip(np.searchsorted(xp, az), 1, len(xp) - 1)
    near = np.minimum(np.abs(xp[j] - az), np.abs(xp[j - 1] - az)) <= 1.01 * step
    if not near.all():
        return None
    o = np.argsort(az)
    z = np.interp(az, xp, zp)[o]
    e = np.interp(az, xp, ep)[o] if ep is not None else None
    return SurveyData(azimuth_deg=az[o], elevation=z, std_error=e, label=tuple(str(i + 1) for i in o), dense=False,
                      units=s.units, source=f"{n}-point survey sampled from {s.source} from {start_deg:.2f} deg")


def decimation_study(s: SurveyData, tank: TankData, cfg: EvaluateConfig) -> dict:
    import dataclasses

    n = cfg.decimate
    sub_cfg = dataclasses.replace(cfg, order_selection="nested_f", decimate=None)
    if cfg.decimate_start_deg == "all":
        step = float(np.median(np.diff(s.azimuth_deg)))
        starts = np.arange(0.0, 360.0 / n, max(step, 360.0 / n / 60))
    else:
        starts = np.array([float(cfg.decimate_start_deg)])
    runs = []
    for st in starts:
        sv = decimate(s, n, st)
        if sv is None:
            continue
        ev = evaluate_survey(sv, tank, sub_cfg)
        runs.append({"start_deg": float(st), "r_squared": ev.tilt.r_squared, "tilt_p_value": ev.tilt.f_test.p_value,
                     "tilt_amplitude": ev.tilt.amplitude, "max_deflection_ratio": float(np.nanmax(ev.deflection["ratio"])),
                     "verdict": ev.verdict, "deflection_verdict": ev.criteria[0].verdict,
                     "evaluation": ev if len(starts) == 1 else None})
    if not runs:
        return {"n_points": n, "runs": [], "note": "every sampled survey had a point in a gap"}
    mr = np.array([r["max_deflection_ratio"] for r in runs])
    r2 = np.array([r["r_squared"] for r in runs])
    return {"n_points": n, "starts": len(runs), "runs": runs,
            "max_deflection_ratio": {"min": float(mr.min()), "median": float(np.median(mr)), "max": float(mr.max())},
            "r_squared": {"min": float(r2.min()), "median": float(np.median(r2)), "max": float(r2.max())},
            "verdicts": {v: sum(r["verdict"] == v for r in runs) for v in ("acceptable", "indeterminate", "exceeds")}}
