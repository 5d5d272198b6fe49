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

from ..config import EvaluateConfig
from ..io.arctable import ArcTable
from ..io.surveys import SurveyData
from ..notices import ILLUSTRATIVE_TABLE
from .adequacy import adequacy, minimum_points
from .arcs import settled_arcs
from .deflection import allowable, chord_deflection, curvature_limit, second_difference_curvature, window_deflection
from .fourier import curvature, evaluate_model, fit_fourier
from .results import (ArcTableInfo, Criterion, CurvatureCheck, DeflectionCheck, Evaluation, EvaluationSettings, ModelCurve,
                      SettledArc, SurveyCurvature, TankData)
from .tilt import fit_tilt
from .verdicts import arc_verdict, criterion, overall

log = logging.getLogger(__name__)


def evaluate_survey(s: SurveyData, tank: TankData, cfg: EvaluateConfig, table: ArcTable) -> Evaluation:
    """Evaluate ``s`` for ``tank``; ``table`` is the permissible settled-arc table (``io.arctable``)."""
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
    crit_def, ratio, ex, ind = criterion("deflection (B.3.2.1)", az, S / Smax, S_sd / Smax, 1.0, "S/S_max",
                                         reasons, force_indeterminate=force)
    deflection = DeflectionCheck(S=S, S_sd=S_sd, allowable=Smax, ratio=ratio, L1=L1, L2=L2, exceeds=ex,
                                 indeterminate=ind, spacing=how_L)
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
    crit_k, kratio, kex, kind = criterion("curvature (Fourier model)", grid, kap, ksd, klim, "|kappa|/limit", kreasons)
    curv = CurvatureCheck(azimuth_deg=grid, kappa=kap, kappa_sd=ksd, limit=klim, exceeds=kex, indeterminate=kind)
    curv_sparse = None
    if not s.dense:
        curv_sparse = SurveyCurvature(azimuth_deg=az, kappa=second_difference_curvature(s_arc, u, C), limit=klim)
    ugrid, usd = evaluate_model(four, grid, k_min=2)
    model = ModelCurve(azimuth_deg=grid, value=ugrid, sd=usd)
    # 6. settled arcs
    if s.dense:
        arc_list = settled_arcs(grid, ugrid, R)
        sd_of = lambda deg: float(np.interp(deg, grid, usd, period=360))  # noqa: E731
    else:
        arc_list = settled_arcs(az, u, R)
        sd_of = lambda deg: float(np.median(sd_pts)) * math.sqrt(1.5)  # noqa: E731
    curve = table.permissible(tank.roof, tank.diameter)
    arcs, a_ex, a_ind = [], False, False
    for a in arc_list:
        depth_sd = sd_of(a["deepest_deg"])
        if curve is None or not (curve[0][0] <= a["arc_length"] <= curve[0][-1]):
            arc = SettledArc(**a, depth_sd=depth_sd, permissible=None, verdict="outside table")
        else:
            perm = float(np.interp(a["arc_length"], curve[0], curve[1]))
            arc = SettledArc(**a, depth_sd=depth_sd, permissible=perm,
                             verdict=arc_verdict(a["depth"], depth_sd, perm), ratio=a["depth"] / perm)
        a_ex |= arc.verdict == "exceeds"
        a_ind |= arc.verdict == "indeterminate"
        arcs.append(arc)
    judged = [r for r in arcs if r.permissible is not None]
    areasons = [f"table: {table.title or table.source}"]
    if table.illustrative:
        areasons.append(ILLUSTRATIVE_TABLE)
    if curve is None:
        areasons.append(f"no curve in the table for roof '{tank.roof}' and D = {tank.diameter:.1f} m")
    if judged:
        worst = max(judged, key=lambda r: r.ratio)
        gov = (f"deepest arc {worst.depth * 1000:.1f} mm over {worst.arc_length:.1f} m at {worst.deepest_deg:.0f} deg "
               f"(ratio {worst.ratio:.2f})")
    else:
        gov = "no settled arc inside the table's range"
    averdict = "exceeds" if a_ex else ("indeterminate" if a_ind or curve is None else "acceptable")
    from_arcs = tuple((r.start_deg, r.end_deg) for r in arcs if r.verdict in ("exceeds", "indeterminate"))
    crit_a = Criterion("settled arcs (arc-length method)", averdict, gov, from_arcs, tuple(areasons))
    criteria = (crit_def, crit_k, crit_a)
    verdict = overall(criteria)
    settings = EvaluationSettings(order_selection=sel, tilt_rule=cfg.tilt_rule, alpha=cfg.alpha, r2_min=cfg.r2_min,
                                  deflection_L=how_L)
    log.info("evaluate: tilt %.1f mm (R^2 %.3f, p %.2g), K = %d, verdict %s", tilt.amplitude * 1e3,
             tilt.r_squared, tilt.f_test.p_value, four.order, verdict)
    info = ArcTableInfo(title=table.title, source=table.source, illustrative=table.illustrative,
                        curve_arc_length=None if curve is None else curve[0],
                        curve_depth=None if curve is None else curve[1])
    return Evaluation(survey=s, tank=tank, tilt=tilt, fourier=four, out_of_plane=u, out_of_plane_reference=ref,
                      model=model, deflection=deflection, curvature=curv, curvature_sparse=curv_sparse,
                      arcs=tuple(arcs), arc_table=info, criteria=criteria, verdict=verdict, adequacy=tuple(adequ),
                      warnings=tuple(warnings + adequ), settings=settings)
