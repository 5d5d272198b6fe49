"""Settlement evaluation of a junction profile or a conventional survey (config section ``evaluate``).

Two layers. The standard's checks set the overall verdict: the B.3.2.1 deflection check at the standard's
spacing (a survey's own points; for a dense profile the minimum-survey spacing) and the settled-arc check
(B.3.2.2) against the user's permissible table. Screening flags inform only: curvature at the deflection spacing
and local dips shorter than it (dense profiles). The tilt plane is reported with the standard's R^2 rule (R^2 >=
0.9 for the cosine fit to be accepted for B.3.2.1, from memory) beside the tests that say whether a tilt plane is
statistically real. Nothing is judged where there are no data.
"""
from __future__ import annotations

import dataclasses
import logging
import math

import numpy as np
from scipy import stats

from ..config import EvaluateConfig
from ..core.circular import near_sample
from ..core.rng import Purpose, stream
from ..core.robust import MAD_TO_SIGMA, Z95
from ..io.arctable import ArcTable
from ..io.surveys import SurveyData
from ..notices import ILLUSTRATIVE_TABLE
from ..units import FOOT
from .adequacy import MAX_SPACING, adequacy, max_gap_arc, minimum_points
from .arcs import settled_arcs
from .deflection import allowable, chord_deflection, curvature_limit, second_difference_curvature, window_deflection
from .fourier import curvature, curvature_operator, evaluate_model, fit_fourier, simultaneous_quantile
from .results import (ArcTableInfo, Criterion, CurvatureCheck, DeflectionCheck, Evaluation, EvaluationSettings,
                      ModelCurve, SettledArc, SurveyCurvature, TankData)
from .screening import local_dips
from .tilt import fit_tilt
from .verdicts import bounds, judge, overall

log = logging.getLogger(__name__)

DEFLECTION = "deflection (B.3.2.1)"
ARCS = "settled arcs (B.3.2.2)"
CURVATURE = "curvature at the deflection spacing (screening)"
DIPS = "local dips shorter than the deflection spacing (screening)"


#: a survey reading this far (m) from the median of the readings, and this many robust standard deviations, is
#: called out for checking: a typo or a unit slip, common practice in reviewing level surveys
BLUNDER_DISTANCE, BLUNDER_Z = 0.25, 10.0


def blunder_warnings(s: SurveyData) -> list:
    """Readings that stand far apart from all the others (warned, never removed: the engineer decides)."""
    z = s.elevation
    med = float(np.median(z))
    d = np.abs(z - med)
    scale = MAD_TO_SIGMA * float(np.median(d))
    out = []
    for i in np.flatnonzero((d > BLUNDER_DISTANCE) & (d > BLUNDER_Z * scale)):
        k = f"{d[i] / scale:.0f} robust standard deviations" if scale > 0 else "all the others agree"
        out.append(f"reading {s.label[i]} at {s.azimuth_deg[i]:.1f} deg is {d[i] * 1e3:.0f} mm from the median of "
                   f"the readings ({k}): check it for a typo or a unit slip before relying on the result")
    return out


def evaluate_survey(s: SurveyData, tank: TankData, cfg: EvaluateConfig, table: ArcTable | None,
                    seed: int = 0) -> Evaluation:
    """Evaluate ``s`` for ``tank``; ``table`` is the permissible settled-arc table (None: arcs not assessed)."""
    warnings = []
    R = tank.radius
    C = 2 * math.pi * R
    az, z = s.azimuth_deg, s.elevation
    n = len(z)
    Y, E, H = tank.yield_strength, tank.youngs_modulus, tank.shell_height
    step = float(np.median(np.diff(az))) if s.dense else None
    if not s.dense:
        warnings += blunder_warnings(s)
    # 1. tilt plane (the standard's cosine fit) and 2. Fourier regression
    tilt = fit_tilt(az, z, alpha=cfg.alpha, r2_min=cfg.r2_min)
    sel = cfg.order_selection if cfg.order_selection != "auto" else ("blocked_cv" if s.dense else "nested_f")
    four = fit_fourier(az, z, s.std_error, R, selection=sel, order=cfg.order, max_order_cap=cfg.max_order,
                       min_wavelength=cfg.min_wavelength, alpha=cfg.alpha, noise_known=s.noise_sigma is not None,
                       cv_block_deg=cfg.cv_block_deg, cv_folds=cfg.cv_folds)
    if four.order >= four.max_order_allowed and four.max_order_allowed > 1 and sel != "fixed":
        warnings.append(f"the Fourier order reached its cap K = {four.order} (evaluate.max_order, "
                        f"evaluate.min_wavelength, or N/2): the model may miss shorter features")
    tilt = _tilt_decision(tilt, four, s.dense)
    # 3. out-of-plane settlement
    th = np.radians(az)
    if s.dense:
        plane = four.coef[0] + four.coef[1] * np.cos(th) + four.coef[2] * np.sin(th)
        ref = "Fourier model terms k = 0 and 1 (weighted)"
    else:
        plane = tilt.a + tilt.b * np.cos(th) + tilt.c * np.sin(th)
        ref = "single cosine fit (the standard's tilt plane)"
    u = z - plane
    # reading uncertainty and the quantile of the 95 % bounds
    sd_pts, q, sigma, sigma_src = _reading_uncertainty(s, four, cfg)
    # 4. the B.3.2.1 deflection check
    adequ = adequacy(s, tank.diameter)
    s_arc = np.radians(az) * R
    if s.dense:
        L = C / minimum_points(tank.diameter) if cfg.deflection_spacing == "auto" else float(cfg.deflection_spacing)
        how_L = (f"minimum-survey spacing pi D / {minimum_points(tank.diameter)} = {L:.2f} m"
                 if cfg.deflection_spacing == "auto" else f"evaluate.deflection_spacing = {L:.2f} m")
        S, S_sd = window_deflection(s_arc, u, sd_pts, L, C)
        L1 = L2 = np.full(n, L)
    else:
        S, S_sd, L1, L2 = chord_deflection(s_arc, u, sd_pts, C)
        L = float(np.sqrt(np.mean(L1 * L2)))
        how_L = "arc to each neighbour (L^2 = L1 L2; chord form for unequal spacing)"
    Smax = allowable(np.sqrt(L1 * L2), Y, E, H)
    ratio, lower, upper = bounds(S, S_sd, Smax, q)
    notes = [f"L: {how_L}", f"uncertainty: {sigma_src}"]
    notes += [f"survey note: {a}" for a in adequ]
    force = None
    if s.dense:
        cov_def = float(np.isfinite(S).sum() * step / 360.0)
    else:
        cov_def = 1.0
        gap_m, i_gap = max_gap_arc(s, R)
        if gap_m > MAX_SPACING + 1e-9:
            force = (f"readings {s.label[i_gap]} and {s.label[(i_gap + 1) % n]} are {gap_m:.2f} m "
                     f"({gap_m / FOOT:.1f} ft) apart along the shell, more than the standard's maximum spacing of "
                     f"32 ft (9.75 m): the deflection between them is not known")
    crit_def = judge(DEFLECTION, az, ratio, lower, upper, clause="B.3.2.1", what="S/S_max", reasons=notes,
                     coverage=cov_def, min_coverage=cfg.min_evidence_coverage, force_indeterminate=force)
    if not tilt.r2_rule_met:
        crit_def = dataclasses.replace(crit_def, verdict="not applicable", azimuth_ranges=(), reasons=crit_def.reasons
                                       + (f"R^2 = {tilt.r_squared:.3f} < {cfg.r2_min}: the standard does not accept "
                                          f"the cosine fit for this check (values shown for information); the "
                                          f"settled-arc check (B.3.2.2) or a rigorous analysis applies",))
    deflection = DeflectionCheck(S=S, S_sd=S_sd, allowable=Smax, ratio=ratio, L1=L1, L2=L2,
                                 exceeds=np.isfinite(lower) & (lower > 1), indeterminate=np.isfinite(ratio) &
                                 (ratio > 1) & ~(lower > 1), spacing=how_L)
    # 5. screening: curvature at the deflection spacing (and the unsmoothed model for the audit)
    klim = curvature_limit(Y, E, H)
    grid = np.arange(0.0, 360.0, cfg.curvature_step_deg)
    spacing_k = L if cfg.curvature_smoothing == "auto" else float(cfg.curvature_smoothing)
    near = near_sample(grid, az, 3 * step) if s.dense else np.ones(len(grid), bool)
    ugrid, usd = evaluate_model(four, grid, k_min=2)
    model = ModelCurve(azimuth_deg=grid, value=ugrid, sd=usd)
    curv, crit_k = _curvature_screen(four, grid, near, R, spacing_k, klim, s.dense, seed, cfg)
    curv_sparse = None
    if not s.dense:
        curv_sparse = SurveyCurvature(azimuth_deg=az, kappa=second_difference_curvature(s_arc, u, C), limit=klim)
    # 6. screening: local dips shorter than the deflection spacing (dense)
    dips = ()
    if s.dense:
        w = 1.0 / sd_pts ** 2
        dips, cov_dip, dnotes = local_dips(az, z, w, R, L, cfg.dip_min_length, Y, E, H, alpha=cfg.screening_alpha,
                                           rng=stream(seed, Purpose.EVALUATION_BANDS, 1))
        crit_d = _dip_criterion(dips, cov_dip, dnotes, cfg)
    else:
        crit_d = Criterion(DIPS, "not assessed", "a survey cannot resolve features shorter than its spacing",
                           reasons=("dense profiles only",))
    # 7. the settled-arc check (B.3.2.2)
    if s.dense:
        arc_list = settled_arcs(grid, ugrid, R)
        sd_of = lambda deg: float(np.interp(deg, grid, usd, period=360))  # noqa: E731
        data_at = lambda deg: bool(near_sample(np.array([deg]), az, 3 * step)[0])  # noqa: E731
        cov_arc = float(near.mean())
    else:
        arc_list = settled_arcs(az, u, R)
        sd_of = lambda deg: float(np.median(sd_pts)) * math.sqrt(1.5)  # noqa: E731
        data_at = lambda deg: True  # noqa: E731
        cov_arc = 1.0
    arcs, crit_a, info = _arc_check(arc_list, table, tank, sd_of, data_at, grid, near, s.dense, q, cov_arc, cfg)
    criteria = (crit_def, crit_a, crit_k, crit_d)
    verdict, governing = overall(criteria)
    settings = EvaluationSettings(order_selection=sel, alpha=cfg.alpha, r2_min=cfg.r2_min, deflection_L=how_L,
                                  deflection_spacing=float(L), curvature_smoothing=float(spacing_k),
                                  min_evidence_coverage=cfg.min_evidence_coverage, reading_sigma=sigma,
                                  reading_sigma_source=sigma_src)
    log.debug("evaluate: tilt %.1f mm (R^2 %.3f, p %.2g), K = %d, verdict %s (%s)", tilt.amplitude * 1e3,
             tilt.r_squared, tilt.f_test.p_value, four.order, verdict, governing)
    return Evaluation(survey=s, tank=tank, tilt=tilt, fourier=four, out_of_plane=u, out_of_plane_reference=ref,
                      model=model, deflection=deflection, curvature=curv, curvature_sparse=curv_sparse,
                      arcs=tuple(arcs), arc_table=info, criteria=criteria, verdict=verdict, governing=governing,
                      adequacy=tuple(adequ), warnings=tuple(warnings), settings=settings, dips=tuple(dips))


def _tilt_decision(tilt, four, dense):
    """Whether a tilt plane is statistically real, and which test said so."""
    if dense or four.order >= 2:
        t = four.tilt_partial_f
        by = f"{t.name} (K = {four.order})"
    else:
        t = tilt.f_test
        by = "overall F test of the cosine fit"
    return dataclasses.replace(tilt, significant=bool(t.reject), decided_by=by, p_value=float(t.p_value))


def _reading_uncertainty(s, four, cfg):
    """(1-sigma per point (n,), quantile of the 95 % bounds, reading sigma or None, source in words)."""
    n = len(s.elevation)
    if s.std_error is not None:
        src = "std_error of each bin (measured noise and registration)" if s.dense else "std_error column of the survey"
        return np.asarray(s.std_error, dtype=float), Z95, None, src
    floor = cfg.survey_std_error
    df = four.df_resid
    if df >= 1:
        s_res = math.sqrt(four.rss / df)
        if s_res > floor:
            q = float(stats.t.ppf(0.975, df))
            return (np.full(n, s_res), q, s_res, f"reading error estimated from the residuals of the {four.order}-mode "
                    f"model: {s_res * 1e3:.2f} mm with {df} degrees of freedom (t quantile {q:.2f})")
        return (np.full(n, floor), Z95, floor, f"reading error {floor * 1e3:.2f} mm (evaluate.survey_std_error; the "
                f"residuals of the {four.order}-mode model give {s_res * 1e3:.2f} mm)")
    return (np.full(n, floor), Z95, floor, f"reading error {floor * 1e3:.2f} mm assumed (evaluate.survey_std_error): "
            f"no residual degrees of freedom to estimate it")


def _curvature_screen(four, grid, near, R, spacing, klim, dense, seed, cfg):
    if four.order < 2:
        nan = np.full(len(grid), np.nan)
        curv = CurvatureCheck(azimuth_deg=grid, kappa=nan, kappa_sd=nan, limit=klim, exceeds=np.zeros(len(grid), bool),
                              indeterminate=np.zeros(len(grid), bool), smoothing=spacing, assessed=False)
        return curv, Criterion(CURVATURE, "not assessed", "no mode above 1 in the selected model",
                               reasons=("curvature not assessed: the data carry no out-of-plane mode",))
    kap, ksd = curvature(four, grid, R, spacing)
    kap = np.where(near, kap, np.nan)
    G = curvature_operator(four, grid[near], R, spacing)
    df = None if dense else max(four.df_resid, 1)
    qs = simultaneous_quantile(G, four.cov, stream(seed, Purpose.EVALUATION_BANDS), level=1 - cfg.screening_alpha,
                               df=df)
    ratio, lower, upper = bounds(kap, ksd, klim, qs)
    notes = [f"Fourier model K = {four.order} ({four.selection})",
             f"smoothed at {spacing:.2f} m: the second difference at that spacing, -2 S / L^2; limit 11 Y / (E H) = "
             f"{klim:.4g} 1/m; simultaneous 95 % band (max-t, quantile {qs:.2f})"]
    crit = judge(CURVATURE, grid, ratio, lower, upper, what="|kappa|/limit", reasons=notes,
                 coverage=float(near.mean()), min_coverage=cfg.min_evidence_coverage)
    curv = CurvatureCheck(azimuth_deg=grid, kappa=kap, kappa_sd=ksd, limit=klim, exceeds=np.isfinite(lower) & (lower > 1),
                          indeterminate=np.isfinite(ratio) & (ratio > 1) & ~(lower > 1), smoothing=spacing,
                          q_simultaneous=qs)
    return curv, crit


def _dip_criterion(dips, coverage, notes, cfg):
    raised = [d for d in dips if d.ratio > 1]
    if raised:
        worst = raised[0]
        gov = (f"{len(raised)} dip(s); deepest {worst.depth * 1e3:.1f} mm over {worst.length:.1f} m at "
               f"{worst.deepest_deg:.1f} deg ({worst.ratio:.3g} x S_max at half its length)")
        why = ("a shell bridges dips shorter than its height: a local-support question for the engineer "
               "(rigorous analysis), not a code exceedance",)
        return Criterion(DIPS, "exceeds", gov, tuple((d.start_deg, d.end_deg) for d in raised), notes + why,
                         ratio=worst.ratio, evidence_coverage=coverage)
    verdict = "acceptable"
    reasons = list(notes)
    if coverage < cfg.min_evidence_coverage:
        verdict = "indeterminate"
        reasons.append(f"evidence covers {100 * coverage:.1f} % of the circumference")
    gov = (f"{len(dips)} dip(s) beyond the noise, none beyond S_max at half its length" if dips else
           "no dip beyond the noise")
    return Criterion(DIPS, verdict, gov, (), tuple(reasons), ratio=max((d.ratio for d in dips), default=None),
                     evidence_coverage=coverage)


def _arc_check(arc_list, table, tank, sd_of, data_at, grid, near, dense, q, coverage, cfg):
    curve = table.permissible(tank.roof, tank.diameter) if table is not None else None
    info = ArcTableInfo(title=table.title if table else "", source=table.source if table else "none",
                        illustrative=bool(table and table.illustrative),
                        curve_arc_length=None if curve is None else curve[0],
                        curve_depth=None if curve is None else curve[1])
    arcs, judged, uncovered = [], [], []
    for a in arc_list:
        dsd = sd_of(a["deepest_deg"])
        if table is None:
            arcs.append(SettledArc(**a, depth_sd=dsd, permissible=None, verdict="not assessed"))
            continue
        if curve is None or a["arc_length"] > curve[0][-1]:
            arc = SettledArc(**a, depth_sd=dsd, permissible=None, verdict="not covered")
            uncovered.append(arc)
        elif a["arc_length"] < curve[0][0]:
            arc = SettledArc(**a, depth_sd=dsd, permissible=None, verdict="below table")
        elif dense and not _arc_on_data(a, grid, near, data_at):
            arc = SettledArc(**a, depth_sd=dsd, permissible=None, verdict="in a gap")
            uncovered.append(arc)
        else:
            perm = float(np.interp(a["arc_length"], curve[0], curve[1]))
            r, lo, up = a["depth"] / perm, (a["depth"] - q * dsd) / perm, (a["depth"] + q * dsd) / perm
            v = "exceeds" if lo > 1 else ("indeterminate" if r > 1 else "acceptable")
            arc = SettledArc(**a, depth_sd=dsd, permissible=perm, verdict=v, ratio=r, ratio_upper95=up)
            judged.append((arc, lo, up))
        arcs.append(arc)
    if table is None:
        return arcs, Criterion(ARCS, "not assessed", "no permissible settled-arc table supplied",
                               reasons=("supply the table of the governing edition with evaluate.arc_table; the "
                                        "check takes no part in the overall verdict without it",),
                               clause="B.3.2.2"), info
    reasons = [f"table: {table.title or table.source}"]
    if table.illustrative:
        reasons.append(ILLUSTRATIVE_TABLE)
    if curve is None:
        reasons.append(f"no curve in the table for roof '{tank.roof}' and D = {tank.diameter:.1f} m")
    if uncovered:
        reasons.append("not judged: " + "; ".join(
            f"{x.arc_length:.1f} m arc {x.depth * 1e3:.1f} mm deep at {x.deepest_deg:.0f} deg "
            f"({'longer than the table' if x.verdict == 'not covered' else 'crosses a data gap'})" for x in uncovered))
    if judged:
        az = np.array([a.deepest_deg for a, _, _ in judged])
        crit = judge(ARCS, az, np.array([a.ratio for a, _, _ in judged]), np.array([lo for _, lo, _ in judged]),
                     np.array([up for _, _, up in judged]), clause="B.3.2.2", what="depth/permissible",
                     reasons=reasons, coverage=coverage, min_coverage=cfg.min_evidence_coverage)
        worst = max(judged, key=lambda t: t[0].ratio)[0]
        crit = dataclasses.replace(crit, governing=f"deepest arc {worst.depth * 1e3:.1f} mm over {worst.arc_length:.1f}"
                                   f" m at {worst.deepest_deg:.0f} deg: " + crit.governing)
    else:
        v = "indeterminate" if uncovered or curve is None else "acceptable"
        crit = Criterion(ARCS, v, "no settled arc within the table's lengths", (), tuple(reasons), clause="B.3.2.2",
                         evidence_coverage=coverage)
    if uncovered and crit.verdict == "acceptable":
        crit = dataclasses.replace(crit, verdict="indeterminate",
                                   azimuth_ranges=tuple((x.start_deg, x.end_deg) for x in uncovered))
    return arcs, crit, info


def _arc_on_data(a, grid, near, data_at):
    """An arc is judged only when its deepest point has data near and it spans no gap of more than 3 bins."""
    if not data_at(a["deepest_deg"]):
        return False
    t0 = a["start_deg"]
    span = (a["end_deg"] - t0) % 360 or 360.0
    inside = ((grid - t0) % 360) <= span
    return bool(near[inside].all())
