"""chimeline demo: simulate the embedded demo scan (once) and run every stage on it."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from .common import Progress, reported, result_tail

synth_wf = lazy_import("chimeline.workflows.synth")


@click.command()
@click.option("--dir", "work_dir", default=Path("chimeline-demo"), show_default=True,
              type=click.Path(file_okay=False, path_type=Path), help="Working folder (kept if it exists).")
@click.option("--regenerate", is_flag=True, help="Simulate the demo scan again even if it exists.")
@click.pass_context
def demo(ctx, work_dir, regenerate):
    """Make the embedded synthetic demo scan (if missing) and run every stage on it."""
    progress = Progress(ctx.obj["quiet"])
    scan, truth = synth_wf.demo_paths(work_dir)
    if synth_wf.demo_needs_scan(work_dir, regenerate):
        click.echo(f"Simulating the demo scan into {work_dir}/ (about 20 s) ...")
    else:
        click.echo(f"Using the existing demo scan {scan} (pass --regenerate to simulate it again).")
    with reported(progress):
        d = synth_wf.run_demo(work_dir, regenerate, progress)
    out = d.run_dir
    click.echo(f"scan:  {d.scan}")
    click.echo(f"truth: {d.truth}")
    click.echo(f"view:  {d.view}")
    click.echo(f"profile: {out / 'profile.csv'}")
    click.echo(f"summary: {out / 'profile.json'}")
    if (out / "evaluation.json").exists():
        click.echo(f"evaluation: {out / 'evaluation.json'}")
    if (out / "report.html").exists():
        click.echo(f"report:  {out / 'report.html'}")
    click.echo(f"plot:    {out / 'quicklook.png'}")
    res = d.run
    n = res.noise
    click.echo(f"noise sigma {n.sigma * 1e3:.2f} mm (95 % CI {n.ci[0] * 1e3:.2f}-{n.ci[1] * 1e3:.2f}), "
               f"coverage {100 * res.profile.coverage:.1f} %, shell radius at the base {res.shell.radius:.4f} m")
    result_tail(res)
