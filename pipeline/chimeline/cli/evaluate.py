"""chimeline evaluate: settlement evaluation of a profile.csv or a conventional survey."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from ..notices import CAUTION
from ..report.console import verdict_lines
from .common import Number, config_option, out_option, reported, set_option, set_pairs, warn

evaluate_wf = lazy_import("chimeline.workflows.evaluate")


@click.command()
@click.argument("input_csv", type=click.Path(path_type=Path))
@config_option("YAML config with the tank data (tank.*) and evaluate.* settings.")
@set_option("Override a config key, e.g. tank.yield_strength='36 ksi' (repeatable).")
@click.option("--decimate", type=Number(4, 360, integer=True), default=None,
              help="Also evaluate an N-point survey sampled from a dense profile (4-360).")
@out_option()
@click.option("--pdf", is_flag=True, help="Also print report.html to report.pdf (needs Chromium).")
def evaluate(input_csv, config_path, sets, decimate, out_dir, pdf):
    """Settlement evaluation of a profile.csv or a conventional survey CSV.

    \b
    Inputs: profile.csv from 'chimeline run', or a survey with columns
      azimuth_deg,elevation[,label,std_error]  or  x,y,z[,label]  or  point,elevation
    (a unit suffix such as elevation_ft gives the length unit).
    Tank data come from the config: tank.diameter, tank.shell_height, tank.yield_strength
    (with units, e.g. '36 ksi'), tank.youngs_modulus, tank.roof; the permissible
    settled-arc table from evaluate.arc_table. Writes into OUT:
      evaluation.json, evaluation.csv   the checks, verdicts and per-point values
      fe_out_of_plane.csv               out-of-plane settlement for an FE model
      report.html, plots/*.png          the report; report.pdf with --pdf
      config.resolved.yaml              the exact config
    OUT is an evaluation folder: a run folder is refused (write beside it, e.g.
    RUN-evaluation).
    """
    pairs = set_pairs(sets)
    if pdf:
        pairs.append(("output.pdf", True))
    if decimate is not None:
        pairs.append(("evaluate.decimate", decimate))
    with reported():
        ev = evaluate_wf.evaluate_file(input_csv, out_dir, config_path, pairs)
    for line in verdict_lines(ev, ev.survey.units):
        click.echo(line)
    click.echo(f"wrote {out_dir}/evaluation.json, evaluation.csv, fe_out_of_plane.csv, report.html and plots/")
    for w in ev.warnings:
        warn(w)
    click.echo(f"Caution: {CAUTION}")
