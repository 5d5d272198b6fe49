"""Decimation study: conventional n-point surveys sampled from a dense profile, evaluated as surveys."""
from __future__ import annotations

import dataclasses

import numpy as np

from ..config import EvaluateConfig
from ..core.circular import interp_periodic, near_sample
from ..io.arctable import ArcTable
from ..io.surveys import SurveyData
from .results import DecimatedRun, DecimationStudy, TankData
from .settlement import evaluate_survey


def decimate(s: SurveyData, n: int, start_deg: float) -> SurveyData | None:
    """An n-point conventional survey sampled from a dense profile (linear between bins; None if a point is in a gap)."""
    az = np.mod(start_deg + np.arange(n) * 360.0 / n, 360.0)
    step = float(np.median(np.diff(s.azimuth_deg)))
    if not near_sample(az, s.azimuth_deg, 1.01 * step).all():
        return None
    o = np.argsort(az)
    z = interp_periodic(az, s.azimuth_deg, s.elevation)[o]
    e = interp_periodic(az, s.azimuth_deg, s.std_error)[o] if s.std_error is not None else None
    return SurveyData(azimuth_deg=az[o], elevation=z, std_error=e, label=tuple(str(i + 1) for i in o), dense=False,
                      units=s.units, source=f"{n}-point survey sampled from {s.source} from {start_deg:.2f} deg")


def decimation_study(s: SurveyData, tank: TankData, cfg: EvaluateConfig, table: ArcTable | None,
                     seed: int = 0) -> DecimationStudy:
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
        ev = evaluate_survey(sv, tank, sub_cfg, table, seed=seed)
        runs.append(DecimatedRun(start_deg=float(st), r_squared=ev.tilt.r_squared,
                                 tilt_p_value=ev.tilt.f_test.p_value, tilt_amplitude=ev.tilt.amplitude,
                                 max_deflection_ratio=float(np.nanmax(ev.deflection.ratio)), verdict=ev.verdict,
                                 deflection_verdict=ev.criteria[0].verdict,
                                 evaluation=ev if len(starts) == 1 else None))
    if not runs:
        return DecimationStudy(n_points=n, runs=(), note="every sampled survey had a point in a gap")
    return DecimationStudy(n_points=n, runs=tuple(runs))
