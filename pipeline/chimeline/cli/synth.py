"""chimeline synth: simulate a scan with known truth."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from .common import Number, OutFolder, Progress, reported, set_pairs

synth_wf = lazy_import("chimeline.workflows.synth")


@click.command()
@click.argument("scene_file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--out", "out_dir", required=True, type=OutFolder(replaced=False),
              help="Folder for the scan file, its truth JSON and a scan view PNG.")
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help="Override a scene key, e.g. output.format=laz.")
@click.option("--density", type=Number(1e-4, 1000), default=None,
              help="Multiply the number of rays (overrides the scene's density; 1e-4 to 1000).")
@click.option("--points", type=Number(1e3, 1e9), default=None, help="Aim for about this many points (1e3 to 1e9).")
@click.option("--seed", type=click.IntRange(0, 2**63 - 1), default=None, help="Override the scene's seed.")
@click.option("--no-plot", is_flag=True, help="Skip the scan view PNG (large scans).")
@click.pass_context
def synth(ctx, scene_file, out_dir, sets, density, points, seed, no_plot):
    """Simulate a terrestrial laser scan of a tank scene with exact truth.

    Rays are cast from each scanner station against the scene's surfaces;
    writes SCAN (LAS/LAZ/PLY/XYZ/NPY per the scene's output.format) and
    SCAN.truth.json with the junction elevation every 0.1 degree.
    """
    set_pairs(sets)  # malformed pairs are usage errors
    progress = Progress(ctx.obj["quiet"])
    with reported(progress):
        synth_wf.synthesize(scene_file, out_dir, sets, density, points, seed, no_plot, progress)
