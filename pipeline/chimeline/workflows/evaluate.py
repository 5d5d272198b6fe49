"""Wiring of the evaluation: from a run's profile or from a CSV file, to the outputs."""
from __future__ import annotations

import dataclasses
import logging
import os
import time
from pathlib import Path

from ..config import config_hash, load_config
from ..core.hashing import sha256_file
from ..evaluate import decimation_study, evaluate_survey, has_tank_data, tank_data
from ..evaluate.results import Evaluation
from ..io.arctable import load_arc_table
from ..io.atomic import OutputSlot
from ..io.pdf import pdf_bytes
from ..io.runfiles import KIND_EVALUATION, FolderInput, kind_guard, provenance_record, with_manifest
from ..io.surveys import SurveyData, read_survey
from ..report.evaluation_files import evaluation_outputs

log = logging.getLogger(__name__)


def survey_from_run(res) -> SurveyData:
    """The ok bins of a run's profile as dense survey data in scan-datum metres."""
    p = res.profile
    ok = p.status == "ok"
    z0 = res.frame.up_origin_m()
    return SurveyData(azimuth_deg=p.azimuth_deg[ok], elevation=p.elevation[ok] + z0, std_error=p.std_error[ok],
                      label=tuple(f"{a:.2f}" for a in p.azimuth_deg[ok]), dense=True, units=res.out_units,
                      source=str(res.scan_path), noise_sigma=res.noise.sigma, n_dropped=int((~ok).sum()))


def _evaluate(s: SurveyData, tank, cfg) -> Evaluation:
    table = load_arc_table(cfg.evaluate.arc_table)
    ev = evaluate_survey(s, tank, cfg.evaluate, table, seed=cfg.seed)
    log.info("evaluate: %s, governed by %s; tilt %.1f mm (R^2 %.3f), Fourier K = %d", ev.verdict, ev.governing,
             ev.tilt.amplitude * 1e3, ev.tilt.r_squared, ev.fourier.order)
    if cfg.evaluate.decimate:
        if not s.dense:
            ev = dataclasses.replace(ev, warnings=ev.warnings + ("evaluate.decimate applies to dense profiles only; "
                                                                 "ignored",))
        else:
            ev = dataclasses.replace(ev, decimation=decimation_study(s, tank, cfg.evaluate, table,
                                                                                  seed=cfg.seed))
            d = ev.decimation
            if d.runs:
                mr = d.max_deflection_ratio
                log.info("decimation: %d %d-point surveys from the profile: max S/S_max min %.2f, median %.2f, max %.2f;"
                         " %s", len(d.runs), d.n_points, mr["min"], mr["median"], mr["max"],
                         ", ".join(f"{k} {v}" for k, v in d.verdicts.items() if v))
    return ev


def evaluate_run(res) -> Evaluation | None:
    """Evaluate a run's profile when the config carries tank data; None otherwise."""
    cfg = res.config
    if not has_tank_data(cfg.tank):
        log.info("evaluate: skipped (set tank.shell_height and tank.yield_strength to evaluate)")
        return None
    s = survey_from_run(res)
    tank = tank_data(cfg.tank, res.frame.units, fitted_diameter_m=2 * res.shell.radius)
    return _evaluate(s, tank, cfg)


def evaluate_file(path, out_dir, config_path=None, sets=()) -> Evaluation:
    """Evaluate a profile.csv or a survey CSV and publish the evaluation folder (refusing a folder of another kind,
    such as the run folder the profile came from)."""
    cfg, resolved, source = load_config(config_path, sets)
    path = Path(os.path.abspath(path))
    with OutputSlot(out_dir, guard=kind_guard(KIND_EVALUATION), inputs=[path]) as slot:
        t0 = time.perf_counter()
        s = read_survey(path, cfg.evaluate)
        tank = tank_data(cfg.tank, s.units)
        ev = _evaluate(s, tank, cfg)
        sha = sha256_file(path)
        files = evaluation_outputs(ev, s.units, resolved=resolved, config_source=source, input_path=path,
                                   input_sha256=sha)
        if cfg.output.pdf:
            files["report.pdf"] = pdf_bytes(files["report.html"])
        inputs = [FolderInput("profile" if s.dense else "survey", str(path), sha)]
        slot.publish(with_manifest(files, KIND_EVALUATION, inputs, config_hash(resolved),
                                   provenance_record("evaluate", {"total": time.perf_counter() - t0},
                                                     recovered=slot.recovered)))
    return ev
