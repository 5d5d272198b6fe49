"""chimeline rerun: the earlier run's input and config with changes, and what changed."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from .common import Progress, reported, set_pairs

rerun_wf = lazy_import("chimeline.workflows.rerun")


@click.command()
@click.argument("run_dir", type=click.Path(file_okay=False, path_type=Path))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help="Override a key of the earlier run's config.")
@click.option("--out", "out_dir", required=True, type=click.Path(path_type=Path), help="New output folder.")
@click.pass_context
def rerun(ctx, run_dir, sets, out_dir):
    """Run again with the earlier run's input and resolved config, plus --set changes; show what changed."""
    pairs = set_pairs(sets)
    progress = Progress(ctx.obj["quiet"])
    with reported(progress):
        changed, headline = rerun_wf.rerun(run_dir, out_dir, pairs, progress)
    click.echo("changed config keys:" if changed else "changed config keys: none")
    for k, a, b in changed:
        click.echo(f"  {k}: {a!r} -> {b!r}")
    click.echo("headline results (earlier -> now):")
    for k, a, b in headline:
        click.echo(f"  {k}: {a} -> {b}")
    click.echo(f"wrote {out_dir}")
