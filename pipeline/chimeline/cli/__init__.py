"""Command line: arguments, logging, exit codes; the only place that prints.

Exit codes: 0 success; 2 bad usage, bad input or any chimeline error; 1 a bug; 130 interrupted; 3 a batch that
ran but some of its jobs failed. A failing command prints exactly one line on stderr at default verbosity
(``cli.common.ChimelineGroup``). Workflows are imported lazily, so ``chimeline --help`` costs only click.
"""
from __future__ import annotations

import click

from ..notices import CAUTION
from ..version import __version__
from .batch import batch
from .common import ChimelineGroup, native_output_to_log, setup_logging
from .compare import compare
from .demo import demo
from .evaluate import evaluate
from .rerun import rerun
from .run import run
from .synth import synth


@click.group(cls=ChimelineGroup, context_settings={"help_option_names": ["-h", "--help"]}, help=f"""Tank settlement from laser scans:
junction profile, noise, and evaluation.

\b
Typical use:
  chimeline demo                         make a synthetic demo scan and process it
  chimeline synth SCENE.yaml --out DIR   simulate a scan with known truth
  chimeline run SCAN --out DIR           scan -> junction profile (+ evaluation)
  chimeline evaluate PROFILE.csv --out DIR   settlement evaluation of a profile or survey
  chimeline compare RUN_A RUN_B --out DIR    QA: noise and profile of two runs
  chimeline rerun RUN --set KEY=VALUE --out DIR   run again with changes
  chimeline batch MANIFEST --out DIR     a fleet of scans on a Dask cluster

Exit codes: 0 success, 2 bad usage or input (one line on stderr), 1 a bug; batch: 3 when some jobs failed.

Caution: {CAUTION}
""")
@click.version_option(__version__, prog_name="chimeline")
@click.option("-v", "--verbose", count=True, help="More log detail.")
@click.option("-q", "--quiet", is_flag=True, help="Warnings and errors only; no progress bars.")
@click.pass_context
def cli(ctx, verbose, quiet):
    setup_logging(verbose, quiet)
    if not verbose:  # C libraries' own output goes to the log, shown with -v (restored when the command ends)
        ctx.with_resource(native_output_to_log())
    ctx.obj = {"quiet": quiet}


for _command in (demo, synth, run, evaluate, compare, rerun, batch):
    cli.add_command(_command)


def main(argv=None):
    """Console entry point."""
    cli.main(args=argv, prog_name="chimeline")
