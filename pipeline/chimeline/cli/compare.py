"""chimeline compare: QA comparison of runs by noise and profile."""
from __future__ import annotations

from pathlib import Path

import click

from ..core.lazy import lazy_import
from ..notices import CAUTION
from ..report.console import p_text
from .common import Number, out_option, reported

compare_wf = lazy_import("chimeline.workflows.compare")


@click.command()
@click.argument("run_dirs", nargs=-1, required=True, type=click.Path(path_type=Path))
@out_option()
@click.option("--alpha", type=Number(1e-6, 0.5), default=0.05, show_default=True,
              help="Significance level of the tests (1e-6 to 0.5).")
@click.option("--margin", type=Number(1e-3, 10.0), default=0.1, show_default=True,
              help="Equivalence margin: noise levels within this share of each other 'do not differ'.")
def compare(run_dirs, out_dir, alpha, margin):
    """QA: compare scanner setups (or survey dates) by noise and by profile.

    \b
    The first RUN_DIR is the reference. Setup names come from input.setup in each run's config
    (else the survey date or the folder name). Writes into OUT:
      compare.html                the comparison in words, tables and figures
      compare.json, compare.csv   the statistics (lengths in metres, full precision)
    """
    with reported():
        result = compare_wf.compare_runs(run_dirs, alpha, margin)
        compare_wf.write_compare(result, out_dir)
    for r in result["runs"]:
        click.echo(f"{r['name']} ({r['dir']}): sigma {r['sigma'] * 1e3:.3f} mm [{r['ci'][0] * 1e3:.3f}, "
                   f"{r['ci'][1] * 1e3:.3f}]")
    for p in result["pairs"]:
        click.echo(p["noise"]["in_words"])
        pd = p["profile"]
        if "mean_difference" in pd:
            click.echo(f"  profile difference {pd['mean_difference'] * 1e3:+.2f} +- {pd['mean_difference_se'] * 1e3:.2f} mm "
                       f"over {pd['n_common']} bins, consistency {p_text(pd['consistency_p'])}")
    click.echo(f"wrote {out_dir}/compare.html, compare.json, compare.csv")
    click.echo(f"Caution: {CAUTION}")
