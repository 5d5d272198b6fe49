"""Ray-casting scanner: stations, scan pattern, first hits, noise, mixed pixels, registration.

``simulate(scene)`` yields ``ScanChunk`` objects station by station, a block of
scan columns at a time, so a 100 M point scan never sits in memory. The truth
(labels, noise-free positions) travels with each chunk for tests and for the
truth file; scan writers keep only what a real scanner records.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Iterator

import numpy as np

from ..config import build
from ..core.mapping import deep_update
from ..core.rng import Purpose, stream
from . import geometry as G
from .scene import Scene, StationParams


@dataclass(frozen=True)
class Station:
    index: int  # 0-based; files carry index + 1 as point_source_id
    position: np.ndarray  # (3,) instrument centre, world m
    params: StationParams
    reg_rotation: np.ndarray  # (3, 3) registration error rotation
    reg_translation: np.ndarray  # (3,) m
    reg_angles_rad: np.ndarray  # (3,)


@dataclass
class ScanChunk:
    xyz: np.ndarray  # (n, 3) world m, measured and registered
    xyz_true: np.ndarray  # (n, 3) world m, noise-free first hit (for mixed pixels: the ray's own hit)
    label: np.ndarray  # (n,) int8 surface label, geometry.MIXED for mixed pixels
    station: np.ndarray  # (n,) uint16, 0-based
    intensity: np.ndarray  # (n,) uint16
    gps_time: np.ndarray  # (n,) s
    xyz_unregistered: np.ndarray  # (n, 3) world m, measured before the registration error


def _small_rotation(angles):
    ax, ay, az = angles
    rx = np.array([[1, 0, 0], [0, math.cos(ax), -math.sin(ax)], [0, math.sin(ax), math.cos(ax)]])
    ry = np.array([[math.cos(ay), 0, math.sin(ay)], [0, 1, 0], [-math.sin(ay), 0, math.cos(ay)]])
    rz = np.array([[math.cos(az), -math.sin(az), 0], [math.sin(az), math.cos(az), 0], [0, 0, 1]])
    return rz @ ry @ rx


class Simulator:
    """Holds the built scene: tanks, ground, clutter and stations."""

    def __init__(self, scene: Scene):
        self.scene = scene
        self.tank = G.Tank(scene.tank, scene.settlement)
        self.ground = G.Ground(scene, stream(scene.seed, Purpose.SYNTH_GROUND))
        self.others = [G.Tank(t, None, label_shell=G.OTHER_TANK) for t in scene.clutter.other_tanks]
        self.clutter = G.build_clutter(scene, self.tank, self.ground)
        self.stations = self._stations()

    def _stations(self) -> list[Station]:
        sc = self.scene
        cx, cy = sc.tank.center
        R = sc.tank.radius
        specs = []
        st = sc.stations
        for i in range(st.ring_count):
            az = math.radians(st.ring_start_deg + i * 360.0 / st.ring_count)
            specs.append(((cx + (R + st.ring_distance) * math.sin(az), cy + (R + st.ring_distance) * math.cos(az)), {}))
        for ex in st.extra:
            if ex.position is not None:
                pos = ex.position
            else:
                az = math.radians(ex.azimuth_deg)
                pos = (cx + (R + ex.distance_from_shell) * math.sin(az), cy + (R + ex.distance_from_shell) * math.cos(az))
            specs.append((pos, ex.overrides))
        out = []
        common = dataclasses.asdict(st.common)
        for i, (pos, ov) in enumerate(specs):
            merged = deep_update(common, ov or {})
            params = build(StationParams, merged, f"stations[{i}]", "scene")
            x, y = pos
            zg = float(self.ground.height(np.array([x]), np.array([y]))[0])
            rng = stream(sc.seed, Purpose.SYNTH_STATION, offset=i)
            ang = rng.normal(0, math.radians(params.registration.rotation_deg), 3)
            tr = rng.normal(0, params.registration.translation, 3)
            out.append(Station(i, np.array([x, y, zg + params.height]), params, _small_rotation(ang), tr, ang))
        return out

    # ------------------------------------------------------------------ pattern
    def h_windows(self, stn: Station, main_only=False) -> list[tuple[float, float]]:
        """Horizontal angle intervals (radians, clockwise from +Y) that cover every tank."""
        ivs = []
        for tk in [self.tank] + ([] if main_only else self.others):
            dx, dy = tk.c0[0] - stn.position[0], tk.c0[1] - stn.position[1]
            dist = math.hypot(dx, dy)
            rf = tk.foundation_radius() + 1.5
            if dist > stn.params.max_range + rf:
                continue
            if dist <= rf:
                return [(0.0, 2 * math.pi)]
            c = math.atan2(dx, dy)
            half = math.asin(rf / dist) + math.radians(3)
            ivs.append((c - half, c + half))
        ivs.sort()
        merged = []
        for lo, hi in ivs:
            if merged and lo <= merged[-1][1]:
                merged[-1] = (merged[-1][0], max(hi, merged[-1][1]))
            else:
                merged.append((lo, hi))
        return merged

    def v_range(self, stn: Station) -> tuple[float, float]:
        p = stn.params
        top = -90.0
        for tk in [self.tank] + self.others:
            dist = math.hypot(tk.c0[0] - stn.position[0], tk.c0[1] - stn.position[1]) - tk.R
            ztop = tk.c0[2] + tk.ts.height - stn.position[2]
            top = max(top, math.degrees(math.atan2(ztop, max(dist, 0.5))) + 2)
        return math.radians(p.v_min_deg), math.radians(min(p.v_max_deg, top))

    def band_range(self, stn: Station) -> tuple[float, float]:
        """Elevation angles (radians) of the main tank's junction seen from ``stn``, plus the band margin."""
        tk = self.tank
        dc = math.hypot(tk.c0[0] - stn.position[0], tk.c0[1] - stn.position[1])
        dz = tk.c0[2] + self.scene.settlement.uniform - stn.position[2]
        amp = self.scene.settlement.tilt.amplitude + 0.1
        near = max(dc - tk.R, 0.3)
        tangent = math.sqrt(max(dc * dc - tk.R * tk.R, 0.09))
        m = math.radians(stn.params.band.margin_deg)
        return math.atan2(dz - amp, near) - m, math.atan2(dz + amp, tangent) + m

    def patterns(self, stn: Station):
        """(horizontal step, vertical step, vertical range, horizontal windows) of each scan of a station."""
        dens = math.sqrt(self.scene.density)
        p = stn.params
        out = [(math.radians(p.h_step_deg) / dens, math.radians(p.v_step_deg) / dens, self.v_range(stn),
                self.h_windows(stn))]
        if p.band is not None:
            out.append((math.radians(p.band.h_step_deg) / dens, math.radians(p.band.v_step_deg) / dens,
                        self.band_range(stn), self.h_windows(stn, main_only=True)))
        return out

    def ray_count(self, stn: Station) -> int:
        total = 0
        for hs, vs, (vlo, vhi), wins in self.patterns(stn):
            nv = int((vhi - vlo) / vs) + 1
            total += sum(int((hi - lo) / hs) + 1 for lo, hi in wins) * nv
        return total

    # ------------------------------------------------------------------ casting
    def first_hit(self, o, d):
        """t (n,), normal (n, 3), label (n,) of the first surface each ray meets."""
        t, n, lab = self.tank.surfaces_hit(o, d)
        for tk in self.others:
            t2, n2, l2 = tk.surfaces_hit(o, d)
            b = t2 < t
            t[b], n[b], lab[b] = t2[b], n2[b], l2[b]
        tg, ng = self.ground.hit(o, d)
        b = tg < t
        t[b], n[b], lab[b] = tg[b], ng[b], G.GROUND
        for prim in self.clutter:
            c, rad = prim.bound()
            w = c - o
            proj = d @ w
            dist2 = w @ w - proj ** 2
            cand = np.nonzero((dist2 <= rad * rad) & (proj > -rad))[0]
            if len(cand) == 0:
                continue
            tp, npp = prim.hit(o, d[cand])
            b = tp < t[cand]
            idx = cand[b]
            t[idx], n[idx], lab[idx] = tp[b], npp[b], prim.label
        return t, n, lab

    def scan_station(self, stn: Station) -> Iterator[ScanChunk]:
        sc = self.scene
        chunk_idx = 0
        t_clock = 1000.0 * (stn.index + 1)
        for hs, vs, (vlo, vhi), wins in self.patterns(stn):
            v = np.arange(vlo, vhi, vs)
            nv = len(v)
            cols_per_chunk = max(2, sc.output.chunk_rays // max(nv, 1))
            for lo, hi in wins:
                h_all = np.arange(lo, hi, hs)
                for c0 in range(0, len(h_all), cols_per_chunk):
                    h = h_all[c0:c0 + cols_per_chunk]
                    rng = stream(sc.seed, Purpose.SYNTH_CHUNK, chunk_idx, offset=stn.index)
                    mix_rng = stream(sc.seed, Purpose.SYNTH_MIXING, chunk_idx, offset=stn.index)
                    chunk_idx += 1
                    out = self._scan_block(stn, h, v, rng, t_clock, mix_rng)
                    t_clock += len(h) * 0.01
                    if out is not None:
                        yield out

    def _scan_block(self, stn, h, v, rng, t_clock, mix_rng=None):
        p = stn.params
        o = stn.position
        H, V = np.meshgrid(h, v, indexing="ij")  # (ncol, nrow)
        cv = np.cos(V)
        d = np.stack([cv * np.sin(H), cv * np.cos(H), np.sin(V)], axis=-1).reshape(-1, 3)
        t, nrm, lab = self.first_hit(o, d)
        t[t > p.max_range] = np.inf
        lab = np.where(np.isfinite(t), lab, -1)
        shape = H.shape
        T = t.reshape(shape)
        # mixed pixels: where the range jumps between neighbouring rays (a depth edge lies between them), the
        # beam footprint straddles the edge with a chance of footprint / spacing of the two hits
        mixed_target = np.full(shape, np.nan)
        straddle = np.zeros(shape)
        ang_step = (h[1] - h[0]) if len(h) > 1 else 1e-3, (v[1] - v[0]) if len(v) > 1 else 1e-3
        for axis in (0, 1):
            if shape[axis] < 3:
                continue
            with np.errstate(invalid="ignore"):
                fwd = np.diff(T, axis=axis)
            lo = [slice(None)] * 2
            hi = [slice(None)] * 2
            lo[axis] = slice(0, -1)
            hi[axis] = slice(1, None)
            for me, nb, jump in ((tuple(lo), tuple(hi), fwd), (tuple(hi), tuple(lo), -fwd)):
                r_me = T[me]
                with np.errstate(invalid="ignore"):
                    thr = 0.06 + 0.003 * r_me  # smaller steps give a footprint-averaged range, not a floating point
                    edge = np.isfinite(jump) & (np.abs(jump) > thr)
                    # chance the footprint reaches across: footprint / lateral spacing of the two rays
                    foot = p.beam_exit_diameter + 1e-3 * p.beam_divergence_mrad * r_me
                    spacing = np.maximum(r_me * abs(ang_step[axis]), 1e-6)
                    chance = np.where(edge, np.minimum(1.0, foot / spacing), 0.0)
                region = straddle[me]
                take = chance > region
                region[take] = chance[take]
                mt = mixed_target[me]
                mt[take] = T[nb][take]
        is_edge = (straddle.reshape(-1) > 0) & np.isfinite(t)
        mix = is_edge & (rng.random(len(t)) < p.mixed_pixel_prob * straddle.reshape(-1))
        hit = np.isfinite(t)
        idx = np.nonzero(hit)[0]
        if len(idx) == 0:
            return None
        r_true = t[idx]
        alpha = rng.uniform(0.15, 0.85, len(idx))
        r_meas = np.where(mix[idx], r_true + alpha * (mixed_target.reshape(-1)[idx] - r_true), r_true)
        if (p.crease_mixed_prob > 0 or p.edge_mixed_prob > 0) and mix_rng is not None:
            fm, f_target = self._footprint_mixing(stn, H.reshape(-1)[idx], V.reshape(-1)[idx], r_true, lab[idx],
                                                  mix_rng)
            fm &= ~mix[idx]
            mix[idx[fm]] = True
            r_meas = np.where(fm, r_true + mix_rng.uniform(0.15, 0.85, len(idx)) * (f_target - r_true), r_meas)
        cos_inc = np.abs(np.einsum("ij,ij->i", nrm[idx], d[idx]))
        # range precision degrades at grazing incidence
        inc_factor = 1.0 + p.incidence_noise_gain * (1.0 / np.maximum(cos_inc, 0.05) - 1.0)
        sigma = (p.range_noise + p.range_noise_per_m * r_true) * inc_factor
        noise_scale = np.where(lab[idx] == G.BUSH, 0.02, 0.0)
        r_meas = r_meas + rng.normal(0.0, 1.0, len(idx)) * np.sqrt(sigma ** 2 + noise_scale ** 2)
        sa = math.radians(p.angular_noise_deg)
        hh = H.reshape(-1)[idx] + rng.normal(0, sa, len(idx))
        vv = V.reshape(-1)[idx] + rng.normal(0, sa, len(idx))
        cvv = np.cos(vv)
        dm = np.stack([cvv * np.sin(hh), cvv * np.cos(hh), np.sin(vv)], axis=1)
        xyz_meas = o + r_meas[:, None] * dm
        xyz_true = o + r_true[:, None] * d[idx]
        xyz_reg = (xyz_meas - o) @ stn.reg_rotation.T + o + stn.reg_translation
        labels = np.where(mix[idx], G.MIXED, lab[idx]).astype(np.int8)
        refl = G.REFLECTIVITY[np.clip(lab[idx], 0, len(G.REFLECTIVITY) - 1)]
        inten = refl * (0.3 + 0.7 * cos_inc) / (1.0 + (r_true / 40.0) ** 2) * 50000.0
        inten = np.clip(inten * rng.lognormal(0, 0.08, len(idx)), 1, 65535).astype(np.uint16)
        gps = t_clock + idx.astype(float) * 1e-6
        return ScanChunk(xyz_reg, xyz_true, labels, np.full(len(idx), stn.index, np.uint16), inten, gps, xyz_meas)

    def _footprint_mixing(self, stn, h, v, r, lab, rng):
        """Returns whose beam footprint straddles the shell/plate crease or the projection's outer edge.

        The rays ``h``, ``v`` (radians) hit at ranges ``r`` with labels ``lab``. For hits near the main tank's
        base, two more rays are cast at the footprint's upper and lower rim (elevation +- half the footprint
        angle); where one meets another surface across the crease (shell <-> plate top) or the plate's outer edge
        (plate top or step face <-> step face, foundation or ground), the footprint straddles, and with
        ``crease_mixed_prob`` / ``edge_mixed_prob`` the scanner reports a range between the two surfaces' ranges.
        Returns (mixed (n,) bool, range of the other surface (n,) m).
        """
        p = stn.params
        o = stn.position
        tk = self.tank
        n = len(r)
        mixed = np.zeros(n, bool)
        target = r.copy()
        near_kinds = (G.SHELL, G.PLATE_TOP, G.PLATE_EDGE, G.FOUNDATION_TOP, G.FOUNDATION_FACE, G.GROUND)
        cv = np.cos(v)
        d = np.stack([cv * np.sin(h), cv * np.cos(h), np.sin(v)], axis=1)
        q = tk.to_tank(o + r[:, None] * d)
        rho = np.hypot(q[:, 0], q[:, 1])
        az = G.azimuth(q[:, 0], q[:, 1])
        cand = np.isin(lab, near_kinds) & (np.abs(q[:, 2] - tk.u(az)) < 0.25) & (rho < tk.R + tk.w + 0.6)
        idx = np.nonzero(cand)[0]
        if len(idx) == 0:
            return mixed, target
        half = 0.5 * (p.beam_exit_diameter + 1e-3 * p.beam_divergence_mrad * r[idx]) / r[idx]
        plate = (G.PLATE_TOP, G.PLATE_EDGE)
        beyond = (G.PLATE_EDGE, G.FOUNDATION_TOP, G.FOUNDATION_FACE, G.GROUND)
        la = lab[idx]
        best_t = np.full(len(idx), np.nan)
        kind = np.zeros(len(idx), np.int8)  # 1 crease, 2 edge
        for sign in (1.0, -1.0):
            vv = v[idx] + sign * half
            c2 = np.cos(vv)
            d2 = np.stack([c2 * np.sin(h[idx]), c2 * np.cos(h[idx]), np.sin(vv)], axis=1)
            t2, _, l2 = self.first_hit(o, d2)
            crease = ((la == G.SHELL) & (l2 == G.PLATE_TOP)) | ((la == G.PLATE_TOP) & (l2 == G.SHELL))
            edge = (l2 != la) & ((np.isin(la, plate) & np.isin(l2, beyond)) | (np.isin(la, beyond) & np.isin(l2, plate)))
            new = np.isnan(best_t) & np.isfinite(t2) & (crease | edge)
            best_t[new] = t2[new]
            kind[new] = np.where(crease[new], 1, 2)
        prob = np.where(kind == 1, p.crease_mixed_prob, np.where(kind == 2, p.edge_mixed_prob, 0.0))
        take = rng.random(len(idx)) < prob
        mixed[idx[take]] = True
        target[idx[take]] = best_t[take]
        return mixed, target

