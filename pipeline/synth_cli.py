"""Glue between the CLI and the simulator / demo (kept out of cli.py so it stays about arguments)."""
from __future__ import annotations

import dataclasses
import importlib.resources
import logging
from pathlib import Path

import numpy as np

from . import __version__
from .config import parse_set_pairs

log = logging.getLogger(__name__)


def _load(scene_file, sets, density, points, seed):
    from .synth import load_scene
    from .synth.scanner import Simulator

    pairs = parse_set_pairs(sets)
    if seed is not None:
        pairs.append(("seed", seed))
    if density is not None:
        pairs.append(("density", density))
    scene = load_scene(scene_file, pairs)
    if points is not None:
        # rays scale with density; hits per ray are nearly constant: calibrate on the ray count
        sim = Simulator(dataclasses.replace(scene, density=1.0))
        rays = sum(sim.ray_count(s) for s in sim.stations)
        scene = dataclasses.replace(scene, density=max(points / (0.9 * rays), 1e-4))
    return scene


def do_synth(scene_file, out_dir, sets, density, points, seed, no_plot, progress, name=None):
    from .synth import run_synth
    from .synth.scanner import Simulator

    scene = _load(scene_file, sets, density, points, seed)
    sim = Simulator(scene)
    total = sum(sim.ray_count(s) for s in sim.stations)
    done = [0]

    def cb(n):
        done[0] += n
        progress("synth", done[0], total)

    log.info("synth: %s, seed %d, about %.2f M rays", scene.name, scene.seed, total / 1e6)
    res = run_synth(scene, out_dir, name=name, progress=cb, software=f"chimeline {__version__}")
    progress.close()
    log.info("synth: wrote %s (%d points, %.1f s) and %s", res.scan_path, res.n_points, res.seconds, res.truth_path)
    if not no_plot:
        from .report.scanview import plot_scan
        from .units import to_metres

        f = to_metres(scene.output.units)
        png = res.scan_path.with_name(res.scan_path.stem + ".view.png")
        plot_scan(png, res.sample["xyz"] / f, np.array(scene.tank.center) / f, scene.tank.radius / f,
                  station=res.sample["station"], base_z=scene.tank.base_elevation / f,
                  title=f"{scene.tank.tag} synthetic scan, {res.n_points:,} points (local frame, offset removed)",
                  units=scene.output.units)
        log.info("synth: scan view %s", png)
    return res


def demo_scene_path() -> Path:
    return Path(str(importlib.resources.files("pipeline").joinpath("data/demo_tank.yaml")))


def do_demo(work_dir: Path, regenerate: bool, progress, echo):
    work_dir = Path(work_dir)
    scan = work_dir / "demo_tank.las"
    truth = work_dir / "demo_tank.truth.json"
    if regenerate or not (scan.exists() and truth.exists()):
        echo(f"Simulating the demo scan into {work_dir}/ (about 20 s) ...")
        do_synth(demo_scene_path(), work_dir, (), None, None, None, False, progress, name="demo_tank")
    else:
        echo(f"Using the existing demo scan {scan} (pass --regenerate to simulate it again).")
    echo(f"scan:  {scan}")
    echo(f"truth: {truth}")
    echo(f"view:  {work_dir / 'demo_tank.view.png'}")
    from .runner import run_demo

    return run_demo(scan, work_dir / "run", progress, echo)
