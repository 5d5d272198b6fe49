"""True shell geometry of a simulated tank: out-of-plumbness and radius, for the truth file and the tests.

Heights are metres above the settled junction plane: at world azimuth theta the plane lies at
``base_elevation + uniform + tilt term(theta)`` (the junction elevation without its out-of-plane part), which is
what a scan can refer heights to. Every quantity is measured in the world frame (vertical = world z):

- the face distance ``rho(P, theta, z)``: horizontal distance from the vertical line through the plan point P to the
  shell's outer face along world azimuth theta at world height z, solved on the analytic shell of ``geometry.Tank``
  (tilted axis, course steps, ovality growing with height);
- radial out-of-plumbness: rho at a height minus rho at the reference height, both from the vertical through the
  tank-frame origin (to first order independent of that choice);
- tangential out-of-plumbness: the horizontal shift of the shell axis between the two heights, along the
  direction of increasing azimuth (an ovalised or stepped section keeps its centre on the axis);
- radius: rho from the vertical through the axis point of the section at that height.
"""
from __future__ import annotations

import numpy as np

from . import geometry as G
from .scene import Scene

#: where the geometry stage refers its out-of-plumbness by default: 0.3 m (the standard's 1 ft) above the junction
REFERENCE_HEIGHT = 0.3
#: default measuring bands of the geometry stage end this far below a course seam or the shell top, and are this
#: high: the truth file gives values at their centres (0.2 m below each seam and below the top)
BAND_BELOW_EDGE = 0.1
BAND_HEIGHT = 0.2


def junction_plane(scene: Scene, az_rad) -> np.ndarray:
    """World elevation (m) of the settled junction plane at the shell: base + uniform + tilt term."""
    st = scene.settlement
    return scene.tank.base_elevation + st.uniform + G.tilt_term(st, np.asarray(az_rad, dtype=float))


def face_distance(tank: G.Tank, origin_xy, az_rad, z_world, iterations: int = 12) -> np.ndarray:
    """Horizontal distance (m) from the vertical through ``origin_xy`` to the shell face along world azimuth
    ``az_rad`` at world height ``z_world`` (broadcast arrays), by fixed-point iteration on the analytic shell."""
    az = np.asarray(az_rad, dtype=float)
    z = np.broadcast_to(np.asarray(z_world, dtype=float), np.broadcast(az, z_world).shape)
    az = np.broadcast_to(az, z.shape)
    u = np.stack([np.sin(az), np.cos(az), np.zeros_like(az)], axis=-1)
    base = np.stack([np.full(z.shape, origin_xy[0]), np.full(z.shape, origin_xy[1]), z], axis=-1)
    rho = np.full(z.shape, tank.R)
    for _ in range(iterations):
        q = tank.to_tank((base + rho[..., None] * u).reshape(-1, 3)).reshape(z.shape + (3,))
        r_t = np.hypot(q[..., 0], q[..., 1])
        err = r_t - tank.r_shell(G.azimuth(q[..., 0], q[..., 1]), q[..., 2])
        rho = rho - err
    return rho


def axis_xy(tank: G.Tank, z_world) -> np.ndarray:
    """Plan position (m) of the shell axis at world height ``z_world`` (scalar or (n,)), shape (..., 2)."""
    t = (np.asarray(z_world, dtype=float) - tank.c0[2]) / tank.axis[2]
    return tank.c0[:2] + np.multiply.outer(t, tank.axis[:2])


def plumbness(scene: Scene, az_deg, heights, ref_height: float = REFERENCE_HEIGHT) -> dict:
    """True out-of-plumbness at azimuths (n_az,) and heights (n_h,) above the junction plane, relative to the face
    at ``ref_height``: arrays (n_h, n_az) of ``offset_radial`` (outward positive), ``offset_tangential`` (toward
    increasing azimuth) and ``offset_total``, m."""
    tank = G.Tank(scene.tank, scene.settlement)
    th = np.radians(np.asarray(az_deg, dtype=float))
    h = np.asarray(heights, dtype=float)
    plane = junction_plane(scene, th)
    z = plane[None, :] + h[:, None]
    rho = face_distance(tank, tank.c0[:2], th[None, :], z)
    rho_ref = face_distance(tank, tank.c0[:2], th, plane + ref_height)
    radial = rho - rho_ref[None, :]
    mid = scene.tank.base_elevation + scene.settlement.uniform
    shift = axis_xy(tank, mid + h) - axis_xy(tank, mid + ref_height)  # (n_h, 2)
    tangential = shift[:, 0:1] * np.cos(th)[None, :] - shift[:, 1:2] * np.sin(th)[None, :]
    return {"offset_radial": radial, "offset_tangential": tangential, "offset_total": np.hypot(radial, tangential)}


def radius(scene: Scene, az_deg, heights) -> np.ndarray:
    """True outer radius (m), (n_h, n_az): from the axis point of the section at each height above the junction
    plane, along world azimuth."""
    tank = G.Tank(scene.tank, scene.settlement)
    th = np.radians(np.asarray(az_deg, dtype=float))
    h = np.asarray(heights, dtype=float)
    plane = junction_plane(scene, th)
    mid = scene.tank.base_elevation + scene.settlement.uniform
    out = np.empty((len(h), len(th)))
    for i, hh in enumerate(h):
        out[i] = face_distance(tank, axis_xy(tank, mid + hh), th, plane + hh)
    return out


def course_tops(scene: Scene) -> np.ndarray:
    """Heights (m above the junction plane) of the course seams and of the shell top."""
    t = scene.tank
    n = int(np.ceil(t.height / t.course_height - 1e-9))
    seams = np.arange(1, n) * t.course_height
    return np.concatenate([seams, [t.height]]) - scene.settlement.uniform


def default_heights(scene: Scene) -> tuple[np.ndarray, np.ndarray]:
    """(plumbness heights: the band centres below each seam and the top; roundness heights: 0.3 m and each course's
    mid-height), m above the junction plane."""
    tops = course_tops(scene)
    plumb = tops - BAND_BELOW_EDGE - BAND_HEIGHT / 2
    bottoms = np.concatenate([[0.0], tops[:-1]])
    return plumb, np.concatenate([[REFERENCE_HEIGHT], (bottoms + tops) / 2])


def truth_section(scene: Scene, units_factor: float) -> dict:
    """The truth file's ``geometry`` section, lengths divided by ``units_factor`` (metres per file unit)."""
    f = units_factor
    plumb_h, round_h = default_heights(scene)
    az_p = np.arange(0.0, 360.0, 10.0)
    az_r = np.arange(0.5, 360.0, 1.0)
    pl = plumbness(scene, az_p, plumb_h)
    rr = radius(scene, az_r, round_h)
    tank = G.Tank(scene.tank, scene.settlement)
    amp = tank.ovality_amplitude(round_h + scene.settlement.uniform)
    return {
        "heights": "m above the settled junction plane (base_elevation + uniform + tilt term at the shell); world "
                   "vertical; azimuth degrees clockwise from +Y",
        "reference_height": REFERENCE_HEIGHT / f,
        "course_tops": (course_tops(scene) / f).tolist(),
        "axis_tilt_deg": float(np.degrees(np.arccos(tank.axis[2]))),
        "plumbness": {
            "note": f"relative to the face at reference_height, at the centres of {BAND_HEIGHT} m bands ending "
                    f"{BAND_BELOW_EDGE} m below each course seam and below the shell top; radial outward positive, "
                    "tangential toward increasing azimuth",
            "azimuth_deg": az_p.tolist(), "heights": (plumb_h / f).tolist(),
            **{k: (v / f).tolist() for k, v in pl.items()},
        },
        "roundness": {
            "note": "outer radius from the axis point of the section, per azimuth (1 degree bin centres) and height",
            "azimuth_deg": az_r.tolist(), "heights": (round_h / f).tolist(), "radius": (rr / f).tolist(),
            "ovality_amplitude": (np.broadcast_to(amp, round_h.shape) / f).tolist(),
        },
    }
