"""The scan-to-profile run: stage order, the random generator, streaming, timings and the output folder.

read -> frame -> shell (subsample) -> stream ring (junction hook) -> junction -> profile -> noise (standard
errors) -> [evaluate] -> report. Memory does not grow with the scan: the shell is found on a spread sample,
then every chunk is cut down to the thin ring around the shell base before the next chunk is read.
"""
from __future__ import annotations

import dataclasses
import logging
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Optional

import numpy as np

from ..config import ChimelineConfig, load_config
from ..core.hashing import sha256_file
from ..core.rng import Purpose, stream
from ..errors import InputError, StageError
from ..evaluate.results import Evaluation
from ..io.atomic import check_writable, staging_dir, write_files
from ..io.readers import open_scan
from ..report.run_files import run_outputs
from ..stages.frame import Frame, check_extent, make_frame
from ..stages.fusion import fuse_evidence
from ..stages.junction import Junction, RingFilter, extract_junction
from ..stages.noise import NoiseEstimate, attach_uncertainty, estimate_noise, point_scale
from ..stages.profile import Profile, bin_junction, reject_with_noise
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

    t = time.perf_counter()
    profile = bin_junction(junction, cfg.profile, shell.radius)
    timings["profile"] = time.perf_counter() - t
    t = time.perf_counter()
    quantum = vertical_quantum(src, frame)
    station_ids = len(np.unique(junction.station)) > 1
    noise = estimate_noise(profile, junction, cfg.noise, cfg.profile.reject_k, quantum=quantum,
                           station_ids=station_ids)
    # reject again with the measured noise (mixed pixels widen the bins' own scatter), then measure again on
    # what is kept: the station offsets and registration terms no longer see the contaminants
    first = noise
    for _ in range(2 if station_ids else 3):  # without ids the correlated error settles over the rounds
        profile = reject_with_noise(profile, junction, point_scale(junction, noise), cfg.profile)
        noise = estimate_noise(profile, junction, cfg.noise, cfg.profile.reject_k, quantum=quantum,
                               station_ids=station_ids)
    # the contamination is what the scatter-based rejection let through, measured before the noise-based one
    noise = dataclasses.replace(noise, classical_sigma=first.classical_sigma,
                                contamination=first.classical_sigma / noise.sigma if noise.sigma > 0 else float("nan"))
    profile = attach_uncertainty(profile, junction, noise)
    timings["noise"] = time.perf_counter() - t
    t = time.perf_counter()
    profile = fuse_evidence(profile, junction, noise, cfg.profile)
    timings["fusion"] = time.perf_counter() - t
    if profile.fusion is not None and profile.fusion.foot_disagreement > 0:
        warnings.append(f"the projection top and the shell foot disagree by {profile.fusion.foot_disagreement * 1e3:.1f} "
                        f"mm: returns off the plate (mixed pixels) may have moved the top, or the foot is hidden; the "
                        f"disagreement is in every standard error")
    if profile.coverage < cfg.profile.min_coverage:
        msg, advice, no_tank = coverage_message(profile, junction, shell, cfg.profile)
        if no_tank or cfg.profile.on_low_coverage == "refuse":
            raise StageError(f"profile: {msg} ({advice})")
        warnings.append(msg)
        log.warning("profile: %s", msg)
    for g0, g1 in profile.gaps:
        warnings.append(f"no junction data from {g0:.1f} to {g1:.1f} deg (gap left empty)")
    warnings.extend(noise_warnings(noise, cfg.noise, profile))
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


def coverage_message(profile: Profile, junction: Junction, shell: ShellFit, cfg) -> tuple[str, str, bool]:
    """(what is wrong, the keys that help, whether there is no tank base at all) for a profile below
    ``profile.min_coverage``. Coverage advice is only given where a tank's base was found."""
    p = profile
    n = len(p.status)
    seen = float((p.status != "empty").mean())
    msg = (f"only {100 * p.coverage:.1f} % of the circumference has ok bins, below profile.min_coverage = "
           f"{cfg.min_coverage}")
    if seen < 0.5 * cfg.min_coverage:
        return (f"junction evidence (projection top, shell foot or step face) in only {100 * seen:.1f} % of the "
                f"circumference next to the cylinder of r = {shell.radius:.3f} m ({shell.n_inliers} inliers, "
                f"{100 * shell.coverage:.0f} % of the circle): no tank base found",
                "is this a scan of a tank? the shell stage's thresholds are shell.min_inliers and shell.min_coverage",
                True)
    k = {s: int((p.status == s).sum()) for s in ("sparse", "suspect", "empty")}
    worst = max(k, key=k.get)
    if worst == "sparse":
        advice = (f"{k['sparse']} of {n} bins have a standard error above profile.max_std_error = "
                  f"{cfg.max_std_error} m even at profile.max_bin_width_deg = {cfg.max_bin_width_deg}: raise either "
                  f"for a thin or noisy scan, or set profile.on_low_coverage: flag to keep the profile")
    elif worst == "suspect":
        advice = (f"{k['suspect']} of {n} bins reject more than profile.max_reject_fraction = "
                  f"{cfg.max_reject_fraction} of their points: check junction.radial_max and junction.height_gate "
                  f"(projection width found: {_mm(junction.projection_width)}), or set profile.on_low_coverage: flag")
    else:
        advice = (f"{k['empty']} of {n} bins have no junction evidence (occlusions, or a projection outside "
                  f"junction.radial_min - junction.radial_max; width found: {_mm(junction.projection_width)}); "
                  f"set profile.on_low_coverage: flag to keep the profile with its gaps")
    return msg, advice, False


def _mm(v) -> str:
    return f"{v * 1e3:.0f} mm" if v else "none"


def vertical_quantum(src, frame: Frame) -> float:
    """The file's vertical coordinate resolution in m (0 when the reader does not know it)."""
    q = getattr(src, "coordinate_quantum", None)
    if q is None:
        return 0.0
    up = 2 if frame.up_axis == "z" else 1
    return float(np.asarray(q, dtype=float)[up]) * frame.metres_per_unit


def noise_warnings(noise: NoiseEstimate, cfg, profile: Profile) -> list:
    """What the noise stage found that the reader of the results must know."""
    out = []
    if noise.station_ids and len(noise.stations) >= 2 and not profile.station_offset:
        out.append("the stations share no bins: their relative vertical offsets (registration) cannot be measured "
                   "and are not in the standard errors")
    if noise.quantum > 0 and noise.quantum ** 2 / 12 > 0.1 * noise.sigma ** 2:
        hidden = (f"; the noise itself is below what this resolution shows (under {noise.quantum / 4 * 1e3:.2g} mm)"
                  if noise.sigma < noise.quantum / 4 else "")
        out.append(f"the file's vertical resolution ({noise.quantum * 1e3:.3g} mm) is not small against the "
                   f"noise ({noise.sigma * 1e3:.2f} mm): rounding (q^2/12 per point, and "
                   f"{noise.quantization_bias_sigma * 1e3:.2f} mm per bin that averaging cannot remove) is in "
                   f"the standard errors{hidden}; export the scan with a finer scale if you can")
    if not noise.station_ids:
        out.append(f"the scan carries no station ids: station levelling was not possible; the correlated "
                   f"(registration) error estimated from the data, {noise.correlated_sigma * 1e3:.2f} mm, is in "
                   f"every standard error")
    if np.isfinite(noise.contamination) and noise.contamination > 1 + cfg.agreement_ratio:
        out.append(f"mixed pixels: the plain within-bin scatter ({noise.classical_sigma * 1e3:.2f} mm) exceeds the "
                   f"robust noise estimate ({noise.sigma * 1e3:.2f} mm) by {100 * (noise.contamination - 1):.0f} %; "
                   f"the noise comes from the robust estimate")
    return out


def run_scan(scan, out_dir, config_path=None, sets=(), progress=None, *, base_mapping: dict | None = None,
             base_source: str = "") -> RunResult:
    """Resolve the config, process the scan, evaluate when the config has tank data, write every output.

    ``base_mapping`` (a resolved config read back from a run folder) stands in for ``config_path``.
    """
    cfg, resolved, source = load_config(config_path, sets, mapping=base_mapping, mapping_source=base_source)
    out_dir = Path(out_dir)
    check_writable(out_dir)
    t0 = time.perf_counter()
    res = process_scan(scan, cfg, resolved, source, progress)
    timings = dict(res.timings)
    t = time.perf_counter()
    sha = sha256_file(scan)
    timings["hash"] = time.perf_counter() - t
    t = time.perf_counter()
    ev = evaluate_run(res)
    if ev is not None:
        timings["evaluate"] = time.perf_counter() - t
    timings["total"] = time.perf_counter() - t0
    res = dataclasses.replace(res, input_sha256=sha, evaluation=ev, timings=timings)
    files = run_outputs(res)
    with staging_dir(out_dir) as stage:
        write_files(stage, files)
    return res
