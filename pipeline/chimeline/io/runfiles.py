"""Everything in a run folder, typed: one writer format and one reader for profile.csv, residuals.csv,
profile.json, config.resolved.yaml and evaluation.json. ``compare``, ``rerun`` and ``evaluate`` read run
folders only through here.

CSV lengths are in the run's output unit (``units`` in profile.json); the reader returns them in that unit
and says which, with ``metres_per_unit`` to convert.
"""
from __future__ import annotations

import csv
import dataclasses
import io
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Optional

import numpy as np
import yaml

from ..errors import InputError
from ..notices import CAUTION
from ..units import LENGTH_FACTORS, UNIT_LABELS

PROFILE_CSV = "profile.csv"
PROFILE_JSON = "profile.json"
RESIDUALS_CSV = "residuals.csv"
CONFIG_YAML = "config.resolved.yaml"
EVALUATION_JSON = "evaluation.json"

#: columns of profile.csv; lengths carry the unit as a suffix in the header (elevation_m, std_error_ft, ...)
PROFILE_COLUMNS = ("azimuth_deg", "elevation", "std_error", "n_points", "n_rejected", "n_stations", "n_eff",
                   "scale", "status", "evidence", "width_deg")
#: columns a profile.csv must have (files written before the evidence columns existed lack the last two)
PROFILE_REQUIRED = PROFILE_COLUMNS[:9]
PROFILE_LENGTHS = ("elevation", "std_error", "scale")
RESIDUAL_COLUMNS = ("azimuth_deg", "station", "bin", "residual")
RESIDUAL_LENGTHS = ("residual",)


def unit_column(name: str, units: str) -> str:
    """A length column's header with its unit: elevation -> elevation_m."""
    return f"{name}_{units}"


def split_unit(header: str):
    """(name, unit) of a header like elevation_us_ft; (header, None) when it carries no known unit."""
    for u in sorted(LENGTH_FACTORS, key=len, reverse=True):
        if header.endswith("_" + u):
            return header[: -len(u) - 1], u
    return header, None


def _caution_line() -> str:
    return f"# Caution: {CAUTION}\n"


def _fmt(v) -> str:
    """Full precision ('' where not finite)."""
    v = float(v)
    return repr(v) if np.isfinite(v) else ""


@dataclass(frozen=True)
class ProfileTable:
    """profile.csv: one row per azimuth bin; lengths in the run's output unit."""

    azimuth_deg: np.ndarray  # (n_bins,) bin centres
    elevation: np.ndarray  # (n_bins,) nan where the bin has no value
    std_error: np.ndarray  # (n_bins,) 1 sigma, nan where no value
    n_points: np.ndarray  # (n_bins,) int
    n_rejected: np.ndarray  # (n_bins,) int
    n_stations: np.ndarray  # (n_bins,) int
    n_eff: np.ndarray  # (n_bins,) nan where no value
    scale: np.ndarray  # (n_bins,) robust scale of the kept points, nan where fewer than two
    status: np.ndarray  # (n_bins,) str: ok, sparse, suspect, empty
    units: str = "m"  # unit of the lengths (elevation, std_error, scale); "" when read from bare headers
    evidence: Optional[np.ndarray] = None  # (n_bins,) str: kinds of junction evidence joined ("top+foot", ...)
    width_deg: Optional[np.ndarray] = None  # (n_bins,) degrees of azimuth the bin's value used (nan where empty)

    def to_csv(self) -> str:
        """Full precision; length headers carry the unit; a comment line states units and the caution."""
        buf = io.StringIO()
        buf.write(f"# chimeline junction profile; lengths in {UNIT_LABELS.get(self.units, self.units)} (scan datum); "
                  f"azimuth_deg: bin centre, degrees clockwise from the frame's reference; std_error: 1 sigma\n")
        buf.write(_caution_line())
        w = csv.writer(buf, lineterminator="\n")
        w.writerow([unit_column(c, self.units) if c in PROFILE_LENGTHS else c for c in PROFILE_COLUMNS])
        for i in range(len(self.azimuth_deg)):
            w.writerow([_fmt(self.azimuth_deg[i]), _fmt(self.elevation[i]), _fmt(self.std_error[i]),
                        int(self.n_points[i]), int(self.n_rejected[i]), int(self.n_stations[i]), _fmt(self.n_eff[i]),
                        _fmt(self.scale[i]), self.status[i], self.evidence[i] if self.evidence is not None else "",
                        _fmt(self.width_deg[i]) if self.width_deg is not None else ""])
        return buf.getvalue()

    @classmethod
    def from_csv(cls, text: str, source) -> "ProfileTable":
        rows, names, units = _unit_rows(text, source, PROFILE_REQUIRED, PROFILE_LENGTHS)
        num = lambda c, i, r: _cell(r, names.get(c, c), i, source, empty_ok=True)  # noqa: E731
        cols = {c: np.array([num(c, i, r) for i, r in enumerate(rows, start=2)]) for c in PROFILE_REQUIRED[:-1]}
        has_ev = bool(rows) and "evidence" in rows[0] and "width_deg" in rows[0]
        return cls(azimuth_deg=cols["azimuth_deg"], elevation=cols["elevation"], std_error=cols["std_error"],
                   n_points=np.nan_to_num(cols["n_points"]).astype(int),
                   n_rejected=np.nan_to_num(cols["n_rejected"]).astype(int),
                   n_stations=np.nan_to_num(cols["n_stations"]).astype(int), n_eff=cols["n_eff"],
                   scale=cols["scale"], status=np.array([(r.get("status") or "").strip() for r in rows], dtype=str),
                   units=units or "",
                   evidence=np.array([(r["evidence"] or "").strip() for r in rows], dtype=str) if has_ev else None,
                   width_deg=np.array([num("width_deg", i, r) for i, r in enumerate(rows, start=2)])
                   if has_ev else None)


@dataclass(frozen=True)
class ResidualTable:
    """residuals.csv: kept junction points' residuals about their bin line, per station (output unit)."""

    azimuth_deg: np.ndarray  # (m,)
    station: np.ndarray  # (m,) int
    bin: np.ndarray  # (m,) int
    residual: np.ndarray  # (m,)
    units: str = "m"  # unit of the residuals

    def to_csv(self) -> str:
        buf = io.StringIO()
        buf.write(f"# kept junction points' residuals about their bin line; lengths in "
                  f"{UNIT_LABELS.get(self.units, self.units)}\n")
        w = csv.writer(buf, lineterminator="\n")
        w.writerow([unit_column(c, self.units) if c in RESIDUAL_LENGTHS else c for c in RESIDUAL_COLUMNS])
        for a, s, b, r in zip(self.azimuth_deg, self.station, self.bin, self.residual):
            w.writerow([_fmt(a), int(s), int(b), _fmt(r)])
        return buf.getvalue()

    @classmethod
    def from_csv(cls, text: str, source) -> "ResidualTable":
        rows, names, units = _unit_rows(text, source, RESIDUAL_COLUMNS, RESIDUAL_LENGTHS)
        col = {c: np.array([_cell(r, names[c], i, source) for i, r in enumerate(rows, start=2)])
               for c in RESIDUAL_COLUMNS}
        return cls(azimuth_deg=col["azimuth_deg"], station=col["station"].astype(int), bin=col["bin"].astype(int),
                   residual=col["residual"], units=units or "")


def _unit_rows(text, source, columns, lengths):
    """Rows, {column: header as found}, and the unit the length headers carry (None for bare headers)."""
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"{source}: the file is empty")
    header = next(csv.reader(lines[:1]))
    names, units = {}, set()
    for h in header:
        base, u = split_unit(h.strip())
        if base in lengths and u is not None:
            names[base] = h
            units.add(u)
        elif h.strip() in columns:
            names[h.strip()] = h
    missing = [c for c in columns if c not in names]
    if missing:
        raise InputError(f"{source}: missing column(s) {', '.join(missing)}")
    if len(units) > 1:
        raise InputError(f"{source}: the length columns carry different units ({', '.join(sorted(units))})")
    return list(csv.DictReader(lines)), names, (units.pop() if units else None)


def _cell(row, col, i, source, empty_ok=False):
    v = (row.get(col) or "").strip()
    if v == "" and empty_ok:
        return np.nan
    try:
        return float(v)
    except ValueError:
        raise InputError(f"{source}: row {i}: '{col}' is not a number: {v[:40]!r}") from None


def read_json(path) -> dict:
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read: {exc}") from None
    except ValueError as exc:
        raise InputError(f"{path}: not valid JSON ({str(exc)[:120]})") from None
    if not isinstance(data, dict):
        raise InputError(f"{path}: expected a JSON object, got {type(data).__name__}")
    return data


def read_summary(path) -> dict:
    """profile.json, with its length unit checked."""
    js = read_json(path)
    units = js.get("units")
    if units not in LENGTH_FACTORS:
        raise InputError(f"{path}: 'units' must be one of {', '.join(LENGTH_FACTORS)}, got {str(units)[:40]!r}")
    return js


@dataclass(frozen=True)
class RunFolder:
    """A finished ``chimeline run`` folder, read back."""

    path: Path
    summary: dict  # profile.json
    config: dict  # config.resolved.yaml
    profile: ProfileTable
    residuals: Optional[ResidualTable]
    evaluation: Optional[dict]  # evaluation.json, when the run evaluated

    @property
    def units(self) -> str:
        return self.summary["units"]

    @property
    def metres_per_unit(self) -> float:
        return LENGTH_FACTORS[self.units]

    def get(self, *keys, default=None):
        """A nested value of profile.json, or ``default``."""
        node = self.summary
        for k in keys:
            if not isinstance(node, dict) or k not in node:
                return default
            node = node[k]
        return node


def read_run_folder(run_dir, *, need_config: bool = False) -> RunFolder:
    d = Path(run_dir)
    pj = d / PROFILE_JSON
    if not d.is_dir() or not pj.exists():
        raise InputError(f"{d}: not a chimeline run folder (no {PROFILE_JSON})")
    summary = read_summary(pj)
    pc = d / PROFILE_CSV
    if not pc.exists():
        raise InputError(f"{d}: not a complete run folder (no {PROFILE_CSV})")
    profile = ProfileTable.from_csv(_text(pc), pc)
    if profile.units and profile.units != summary["units"]:
        raise InputError(f"{pc}: its columns are in {profile.units} but {pj} says units {summary['units']!r}")
    profile = dataclasses.replace(profile, units=summary["units"])
    rp = d / RESIDUALS_CSV
    residuals = ResidualTable.from_csv(_text(rp), rp) if rp.exists() else None
    cp = d / CONFIG_YAML
    config = {}
    if cp.exists():
        try:
            config = yaml.safe_load(_text(cp)) or {}
        except yaml.YAMLError as exc:
            raise InputError(f"{cp}: not valid YAML ({str(exc).splitlines()[0][:120]})") from None
        if not isinstance(config, dict):
            raise InputError(f"{cp}: expected a mapping of config sections")
    elif need_config:
        raise InputError(f"{d}: not a chimeline run folder (no {CONFIG_YAML})")
    ep = d / EVALUATION_JSON
    evaluation = read_json(ep) if ep.exists() else None
    return RunFolder(path=d, summary=summary, config=config, profile=profile, residuals=residuals,
                     evaluation=evaluation)


def _text(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read: {exc}") from None
