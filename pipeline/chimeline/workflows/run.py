"""The scan-to-profile run: stage order, the random generator, streaming, timings and the output folder.

read -> frame -> shell (subsample) -> stream ring (junction hook) -> junction -> profile -> noise (standard
errors) -> [evaluate] -> report. Memory does not grow with the scan: the shell is found on a spread sample,
then every chunk is cut down to the thin ring around the shell base before the next chunk is read.
"""
from __future__ import annotations

import dataclasses
import logging
import math
import os
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Optional

import numpy as np

from ..config import ChimelineConfig, ProfileConfig, config_hash, load_config
from ..core.hashing import sha256_file
from ..core.rng import Purpose, stream
from ..errors import ConfigError, InputError, StageError
from ..evaluate.results import Evaluation
from ..io.atomic import OutputSlot, checkpoint
from ..io.readers import open_scan
from ..io.runfiles import KIND_RUN, FolderInput, kind_guard, provenance_record, with_manifest
from ..report.run_files import run_outputs
from ..stages.frame import Frame, check_extent, make_frame
from ..stages.junction import Junction, RingFilter, extract_junction
from ..stages.noise import NoiseEstimate, attach_uncertainty, estimate_noise
from ..stages.profile import Profile, bin_junction
from ..stages.shell import ShellFit, fit_shell, refine_base
from .evaluate import evaluate_run

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class RunResult:
    """Everything a run measured; ``report/`` renders it."""

    scan_path: Path
    config: ChimelineConfig
    resolved: dict
    config_source: str
    frame: Frame
    shell: ShellFit
    junction: Junction
    profile: Profile
    noise: NoiseEstimate
    counts: dict
    timings: dict  # stage -> s
    warnings: tuple  # str
    input_sha256: str
    n_points_read: int
    plot_sample: np.ndarray  # (m, 3) local m, a spread subsample of the scan
    ring_sample: np.ndarray  # (k, 3) local m, ring points for plots
    shell_sample: np.ndarray  # (s, 3) local m, points near the shell face at all heights
    evaluation: Optional[Evaluation] = None

    @property
    def out_units(self) -> str:
        u = self.config.output.length_unit
        return self.frame.units if u == "input" else u


def process_scan(scan, cfg: ChimelineConfig, resolved: dict, source: str,
                 progress: Optional[Callable] = None) -> RunResult:
    """Run every stage on ``scan``; no files are written, no evaluation is made."""
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
    check_extent(scan, local, frame, cfg.shell.min_radius, cfg.shell.max_radius)
    hint = frame.file_xy_to_local(cfg.tank.center_hint) if cfg.tank.center_hint is not None else None
    timings["frame"] = time.perf_counter() - t

    t = time.perf_counter()
    shell = fit_shell(local, cfg.shell, rng, center_hint=hint, metres_per_unit=frame.metres_per_unit)
    timings["shell"] = time.perf_counter() - t

    t = time.perf_counter()
    ring_filter = RingFilter(local, shell, frame, cfg.junction, src.n_points, cfg.seed)
    ring, ring_st, plot_parts = [], [], []
    stride = max(1, src.n_points // 150_000)
    n_read = n_bad = 0
    up = 2 if frame.up_axis == "z" else 1
    for n, band, strided, bad in src.stream(cfg.input.chunk_size, up, ring_filter.up_band_file(), stride):
        n_read += n
        n_bad += bad
        ok = np.isfinite(band.xyz).all(axis=1)
        p = frame.to_local(band.xyz[ok] if not ok.all() else band.xyz)
        sid = band.source_id[ok] if band.source_id is not None else np.zeros(len(p), np.int64)
        kp, ks = ring_filter(p, sid)
        ring.append(kp)
        ring_st.append(ks)
        sp = strided.xyz[np.isfinite(strided.xyz).all(axis=1)]
        plot_parts.append(frame.to_local(sp))
        progress("stream", n_read, src.n_points)
        checkpoint("stream")
    counts["face_keep_fraction"] = round(ring_filter.face_keep_fraction, 6)
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
    first = extract_junction(ring_pts, ring_sid, shell, frame, cfg.junction)
    shell = refine_base(shell, ring_pts, first.base_z, cfg.shell)
    junction = extract_junction(ring_pts, ring_sid, shell, frame, cfg.junction)
    timings["junction"] = time.perf_counter() - t

    _check_bin_arc(cfg.profile, shell.radius)
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
    if len(ring_pts):
        rs = ring_pts[stream(cfg.seed, Purpose.PLOT_SAMPLE).permutation(len(ring_pts))[:200_000]]
    else:
        rs = ring_pts
    plot_sample = np.concatenate(plot_parts) if plot_parts else np.zeros((0, 3))
    if len(plot_sample):
        _, rho_s, _, _ = shell.radial(plot_sample)
        shell_sample = plot_sample[np.abs(rho_s - shell.radius) < 0.1]
    else:
        shell_sample = plot_sample
    return RunResult(scan_path=scan, config=cfg, resolved=resolved, config_source=source, frame=frame, shell=shell,
                     junction=junction, profile=profile, noise=noise, counts=counts, timings=timings,
                     warnings=tuple(warnings), input_sha256="", n_points_read=n_read,
                     plot_sample=plot_sample, ring_sample=rs, shell_sample=shell_sample)


def _check_bin_arc(pc: ProfileConfig, radius: float) -> None:
    """profile.bin_arc_length gives bins of arc / radius; they must lie in bin_width_deg's range on this shell."""
    if pc.bin_arc_length is None:
        return
    md = ProfileConfig.__dataclass_fields__["bin_width_deg"].metadata
    width = math.degrees(pc.bin_arc_length / radius)
    if not md["min"] <= width <= md["max"]:
        raise ConfigError(f"'profile.bin_arc_length' = {pc.bin_arc_length:g} m gives bins of {width:.3g} deg on this "
                          f"shell (radius {radius:.3f} m); choose an arc giving {md['min']}-{md['max']} deg")


def run_scan(scan, out_dir, config_path=None, sets=(), progress=None, *, base_mapping: dict | None = None,
             base_source: str = "", input_sha256: str | None = None, extra_inputs=()) -> RunResult:
    """Resolve the config, process the scan, evaluate when the config has tank data, publish the run folder.

    ``base_mapping`` (a resolved config read back from a run folder) stands in for ``config_path``. The folder is
    locked before any work and swapped in as a whole at the end (``io.atomic.OutputSlot``): a failure leaves the
    earlier folder as it was. ``input_sha256`` skips hashing a scan the caller has hashed.
    """
    cfg, resolved, source = load_config(config_path, sets, mapping=base_mapping, mapping_source=base_source)
    scan = Path(os.path.abspath(scan))
    with OutputSlot(out_dir, guard=kind_guard(KIND_RUN), inputs=[scan]) as slot:
        t0 = time.perf_counter()
        res = process_scan(scan, cfg, resolved, source, progress)
        timings = dict(res.timings)
        t = time.perf_counter()
        sha = input_sha256 or sha256_file(scan)
        timings["hash"] = time.perf_counter() - t
        t = time.perf_counter()
        ev = evaluate_run(res)
        if ev is not None:
            timings["evaluate"] = time.perf_counter() - t
        res = dataclasses.replace(res, input_sha256=sha, evaluation=ev, timings=timings)
        files = run_outputs(res)
        timings["total"] = time.perf_counter() - t0
        inputs = [FolderInput("scan", str(scan), sha), *extra_inputs]
        slot.publish(with_manifest(files, KIND_RUN, inputs, config_hash(resolved),
                                   provenance_record("run", timings, recovered=slot.recovered)))
    return res
