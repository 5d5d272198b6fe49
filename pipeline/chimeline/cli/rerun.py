"""chimeline rerun: the earlier run's input and config with changes, and what changed."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from .common import OutFolder, Progress, reported, set_pairs, warn

rerun_wf = lazy_import("chimeline.workflows.rerun")


@click.command()
@click.argument("run_dir", type=click.Path(file_okay=False, path_type=Path))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help="Override a key of the earlier run's config.")
@click.option("--out", "out_dir", required=True, type=OutFolder(), help="New output folder (not RUN_DIR).")
@click.option("--scan", "scan", multiple=True, type=click.Path(dir_okay=False, path_type=Path),
              help="The earlier scan at a new place (its SHA-256 must match the earlier run's input); repeat it for "
                   "a scan of several files.")
@click.option("--allow-different-input", is_flag=True, help="Accept a --scan whose SHA-256 differs.")
@click.pass_context
def rerun(ctx, run_dir, sets, out_dir, scan, allow_different_input):
    """Run again with the earlier run's input and resolved config, plus --set changes; show what changed.

    The scan is found by the absolute path and SHA-256 in RUN_DIR/manifest.json, or given with --scan.
    """
    pairs = set_pairs(sets)
    progress = Progress(ctx.obj["quiet"])
    with reported(progress):
        changed, headline, notes = rerun_wf.rerun(run_dir, out_dir, pairs, progress, scan=list(scan) or None,
                                                  allow_different_input=allow_different_input)
    for note in notes:
        warn(note)
    click.echo("changed config keys:" if changed else "changed config keys: none")
    for k, a, b in changed:
        click.echo(f"  {k}: {a!r} -> {b!r}")
    click.echo("headline results (earlier -> now):")
    for k, a, b in headline:
        click.echo(f"  {k}: {a} -> {b}")
    click.echo(f"wrote {out_dir}")
