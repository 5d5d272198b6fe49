"""Runs the stages in order; owns the random generator, the timings and the output folder.

read -> frame -> shell (subsample) -> stream ring -> junction -> profile -> noise -> [evaluate] -> report.
Memory does not grow with the scan: the shell is found on a spread sample, then
every chunk is cut down to the thin ring around the shell base before the next
chunk is read.
"""
from __future__ import annotations

import hashlib
import logging
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Optional

import numpy as np
from .config import PipelineConfig, load_config
from .errors import InputError, StageError
from .io.atomic import staging_dir
from .io.readers import open_scan
from .model import Frame, Junction, NoiseEstimate, Profile, ShellFit
from .stages.frame import make_frame
from .stages.junction import extract_junction
from .stages.noise import estimate_noise
from .stages.profile import attach_uncertainty, bin_junction
from .stages.shell import fit_shell, refine_base

log = logging.getLogger(__name__)

CAUTION = ("Results assist a qualified tank engineer or authorized inspector; they do not replace them and are not "
           "a fitness-for-service determination. The governing edition of the standard, local regulations and the "
           "owner's procedures prevail. Verify inputs (units, material, shell height) before acting; when in doubt, "
           "do a rigorous analysis or repair.")


@dataclass
class RunResult:
    """Everything a run measured; ``report/`` renders it."""

    scan_path: Path
    config: PipelineConfig
    resolved: dict
    config_source: str
    frame: Frame
    shell: ShellFit
    junction: Junction
    profile: Profile
    noise: NoiseEstimate
    counts: dict
    timings: dict
    warnings: list
    input_sha256: str
    n_points_read: int
    plot_sample: np.ndarray  # (m, 3) local m, a spread subsample of the scan
    ring_sample: np.ndarray  # (k, 3) local m, ring points for plots
    shell_sample: np.ndarray  # (s, 3) local m, points near the shell face at all heights
    evaluation: object = None
    out_dir: Optional[Path] = None

    @property
    def out_units(self) -> str:
        u = self.config.output.length_unit
        return self.frame.units if u == "input" else u


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(8 << 20), b""):
            h.update(block)
    return h.hexdigest()


def process_scan(scan, cfg: PipelineConfig, resolved: dict, source: str,
                 progress: Optional[Callable] = None) -> RunResult:
    """Run every stage on ``scan``; no files are written."""
    progress = progress or (lambda *a: None)
    timings, warnings, counts = {}, [], {}
    scan = Path(scan)
    t = time.perf_counter()
    src = open_scan(scan)
    rng = np.random.default_rng(cfg.seed)
    sample = src.sample(cfg.shell.sample_points, rng)
    fin = np.isfinite(sample.xyz).all(axis=1)
    timings["read_sample"] = time.perf_counter() - t
    log.info("read: %s, %d points, sample of %d", scan.name, src.n_points, len(sample.xyz))

    t = time.perf_counter()
    if fin.sum() == 0:
        raise InputError(f"{scan}: no point has finite coordinates")
    frame = make_frame(sample.xyz, src.units_hint, cfg.input, cfg.frame, warnings)
    local = frame.to_local(sample.xyz[fin])
    _check_extent(scan, local, frame, cfg)
    hint = None
    if cfg.tank.center_hint is not None:
        h = np.asarray(cfg.tank.center_hint, dtype=float)
        hint = (h - frame.origin[:2]) * frame.metres_per_unit if frame.up_axis == "z" else \
            np.array([(h[0] - frame.origin[0]), -(h[1] - frame.origin[2])]) * frame.metres_per_unit
    timings["frame"] = time.perf_counter() - t

    t = time.perf_counter()
    shell = fit_shell(local, cfg.shell, rng, center_hint=hint, metres_per_unit=frame.metres_per_unit)
    timings["shell"] = time.perf_counter() - t

    t = time.perf_counter()
    jc = cfg.junction
    ring, ring_st, plot_parts = [], [], []
    stride = max(1, src.n_points // 150_000)
    n_read = n_bad = 0
    zlo, zhi = shell.z_min - jc.band_below, shell.z_min + jc.band_above
    # the band in file units along the file's up axis (cut before any other work on a chunk)
    up = 2 if frame.up_axis == "z" else 1
    band_file = (zlo / frame.metres_per_unit + frame.origin[up], zhi / frame.metres_per_unit + frame.origin[up])
    # the shell face itself is most of the ring and only its position is needed: keep a bounded share of it
    face, p_face = _face_model(local, shell, frame, jc, zlo, zhi, src.n_points, len(local), cfg.junction.face_budget)
    keep_rng = np.random.default_rng([cfg.seed, 17])
    for n, band, strided, bad in src.stream(cfg.input.chunk_size, up, band_file, stride):
        n_read += n
        n_bad += bad
        ok = np.isfinite(band.xyz).all(axis=1)
        p = frame.to_local(band.xyz[ok] if not ok.all() else band.xyz)
        sid = band.source_id[ok] if band.source_id is not None else np.zeros(len(p), np.int64)
        _, rho, dx, dy = shell.radial(p)
        d = rho - shell.radius
        keep = (d > -0.15) & (d < jc.band_outside) & (p[:, 2] > zlo) & (p[:, 2] < zhi)
        if p_face < 1.0 and keep.any():
            dl = d - face(frame.azimuth_deg(dx, dy))
            on_face = dl < face.tol  # the face and whatever lies inside it: only its position is used
            keep &= ~on_face | (keep_rng.random(len(p)) < p_face)
        ring.append(p[keep])
        ring_st.append(sid[keep])
        sp = strided.xyz[np.isfinite(strided.xyz).all(axis=1)]
        plot_parts.append(frame.to_local(sp))
        progress("stream", n_read, src.n_points)
    counts["face_keep_fraction"] = round(p_face, 6)
    if n_read and n_bad / n_read > cfg.input.max_nonfinite_fraction:
        raise InputError(f"{scan}: {n_bad} of {n_read} points have NaN or infinite coordinates "
                         f"(more than input.max_nonfinite_fraction = {cfg.input.max_nonfinite_fraction})")
    if n_bad:
        warnings.append(f"{n_bad} points with NaN or infinite coordinates were dropped")
    ring_pts = np.concatenate(ring) if ring else np.zeros((0, 3))
    ring_sid = np.concatenate(ring_st) if ring_st else np.zeros(0, np.int64)
    timings["stream"] = time.perf_counter() - t
    log.info("stream: %d points read, %d kept in the base ring", n_read, len(ring_pts))

    t = time.perf_counter()
    first = extract_junction(ring_pts, ring_sid, shell, frame, jc)
    shell = refine_base(shell, ring_pts, first.base_z, cfg.shell)
    junction = extract_junction(ring_pts, ring_sid, shell, frame, jc)
    timings["junction"] = time.perf_counter() - t

    t = time.perf_counter()
    profile = bin_junction(junction, cfg.profile, shell.radius)
    timings["profile"] = time.perf_counter() - t
    if profile.coverage < cfg.profile.min_coverage:
        msg = (f"only {100 * profile.coverage:.1f} % of the circumference has ok bins, below profile.min_coverage = "
               f"{cfg.profile.min_coverage}")
        if cfg.profile.on_low_coverage == "refuse":
            raise StageError(f"profile: {msg} (set profile.on_low_coverage: flag to keep the profile)")
        warnings.append(msg)
        log.warning("profile: %s", msg)
    for g0, g1 in profile.gaps:
        warnings.append(f"no junction data from {g0:.1f} to {g1:.1f} deg (gap left empty)")

    t = time.perf_counter()
    noise = estimate_noise(profile, junction, cfg.noise, cfg.profile.reject_k)
    profile = attach_uncertainty(profile, junction, noise)
    timings["noise"] = time.perf_counter() - t
    if not noise.agree:
        warnings.append(f"noise estimators disagree: within-bin {noise.within_bin.sigma * 1e3:.2f} mm, pairs "
                        f"{noise.pairs.sigma * 1e3:.2f} mm (F test p = {noise.agreement_p:.2g})")
    if shell.others:
        warnings.append(f"{len(shell.others)} other cylinder(s) in view; chose the {shell.selection}")

    counts.update(n_points_read=n_read, nonfinite_dropped=n_bad, sample=int(len(sample.xyz)),
                  shell_candidates=shell.n_candidates, shell_inliers=shell.n_inliers, ring=int(len(ring_pts)),
                  junction_candidates=junction.n_candidates, junction_gated=junction.n_gated,
                  profile_kept=int(profile.kept.sum()), profile_rejected=int((~profile.kept).sum()))
    rs = ring_pts[np.random.default_rng(cfg.seed + 1).permutation(len(ring_pts))[:200_000]] if len(ring_pts) else ring_pts
    plot_sample = np.concatenate(plot_parts) if plot_parts else np.zeros((0, 3))
    if len(plot_sample):
        _, rho_s, _, _ = shell.radial(plot_sample)
        shell_sample = plot_sample[np.abs(rho_s - shell.radius) < 0.1]
    else:
        shell_sample = plot_sample
    return RunResult(scan_path=scan, config=cfg, resolved=resolved, config_source=source, frame=frame, shell=shell,
                     junction=junction, profile=profile, noise=noise, counts=counts, timings=timings,
                     warnings=warnings, input_sha256="", n_points_read=n_read,
                     plot_sample=plot_sample, ring_sample=rs, shell_sample=shell_sample)


def run_scan(scan, out_dir, config_path=None, sets=(), progress=None) -> RunResult:
    """Resolve the config, process the scan, evaluate when the config has tank data, write every output."""
    cfg, resolved, source = load_config(config_path, sets)
    out_dir = Path(out_dir)
    _check_out_dir(out_dir)
    t0 = time.perf_counter()
    res = process_scan(scan, cfg, resolved, source, progress)
    t = time.perf_counter()
    res.input_sha256 = _sha256(Path(scan))
    res.timings["hash"] = time.perf_counter() - t
    try:
        from .evaluate.runner import evaluate_run
    except ImportError:  # evaluation stage not present
        evaluate_run = None
    if evaluate_run is not None:
        res.evaluation = evaluate_run(res)
    res.timings["total"] = time.perf_counter() - t0
    from .report.outputs import write_run_outputs

    with staging_dir(out_dir) as stage:
        write_run_outputs(res, stage)
    res.out_dir = out_dir
    return res


class _Face:
    """Shell face radial offset per azimuth (from the sample), for thinning the face while streaming."""

    def __init__(self, per_sector, sec_w, tol):
        self.f, self.sec_w, self.tol = per_sector, sec_w, tol

    def __call__(self, az):
        n = len(self.f)
        c = (np.arange(n) + 0.5) * self.sec_w
        return np.interp(az, np.concatenate([c - 360, c, c + 360]), np.tile(self.f, 3))


def _face_model(local, shell, frame, jc, zlo, zhi, n_total, n_sample, budget):
    """(face model, keep probability) so that about ``budget`` shell-face points are kept from the whole scan."""
    from .stages.junction import _fill_circular, _local_face, sector_slices

    _, rho, dx, dy = shell.radial(local)
    m = (local[:, 2] > zlo) & (local[:, 2] < zhi) & (np.abs(rho - shell.radius) < 0.15)
    if m.sum() < 200:
        return None, 1.0
    az = frame.azimuth_deg(dx[m], dy[m])
    slices, sec_w = sector_slices(az, jc.sector_deg)
    d0 = rho[m] - shell.radius
    d, scale = _local_face(d0, local[m, 2], az, slices, sec_w)
    per_sector = np.array([np.median((d0 - d)[s]) if len(s) else np.nan for s in slices])
    per_sector = _fill_circular(per_sector)
    # the face band is kept generously (+-3 sigma of the face, at least 3 mm): plate points lie outside it
    tol = max(3.0 * scale, 0.003)
    expected = (d < tol).sum() * n_total / max(n_sample, 1)
    p = min(1.0, budget / max(expected, 1.0))
    return _Face(per_sector, sec_w, tol), p


def _check_extent(scan, local, frame, cfg):
    """Refuse a scan whose size is absurd for the declared unit, and say which unit would fit."""
    from .units import LENGTH_FACTORS

    span = float(np.max(np.ptp(local[:, :2], axis=0)))
    lo, hi = 2 * cfg.shell.min_radius, 20 * cfg.shell.max_radius
    if lo <= span <= hi:
        return
    span_file = span / frame.metres_per_unit
    fits = [u for u, f in LENGTH_FACTORS.items() if lo <= span_file * f <= hi and u in ("m", "mm", "ft", "us_ft")
            and abs(f - frame.metres_per_unit) > 1e-12]
    hint = f"; if the scan is in {' or '.join(fits)}, set input.units" if fits else ""
    raise InputError(f"{scan}: the scan spans {span:.4g} m in plan with input.units = {frame.units!r}, absurd for a "
                     f"tank site{hint}")


def _check_out_dir(out_dir: Path):
    from .errors import OutputError

    p = out_dir
    while not p.exists():
        p = p.parent
    if not p.is_dir():
        raise OutputError(f"{out_dir}: output path is inside a file ({p})")
    import os

    if not os.access(p, os.W_OK | os.X_OK):
        raise OutputError(f"{out_dir}: output folder is not writable ({p})")


def run_demo(scan, out_dir, progress, echo):
    import importlib.resources

    cfg = Path(str(importlib.resources.files("pipeline").joinpath("data/demo_config.yaml")))
    res = run_scan(scan, out_dir, config_path=cfg, progress=progress)
    echo(f"profile: {out_dir / 'profile.csv'}")
    echo(f"summary: {out_dir / 'profile.json'}")
    if (out_dir / "report.html").exists():
        echo(f"report:  {out_dir / 'report.html'}")
    echo(f"plot:    {out_dir / 'quicklook.png'}")
    n = res.noise
    echo(f"noise sigma {n.sigma * 1e3:.2f} mm (95 % CI {n.ci[0] * 1e3:.2f}-{n.ci[1] * 1e3:.2f}), "
         f"coverage {100 * res.profile.coverage:.1f} %, shell radius {res.shell.radius:.4f} m")
    if res.evaluation is not None:
        ev = res.evaluation
        echo(f"verdict: {ev.verdict} (" + "; ".join(f"{c.name}: {c.verdict}" for c in ev.criteria) + ")")
    echo("Results assist a qualified tank engineer or authorized inspector; they do not replace them.")
    return res
