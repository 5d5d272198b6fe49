"""What every command shares: the console (log records, progress, warnings), checked option types, the
--config/--set/--out options, and the single error funnel.

The funnel (``ChimelineGroup.main``): whatever goes wrong, a command ends with exactly one line on stderr at
default verbosity, printed after any progress display was cleared:

- a ChimelineError (bad input, config or output) or a click usage error: ``chimeline: error: ...``, exit 2;
- Ctrl-C: ``chimeline: error: interrupted``, exit 130;
- anything else is a bug: ``chimeline: internal error: ...``, exit 1 (the traceback with -v).

Console: at default verbosity, chimeline's INFO lines (one per stage) go to stdout, above the progress bar while
one is on the terminal, its warnings are held and printed at the end of a successful command, and library output (Python
warnings from numpy or matplotlib, other libraries' log records, text that C libraries such as open3d write
straight to the process's stdout or stderr) is captured into the log and shown with -v only. With -v every
record goes to stderr as it happens.
"""
from __future__ import annotations

import io
import logging
import math
import os
import sys
from contextlib import contextmanager
from pathlib import Path

import click

from ..config import parse_set_pairs
from ..core.native import captured_native_output
from ..errors import ChimelineError, OutputError, clip_repr, one_line
from ..io.atomic import check_target
from ..notices import CAUTION
from ..report.console import verdict_lines

EXIT_ERROR = 2  # bad usage, bad input or any chimeline error; click's usage errors use the same code
EXIT_BUG = 1  # an unexpected exception: a bug to report
EXIT_INTERRUPTED = 130

log = logging.getLogger("chimeline.cli")


# ---------------------------------------------------------------------------
# the console


class ConsoleLog(logging.Handler):
    """Routes log records by verbosity (see the module docstring); holds warnings until the command ends."""

    def __init__(self, verbose: int, quiet: bool):
        super().__init__(logging.DEBUG)
        self.verbose, self.quiet = verbose, quiet
        self.held: list[str] = []
        self.shown: list[str] = []  # warnings the command printed itself

    def emit(self, record):
        try:
            msg = record.getMessage()
        except Exception:  # a library's malformed record must not break the command
            msg = str(record.msg)
        ours = record.name == "chimeline" or record.name.startswith("chimeline.")
        if self.verbose:
            who = "" if ours else f"[{record.name}] "
            _line(f"{record.levelname} {who}{msg}", sys.stderr)
            if record.exc_info and record.levelno <= logging.DEBUG:
                _line(self.format(record).split("\n", 1)[-1], sys.stderr)
            return
        if not ours:
            return
        if record.levelno >= logging.WARNING:
            self.held.append(msg)
        elif record.levelno >= logging.INFO and not self.quiet:
            _line(msg, sys.stdout)

    def flush_held(self):
        """Print held warnings (success); skip those the command already printed."""
        for msg in self.held:
            if not any(msg.endswith(s) for s in self.shown):
                click.echo(f"warning: {msg}", err=True)
        self.held.clear()


_CONSOLE: ConsoleLog | None = None


def _line(text: str, stream) -> None:
    """One line; above the progress bar while one is on the terminal (so the bar is not torn)."""
    if Progress.showing:
        from tqdm import tqdm

        tqdm.write(text, file=stream)
    else:
        stream.write(text + "\n")


def _is_tty(stream) -> bool:
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


def setup_logging(verbose: int, quiet: bool) -> ConsoleLog:
    """Install the console handler on the root logger (replacing any earlier one) and capture Python warnings."""
    global _CONSOLE
    root = logging.getLogger()
    for h in list(root.handlers):
        root.removeHandler(h)
    _CONSOLE = ConsoleLog(verbose, quiet)
    _CONSOLE.setFormatter(logging.Formatter("%(message)s"))
    root.addHandler(_CONSOLE)
    root.setLevel(logging.DEBUG if verbose else logging.INFO)
    for noisy in ("matplotlib", "PIL", "laspy"):  # their DEBUG chatter is no use even with -v
        logging.getLogger(noisy).setLevel(logging.INFO if verbose > 1 else logging.WARNING)
    logging.captureWarnings(True)
    return _CONSOLE


def result_tail(res) -> None:
    """The end of a run's console summary: the verdict in three lines (with tank data), the run's and the
    evaluation's warnings, the caution."""
    if res.evaluation is not None:
        for line in verdict_lines(res.evaluation, res.out_units):
            click.echo(line)
    for w in dict.fromkeys(list(res.warnings) + list(res.evaluation.warnings if res.evaluation else [])):
        warn(w)
    click.echo(f"Caution: {CAUTION}")


def warn(text: str) -> None:
    """A warning line of a successful command (stderr)."""
    click.echo(f"warning: {text}", err=True)
    if _CONSOLE is not None:
        _CONSOLE.shown.append(text)


@contextmanager
def native_output_to_log():
    """Send what C libraries write straight to file descriptors 1 and 2 into the log (DEBUG, shown with -v).

    Python's own stdout and stderr are re-opened on the original descriptors, so chimeline's lines still reach
    the terminal. Under an in-process test runner (no real descriptors) nothing is redirected.
    """
    try:
        real = sys.stdout.fileno() == 1 and sys.stderr.fileno() == 2
    except (AttributeError, ValueError, io.UnsupportedOperation):
        real = False
    if not real:
        yield
        return
    old = sys.stdout, sys.stderr
    sys.stdout.flush()
    sys.stderr.flush()
    sys.stdout = open(os.dup(1), "w", encoding=old[0].encoding, errors="replace", buffering=1)
    sys.stderr = open(os.dup(2), "w", encoding=old[1].encoding, errors="backslashreplace", buffering=1)
    text = []
    try:
        with captured_native_output() as text:
            yield
    finally:
        sys.stdout.close()
        sys.stderr.close()
        sys.stdout, sys.stderr = old
        for line in "".join(text).splitlines():
            if line.strip():
                log.debug("library output: %s", line.rstrip())


class Progress:
    """One progress display for a whole run: a bar over the stages on a terminal (points while streaming), closed
    before anything else is printed; nothing otherwise (the workflows log one INFO line per stage)."""

    STAGES = ("read", "shell", "stream", "junction", "profile", "noise", "evaluate", "report")
    showing = False  # a bar is on the terminal (the console writes its lines above it)

    def __init__(self, quiet: bool):
        self.bar = None
        self.enabled = not quiet and _is_tty(sys.stderr)
        self._other = None

    def __call__(self, stage: str, done: int | None = None, total: int | None = None):
        if not self.enabled:
            return
        from tqdm import tqdm

        if stage in self.STAGES:
            if self.bar is None:
                self.bar = tqdm(total=len(self.STAGES), desc=stage, unit="stage", leave=False, file=sys.stderr,
                                bar_format="{desc:<10} {bar} {n_fmt}/{total_fmt} stages {postfix}")
            Progress.showing = True
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
            Progress.showing = True
        self._other.n = done or 0
        self._other.refresh()

    def close(self):
        for bar in (self.bar, self._other):
            if bar is not None:
                bar.close()
        self.bar = self._other = None
        Progress.showing = False


@contextmanager
def reported(progress: Progress | None = None):
    """Run a workflow with the progress display; it is cleared whatever happens (errors go to the funnel)."""
    try:
        yield
    finally:
        if progress is not None:
            progress.close()


# ---------------------------------------------------------------------------
# the error funnel


class ChimelineGroup(click.Group):
    """click group whose ``main`` is the single error funnel (see the module docstring)."""

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        if not standalone_mode:
            return super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        try:
            rv = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        except click.exceptions.NoArgsIsHelpError as exc:
            exc.show()
            sys.exit(EXIT_ERROR)
        except click.ClickException as exc:
            hint = ""
            ctx = getattr(exc, "ctx", None)
            if isinstance(exc, click.UsageError) and ctx is not None:
                hint = f" (see '{ctx.command_path} --help')"
            self._fail(f"chimeline: error: {one_line(exc.format_message())}{hint}", exc.exit_code)
        except click.Abort:
            self._fail("chimeline: error: interrupted", EXIT_INTERRUPTED)
        except ChimelineError as exc:
            self._fail(f"chimeline: error: {one_line(exc)}", EXIT_ERROR)
        except MemoryError:
            self._fail("chimeline: error: out of memory; try a smaller input.chunk_size or shell.sample_points",
                       EXIT_BUG)
        except Exception as exc:
            log.debug("internal error", exc_info=True)
            self._fail(f"chimeline: internal error: {type(exc).__name__}: {one_line(exc, 300)} (a bug: please report "
                       f"it; -v shows the traceback)", EXIT_BUG)
        if _CONSOLE is not None:
            _CONSOLE.flush_held()
        sys.exit(rv if isinstance(rv, int) else 0)

    @staticmethod
    def _fail(line: str, code: int):
        if _CONSOLE is not None:
            _CONSOLE.held.clear()  # shown with -v only: the error is the one line
        click.echo(line, err=True)
        sys.exit(code)


# ---------------------------------------------------------------------------
# option types and shared options


class Number(click.ParamType):
    """A finite number in [lo, hi] (click's FloatRange lets nan through); ``integer`` for whole numbers."""

    name = "number"

    def __init__(self, lo: float, hi: float, integer: bool = False):
        self.lo, self.hi, self.integer = lo, hi, integer

    def convert(self, value, param, ctx):
        try:
            x = float(value)
        except (TypeError, ValueError, OverflowError):
            self.fail(f"{clip_repr(value)} is not a number", param, ctx)
        if not math.isfinite(x) or not self.lo <= x <= self.hi:
            self.fail(f"{clip_repr(value)} is not in [{self.lo:g}, {self.hi:g}]", param, ctx)
        if self.integer:
            if x != int(x):
                self.fail(f"{clip_repr(value)} is not a whole number", param, ctx)
            return int(x)
        return x


class OutFolder(click.ParamType):
    """--out: not empty, names the file system allows; with ``replaced`` (a folder swapped in as a whole) also
    not the current folder, one containing it, or the root."""

    name = "folder"

    def __init__(self, replaced: bool = True):
        self.replaced = replaced

    def convert(self, value, param, ctx):
        try:
            check_target(value, replaced=self.replaced)
        except OutputError as exc:
            self.fail(str(exc), param, ctx)
        return Path(value)


def set_pairs(sets):
    """--set KEY=VALUE pairs; malformed ones are usage errors (exit 2, one line)."""
    try:
        return parse_set_pairs(sets)
    except ValueError as exc:
        raise click.UsageError(str(exc))


def config_option(help_text="YAML config (default: the embedded one, copy in configs/default.yaml)."):
    return click.option("--config", "config_path", type=click.Path(dir_okay=False, path_type=Path), default=None,
                        help=help_text)


def set_option(help_text="Override a config key, e.g. profile.bin_width_deg=0.5 (repeatable)."):
    return click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=help_text)


def out_option(help_text="Output folder (replaced as a whole when the command succeeds)."):
    return click.option("--out", "out_dir", required=True, type=OutFolder(), help=help_text)
