"""Scanner simulator: synthetic tank scans with exact truth (``chimeline synth``)."""
from __future__ import annotations

import datetime
import math
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..core.circular import gap_arcs
from ..io.atomic import write_json
from ..io.writers import EXTENSIONS, ScanWriter
from ..units import to_metres
from . import geometry as G
from . import shell_truth
from .scanner import ScanChunk, Simulator
from .scene import Scene, load_scene, scene_from_mapping

__all__ = ["Scene", "Simulator", "ScanChunk", "load_scene", "scene_from_mapping", "run_synth", "collect",
           "truth_junction", "shell_truth"]

N_COVER = 3600  # 0.1 degree cells for the coverage of the projection top
FOOT_HEIGHT = 0.01  # m: shell returns this close above the junction count as evidence of its elevation


def truth_junction(scene: Scene, az_deg) -> np.ndarray:
    """True junction elevation in world metres (no georeferencing offset) at azimuths in degrees."""
    az = np.radians(np.asarray(az_deg, dtype=float))
    return scene.tank.base_elevation + G.junction_offset(scene.settlement, scene.tank.radius, az)


@dataclass
class _Stats:
    n: int = 0
    s1: float = 0.0
    s2: float = 0.0
    r1: float = 0.0
    r2: float = 0.0
    pred2: float = 0.0

    def rms(self):
        return math.sqrt(self.s2 / self.n) if self.n else None


@dataclass
class SynthResult:
    scan_path: Path
    truth_path: Path
    n_points: int
    seconds: float
    truth: dict
    sample: dict = field(default_factory=dict)  # subsample of points for plots: xyz (world m), label


def collect(scene: Scene) -> dict:
    """Run the simulator in memory (small scenes): concatenated chunk arrays plus the Simulator."""
    sim = Simulator(scene)
    parts = [c for stn in sim.stations for c in sim.scan_station(stn)]
    out = {k: np.concatenate([getattr(c, k) for c in parts]) for k in ScanChunk.__dataclass_fields__}
    out["simulator"] = sim
    return out


def run_synth(scene: Scene, out_dir, *, name: str | None = None, progress=None, sample_size: int = 300_000,
              software: str = "chimeline") -> SynthResult:
    """Simulate ``scene`` and write the scan file and ``<name>.truth.json`` into ``out_dir``."""
    t0 = time.perf_counter()
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    name = name or scene.name
    fmt = scene.output.format
    scan_path = out_dir / f"{name}{EXTENSIONS[fmt]}"
    truth_path = out_dir / f"{name}.truth.json"
    sim = Simulator(scene)
    date = datetime.date.fromisoformat(scene.survey_date)
    writer = ScanWriter(scan_path, fmt, scene.output.units, scene.output.georef_offset, date, software,
                        station_ids=scene.output.station_ids, scale=scene.output.scale)
    stats = [_Stats() for _ in sim.stations]
    cover = np.zeros(N_COVER, dtype=np.int64)
    label_counts = np.zeros(len(G.LABEL_NAMES), dtype=np.int64)
    evidence = {k: np.zeros(360, dtype=np.int64) for k in ("plate_top", "step_face", "shell_foot")}
    total_rays = sum(sim.ray_count(s) for s in sim.stations)
    stride = max(1, total_rays // max(sample_size, 1))
    samples_xyz, samples_lab, samples_st = [], [], []
    cx, cy = scene.tank.center
    seen = 0
    try:
        for stn in sim.stations:
            for ch in sim.scan_station(stn):
                writer.write(ch.xyz, ch.intensity, (ch.station + 1).astype(np.uint16), ch.gps_time)
                label_counts += np.bincount(ch.label.astype(np.int64) % len(G.LABEL_NAMES), minlength=len(G.LABEL_NAMES))
                top = ch.label == G.PLATE_TOP
                if top.any():
                    st = stats[stn.index]
                    dz = ch.xyz_unregistered[top, 2] - ch.xyz_true[top, 2]
                    dzr = ch.xyz[top, 2] - ch.xyz_true[top, 2]
                    st.n += int(top.sum())
                    st.s1 += float(dz.sum())
                    st.s2 += float((dz ** 2).sum())
                    st.r1 += float(dzr.sum())
                    st.r2 += float((dzr ** 2).sum())
                    # predicted vertical noise from the injected range and angular noise
                    v = ch.xyz_true[top] - stn.position
                    rng_ = np.linalg.norm(v, axis=1)
                    sin_e = v[:, 2] / rng_
                    cos_e = np.sqrt(1 - sin_e ** 2)
                    p = stn.params
                    nrm_z = 1.0  # the projection top is horizontal
                    cos_inc = np.abs(sin_e) * nrm_z
                    sr = (p.range_noise + p.range_noise_per_m * rng_) * (
                        1.0 + p.incidence_noise_gain * (1.0 / np.maximum(cos_inc, 0.05) - 1.0))
                    sa = math.radians(p.angular_noise_deg)
                    st.pred2 += float(((sr * sin_e) ** 2 + (rng_ * sa * cos_e) ** 2).sum())
                    az = G.azimuth(ch.xyz_true[top, 0] - cx, ch.xyz_true[top, 1] - cy)
                    cover += np.bincount((az / (2 * np.pi) * N_COVER).astype(int) % N_COVER, minlength=N_COVER)
                _count_evidence(evidence, sim.tank, ch)
                sel = np.arange(seen, seen + len(ch.xyz)) % stride == 0
                seen += len(ch.xyz)
                samples_xyz.append(ch.xyz[sel])
                samples_lab.append(ch.label[sel])
                samples_st.append(ch.station[sel])
                if progress:
                    progress(len(ch.xyz))
        writer.close()
    except BaseException:
        writer.abort()
        raise
    truth = _truth_dict(scene, sim, stats, cover, label_counts, writer.count, scan_path)
    truth["junction_evidence"] = _evidence_dict(evidence)
    write_json(truth_path, truth)
    sample = {"xyz": np.concatenate(samples_xyz), "label": np.concatenate(samples_lab),
              "station": np.concatenate(samples_st)}
    return SynthResult(scan_path, truth_path, writer.count, time.perf_counter() - t0, truth, sample)


def _count_evidence(evidence: dict, tank, ch) -> None:
    """Per 1-degree bin, non-mixed first hits that carry the junction elevation, by kind."""
    kinds = {"plate_top": ch.label == G.PLATE_TOP, "step_face": ch.label == G.PLATE_EDGE,
             "shell_foot": ch.label == G.SHELL}
    if kinds["shell_foot"].any():
        q = tank.to_tank(ch.xyz_true[kinds["shell_foot"]])
        low = q[:, 2] - tank.u(G.azimuth(q[:, 0], q[:, 1])) < FOOT_HEIGHT
        kinds["shell_foot"][np.nonzero(kinds["shell_foot"])[0][~low]] = False
    for k, m in kinds.items():
        if m.any():
            q = tank.to_tank(ch.xyz_true[m])
            deg = (np.degrees(G.azimuth(q[:, 0], q[:, 1]))).astype(int) % 360
            evidence[k] += np.bincount(deg, minlength=360)


def _evidence_dict(evidence: dict) -> dict:
    any_kind = sum(evidence.values()) > 0
    return {"bin_deg": 1.0, "shell_foot_height": FOOT_HEIGHT,
            "note": "non-mixed first hits per 1-degree bin (tank-frame azimuth) on the projection top, on its step "
                    "face, and on the shell within shell_foot_height above the junction",
            **{k: v.tolist() for k, v in evidence.items()},
            "fraction_1deg": float(any_kind.mean())}


def _gaps(cover: np.ndarray) -> list[dict]:
    """Contiguous runs of 0.1 degree cells with no projection-top hit, as [start, end) degrees."""
    return [{"start_deg": a, "end_deg": b} for a, b in gap_arcs(cover == 0, 360 / N_COVER, digits=None)]


def _truth_dict(scene, sim, stats, cover, label_counts, n_points, scan_path) -> dict:
    units = scene.output.units
    f = to_metres(units)
    off = np.asarray(scene.output.georef_offset, dtype=float)
    az = np.round(np.arange(0, 360, 0.1), 1)
    z = truth_junction(scene, az)
    tk = sim.tank
    stations = []
    n_all = sum(s.n for s in stats)
    for stn, st in zip(sim.stations, stats):
        p = stn.params
        stations.append({
            "point_source_id": stn.index + 1,
            "position": ((stn.position / f) + off).tolist(),
            "range_noise": p.range_noise / f, "range_noise_per_m": p.range_noise_per_m,
            "angular_noise_deg": p.angular_noise_deg, "mixed_pixel_prob": p.mixed_pixel_prob,
            "registration_translation": (stn.reg_translation / f).tolist(),
            "registration_rotation_deg": np.degrees(stn.reg_angles_rad).tolist(),
            "projection_points": st.n,
            "vertical_noise": (st.rms() / f) if st.n else None,
            "vertical_noise_predicted": (math.sqrt(st.pred2 / st.n) / f) if st.n else None,
            "vertical_error_with_registration": (math.sqrt(st.r2 / st.n) / f) if st.n else None,
            "vertical_bias_with_registration": (st.r1 / st.n / f) if st.n else None,
        })
    return {
        "scene": scene.name, "terminal": scene.terminal, "tank_tag": scene.tank.tag, "survey_date": scene.survey_date,
        "seed": scene.seed, "units": units, "format": scene.output.format, "scan_file": scan_path.name,
        "station_ids": scene.output.station_ids, "coordinate_scale": scene.output.scale,
        "n_points": int(n_points),
        "azimuth_convention": "degrees clockwise from +Y of the scan frame, [0, 360)",
        "tank": {
            "center": ((np.array([*scene.tank.center, scene.tank.base_elevation]) / f) + off).tolist(),
            "outer_radius": scene.tank.radius / f, "shell_height": scene.tank.height / f,
            "axis": tk.axis.tolist(),
            "projection_width": scene.tank.projection.width / f,
            "projection_thickness": scene.tank.projection.thickness / f,
            "foundation": scene.tank.foundation.type,
        },
        "settlement": {
            "uniform": scene.settlement.uniform / f,
            "tilt_amplitude": scene.settlement.tilt.amplitude / f,
            "tilt_low_azimuth_deg": scene.settlement.tilt.low_azimuth_deg % 360,
            "modes": [{"k": m.k, "amplitude": m.amplitude / f, "phase_deg": m.phase_deg} for m in scene.settlement.modes],
            "dips": [{"center_deg": d.center_deg, "arc_length": d.arc_length / f, "depth": d.depth / f}
                     for d in scene.settlement.dips],
        },
        "junction": {
            "azimuth_deg": az.tolist(),
            "elevation": ((z / f) + off[2]).tolist(),
            "out_of_plane": (G.out_of_plane(scene.settlement, scene.tank.radius, np.radians(az)) / f).tolist(),
        },
        "noise": {
            "vertical_noise": (math.sqrt(sum(s.s2 for s in stats) / n_all) / f) if n_all else None,
            "vertical_noise_predicted": (math.sqrt(sum(s.pred2 for s in stats) / n_all) / f) if n_all else None,
            "vertical_error_with_registration": (math.sqrt(sum(s.r2 for s in stats) / n_all) / f) if n_all else None,
            "note": "vertical noise = RMS of measured minus noise-free z of points whose first hit is the projection "
                    "top, before the registration error; 'with_registration' includes it",
        },
        "stations": stations,
        "projection_coverage": {"fraction": float((cover > 0).mean()), "cell_deg": 360 / N_COVER,
                                "fraction_1deg": float((cover.reshape(360, -1).sum(axis=1) > 0).mean()),
                                "gaps": _gaps(cover)},
        "label_counts": {name: int(c) for name, c in zip(G.LABEL_NAMES, label_counts)},
        "geometry": shell_truth.truth_section(scene, f),
    }
