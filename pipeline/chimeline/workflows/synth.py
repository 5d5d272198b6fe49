"""The simulator and the demo as workflows: scene loading, the scan view, and the demo run."""
from __future__ import annotations

import dataclasses
import importlib.resources
import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..config import parse_set_pairs
from ..errors import ConfigError, OutputError, clip_repr
from ..io.atomic import check_writable, write_files
from ..report.scanview import plot_scan
from ..synth import SynthResult, load_scene, run_synth
from ..synth.scanner import Simulator
from ..units import to_metres
from ..version import __version__
from .run import RunResult, run_scan

log = logging.getLogger(__name__)

#: most points ``--points`` may ask for (a 1e9-point LAS file is about 30 GB)
MAX_POINTS = 1e9


def load_synth_scene(scene_file, sets=(), density=None, points=None, seed=None):
    pairs = parse_set_pairs(sets)
    if seed is not None:
        pairs.append(("seed", seed))
    if density is not None:
        pairs.append(("density", density))
    scene = load_scene(scene_file, pairs)
    if points is not None:
        if isinstance(points, bool) or not isinstance(points, (int, float)) or not 1e3 <= points <= MAX_POINTS:
            raise ConfigError(f"--points must be a number of points in [1000, {MAX_POINTS:.0e}], got {clip_repr(points)}")
        # rays scale with density; hits per ray are nearly constant: calibrate on the ray count
        sim = Simulator(dataclasses.replace(scene, density=1.0))
        rays = sum(sim.ray_count(s) for s in sim.stations)
        density = points / (0.9 * rays)
        md = type(scene).__dataclass_fields__["density"].metadata
        if not md["min"] <= density <= md["max"]:
            raise ConfigError(f"--points {points:.3g} needs a ray density of {density:.3g} for this scene, outside "
                              f"[{md['min']}, {md['max']}]; ask for fewer or more points")
        scene = dataclasses.replace(scene, density=density)
    return scene


def synthesize(scene_file, out_dir, sets=(), density=None, points=None, seed=None, no_plot=False, progress=None,
               name=None) -> SynthResult:
    """Simulate a scene into ``out_dir`` (scan, truth JSON and, unless ``no_plot``, a scan view PNG)."""
    progress = progress or (lambda *a: None)
    scene = load_synth_scene(scene_file, sets, density, points, seed)
    check_writable(out_dir)
    try:
        Path(out_dir).mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{out_dir}: output folder cannot be created: {exc.strerror or exc}") from None
    sim = Simulator(scene)
    total = sum(sim.ray_count(s) for s in sim.stations)
    done = [0]

    def cb(n):
        done[0] += n
        progress("synth", done[0], total)

    log.info("synth: %s, seed %d, about %.2f M rays", scene.name, scene.seed, total / 1e6)
    try:
        res = run_synth(scene, out_dir, name=name, progress=cb, software=f"chimeline {__version__}")
    except OSError as exc:  # disk full, a read-only folder: the partial scan was removed by the writer
        raise OutputError(f"{out_dir}: cannot write the simulated scan: {exc.strerror or exc}") from None
    log.info("synth: wrote %s (%d points, %.1f s) and %s", res.scan_path, res.n_points, res.seconds, res.truth_path)
    if not no_plot:
        f = to_metres(scene.output.units)
        png = res.scan_path.with_name(res.scan_path.stem + ".view.png")
        view = plot_scan(res.sample["xyz"] / f, np.array(scene.tank.center) / f, scene.tank.radius / f,
                         station=res.sample["station"], base_z=scene.tank.base_elevation / f,
                         title=f"{scene.tank.tag} synthetic scan, {res.n_points:,} points (local frame, offset removed)",
                         units=scene.output.units)
        write_files(png.parent, {png.name: view})
        log.info("synth: scan view %s", png)
    return res


def _packaged(name: str) -> Path:
    return Path(str(importlib.resources.files("chimeline").joinpath(f"data/{name}")))


def demo_scene_path() -> Path:
    return _packaged("demo_tank.yaml")


@dataclass(frozen=True)
class DemoResult:
    scan: Path
    truth: Path
    view: Path
    run_dir: Path
    simulated: bool  # the scan was simulated by this call (else reused)
    run: RunResult


def demo_paths(work_dir) -> tuple[Path, Path]:
    work_dir = Path(work_dir)
    return work_dir / "demo_tank.las", work_dir / "demo_tank.truth.json"


def demo_needs_scan(work_dir, regenerate: bool) -> bool:
    scan, truth = demo_paths(work_dir)
    return regenerate or not (scan.exists() and truth.exists())


def run_demo(work_dir, regenerate: bool = False, progress=None) -> DemoResult:
    """Simulate the embedded demo scan (if missing) and run every stage on it with the demo config."""
    work_dir = Path(work_dir)
    scan, truth = demo_paths(work_dir)
    simulated = demo_needs_scan(work_dir, regenerate)
    if simulated:
        synthesize(demo_scene_path(), work_dir, progress=progress, name="demo_tank")
    res = run_scan(scan, work_dir / "run", config_path=_packaged("demo_config.yaml"), progress=progress)
    return DemoResult(scan=scan, truth=truth, view=work_dir / "demo_tank.view.png", run_dir=work_dir / "run",
                      simulated=simulated, run=res)
