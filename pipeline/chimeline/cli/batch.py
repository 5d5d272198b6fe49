"""chimeline batch: a terminal's fleet in one command, on this machine or a Dask cluster."""
from __future__ import annotations

import sys
from pathlib import Path

import click

from ..core.lazy import lazy_import
from ..notices import CAUTION
from ..report.console import month_text
from .common import OutFolder, Progress, reported

batch_wf = lazy_import("chimeline.workflows.batch")


def _job_line(oc, n, total) -> str:
    text = f"[{n}/{total}] {oc.tag} {oc.survey_date}: {oc.status}"
    if oc.status == "failed":
        text += f": {oc.error}"
    elif oc.status == "skipped":
        text += " (same input and config as the folder's)"
    elif oc.seconds:
        text += f" ({oc.seconds:.1f} s)"
    return text


@click.command()
@click.argument("manifest", type=click.Path(path_type=Path))
@click.option("--out", "out_dir", required=True, type=OutFolder(replaced=False),
              help="Batch folder (kept; its files are replaced one by one): one <tag>/<survey_date>/ folder per job, "
                   "fleet.csv, fleet.json, index.html and <tag>/history.json, history.csv.")
@click.option("--workers", type=click.IntRange(1, 1024), default=None,
              help="Worker processes of the local Dask cluster (default: one per core).")
@click.option("--memory-limit", default="auto", show_default=True,
              help="Memory limit of each local worker, e.g. 3GiB; auto shares the machine's memory among them.")
@click.option("--scheduler", default=None, metavar="tcp://HOST:8786",
              help="Run on an existing Dask cluster instead (its workers must see the scans, the configs and OUT).")
@click.option("--retries", type=click.IntRange(0, 100), default=0, show_default=True,
              help="Dask retries of a job whose task failed for another reason than its input (a worker died).")
@click.option("--force", is_flag=True, help="Redo jobs whose folder already holds the result of the same input and "
                                            "config (they are skipped otherwise).")
@click.pass_context
def batch(ctx, manifest, out_dir, workers, memory_limit, scheduler, retries, force):
    """Run every job of a manifest (CSV or YAML) as Dask tasks and summarise the fleet.

    \b
    Manifest: one job per row: scan, tag, survey_date [, config, set, kind]
    (kind run for a scan, evaluate for a survey CSV or profile.csv; paths
    relative to the manifest). Writes into OUT:
      <tag>/<survey_date>/         each job's folder, as run or evaluate writes it
      fleet.csv, fleet.json        one row per job: status, verdict, ratios, tilt, noise, error
      index.html                   sortable table, site plan, settlement histories
      <tag>/history.json, .csv     changes and rates between consecutive surveys
    Exit code: 0 all jobs done or skipped, 3 some jobs failed (their rows say
    why), 2 bad manifest or options (nothing run).
    """
    quiet = ctx.obj["quiet"]
    bar = None
    if not quiet and sys.stderr.isatty():
        from tqdm import tqdm

        bar = tqdm(total=0, unit="job", desc="batch", file=sys.stderr, leave=False)
        Progress.showing = True  # log lines are written above the bar

    def on_job(oc, n, total):
        if bar is not None:
            bar.total = total
            bar.update(1)
            bar.write(_job_line(oc, n, total), file=sys.stdout)
        elif not quiet:
            click.echo(_job_line(oc, n, total))

    try:
        with reported():
            res = batch_wf.run_batch(manifest, out_dir, workers=workers, memory_limit=memory_limit,
                                     scheduler=scheduler, retries=retries, force=force, on_job=on_job)
    finally:
        if bar is not None:
            bar.close()
            Progress.showing = False
    counts = {s: sum(o.status == s for o in res.outcomes) for s in ("done", "skipped", "failed")}
    click.echo(f"batch: {len(res.outcomes)} jobs on {res.engine} in {res.seconds:.1f} s: {counts['done']} done, "
               f"{counts['skipped']} skipped, {counts['failed']} failed")
    for h in res.histories:
        ex = next((iv.extrapolation for iv in h.intervals if iv.extrapolation is not None), None)
        text = f"history {h.tag}: {len(h.surveys)} surveys"
        if ex is not None and ex.status == "extrapolated":
            text += (f"; {ex.check} ratio would reach 1 around {month_text(ex.date)} at the current rate (linear "
                     f"extrapolation, 95 % interval {month_text(ex.date_ci95[0])} to {month_text(ex.date_ci95[1])}"
                     + ("; ILLUSTRATIVE arc table: demonstration only" if h.surveys[-1].illustrative
                        and "B.3.2.2" in ex.check else "") + ")")
        elif ex is not None:
            text += f"; governing ratio trend: {ex.status}"
        click.echo(text)
    click.echo(f"wrote {res.out_dir}/index.html, fleet.csv, fleet.json")
    click.echo(f"Caution: {CAUTION}")
    ctx.exit(res.exit_code)
