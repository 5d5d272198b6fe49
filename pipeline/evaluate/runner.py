"""Wiring of the evaluation: from a pipeline run or from a CSV file, to the outputs."""
from __future__ import annotations

import logging
import time
from pathlib import Path

from ..config import load_config
from ..io.atomic import staging_dir
from . import decimation_study, evaluate_survey, read_survey, tank_data
from .results import SurveyData

log = logging.getLogger(__name__)


def has_tank_data(cfg) -> bool:
    return cfg.tank.shell_height is not None and cfg.tank.yield_strength is not None


def survey_from_run(res) -> SurveyData:
    p = res.profile
    ok = p.status == "ok"
    up = 2 if res.frame.up_axis == "z" else 1
    z0 = res.frame.origin[up] * res.frame.metres_per_unit
    return SurveyData(azimuth_deg=p.azimuth_deg[ok], elevation=p.elevation[ok] + z0, std_error=p.std_error[ok],
                      label=tuple(f"{a:.2f}" for a in p.azimuth_deg[ok]), dense=True, units=res.out_units,
                      source=str(res.scan_path), noise_sigma=res.noise.sigma, n_dropped=int((~ok).sum()))


def evaluate_run(res):
    """Evaluate a run's profile when the config carries tank data; None otherwise."""
    cfg = res.config
    if not has_tank_data(cfg):
        log.info("evaluate: skipped (set tank.shell_height and tank.yield_strength to evaluate)")
        return None
    t = time.perf_counter()
    s = survey_from_run(res)
    tank = tank_data(cfg.tank, res.frame.units, fitted_diameter_m=2 * res.shell.radius)
    ev = evaluate_survey(s, tank, cfg.evaluate)
    if cfg.evaluate.decimate:
        ev.decimation = decimation_study(s, tank, cfg.evaluate)
    res.timings["evaluate"] = time.perf_counter() - t
    return ev


def evaluate_file(path, out_dir, config_path=None, sets=()):
    cfg, resolved, source = load_config(config_path, sets)
    from .. import runner as R

    R._check_out_dir(Path(out_dir))
    s = read_survey(path, cfg.evaluate)
    tank = tank_data(cfg.tank, s.units)
    ev = evaluate_survey(s, tank, cfg.evaluate)
    if cfg.evaluate.decimate:
        if not s.dense:
            ev.warnings.append("evaluate.decimate applies to dense profiles only; ignored")
        else:
            ev.decimation = decimation_study(s, tank, cfg.evaluate)
    from .outputs import write_evaluation_outputs

    with staging_dir(out_dir) as stage:
        write_evaluation_outputs(ev, stage, resolved=resolved, config_source=source, input_path=Path(path))
    return ev
