"""The permissible settled-arc table (YAML): the standard gives it as charts, so the user supplies it.

File layout: ``units`` (length unit of the numbers), ``title``, ``illustrative`` (true only for demo values),
and ``curves``: a list of {roof, diameter_min, diameter_max, arc_length: [...], permissible_depth: [...]}.
"""
from __future__ import annotations

import importlib.resources
from dataclasses import dataclass
from pathlib import Path
from typing import Optional

import numpy as np

from ..config import parse_yaml, read_yaml_text
from ..errors import ConfigError
from ..units import to_metres

DEMO_TABLE_SOURCE = "packaged demo table"
#: the config value that selects the packaged ILLUSTRATIVE table (``evaluate.arc_table``)
DEMO_TABLE_KEY = "illustrative-demo"


@dataclass(frozen=True)
class ArcCurve:
    roof: str  # fixed, floating, none or any
    d_min: float  # m
    d_max: float  # m
    arc: np.ndarray  # (c,) m, increasing
    depth: np.ndarray  # (c,) m, permissible depth at each arc length


@dataclass(frozen=True)
class ArcTable:
    illustrative: bool
    title: str
    source: str  # the file, or DEMO_TABLE_SOURCE
    curves: tuple  # ArcCurve

    def permissible(self, roof: str, diameter: float) -> Optional[tuple[np.ndarray, np.ndarray]]:
        """(arc (m), depth (m)) curve for the roof type and diameter, or None."""
        cands = [c for c in self.curves if c.roof in (roof, "any") and c.d_min <= diameter <= c.d_max]
        if not cands:
            return None
        return cands[0].arc, cands[0].depth


def load_arc_table(path=None) -> Optional[ArcTable]:
    """The table at ``path``; the packaged ILLUSTRATIVE demo table for ``illustrative-demo``; None for None."""
    if path is None:
        return None
    if path == DEMO_TABLE_KEY:
        text = importlib.resources.files("chimeline").joinpath("data/arc_table_demo.yaml").read_text()
        src = DEMO_TABLE_SOURCE
    else:
        p = Path(path)
        if not p.is_file():
            raise ConfigError(f"evaluate.arc_table: {p}: {'is a folder, not a table file' if p.is_dir() else 'file not found'}"
                              f" (give a YAML table, or {DEMO_TABLE_KEY} for the packaged illustrative one)")
        text = read_yaml_text(p, "arc table")
        src = str(p)
    try:
        data = parse_yaml(text, src)
        unit = data.get("units", "m")
        f = to_metres(unit)
        curves = []
        for i, r in enumerate(data["curves"]):
            arc = np.asarray(r["arc_length"], dtype=float) * f
            dep = np.asarray(r["permissible_depth"], dtype=float) * f
            if arc.ndim != 1 or not (np.all(np.isfinite(arc)) and np.all(np.isfinite(dep))):
                raise ValueError(f"curves[{i}]: arc_length and permissible_depth must be lists of finite numbers")
            if arc.shape != dep.shape or len(arc) < 2 or np.any(np.diff(arc) <= 0):
                raise ValueError(f"curves[{i}]: arc_length must increase and match permissible_depth")
            curves.append(ArcCurve(roof=r.get("roof", "any"), d_min=float(r.get("diameter_min", 0)) * f,
                                   d_max=float(r.get("diameter_max", 1e9)) * f, arc=arc, depth=dep))
    except ConfigError:
        raise
    except Exception as exc:
        raise ConfigError(f"{src}: not a valid permissible settlement table ({type(exc).__name__}: "
                          f"{str(exc)[:120]})") from None
    return ArcTable(illustrative=bool(data.get("illustrative", False)), title=data.get("title", ""), source=src,
                    curves=tuple(curves))
