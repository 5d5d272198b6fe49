"""Analytic surfaces of a tank scene and their first-hit ray intersections.

Every ``_hit_*`` function takes one ray origin ``o`` (3,) and unit directions
``d`` (n, 3) and returns the ray parameter ``t`` (n,) of its first hit
(``inf`` for a miss) and the unit surface normal (n, 3). Surfaces of the main
tank live in the tank frame (shell axis = +z, origin on the axis at the
unsettled junction elevation); the rigid tilt is the rotation between tank
frame and world. Azimuths are radians clockwise from +Y.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .scene import Scene, SettlementScene, TankScene

INF = np.inf

# surface labels (stored in the simulator's in-memory truth, never in files)
MIXED, SHELL, PLATE_TOP, PLATE_EDGE, FOUNDATION_TOP, FOUNDATION_FACE, GROUND, STAIR, PIPE, POLE, BUSH, OTHER_TANK = range(12)
LABEL_NAMES = ["mixed", "shell", "plate_top", "plate_edge", "foundation_top", "foundation_face", "ground",
               "stair", "pipe", "pole", "bush", "other_tank"]
REFLECTIVITY = np.array([0.4, 0.65, 0.45, 0.45, 0.7, 0.7, 0.3, 0.5, 0.55, 0.5, 0.35, 0.6])


def azimuth(x, y):
    """Azimuth in radians clockwise from +Y, in [0, 2 pi)."""
    return np.mod(np.arctan2(x, y), 2 * np.pi)


# ---------------------------------------------------------------------------
# settlement truth


def junction_offset(st: SettlementScene, radius: float, az_rad) -> np.ndarray:
    """World junction elevation minus the unsettled base elevation, m: uniform + tilt + modes + dips."""
    az = np.asarray(az_rad, dtype=float)
    return st.uniform + tilt_term(st, az) + out_of_plane(st, radius, az)


def tilt_term(st: SettlementScene, az) -> np.ndarray:
    return -st.tilt.amplitude * np.cos(az - np.radians(st.tilt.low_azimuth_deg))


def out_of_plane(st: SettlementScene, radius: float, az) -> np.ndarray:
    """Modes k >= 2 plus local dips, m (the part the tilt plane does not explain, up to dip leakage)."""
    az = np.asarray(az, dtype=float)
    u = np.zeros_like(az)
    for m in st.modes:
        u = u + m.amplitude * np.cos(m.k * (az - np.radians(m.phase_deg)))
    for dip in st.dips:
        dth = np.angle(np.exp(1j * (az - np.radians(dip.center_deg))))
        s = radius * dth
        inside = np.abs(s) < dip.arc_length / 2
        u = u - np.where(inside, dip.depth * np.cos(np.pi * s / dip.arc_length) ** 2, 0.0)
    return u


# ---------------------------------------------------------------------------
# generic primitives (world frame)


def _quadratic_first(a, b, c):
    """Smallest positive root of a t^2 + b t + c, and the other root; inf where none."""
    disc = b * b - 4 * a * c
    ok = (disc >= 0) & (np.abs(a) > 1e-15)
    sq = np.sqrt(np.where(ok, disc, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        t1 = np.where(ok, (-b - sq) / (2 * a), INF)
        t2 = np.where(ok, (-b + sq) / (2 * a), INF)
    return t1, t2


@dataclass
class Box:
    center: np.ndarray  # (3,)
    axes: np.ndarray  # (3, 3) columns are the box axes
    half: np.ndarray  # (3,)
    label: int

    def bound(self):
        return self.center, float(np.linalg.norm(self.half))

    def hit(self, o, d):
        ol = (o - self.center) @ self.axes
        dl = d @ self.axes
        with np.errstate(divide="ignore", invalid="ignore"):
            inv = 1.0 / dl
            t_a = (-self.half - ol) * inv
            t_b = (self.half - ol) * inv
        tmin = np.minimum(t_a, t_b)
        tmax = np.maximum(t_a, t_b)
        tmin = np.where(np.isnan(tmin), -INF, tmin)
        tmax = np.where(np.isnan(tmax), INF, tmax)
        t_near = tmin.max(axis=1)
        t_far = tmax.min(axis=1)
        ok = (t_near <= t_far) & (t_near > 1e-6)
        t = np.where(ok, t_near, INF)
        face = tmin.argmax(axis=1)
        nl = np.zeros_like(dl)
        nl[np.arange(len(d)), face] = -np.sign(dl[np.arange(len(d)), face])
        return t, nl @ self.axes.T


@dataclass
class Cylinder:
    """Finite capped cylinder from ``base`` along unit ``axis`` for ``length``."""

    base: np.ndarray
    axis: np.ndarray
    radius: float
    length: float
    label: int

    def bound(self):
        return self.base + self.axis * self.length / 2, float(np.hypot(self.radius, self.length / 2))

    def hit(self, o, d):
        a_ = self.axis
        w = o - self.base
        dw = d @ a_
        ww = w @ a_
        dp = d - np.outer(dw, a_)
        wp = w - ww * a_
        A = np.einsum("ij,ij->i", dp, dp)
        B = 2 * dp @ wp
        C = wp @ wp - self.radius ** 2
        t1, t2 = _quadratic_first(A, B, np.full_like(A, C))
        t = np.full(len(d), INF)
        for tc in (t2, t1):
            s = ww + tc * dw
            ok = np.isfinite(tc) & (tc > 1e-6) & (s >= 0) & (s <= self.length)
            t = np.where(ok & (tc < t), tc, t)
        # caps
        with np.errstate(divide="ignore", invalid="ignore"):
            for s_cap in (0.0, self.length):
                tc = (s_cap - ww) / dw
                p = w + np.outer(tc, np.ones(3)) * d - s_cap * a_
                rr = np.einsum("ij,ij->i", p, p)
                ok = np.isfinite(tc) & (tc > 1e-6) & (rr <= self.radius ** 2)
                t = np.where(ok & (tc < t), tc, t)
        p = w + np.where(np.isfinite(t), t, 0.0)[:, None] * d
        s = p @ a_
        radial = p - np.outer(s, a_)
        n = radial / np.maximum(np.linalg.norm(radial, axis=1, keepdims=True), 1e-12)
        cap = np.abs(np.linalg.norm(radial, axis=1) - self.radius) > 1e-6
        n[cap] = np.outer(np.where(s[cap] > self.length / 2, 1.0, -1.0), a_)
        return t, n


@dataclass
class Sphere:
    center: np.ndarray
    radius: float
    label: int

    def bound(self):
        return self.center, self.radius

    def hit(self, o, d):
        w = o - self.center
        B = 2 * d @ w
        C = w @ w - self.radius ** 2
        t1, t2 = _quadratic_first(np.ones(len(d)), B, np.full(len(d), C))
        t = np.where(t1 > 1e-6, t1, np.where(t2 > 1e-6, t2, INF))
        p = o + np.where(np.isfinite(t), t, 0)[:, None] * d
        n = (p - self.center) / self.radius
        return t, n


class Ground:
    """Height field z = elevation + slope . (x, y) + undulation; intersected by Newton steps."""

    def __init__(self, scene: Scene, rng: np.random.Generator):
        g = scene.ground
        self.z0 = g.elevation
        self.sx, self.sy = g.slope
        self.amp = g.roughness
        k = rng.uniform(2 * np.pi / 6.0, 2 * np.pi / 1.5, size=3)
        ang = rng.uniform(0, 2 * np.pi, size=3)
        self.kx, self.ky = k * np.cos(ang), k * np.sin(ang)
        self.ph = rng.uniform(0, 2 * np.pi, size=3)
        self.label = GROUND

    def height(self, x, y):
        z = self.z0 + self.sx * x + self.sy * y
        if self.amp:
            arg = np.multiply.outer(x, self.kx) + np.multiply.outer(y, self.ky) + self.ph
            z = z + self.amp / np.sqrt(3) * np.sin(arg).sum(axis=-1)
        return z

    def gradient(self, x, y):
        gx = np.full_like(x, self.sx)
        gy = np.full_like(y, self.sy)
        if self.amp:
            arg = np.multiply.outer(x, self.kx) + np.multiply.outer(y, self.ky) + self.ph
            c = self.amp / np.sqrt(3) * np.cos(arg)
            gx = gx + (c * self.kx).sum(axis=-1)
            gy = gy + (c * self.ky).sum(axis=-1)
        return gx, gy

    def hit(self, o, d):
        dz = d[:, 2]
        h0 = self.height(np.array([o[0]]), np.array([o[1]]))[0]
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.where(dz < -1e-9, (h0 - o[2]) / dz, INF)
        t = np.where(t > 0, t, INF)
        fin = np.isfinite(t)
        tt = np.where(fin, t, 0.0)
        for _ in range(8):
            x = o[0] + tt * d[:, 0]
            y = o[1] + tt * d[:, 1]
            f = o[2] + tt * dz - self.height(x, y)
            gx, gy = self.gradient(x, y)
            fp = dz - gx * d[:, 0] - gy * d[:, 1]
            with np.errstate(divide="ignore", invalid="ignore"):
                step = np.where(np.abs(fp) > 1e-9, f / fp, 0.0)
            tt = tt - np.clip(step, -5.0, 5.0)
        x = o[0] + tt * d[:, 0]
        y = o[1] + tt * d[:, 1]
        res = o[2] + tt * dz - self.height(x, y)
        ok = fin & (np.abs(res) < 1e-6) & (tt > 1e-6)
        gx, gy = self.gradient(x, y)
        n = np.stack([-gx, -gy, np.ones_like(gx)], axis=1)
        n /= np.linalg.norm(n, axis=1, keepdims=True)
        return np.where(ok, tt, INF), n


# ---------------------------------------------------------------------------
# the tank (tank frame)


class Tank:
    """Shell, bottom-plate projection and foundation of one tank, with its settlement."""

    def __init__(self, ts: TankScene, st: SettlementScene | None, label_shell=SHELL, detailed=True):
        self.ts = ts
        self.st = st if st is not None else SettlementScene()
        self.R = ts.radius
        self.w = ts.projection.width
        self.thk = ts.projection.thickness
        self.detailed = detailed
        self.label_shell = label_shell
        A = self.st.tilt.amplitude
        self.sin_a = min(A / self.R, 0.2)
        self.cos_a = np.sqrt(1 - self.sin_a ** 2)
        th_l = np.radians(self.st.tilt.low_azimuth_deg)
        axis = np.array([self.sin_a * np.sin(th_l), self.sin_a * np.cos(th_l), self.cos_a])
        self.axis = axis
        self.rot = _rotation_z_to(axis)  # tank frame -> world
        self.c0 = np.array([ts.center[0], ts.center[1], ts.base_elevation])
        self.steps = np.asarray(ts.course_radius_steps, dtype=float)

    # --- frame changes
    def to_tank(self, p):
        return (p - self.c0) @ self.rot

    def dir_to_tank(self, d):
        return d @ self.rot

    def to_world(self, p):
        return p @ self.rot.T + self.c0

    # --- surfaces (tank frame)
    def u(self, az):
        """Tank-frame junction height: (uniform + out-of-plane) / cos(tilt)."""
        return (self.st.uniform + out_of_plane(self.st, self.R, az)) / self.cos_a

    def ovality_amplitude(self, z):
        """Amplitude of the cos 2 theta radius change at tank-frame height z (m above the unsettled base)."""
        ov = self.ts.ovality
        return ov.amplitude + ov.growth * np.asarray(z, dtype=float) if ov.growth else ov.amplitude

    def r_shell(self, az, z):
        r = self.R + self.ovality_amplitude(z) * np.cos(2 * (az - np.radians(self.ts.ovality.azimuth_deg)))
        if len(self.steps) > 1:
            k = np.clip(np.floor(z / self.ts.course_height).astype(int), 0, len(self.steps) - 1)
            r = r + self.steps[k]
        return r

    def r_base(self, az):
        return self.R + self.ts.ovality.amplitude * np.cos(2 * (az - np.radians(self.ts.ovality.azimuth_deg)))

    def foundation_radius(self):
        return self.R + self.ts.foundation.outer_offset

    def surfaces_hit(self, o_w, d_w):
        """First hit against this tank's surfaces. Returns t, normal (world), label."""
        o = self.to_tank(o_w)
        d = self.dir_to_tank(d_w)
        n = len(d)
        best_t = np.full(n, INF)
        best_n = np.zeros((n, 3))
        best_l = np.full(n, -1)

        def take(t, nrm, label):
            better = t < best_t
            best_t[better] = t[better]
            best_n[better] = nrm[better] if nrm.ndim == 2 else nrm
            best_l[better] = label

        take(*self._hit_shell(o, d), self.label_shell)
        if self.detailed:
            take(*self._hit_plate_top(o, d), PLATE_TOP)
            take(*self._hit_vertical(o, d, lambda az: self.r_base(az) + self.w,
                                     lambda az: self.u(az) - self.thk, lambda az: self.u(az)), PLATE_EDGE)
            if self.ts.foundation.type == "ringwall":
                take(*self._hit_ringwall_top(o, d), FOUNDATION_TOP)
                take(*self._hit_vertical(o, d, lambda az: np.full_like(az, self.foundation_radius()),
                                         lambda az: np.full_like(az, -50.0), lambda az: self.u(az) - self.thk),
                     FOUNDATION_FACE)
            else:
                take(*self._hit_berm(o, d), FOUNDATION_TOP)
        return best_t, best_n @ self.rot.T, best_l

    def _circle_roots(self, o, d, r):
        a = d[:, 0] ** 2 + d[:, 1] ** 2
        b = 2 * (o[0] * d[:, 0] + o[1] * d[:, 1])
        c = o[0] ** 2 + o[1] ** 2 - r ** 2
        return _quadratic_first(a, b, c)

    def _hit_shell(self, o, d):
        t, _ = self._circle_roots(o, d, np.full(len(d), self.R))
        for _ in range(3):
            tt = np.where(np.isfinite(t), t, 0.0)
            p = o + tt[:, None] * d
            az = azimuth(p[:, 0], p[:, 1])
            r = self.r_shell(az, p[:, 2])
            t_new, _ = self._circle_roots(o, d, r)
            t = np.where(np.isfinite(t), t_new, INF)
        tt = np.where(np.isfinite(t), t, 0.0)
        p = o + tt[:, None] * d
        az = azimuth(p[:, 0], p[:, 1])
        ok = np.isfinite(t) & (t > 1e-6) & (p[:, 2] >= self.u(az)) & (p[:, 2] <= self.ts.height)
        nrm = np.stack([p[:, 0], p[:, 1], np.zeros(len(d))], axis=1)
        nrm /= np.maximum(np.linalg.norm(nrm, axis=1, keepdims=True), 1e-12)
        return np.where(ok, t, INF), nrm

    def _hit_height(self, o, d, height_of_az, first_az=None):
        """Ray against z = h(azimuth) by fixed-point iteration on the azimuth."""
        dz = d[:, 2]
        down = dz < -1e-9
        if first_az is None:
            t0, _ = self._circle_roots(o, d, np.full(len(d), self.R))
            tt = np.where(np.isfinite(t0), t0, 0.0)
            p = o + tt[:, None] * d
            az = azimuth(p[:, 0], p[:, 1])
        else:
            az = first_az
        t = np.full(len(d), INF)
        for _ in range(12):
            h = height_of_az(az)
            with np.errstate(divide="ignore", invalid="ignore"):
                t = np.where(down, (h - o[2]) / dz, INF)
            tt = np.where(np.isfinite(t), t, 0.0)
            p = o + tt[:, None] * d
            az = azimuth(p[:, 0], p[:, 1])
        return t, p, az

    def _hit_plate_top(self, o, d):
        t, p, az = self._hit_height(o, d, self.u)
        rho = np.hypot(p[:, 0], p[:, 1])
        rb = self.r_base(az)
        ok = np.isfinite(t) & (t > 1e-6) & (rho >= rb) & (rho <= rb + self.w)
        return np.where(ok, t, INF), np.array([0.0, 0.0, 1.0])

    def _hit_ringwall_top(self, o, d):
        t, p, az = self._hit_height(o, d, lambda a: self.u(a) - self.thk)
        rho = np.hypot(p[:, 0], p[:, 1])
        ok = np.isfinite(t) & (t > 1e-6) & (rho >= self.r_base(az) + self.w) & (rho <= self.foundation_radius())
        return np.where(ok, t, INF), np.array([0.0, 0.0, 1.0])

    def _hit_vertical(self, o, d, r_of_az, zlo_of_az, zhi_of_az):
        t, _ = self._circle_roots(o, d, np.full(len(d), self.R + self.w))
        for _ in range(2):
            tt = np.where(np.isfinite(t), t, 0.0)
            p = o + tt[:, None] * d
            az = azimuth(p[:, 0], p[:, 1])
            t, _ = self._circle_roots(o, d, r_of_az(az))
        tt = np.where(np.isfinite(t), t, 0.0)
        p = o + tt[:, None] * d
        az = azimuth(p[:, 0], p[:, 1])
        ok = np.isfinite(t) & (t > 1e-6) & (p[:, 2] >= zlo_of_az(az)) & (p[:, 2] <= zhi_of_az(az))
        nrm = np.stack([p[:, 0], p[:, 1], np.zeros(len(d))], axis=1)
        nrm /= np.maximum(np.linalg.norm(nrm, axis=1, keepdims=True), 1e-12)
        return np.where(ok, t, INF), nrm

    def _hit_berm(self, o, d):
        slope = self.ts.foundation.berm_slope
        r0 = self.R + self.w
        dz = d[:, 2]
        # start on the berm's top level, then Newton on f(t) = z - h(rho, az)
        t, p, az = self._hit_height(o, d, lambda a: self.u(a) - self.thk)
        tt = np.where(np.isfinite(t), t, 0.0)
        for _ in range(10):
            p = o + tt[:, None] * d
            rho = np.maximum(np.hypot(p[:, 0], p[:, 1]), 1e-9)
            az = azimuth(p[:, 0], p[:, 1])
            h = self.u(az) - self.thk - slope * np.maximum(rho - r0, 0)
            f = p[:, 2] - h
            drho = (p[:, 0] * d[:, 0] + p[:, 1] * d[:, 1]) / rho
            fp = dz + slope * drho * (rho > r0)
            with np.errstate(divide="ignore", invalid="ignore"):
                step = np.where(np.abs(fp) > 1e-9, f / fp, 0.0)
            tt = tt - np.clip(step, -2.0, 2.0)
        p = o + tt[:, None] * d
        rho = np.hypot(p[:, 0], p[:, 1])
        az = azimuth(p[:, 0], p[:, 1])
        h = self.u(az) - self.thk - slope * np.maximum(rho - r0, 0)
        ok = np.isfinite(t) & (tt > 1e-6) & (np.abs(p[:, 2] - h) < 1e-6) & (rho >= r0) & (rho < r0 + 20)
        nrm = np.stack([slope * p[:, 0] / np.maximum(rho, 1e-9), slope * p[:, 1] / np.maximum(rho, 1e-9),
                        np.ones(len(d))], axis=1)
        nrm /= np.linalg.norm(nrm, axis=1, keepdims=True)
        return np.where(ok, tt, INF), nrm

    def bound(self):
        c = self.c0 + self.axis * self.ts.height / 2
        return c, float(np.hypot(self.foundation_radius() + 1, self.ts.height / 2 + 1))


def _rotation_z_to(a):
    """Smallest rotation taking +z to unit vector a (columns: images of x, y, z)."""
    z = np.array([0.0, 0.0, 1.0])
    v = np.cross(z, a)
    s = np.linalg.norm(v)
    c = float(z @ a)
    if s < 1e-15:
        return np.eye(3)
    vx = np.array([[0, -v[2], v[1]], [v[2], 0, -v[0]], [-v[1], v[0], 0]])
    return np.eye(3) + vx + vx @ vx * ((1 - c) / s ** 2)


# ---------------------------------------------------------------------------
# clutter


def build_clutter(scene: Scene, tank: Tank, ground: Ground) -> list:
    """Boxes, cylinders and spheres of the clutter around the main tank (world frame)."""
    prims = []
    R = tank.R
    cl = scene.clutter
    cx, cy = scene.tank.center
    zj0 = scene.tank.base_elevation + scene.settlement.uniform
    if cl.stair is not None:
        s = cl.stair
        rise = 0.2
        run = rise / np.tan(np.radians(s.rise_angle_deg))
        r_in = R + s.gap
        r_mid = r_in + s.width / 2
        sign = 1.0 if s.direction == "cw" else -1.0
        n_treads = int((scene.tank.height - s.first_tread_height) / rise)
        th0 = np.radians(s.start_azimuth_deg)
        for i in range(n_treads):
            th = th0 + sign * i * run / r_mid
            z = zj0 + s.first_tread_height + i * rise
            radial = np.array([np.sin(th), np.cos(th), 0.0])
            tang = np.array([np.cos(th), -np.sin(th), 0.0]) * sign
            axes = np.stack([radial, tang, [0, 0, 1.0]], axis=1)
            c = np.array([cx, cy, 0]) + radial * r_mid + np.array([0, 0, z])
            prims.append(Box(c, axes, np.array([s.width / 2, run * 0.55, 0.02]), STAIR))
            # outer stringer
            c2 = np.array([cx, cy, 0]) + radial * (r_in + s.width + 0.01) + np.array([0, 0, z - 0.08])
            prims.append(Box(c2, axes, np.array([0.006, run * 0.52, 0.12]), STAIR))
            if i % 4 == 0:  # handrail post
                c3 = np.array([cx, cy, 0]) + radial * (r_in + s.width + 0.03) + np.array([0, 0, z + 0.5])
                prims.append(Box(c3, axes, np.array([0.025, 0.025, 0.5]), STAIR))
        # foot post from the ground to the first tread
        radial = np.array([np.sin(th0), np.cos(th0), 0.0])
        foot = np.array([cx, cy, 0]) + radial * (r_in + s.width + 0.03)
        zg = float(ground.height(np.array([foot[0]]), np.array([foot[1]]))[0])
        top = zj0 + s.first_tread_height
        prims.append(Cylinder(np.array([foot[0], foot[1], zg - 0.05]), np.array([0, 0, 1.0]), 0.04,
                              top - zg + 0.05, STAIR))
    for nz in cl.nozzles:
        th = np.radians(nz.azimuth_deg)
        radial = np.array([np.sin(th), np.cos(th), 0.0])
        zj = scene.tank.base_elevation + float(junction_offset(scene.settlement, R, th))
        base = np.array([cx, cy, zj + nz.height]) + radial * (R - 0.01)
        prims.append(Cylinder(base, radial, nz.diameter / 2, nz.length, PIPE))
        prims.append(Cylinder(base + radial * 0.15, radial, nz.diameter / 2 + 0.04, 0.04, PIPE))  # flange
        if nz.support:
            p = base + radial * (nz.length - 0.3)
            zg = float(ground.height(np.array([p[0]]), np.array([p[1]]))[0])
            h = p[2] - nz.diameter / 2 - zg
            if h > 0.05:
                prims.append(Cylinder(np.array([p[0], p[1], zg - 0.05]), np.array([0, 0, 1.0]), 0.06, h + 0.05, PIPE))
    for pole in cl.poles:
        x, y = pole.position
        zg = float(ground.height(np.array([x]), np.array([y]))[0])
        prims.append(Cylinder(np.array([x, y, zg - 0.1]), np.array([0, 0, 1.0]), pole.diameter / 2, pole.height, POLE))
    for b in cl.bushes:
        x, y = b.position
        zg = float(ground.height(np.array([x]), np.array([y]))[0])
        prims.append(Sphere(np.array([x, y, zg + b.radius * 0.6]), b.radius, BUSH))
    return prims
