"""chimeline run: scan -> junction profile (+ evaluation with tank data)."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from .common import Progress, config_option, out_option, reported, set_option, set_pairs

run_wf = lazy_import("chimeline.workflows.run")


@click.command()
@click.argument("scan", nargs=-1, required=True, type=click.Path(path_type=Path))
@config_option()
@set_option()
@out_option()
@click.pass_context
def run(ctx, scan, config_path, sets, out_dir):
    """Turn a registered scan into a junction profile with uncertainty and noise.

    Reads LAS/LAZ/COPC, E57, PTX, PLY, PCD, ASCII (.xyz .txt .pts .csv .asc) or
    .npy. Several files (tiles, or one file per station), a folder or a quoted
    glob pattern make one scan. Writes
    profile.csv, profile.json, config.resolved.yaml and quicklook.png into OUT;
    with tank data in the config (shell_height, yield_strength) it also
    evaluates the settlement. A failed run writes nothing.
    """
    pairs = set_pairs(sets)
    progress = Progress(ctx.obj["quiet"])
    with reported(progress):
        res = run_wf.run_scan(list(scan), out_dir, config_path, pairs, progress)
    n = res.noise
    click.echo(f"wrote {out_dir}/profile.csv ({len(res.profile.azimuth_deg)} bins, {100 * res.profile.coverage:.1f} % ok); "
               f"noise sigma {n.sigma * 1e3:.2f} mm [{n.ci[0] * 1e3:.2f}, {n.ci[1] * 1e3:.2f}]")
    for w in res.warnings:
        click.echo(f"warning: {w}", err=True)
