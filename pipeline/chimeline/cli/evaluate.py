"""chimeline evaluate: settlement evaluation of a profile.csv or a conventional survey."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from .common import Number, config_option, out_option, reported, set_option, set_pairs, warn

evaluate_wf = lazy_import("chimeline.workflows.evaluate")


@click.command()
@click.argument("input_csv", type=click.Path(path_type=Path))
@config_option("YAML config with the tank data (tank.*) and evaluate.* settings.")
@set_option("Override a config key, e.g. tank.yield_strength='36 ksi' (repeatable).")
@click.option("--decimate", type=Number(4, 360, integer=True), default=None,
              help="Also evaluate an N-point survey sampled from a dense profile (4-360).")
@out_option()
def evaluate(input_csv, config_path, sets, decimate, out_dir):
    """Evaluate shell settlement from a profile.csv or a conventional survey CSV.

    \b
    Inputs: profile.csv from 'chimeline run', or a survey with columns
      azimuth_deg,elevation[,label,std_error]  or  x,y,z[,label]  or  point,elevation
    Tank data come from the config: tank.diameter, tank.shell_height, tank.yield_strength
    (with units, e.g. '36 ksi'), tank.youngs_modulus, tank.roof. Writes evaluation.json,
    evaluation.csv and fe_out_of_plane.csv into OUT (an evaluation folder: a run
    folder is refused, write beside it, e.g. RUN-evaluation).
    """
    pairs = set_pairs(sets)
    if decimate is not None:
        pairs.append(("evaluate.decimate", decimate))
    with reported():
        ev = evaluate_wf.evaluate_file(input_csv, out_dir, config_path, pairs)
    click.echo(f"verdict: {ev.verdict}  (" + "; ".join(f"{c.name}: {c.verdict}" for c in ev.criteria) + ")")
    click.echo(f"tilt {ev.tilt.amplitude * 1e3:.1f} mm, R^2 = {ev.tilt.r_squared:.3f}, p = {ev.tilt.f_test.p_value:.3g}; "
               f"wrote {out_dir}/evaluation.json")
    for w in ev.warnings:
        warn(w)
