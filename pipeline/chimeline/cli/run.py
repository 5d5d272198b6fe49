"""chimeline run: scan -> junction profile (+ evaluation with tank data)."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from .common import Progress, config_option, out_option, reported, result_tail, set_option, set_pairs

run_wf = lazy_import("chimeline.workflows.run")


@click.command()
@click.argument("scan", nargs=-1, required=True, type=click.Path(path_type=Path))
@config_option()
@set_option()
@out_option()
@click.option("--pdf", is_flag=True, help="Also print report.html to report.pdf (needs Chromium).")
@click.pass_context
def run(ctx, scan, config_path, sets, out_dir, pdf):
    """Scan -> junction profile with uncertainty and noise (+ evaluation).

    \b
    Reads LAS/LAZ/COPC, E57, PTX, PLY, PCD, ASCII (.xyz .txt .pts .csv .asc) or .npy.
    Several files (tiles, or one file per station), a folder or a quoted glob
    pattern make one scan. Writes into OUT:
      profile.csv, profile.json     the profile per azimuth bin, and the run's summary
      residuals.csv                 kept junction points' residuals (for compare)
      config.resolved.yaml          the exact config (rerun with --config)
      report.html, plots/*.png      the report and its figures; quicklook.png
      report.pdf                    with --pdf (headless Chromium)
      plumbness.csv, roundness.csv, shell_deviation.csv   the shell geometry
    With tank data in the config (tank.shell_height, tank.yield_strength) it also
    evaluates the settlement: evaluation.json, evaluation.csv, fe_out_of_plane.csv.
    OUT is replaced as a whole when the run succeeds; a failed or killed run
    leaves the earlier one as it was.
    """
    pairs = set_pairs(sets)
    if pdf:
        pairs.append(("output.pdf", True))
    progress = Progress(ctx.obj["quiet"])
    with reported(progress):
        res = run_wf.run_scan(list(scan), out_dir, config_path, pairs, progress)
    n = res.noise
    click.echo(f"wrote {out_dir}/profile.csv ({len(res.profile.azimuth_deg)} bins, {100 * res.profile.coverage:.1f} % ok); "
               f"noise sigma {n.sigma * 1e3:.2f} mm [{n.ci[0] * 1e3:.2f}, {n.ci[1] * 1e3:.2f}]")
    result_tail(res)
