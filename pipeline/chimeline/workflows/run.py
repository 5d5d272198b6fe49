"""The scan-to-profile run: stage order, the random generator, streaming, timings and the output folder.

read -> frame -> shell (subsample) -> stream ring (junction hook) -> junction -> profile -> noise (standard
errors) -> [evaluate] -> report. Memory does not grow with the scan: the shell is found on a spread sample,
then every chunk is cut down to the thin ring around the shell base before the next chunk is read.
"""
from __future__ import annotations

import concurrent.futures
import dataclasses
import logging
import math
import os
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Optional

import numpy as np

from ..config import ChimelineConfig, ProfileConfig, config_hash, load_config
from ..core.hashing import sha256_file, sha256_text
from ..core.rng import Purpose, stream
from ..errors import ConfigError, InputError, StageError
from ..evaluate.results import Evaluation
from ..io.atomic import OutputSlot, checkpoint
from ..io.pdf import pdf_bytes
from ..io.readers import expand_inputs, open_scans
from ..io.runfiles import KIND_RUN, FolderInput, kind_guard, provenance_record, with_manifest
from ..report.run_files import run_outputs
from ..stages.frame import Frame, check_extent, make_frame, precision_warnings, tie_azimuth_zero
from ..stages.geometry import FaceSampler, ShellGeometry, measure_geometry
from ..stages.fusion import fuse_evidence
from ..stages.junction import Junction, RingFilter, extract_junction
from ..stages.noise import NoiseEstimate, attach_uncertainty, estimate_noise, point_scale
from ..stages.profile import Profile, bin_junction, reject_with_noise
from ..stages.shell import ShellFit, fit_shell, refine_base
from ..units import PINT_NAMES, parse_quantity
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
    geometry: Optional[ShellGeometry] = None  # None with geometry.enabled: false or too little shell face
    scan_paths: tuple = ()  # every input file (several for tiles or one file per station); scan_path is the first
    input_sha256_files: tuple = ()  # (str,) SHA-256 of each input file, in scan_paths order

    @property
    def out_units(self) -> str:
        u = self.config.output.length_unit
        return self.frame.units if u == "input" else u


def process_scan(scan, cfg: ChimelineConfig, resolved: dict, source: str,
                 progress: Optional[Callable] = None) -> RunResult:
    """Run every stage on ``scan``; no files are written, no evaluation is made."""
    progress = progress or (lambda *a: None)
    timings, warnings, counts = {}, [], {}
    paths = expand_inputs(scan if isinstance(scan, (list, tuple)) else [scan])
    scan = paths[0]
    t = time.perf_counter()
    progress("read", 0, None)
    src = open_scans(paths, cfg.input)
    rng = np.random.default_rng(cfg.seed)
    sample = src.sample(cfg.shell.sample_points, rng)
    fin = np.isfinite(sample.xyz).all(axis=1)
    timings["read_sample"] = time.perf_counter() - t
    log.info("read: %s%s, %d points, sample of %d", scan.name, f" and {len(paths) - 1} more" if len(paths) > 1 else "",
             src.n_points, len(sample.xyz))

    t = time.perf_counter()
    if fin.sum() == 0:
        raise InputError(f"{scan}: no point has finite coordinates")
    frame = make_frame(sample.xyz, src.crs or src.units_hint, cfg.input, cfg.frame, warnings, path=scan)
    local = frame.to_local(sample.xyz[fin])
    check_extent(scan, local, frame, cfg.shell.min_radius, cfg.shell.max_radius)
    hint = frame.file_xy_to_local(cfg.tank.center_hint) if cfg.tank.center_hint is not None else None
    timings["frame"] = time.perf_counter() - t

    t = time.perf_counter()
    progress("shell", 0, None)
    shell = fit_shell(local, cfg.shell, rng, center_hint=hint, metres_per_unit=frame.metres_per_unit_horizontal)
    if cfg.frame.azimuth_zero_at is not None:
        frame = tie_azimuth_zero(frame, shell, cfg.frame.azimuth_zero_at, scan)
        log.info("frame: azimuth 0 points at %s: %.3f deg clockwise from +Y", list(cfg.frame.azimuth_zero_at),
                 frame.azimuth_reference_deg)
    timings["shell"] = time.perf_counter() - t
    log.info("shell: radius %.4f m, centre (%.3f, %.3f) m local, axis tilt %.4f deg, %d inliers, %.0f %% of the "
             "circumference; %s", shell.radius, shell.center[0], shell.center[1],
             float(np.degrees(np.arccos(min(1.0, abs(shell.axis[2]))))), shell.n_inliers, 100 * shell.coverage,
             shell.selection)

    t = time.perf_counter()
    ring_filter = RingFilter(local, shell, frame, cfg.junction, src.n_points, cfg.seed)
    ring, ring_st, plot_parts = [], [], []
    stride = max(1, src.n_points // 150_000)
    face = FaceSampler(local, shell, cfg.geometry, src.n_points, cfg.seed) if cfg.geometry.enabled else None
    every = max(1, stride // face.stride) if face else 1  # the reader strides for the face; plots take every k-th
    n_read = n_bad = 0
    up = 2 if frame.up_axis == "z" else 1
    bounds = _plan_bounds(shell, frame, cfg.junction.band_outside, full_height=face is not None)
    for n, band, strided, bad in src.stream(cfg.input.chunk_size, up, ring_filter.up_band_file(), stride // every,
                                            bounds):
        n_read += n
        n_bad += bad
        ok = np.isfinite(band.xyz).all(axis=1)
        p = frame.to_local(band.xyz[ok] if not ok.all() else band.xyz)
        sid = band.source_id[ok] if band.source_id is not None else np.zeros(len(p), np.int64)
        kp, ks = ring_filter(p, sid)
        ring.append(kp)
        ring_st.append(ks)
        fin_s = np.isfinite(strided.xyz).all(axis=1)
        sp = frame.to_local(strided.xyz[fin_s])
        if face is not None:
            face(sp, strided.source_id[fin_s] if strided.source_id is not None else np.zeros(len(sp), np.int64))
        plot_parts.append(sp[::every])
        progress("stream", n_read, src.n_points)
        checkpoint("stream")
    counts["face_keep_fraction"] = round(ring_filter.face_keep_fraction, 6)
    counts["decoded_fraction"] = round(min(src.decoded / max(src.n_points, 1), 1.0), 6)
    counts["skipped"] = src.skipped_counts
    if src.decoded < src.n_points:
        log.info("stream: decoded %.1f %% of the file (the octree nodes that meet the tank's box)",
                 100 * src.decoded / max(src.n_points, 1))
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
    progress("junction", 0, None)
    first = extract_junction(ring_pts, ring_sid, shell, frame, cfg.junction)
    first_radius = shell.radius
    shell = refine_base(shell, ring_pts, first.base_z, cfg.shell)
    junction = extract_junction(ring_pts, ring_sid, shell, frame, cfg.junction)
    timings["junction"] = time.perf_counter() - t
    pw = junction.projection_width
    log.info("junction: %d candidates, %d within the height gate; projection width %s; radial window %.1f-%.1f mm",
             junction.n_candidates, junction.n_gated, f"{pw * 1000:.0f} mm" if pw else "not found",
             junction.radial_window[0] * 1000, junction.radial_window[1] * 1000)
    log.debug("junction: ring %d points, base at %.4f m local; refined shell radius %.4f m (first pass %.4f m)",
              junction.n_ring, junction.base_z, shell.radius, first_radius)

    _check_bin_arc(cfg.profile, shell.radius)
    t = time.perf_counter()
    progress("profile", 0, None)
    profile = bin_junction(junction, cfg.profile, shell.radius)
    timings["profile"] = time.perf_counter() - t
    t = time.perf_counter()
    progress("noise", 0, None)
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
    log.info("profile: %d bins of %.3g deg, coverage %.1f %% ok, %d gap(s); %d of %d candidates rejected",
             len(profile.azimuth_deg), profile.bin_width_deg, 100 * profile.coverage, len(profile.gaps),
             int((~profile.kept).sum()), len(profile.kept))
    log.info("noise: sigma %.3f mm [%.3f, %.3f] (%s); within-bin %.3f mm; pairs %s; registration spread %.2f mm%s",
             noise.sigma * 1e3, noise.ci[0] * 1e3, noise.ci[1] * 1e3, noise.adopted, noise.within_bin.sigma * 1e3,
             (f"{noise.pairs.sigma * 1e3:.3f} mm" + (f" (F test p = {noise.agreement_p:.2g})" if noise.agreement_p is not None
                                                         else "")) if noise.pairs else "none",
             noise.registration_sigma * 1e3, "" if profile.leveled else " (station levelling not done)")
    log.debug("noise: per station %s", "; ".join(
        f"{st.station}: {st.within_bin.sigma * 1e3:.3f} mm, offset {st.offset * 1e3:+.2f} mm"
        for st in noise.stations if st.within_bin is not None))
    warnings += precision_warnings(src.coordinate_quantum, src.storage, frame, noise.sigma, storage_step=False)
    warnings.extend(noise_warnings(noise, cfg.noise, profile))
    if not noise.agree:
        warnings.append(f"noise estimators disagree: within-bin {noise.within_bin.sigma * 1e3:.2f} mm, pairs "
                        f"{noise.pairs.sigma * 1e3:.2f} mm (F test p = {noise.agreement_p:.2g})")
    if shell.others:
        warnings.append(f"{len(shell.others)} other cylinder(s) in view; chose the {shell.selection}")
    geometry = _geometry(face, stride // every, shell, frame, profile, cfg, counts, timings, warnings) if face else None

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
                     plot_sample=plot_sample, ring_sample=rs, shell_sample=shell_sample, geometry=geometry,
                     scan_paths=tuple(paths))


def _geometry(face, reader_stride, shell, frame, profile, cfg, counts, timings, warnings) -> Optional[ShellGeometry]:
    """The geometry stage on the face sample; tank data in scan units set its tolerances."""
    t = time.perf_counter()
    pts, sid = face.points()
    counts.update(face_sample=int(len(pts)), face_sample_fraction=round(face.keep_fraction / reader_stride, 6))
    if len(pts) < 1000:
        warnings.append(f"geometry: only {len(pts)} points on the shell face; no plumbness or roundness measured")
        return None
    unit = PINT_NAMES[frame.units]
    tc = cfg.tank
    H = parse_quantity(tc.shell_height, "length", unit, "tank.shell_height") if tc.shell_height is not None else None
    D = parse_quantity(tc.diameter, "length", unit, "tank.diameter") if tc.diameter is not None else None
    geo = measure_geometry(pts, sid, shell, frame, profile, cfg.geometry, shell_height=H, diameter=D)
    warnings.extend(geo.warnings)
    timings["geometry"] = time.perf_counter() - t
    return geo


def _plan_bounds(shell: ShellFit, frame: Frame, band_outside: float, full_height: bool = False):
    """The base ring's plan box in file units ((3,) mins, (3,) maxs), for sources with a spatial index; the up axis
    is left open (the reader restricts it to the base band) unless ``full_height``, when it spans the shell's seen
    height (the geometry stage samples the face at all heights). None for y-up files."""
    if frame.up_axis != "z":
        return None
    r = shell.radius + band_outside + 0.5  # m: a margin for the axis tilt over the band and the fit
    c = np.asarray(shell.center[:2], dtype=float)
    lo, hi = frame.to_file_xy(c - r), frame.to_file_xy(c + r)
    zlo, zhi = -np.inf, np.inf
    if full_height:
        zlo = (shell.z_min - 1.0) / frame.metres_per_unit + frame.origin[2]
        zhi = (shell.z_max + 1.0) / frame.metres_per_unit + frame.origin[2]
    return np.array([lo[0], lo[1], zlo]), np.array([hi[0], hi[1], zhi])


def _hash_inputs(paths, stop: threading.Event) -> tuple[str, tuple]:
    """(SHA-256 of one file, or of the list of per-file digests for several; per-file digests)."""
    each = tuple(sha256_file(p, stop=stop) for p in paths)
    if len(each) == 1:
        return each[0], each
    return sha256_text("\n".join(each)), each


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
             base_source: str = "", extra_inputs=()) -> RunResult:
    """Resolve the config, process the scan, evaluate when the config has tank data, publish the run folder.

    ``base_mapping`` (a resolved config read back from a run folder) stands in for ``config_path``. The folder is
    locked before any work and swapped in as a whole at the end (``io.atomic.OutputSlot``): a failure leaves the
    earlier folder as it was. ``extra_inputs`` (FolderInput) join the scan files in manifest.json.
    """
    cfg, resolved, source = load_config(config_path, sets, mapping=base_mapping, mapping_source=base_source)
    paths = [Path(os.path.abspath(p)) for p in expand_inputs(scan if isinstance(scan, (list, tuple)) else [scan])]
    with OutputSlot(out_dir, guard=kind_guard(KIND_RUN), inputs=paths) as slot:
        t0 = time.perf_counter()
        files_in = [p for p in paths if p.is_file()]
        # the input is hashed on another thread while the scan streams (hashlib releases the GIL on large blocks)
        stop = threading.Event()
        with concurrent.futures.ThreadPoolExecutor(max_workers=1) as pool:
            hashing = pool.submit(_hash_inputs, files_in, stop)
            try:
                res = process_scan(paths, cfg, resolved, source, progress)
            except BaseException:
                stop.set()  # a failed run does not wait for the hash
                raise
            t = time.perf_counter()
            sha, sha_each = hashing.result()
        timings = dict(res.timings)
        timings["hash_wait"] = time.perf_counter() - t
        t = time.perf_counter()
        if progress is not None:
            progress("evaluate", 0, None)
        ev = evaluate_run(res)
        if ev is not None:
            timings["evaluate"] = time.perf_counter() - t
        res = dataclasses.replace(res, input_sha256=sha, input_sha256_files=sha_each, evaluation=ev, timings=timings)
        if progress is not None:
            progress("report", 0, None)
        files = run_outputs(res)
        if cfg.output.pdf:
            files["report.pdf"] = pdf_bytes(files["report.html"])
        timings["total"] = time.perf_counter() - t0
        inputs = [FolderInput("scan", str(p), h) for p, h in zip(files_in, sha_each)] + list(extra_inputs)
        slot.publish(with_manifest(files, KIND_RUN, inputs, config_hash(resolved),
                                   provenance_record("run", timings, recovered=slot.recovered)))
    return res
