"""What every command shares: logging set-up, the progress display, --config/--set/--out options, and the
single error funnel (one line on stderr, exit code 2)."""
from __future__ import annotations

import logging
import sys
from contextlib import contextmanager
from pathlib import Path

import click

from ..config import parse_set_pairs
from ..errors import ChimelineError

EXIT_ERROR = 2  # bad usage, bad input or any chimeline error; click's usage errors use the same code


class Progress:
    """One progress display for a whole run: a bar over the stages on a terminal (points while streaming), closed
    before anything else is printed; nothing otherwise (the workflows log one INFO line per stage)."""

    STAGES = ("read", "shell", "stream", "junction", "profile", "noise", "evaluate", "report")

    def __init__(self, quiet: bool):
        self.bar = None
        self.enabled = not quiet and sys.stderr.isatty()
        self._other = None

    def __call__(self, stage: str, done: int | None = None, total: int | None = None):
        if not self.enabled:
            return
        from tqdm import tqdm

        if stage in self.STAGES:
            if self.bar is None:
                self.bar = tqdm(total=len(self.STAGES), desc=stage, unit="stage", leave=False, file=sys.stderr,
                                bar_format="{desc:<10} {bar} {n_fmt}/{total_fmt} stages {postfix}")
            self.bar.n = self.STAGES.index(stage)
            self.bar.set_description_str(stage, refresh=False)
            self.bar.set_postfix_str(f"{done / 1e6:.1f} of {total / 1e6:.1f} M points" if done and total else "",
                                     refresh=False)
            self.bar.refresh()
            return
        if self._other is None or self._other.desc != stage:  # e.g. the simulator's rays
            if self._other is not None:
                self._other.close()
            self._other = tqdm(total=total, desc=stage, unit="pt", unit_scale=True, leave=False, file=sys.stderr)
        self._other.n = done or 0
        self._other.refresh()

    def close(self):
        for bar in (self.bar, self._other):
            if bar is not None:
                bar.close()
        self.bar = self._other = None


def setup_logging(verbose: int, quiet: bool):
    level = logging.WARNING if quiet else (logging.DEBUG if verbose > 0 else logging.INFO)
    logging.basicConfig(level=level, format="%(levelname)s %(message)s", stream=sys.stderr, force=True)
    logging.getLogger("matplotlib").setLevel(logging.WARNING)
    logging.getLogger("PIL").setLevel(logging.WARNING)
    logging.getLogger("laspy").setLevel(logging.CRITICAL)  # its read errors reach the user as one InputError


def set_pairs(sets):
    """--set KEY=VALUE pairs; malformed ones are usage errors (exit 2 with click's usage line)."""
    try:
        return parse_set_pairs(sets)
    except ValueError as exc:
        raise click.UsageError(str(exc))


def fail(exc: ChimelineError):
    """The error funnel: one line on stderr and exit code 2."""
    click.echo(f"chimeline: error: {exc}", err=True)
    raise SystemExit(EXIT_ERROR)


@contextmanager
def reported(progress: Progress | None = None):
    """Run a workflow; a ChimelineError becomes one stderr line and exit code 2 (progress cleared first).
    While a progress bar is on the terminal, log lines are written through it so they do not tear it."""
    redirect = None
    if progress is not None and progress.enabled:
        from tqdm.contrib.logging import logging_redirect_tqdm

        redirect = logging_redirect_tqdm()
        redirect.__enter__()
    try:
        yield
    except ChimelineError as exc:
        if progress is not None:
            progress.close()
        fail(exc)
    finally:
        if progress is not None:
            progress.close()
        if redirect is not None:
            redirect.__exit__(None, None, None)


def config_option(help_text="YAML config (default: the embedded one, copy in configs/default.yaml)."):
    return click.option("--config", "config_path", type=click.Path(dir_okay=False, path_type=Path), default=None,
                        help=help_text)


def set_option(help_text="Override a config key, e.g. profile.bin_width_deg=0.5 (repeatable)."):
    return click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=help_text)


def out_option(help_text="Output folder."):
    return click.option("--out", "out_dir", required=True, type=click.Path(path_type=Path), help=help_text)
