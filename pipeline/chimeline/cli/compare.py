"""chimeline compare: QA comparison of runs by noise and profile."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from .common import Number, out_option, reported

compare_wf = lazy_import("chimeline.workflows.compare")


@click.command()
@click.argument("run_dirs", nargs=-1, required=True, type=click.Path(path_type=Path))
@out_option()
@click.option("--alpha", type=Number(1e-6, 0.5), default=0.05, show_default=True,
              help="Significance level of the tests (1e-6 to 0.5).")
def compare(run_dirs, out_dir, alpha):
    """QA: compare runs by noise (per run and station) and by profile.

    The first RUN_DIR is the reference. Writes compare.json, compare.csv and compare.html.
    """
    with reported():
        result = compare_wf.compare_runs(run_dirs, alpha)
        compare_wf.write_compare(result, out_dir)
    for r in result["runs"]:
        click.echo(f"{r['dir']}: sigma {r['sigma'] * 1e3:.3f} mm [{r['ci'][0] * 1e3:.3f}, {r['ci'][1] * 1e3:.3f}]")
    for p in result["pairs"]:
        n = p["noise"]
        click.echo(f"{p['run']} / reference: sigma ratio {n['sigma_ratio']:.3f} [{n['ratio_ci95'][0]:.3f}, "
                   f"{n['ratio_ci95'][1]:.3f}], F test p = {n['p_value']:.3g}: noise "
                   f"{'differs' if n['noise_differs'] else 'does not differ'} at alpha = {alpha}")
        pd = p["profile"]
        if "mean_difference" in pd:
            click.echo(f"  profile difference {pd['mean_difference'] * 1e3:+.2f} +- {pd['mean_difference_se'] * 1e3:.2f} mm "
                       f"over {pd['n_common']} bins, consistency p = {pd['consistency_p']:.3g}")
    click.echo(f"wrote {out_dir}/compare.html")
