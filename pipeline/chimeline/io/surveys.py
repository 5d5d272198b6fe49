"""Evaluation inputs: a dense profile.csv from ``chimeline run`` or a conventional survey CSV.

Survey layouts (header names, any order, case-insensitive):
- ``azimuth_deg, elevation`` [``label``] [``std_error``]
- ``x, y, z`` [``label``]: azimuths (clockwise from +Y) about ``evaluate.survey_center`` or a fitted circle
- ``point, elevation`` [``label``]: point numbers 1..N equally spaced clockwise from ``evaluate.start_azimuth_deg``,
  N = ``evaluate.survey_points`` (default: the highest number), so a missing point stays missing
Lengths are converted to metres with ``evaluate.input_units`` or the sibling profile.json's ``units``.
"""
from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Optional

import numpy as np
from scipy.optimize import least_squares

from ..errors import ConfigError, InputError, clip_repr
from ..units import to_metres
from .runfiles import PROFILE_JSON, read_summary, split_unit


@dataclass(frozen=True)
class SurveyData:
    """Junction elevations around a tank: a dense scan profile or a conventional survey."""

    azimuth_deg: np.ndarray  # (n,) in [0, 360), strictly increasing
    elevation: np.ndarray  # (n,) m
    std_error: Optional[np.ndarray]  # (n,) m 1 sigma, or None
    label: tuple  # (n,) str
    dense: bool  # a scan profile (many bins) rather than a conventional survey
    units: str  # unit of the input file
    source: str  # path or description
    noise_sigma: Optional[float] = None  # m, per-point scanner noise from profile.json
    n_dropped: int = 0  # bins without value (gaps) not used


#: largest magnitude of a survey number (elevations, coordinates in file units): beyond it the arithmetic of the
#: evaluation overflows, and no tank survey comes near it
MAX_VALUE = 1e9
#: largest survey or profile CSV read (a 0.05 degree profile is under 1 MiB)
MAX_BYTES = 64 << 20


def _float(v, path, row, col, allow_empty=False):
    v = (v or "").strip()
    if v == "" and allow_empty:
        return math.nan
    try:
        x = float(v)
    except ValueError:
        raise InputError(f"{path}: row {row}: '{col}' is not a number: {clip_repr(v, 50)}") from None
    if math.isfinite(x) and abs(x) > MAX_VALUE:
        raise InputError(f"{path}: row {row}: '{col}' = {clip_repr(v, 30)} is beyond +-{MAX_VALUE:g}; check the unit "
                         f"and the column")
    return x


def _text(r, cols, name, path, row) -> str:
    """A text cell; a row too short to have it is refused."""
    v = r.get(cols[name])
    if v is None:
        raise InputError(f"{path}: row {row}: no '{name}' cell (the row has fewer cells than the header)")
    return v.strip()


def read_survey(path, cfg) -> SurveyData:
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: input file not found")
    if not path.is_file():
        raise InputError(f"{path}: is a folder, not a survey or profile CSV")
    if path.stat().st_size > MAX_BYTES:
        raise InputError(f"{path}: larger than {MAX_BYTES >> 20} MiB; not a survey or profile CSV")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read: {str(exc)[:120]}") from None
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"{path}: the file is empty")
    try:
        rows = list(csv.DictReader(lines))
    except csv.Error as exc:
        raise InputError(f"{path}: not a readable CSV table ({str(exc)[:100]})") from None
    if not rows:
        raise InputError(f"{path}: no data rows below the header")
    header = [c for c in rows[0].keys() if c is not None]
    if len(header) == 1 and any(d in header[0] for d in ";\t|"):
        raise InputError(f"{path}: the header is one column ({clip_repr(header[0], 60)}): write the file with commas "
                         f"between the columns")
    for i, r in enumerate(rows, start=2):
        if r.get(None):  # csv puts the cells beyond the header under None: they would shift what the row means
            raise InputError(f"{path}: row {i}: {len(header) + len(r[None])} cells but the header has "
                             f"{len(header)}; remove the extra cells or add their column to the header")
    cols, header_units = {}, set()
    for c in rows[0].keys():
        if c is None:
            continue
        base, u = split_unit(c.strip().lower())
        if u is not None and base in ("elevation", "std_error", "x", "y", "z"):
            header_units.add(u)
            cols[base] = c
        else:
            cols[c.strip().lower()] = c
    if len(header_units) > 1:
        raise InputError(f"{path}: the length columns carry different units ({', '.join(sorted(header_units))})")
    units, noise = _units(path, cfg, header_units.pop() if header_units else None)
    f = to_metres(units)
    dense = "status" in cols
    label, se = [], []
    if "azimuth_deg" in cols and "elevation" in cols:
        az, z = [], []
        dropped = 0
        for i, r in enumerate(rows, start=2):
            a = _float(r[cols["azimuth_deg"]], path, i, "azimuth_deg")
            e = _float(r[cols["elevation"]], path, i, "elevation", allow_empty=dense)
            st = _text(r, cols, "status", path, i) if dense else "ok"
            if dense and (st != "ok" or not math.isfinite(e)):
                dropped += 1
                continue
            if not math.isfinite(e):
                raise InputError(f"{path}: row {i}: elevation is NaN or infinite")
            if not (0.0 <= a < 360.0):
                raise InputError(f"{path}: row {i}: azimuth_deg {a} is outside [0, 360)")
            az.append(a)
            z.append(e * f)
            # a dense profile's bins are named by their azimuth, as in the run's own evaluation
            label.append(_text(r, cols, "label", path, i) if "label" in cols else f"{a:.2f}" if dense else str(i - 1))
            if "std_error" in cols:
                s = _float(r[cols["std_error"]], path, i, "std_error", allow_empty=True)
                if math.isfinite(s) and s <= 0:
                    raise InputError(f"{path}: row {i}: std_error must be > 0, got {s}")
                se.append(s * f)
    elif {"x", "y", "z"} <= set(cols):
        xy, z = [], []
        for i, r in enumerate(rows, start=2):
            x, y, e = (_float(r[cols[c]], path, i, c) for c in ("x", "y", "z"))
            if not all(map(math.isfinite, (x, y, e))):
                raise InputError(f"{path}: row {i}: NaN or infinite coordinate")
            xy.append((x * f, y * f))
            z.append(e * f)
            label.append(_text(r, cols, "label", path, i) if "label" in cols else str(i - 1))
        xy = np.array(xy)
        c = np.asarray(cfg.survey_center, dtype=float) * f if cfg.survey_center is not None else _fit_circle(xy, path)
        az = list(np.mod(np.degrees(np.arctan2(xy[:, 0] - c[0], xy[:, 1] - c[1])), 360.0))
        dropped = 0
    elif "point" in cols and "elevation" in cols:
        pts, z = [], []
        for i, r in enumerate(rows, start=2):
            p = _float(r[cols["point"]], path, i, "point")
            e = _float(r[cols["elevation"]], path, i, "elevation")
            if not math.isfinite(e):
                raise InputError(f"{path}: row {i}: elevation is NaN or infinite")
            if not math.isfinite(p) or p != int(p) or p < 1 or p > 100_000:
                raise InputError(f"{path}: row {i}: point must be a whole number >= 1, got {p}")
            pts.append(int(p))
            z.append(e * f)
            label.append(_text(r, cols, "label", path, i) if "label" in cols else str(int(p)))
        n = cfg.survey_points or max(pts)
        if max(pts) > n:
            raise InputError(f"{path}: point {max(pts)} is beyond evaluate.survey_points = {n}")
        if len(set(pts)) != len(pts):
            dup = sorted({p for p in pts if pts.count(p) > 1})[0]
            raise InputError(f"{path}: point {dup} appears more than once")
        az = [float(np.mod(cfg.start_azimuth_deg + (p - 1) * 360.0 / n, 360.0)) for p in pts]
        dropped = 0
    else:
        raise InputError(f"{path}: needs columns azimuth_deg,elevation or x,y,z or point,elevation; found "
                         f"{', '.join(cols)}")
    az = np.asarray(az, dtype=float)
    z = np.asarray(z, dtype=float)
    order = np.argsort(az, kind="stable")
    az, z = az[order], z[order]
    label = tuple(np.asarray(label, dtype=object)[order])
    se_arr = np.asarray(se, dtype=float)[order] if se else None
    if se_arr is not None and not np.all(np.isfinite(se_arr)):
        if dense:
            raise InputError(f"{path}: ok bins must carry a std_error")
        se_arr = None
    d = np.diff(az)
    if len(az) > 1 and (np.any(d < 1e-9) or (az[-1] - az[0]) > 360 - 1e-9):
        k = int(np.argmin(d)) if np.any(d < 1e-9) else 0
        raise InputError(f"{path}: duplicate azimuth {az[k]:.4f} deg (labels {label[k]}, {label[k + 1]})")
    if len(az) < 4:
        raise InputError(f"{path}: {len(az)} usable points; the evaluation needs at least 4")
    return SurveyData(azimuth_deg=az, elevation=z, std_error=se_arr, label=label, dense=dense, units=units,
                      source=str(path), noise_sigma=noise, n_dropped=dropped)


def _units(path: Path, cfg, header_unit=None):
    """The input's length unit: from a unit suffix in the header (elevation_ft), evaluate.input_units or the
    sibling profile.json; any two that disagree are an error."""
    side = path.with_name(PROFILE_JSON)
    side_units, noise = None, None
    if side.exists():
        js = read_summary(side)
        side_units = js["units"]
        n = js.get("noise")
        n = n.get("sigma") if isinstance(n, dict) else None
        ok = isinstance(n, (int, float)) and not isinstance(n, bool) and math.isfinite(n) and n > 0
        noise = float(n) * to_metres(side_units) if ok else None
    if header_unit is not None:
        if cfg.input_units != "auto" and cfg.input_units != header_unit:
            raise ConfigError(f"evaluate.input_units is {cfg.input_units!r} but the columns of {path} are in "
                              f"{header_unit!r}")
        if side_units and side_units != header_unit:
            raise InputError(f"{path}: its columns are in {header_unit!r} but {side} says units {side_units!r}")
        return header_unit, noise
    if cfg.input_units != "auto":
        if side_units and side_units != cfg.input_units:
            raise ConfigError(f"evaluate.input_units is {cfg.input_units!r} but {side} says units {side_units!r}")
        return cfg.input_units, noise
    if side_units:
        return side_units, noise
    raise ConfigError(f"{path}: the length unit is unknown: set evaluate.input_units (m, mm, ft, us_ft, in), "
                      f"name the columns with their unit (elevation_ft), or keep the run's profile.json beside it")


def _fit_circle(xy, path):
    """Least-squares circle (algebraic fit, then geometric refinement) through survey points."""
    if len(xy) < 3:
        raise InputError(f"{path}: at least 3 points are needed to fit the tank centre")
    m = xy.mean(axis=0)
    d = xy - m
    span = float(np.abs(d).max())
    sv = np.linalg.svd(d / max(span, 1e-300), compute_uv=False)
    if span == 0 or sv[-1] < 1e-6 * sv[0]:
        raise InputError(f"{path}: the x,y points lie on a line (or on one spot): no tank centre can be fitted; set "
                         f"evaluate.survey_center")
    A = np.column_stack([2 * d, np.ones(len(d))])
    b = (d ** 2).sum(axis=1)
    sol, *_ = np.linalg.lstsq(A, b, rcond=None)
    c0 = sol[:2]
    r0 = math.sqrt(max(sol[2] + c0 @ c0, 1e-12))
    res = least_squares(lambda p: np.hypot(d[:, 0] - p[0], d[:, 1] - p[1]) - p[2], [c0[0], c0[1], r0])
    chord = float(np.hypot(*(d.max(axis=0) - d.min(axis=0))))
    if not np.all(np.isfinite(res.x)) or abs(res.x[2]) > 10 * chord:
        raise InputError(f"{path}: the x,y points lie on a nearly straight arc (fitted radius {abs(res.x[2]):.4g} "
                         f"against a spread of {chord:.4g}): no tank centre can be fitted; set evaluate.survey_center")
    return res.x[:2] + m
