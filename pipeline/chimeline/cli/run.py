"""chimeline run: scan -> junction profile (+ evaluation with tank data)."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from .common import Progress, config_option, out_option, reported, set_option, set_pairs, warn

run_wf = lazy_import("chimeline.workflows.run")


@click.command()
@click.argument("scan", type=click.Path(path_type=Path))
@config_option()
@set_option()
@out_option()
@click.pass_context
def run(ctx, scan, config_path, sets, out_dir):
    """Turn a registered scan into a junction profile with uncertainty and noise.

    Reads LAS/LAZ, PLY/PCD, E57, ASCII (.xyz .txt .pts .csv) or .npy. Writes
    profile.csv, profile.json, config.resolved.yaml and quicklook.png into OUT;
    with tank data in the config (shell_height, yield_strength) it also
    evaluates the settlement. The folder is replaced as a whole when the run
    succeeds; a failed or killed run leaves the earlier one as it was.
    """
    pairs = set_pairs(sets)
    progress = Progress(ctx.obj["quiet"])
    with reported(progress):
        res = run_wf.run_scan(scan, out_dir, config_path, pairs, progress)
    n = res.noise
    click.echo(f"wrote {out_dir}/profile.csv ({len(res.profile.azimuth_deg)} bins, {100 * res.profile.coverage:.1f} % ok); "
               f"noise sigma {n.sigma * 1e3:.2f} mm [{n.ci[0] * 1e3:.2f}, {n.ci[1] * 1e3:.2f}]")
    for w in res.warnings:
        warn(w)
