"""Arc-length check: settled arcs between successive local highs of the out-of-plane curve.

A settled arc runs between two successive local maxima of the out-of-plane settlement; its depth is the
largest distance of the curve below the chord joining the two highs. The permissible depth for its arc
length comes from a user-supplied table (the standard gives it as charts); chimeline ships only an
ILLUSTRATIVE demo table, labelled as such wherever it is used.
"""
from __future__ import annotations

import importlib.resources
from pathlib import Path

import numpy as np
import yaml

from ..errors import ConfigError
from ..units import to_metres


def load_table(path=None) -> dict:
    """Permissible settled-arc table: {'illustrative': bool, 'title', 'rows': [{roof, d_min, d_max, arc, depth}]} in m."""
    if path is None:
        text = importlib.resources.files("pipeline").joinpath("data/arc_table_demo.yaml").read_text()
        src = "packaged demo table"
    else:
        p = Path(path)
        if not p.exists():
            raise ConfigError(f"evaluate.arc_table: {p}: file not found")
        text = p.read_text()
        src = str(p)
    try:
        data = yaml.safe_load(text)
        unit = data.get("units", "m")
        f = to_metres(unit)
        rows = []
        for i, r in enumerate(data["curves"]):
            arc = np.asarray(r["arc_length"], dtype=float) * f
            dep = np.asarray(r["permissible_depth"], dtype=float) * f
            if arc.shape != dep.shape or len(arc) < 2 or np.any(np.diff(arc) <= 0):
                raise ValueError(f"curves[{i}]: arc_length must increase and match permissible_depth")
            rows.append({"roof": r.get("roof", "any"), "d_min": float(r.get("diameter_min", 0)) * f,
                         "d_max": float(r.get("diameter_max", 1e9)) * f, "arc": arc, "depth": dep})
    except ConfigError:
        raise
    except Exception as exc:
        raise ConfigError(f"{src}: not a valid permissible settlement table ({exc})") from None
    return {"illustrative": bool(data.get("illustrative", False)), "title": data.get("title", ""),
            "source": src, "rows": rows}


def permissible(table: dict, roof: str, diameter: float):
    """(arc (m), depth (m)) curve for the roof type and diameter, or None."""
    cands = [r for r in table["rows"] if r["roof"] in (roof, "any") and r["d_min"] <= diameter <= r["d_max"]]
    if not cands:
        return None
    return cands[0]["arc"], cands[0]["depth"]


def settled_arcs(theta_deg, u, radius, min_depth=0.0):
    """Arcs between successive local highs of u on a closed ring (theta increasing, uniform or not)."""
    th = np.asarray(theta_deg, dtype=float)
    u = np.asarray(u, dtype=float)
    n = len(u)
    if n < 3:
        return []
    hi = np.nonzero((u >= np.roll(u, 1)) & (u > np.roll(u, -1)))[0]
    if len(hi) < 1:
        return []
    out = []
    for j in range(len(hi)):
        a, b = hi[j], hi[(j + 1) % len(hi)]
        idx = np.arange(a, b + 1) if b > a else np.concatenate([np.arange(a, n), np.arange(0, b + 1)])
        t = th[idx].copy()
        t = np.where(t < t[0], t + 360.0, t)
        if len(hi) == 1:
            t[-1] = t[0] + 360.0
        s = np.radians(t - t[0]) * radius
        L = s[-1]
        if L <= 0:
            continue
        chord = u[idx[0]] + (u[idx[-1]] - u[idx[0]]) * s / L
        below = chord - u[idx]
        k = int(np.argmax(below))
        if below[k] <= min_depth:
            continue
        out.append({"start_deg": float(np.mod(t[0], 360)), "end_deg": float(np.mod(t[-1], 360)),
                    "arc_length": float(L), "depth": float(below[k]), "deepest_deg": float(np.mod(t[k], 360))})
    return out
