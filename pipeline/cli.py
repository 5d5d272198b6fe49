"""Command line: arguments, logging, exit codes. The only module that prints.

Exit codes: 0 success; 2 bad usage, bad input or any chimeline error (one line on stderr).
"""
from __future__ import annotations

import logging
import sys
from pathlib import Path

import click

from . import __version__
from .errors import PipelineError

log = logging.getLogger("chimeline")


class _Progress:
    """Progress callback: a tqdm bar on a terminal, nothing (INFO lines come from the runner) otherwise."""

    def __init__(self, quiet: bool):
        self.bar = None
        self.enabled = not quiet and sys.stderr.isatty()

    def __call__(self, stage: str, done: int, total: int | None):
        if not self.enabled:
            return
        from tqdm import tqdm

        if self.bar is None or self.bar.desc != stage:
            if self.bar is not None:
                self.bar.close()
            self.bar = tqdm(total=total, desc=stage, unit="pt", unit_scale=True, leave=False, file=sys.stderr)
        self.bar.n = done
        self.bar.refresh()

    def close(self):
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def _setup_logging(verbose: int, quiet: bool):
    level = logging.WARNING if quiet else (logging.DEBUG if verbose > 0 else logging.INFO)
    logging.basicConfig(level=level, format="%(levelname)s %(message)s", stream=sys.stderr, force=True)
    logging.getLogger("matplotlib").setLevel(logging.WARNING)
    logging.getLogger("PIL").setLevel(logging.WARNING)
    logging.getLogger("laspy").setLevel(logging.CRITICAL)  # its read errors reach the user as one InputError


def _set_pairs(sets):
    """--set KEY=VALUE pairs; malformed ones are usage errors (exit 2 with click's usage line)."""
    from .config import parse_set_pairs

    try:
        return parse_set_pairs(sets)
    except ValueError as exc:
        raise click.UsageError(str(exc))


def _fail(exc: PipelineError):
    click.echo(f"chimeline: error: {exc}", err=True)
    raise SystemExit(2)


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="chimeline")
@click.option("-v", "--verbose", count=True, help="More log detail.")
@click.option("-q", "--quiet", is_flag=True, help="Warnings and errors only; no progress bars.")
@click.pass_context
def cli(ctx, verbose, quiet):
    """Tank settlement from laser scans: junction profile, noise, and evaluation.

    \b
    Typical use:
      chimeline demo                         make a synthetic demo scan and process it
      chimeline synth SCENE.yaml --out DIR   simulate a scan with known truth
      chimeline run SCAN --out DIR           scan -> junction profile (+ evaluation)
      chimeline evaluate PROFILE.csv --out DIR   settlement evaluation of a profile or survey

    Results assist a qualified tank engineer or authorized inspector; they do
    not replace them. The governing edition of the standard, local codes and
    the owner's procedures prevail.
    """
    _setup_logging(verbose, quiet)
    ctx.obj = {"quiet": quiet}


@cli.command()
@click.argument("scene_file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="Folder for the scan file, its truth JSON and a scan view PNG.")
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help="Override a scene key, e.g. output.format=laz.")
@click.option("--density", type=float, default=None, help="Multiply the number of rays (overrides the scene's density).")
@click.option("--points", type=float, default=None, help="Aim for about this many points (sets the density).")
@click.option("--seed", type=int, default=None, help="Override the scene's seed.")
@click.option("--no-plot", is_flag=True, help="Skip the scan view PNG (large scans).")
@click.pass_context
def synth(ctx, scene_file, out_dir, sets, density, points, seed, no_plot):
    """Simulate a terrestrial laser scan of a tank scene with exact truth.

    Rays are cast from each scanner station against the scene's surfaces;
    writes SCAN (LAS/LAZ/PLY/XYZ/NPY per the scene's output.format) and
    SCAN.truth.json with the junction elevation every 0.1 degree.
    """
    from .synth_cli import do_synth

    try:
        do_synth(scene_file, out_dir, sets, density, points, seed, no_plot, _Progress(ctx.obj["quiet"]))
    except ValueError as exc:
        raise click.UsageError(str(exc))
    except PipelineError as exc:
        _fail(exc)


@cli.command()
@click.option("--dir", "work_dir", default=Path("chimeline-demo"), show_default=True,
              type=click.Path(file_okay=False, path_type=Path), help="Working folder (kept if it exists).")
@click.option("--regenerate", is_flag=True, help="Simulate the demo scan again even if it exists.")
@click.pass_context
def demo(ctx, work_dir, regenerate):
    """Make the embedded synthetic demo scan (if missing) and run every stage on it."""
    from .synth_cli import do_demo

    try:
        do_demo(work_dir, regenerate, _Progress(ctx.obj["quiet"]), click.echo)
    except PipelineError as exc:
        _fail(exc)


@cli.command()
@click.argument("scan", type=click.Path(path_type=Path))
@click.option("--config", "config_path", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="YAML config (default: the embedded one, copy in configs/default.yaml).")
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE",
              help="Override a config key, e.g. profile.bin_width_deg=0.5 (repeatable).")
@click.option("--out", "out_dir", required=True, type=click.Path(path_type=Path), help="Output folder.")
@click.pass_context
def run(ctx, scan, config_path, sets, out_dir):
    """Turn a registered scan into a junction profile with uncertainty and noise.

    Reads LAS/LAZ, PLY/PCD, E57, ASCII (.xyz .txt .pts .csv) or .npy. Writes
    profile.csv, profile.json, config.resolved.yaml and quicklook.png into OUT;
    with tank data in the config (shell_height, yield_strength) it also
    evaluates the settlement. A failed run writes nothing.
    """
    from .runner import run_scan

    pairs = _set_pairs(sets)
    progress = _Progress(ctx.obj["quiet"])
    try:
        res = run_scan(scan, out_dir, config_path, pairs, progress)
    except PipelineError as exc:
        progress.close()
        _fail(exc)
    progress.close()
    n = res.noise
    click.echo(f"wrote {out_dir}/profile.csv ({len(res.profile.azimuth_deg)} bins, {100 * res.profile.coverage:.1f} % ok); "
               f"noise sigma {n.sigma * 1e3:.2f} mm [{n.ci[0] * 1e3:.2f}, {n.ci[1] * 1e3:.2f}]")
    for w in res.warnings:
        click.echo(f"warning: {w}", err=True)


@cli.command()
@click.argument("input_csv", type=click.Path(path_type=Path))
@click.option("--config", "config_path", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="YAML config with the tank data (tank.*) and evaluate.* settings.")
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE",
              help="Override a config key, e.g. tank.yield_strength='36 ksi' (repeatable).")
@click.option("--decimate", type=int, default=None, help="Also evaluate an N-point survey sampled from a dense profile.")
@click.option("--out", "out_dir", required=True, type=click.Path(path_type=Path), help="Output folder.")
@click.pass_context
def evaluate(ctx, input_csv, config_path, sets, decimate, out_dir):
    """Evaluate shell settlement from a profile.csv or a conventional survey CSV.

    \b
    Inputs: profile.csv from 'chimeline run', or a survey with columns
      azimuth_deg,elevation[,label,std_error]  or  x,y,z[,label]  or  point,elevation
    Tank data come from the config: tank.diameter, tank.shell_height, tank.yield_strength
    (with units, e.g. '36 ksi'), tank.youngs_modulus, tank.roof. Writes evaluation.json,
    evaluation.csv and fe_out_of_plane.csv into OUT.
    """
    from .evaluate.runner import evaluate_file

    pairs = _set_pairs(sets)
    if decimate is not None:
        pairs.append(("evaluate.decimate", decimate))
    try:
        ev = evaluate_file(input_csv, out_dir, config_path, pairs)
    except PipelineError as exc:
        _fail(exc)
    click.echo(f"verdict: {ev.verdict}  (" + "; ".join(f"{c.name}: {c.verdict}" for c in ev.criteria) + ")")
    click.echo(f"tilt {ev.tilt.amplitude * 1e3:.1f} mm, R^2 = {ev.tilt.r_squared:.3f}, p = {ev.tilt.f_test.p_value:.3g}; "
               f"wrote {out_dir}/evaluation.json")
    for w in ev.warnings:
        click.echo(f"warning: {w}", err=True)


@cli.command()
@click.argument("run_dirs", nargs=-1, required=True, type=click.Path(path_type=Path))
@click.option("--out", "out_dir", required=True, type=click.Path(path_type=Path), help="Output folder.")
@click.option("--alpha", type=float, default=0.05, show_default=True, help="Significance level of the tests.")
def compare(run_dirs, out_dir, alpha):
    """QA: compare runs by noise (per run and station) and by profile.

    The first RUN_DIR is the reference. Writes compare.json, compare.csv and compare.html.
    """
    from .compare import compare_runs, write_compare

    try:
        result = compare_runs(run_dirs, alpha)
        write_compare(result, out_dir)
    except PipelineError as exc:
        _fail(exc)
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


@cli.command()
@click.argument("run_dir", type=click.Path(file_okay=False, path_type=Path))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help="Override a key of the earlier run's config.")
@click.option("--out", "out_dir", required=True, type=click.Path(path_type=Path), help="New output folder.")
@click.pass_context
def rerun(ctx, run_dir, sets, out_dir):
    """Run again with the earlier run's input and resolved config, plus --set changes; show what changed."""
    from .rerun import rerun as do_rerun

    pairs = _set_pairs(sets)
    progress = _Progress(ctx.obj["quiet"])
    try:
        changed, headline = do_rerun(run_dir, out_dir, pairs, progress)
    except PipelineError as exc:
        progress.close()
        _fail(exc)
    progress.close()
    click.echo("changed config keys:" if changed else "changed config keys: none")
    for k, a, b in changed:
        click.echo(f"  {k}: {a!r} -> {b!r}")
    click.echo("headline results (earlier -> now):")
    for k, a, b in headline:
        click.echo(f"  {k}: {a} -> {b}")
    click.echo(f"wrote {out_dir}")


def main(argv=None):
    """Console entry point."""
    cli.main(args=argv, prog_name="chimeline")


if __name__ == "__main__":  # pragma: no cover
    main()
