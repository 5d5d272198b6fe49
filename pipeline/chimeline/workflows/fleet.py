"""A fleet's finished job folders read back: one row per job, and each tank's settlement history.

Rows are read from the folders the jobs published (``profile.json``, ``evaluation.json``), so a job skipped as
unchanged shows the same values as when it ran. Lengths are converted to metres. A tank's history pairs its
consecutive surveys: run folders through ``workflows.compare`` (``load_run``, ``profile_change``: the same
profile difference and same-tank rule as ``chimeline compare``), survey evaluations through
``evaluate.comparison.profile_difference``; the split into uniform, tilt and out-of-plane change, the rates and
the extrapolation are in ``evaluate.history``.
"""
from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Optional

import numpy as np

from ..core.robust import Z95
from ..errors import ChimelineError, InputError
from ..evaluate.comparison import profile_difference
from ..evaluate.history import (Extrapolation, SettlementChange, amplitude_rate, extrapolate_ratio, settlement_change,
                                years_between)
from ..io.runfiles import EVALUATION_JSON, read_json, read_run_folder
from ..notices import UNOBSERVED_REGISTRATION
from ..units import LENGTH_FACTORS
from .compare import load_run, profile_change

log = logging.getLogger(__name__)

#: centres farther than this from the coordinate origin are taken as map-grid (georeferenced) coordinates, m
GEOREFERENCED_BEYOND = 1000.0


@dataclass(frozen=True)
class FleetRow:
    """One job of the batch as the fleet table shows it; lengths in metres, None where not available."""

    tag: str
    survey_date: str  # ISO date
    kind: str  # run | evaluate
    status: str  # done | failed | skipped
    folder: str  # the job's folder relative to the batch folder
    error: str = ""  # the one-line error of a failed job
    verdict: Optional[str] = None  # acceptable | exceeds | indeterminate; None: not evaluated
    governing: Optional[str] = None  # the check that sets the verdict
    max_ratio: Optional[float] = None  # the largest ratio of the standard's checks (<= 1 passes)
    max_ratio_upper95: Optional[float] = None  # its 95 % upper bound
    tilt_amplitude: Optional[float] = None  # m, half the peak-to-peak tilt at the shell
    tilt_low_azimuth_deg: Optional[float] = None  # where the tilt plane is lowest
    noise_sigma: Optional[float] = None  # m, scanner vertical noise (runs only)
    coverage: Optional[float] = None  # share of the circumference with ok bins (runs only)
    center: Optional[tuple] = None  # (x, y) m in the scan's coordinates (runs only)
    radius: Optional[float] = None  # m, fitted shell radius at the base (runs only)
    report: Optional[str] = None  # report.html relative to the batch folder
    illustrative: bool = False  # the verdict used the packaged ILLUSTRATIVE settled-arc table
    seconds: Optional[float] = None  # s, the job's wall time on its worker (None: skipped or unknown)

    @property
    def has_result(self) -> bool:
        return self.status in ("done", "skipped")

    @property
    def georeferenced(self) -> bool:
        return self.center is not None and math.hypot(*self.center) >= GEOREFERENCED_BEYOND


def _ratio_se(c: dict) -> Optional[float]:
    """1 sigma of a check's ratio from its 95 % bounds."""
    lo, up, r = c.get("ratio_lower95"), c.get("ratio_upper95"), c.get("ratio")
    if up is None or r is None:
        return None
    if lo is None:
        return (up - r) / Z95
    return (up - lo) / (2 * Z95)


def _standard_checks(ev: dict) -> list:
    return [c for c in ev.get("criteria", []) if c.get("clause") and c.get("ratio") is not None
            and c.get("verdict") in ("acceptable", "exceeds", "indeterminate")]


def _evaluation_fields(ev: Optional[dict]) -> dict:
    if not ev:
        return {}
    f = LENGTH_FACTORS.get(ev.get("units"), 1.0)
    checks = _standard_checks(ev)
    worst = max(checks, key=lambda c: c["ratio"]) if checks else None
    tilt = ev.get("tilt") or {}
    amp = tilt.get("amplitude")
    table = ev.get("arc_table") or {}
    return {"verdict": ev.get("verdict"), "governing": ev.get("governing"),
            "illustrative": bool(table.get("illustrative")) and any("B.3.2.2" in (c.get("clause") or "")
                                                                    for c in checks),
            "max_ratio": worst["ratio"] if worst else None,
            "max_ratio_upper95": worst.get("ratio_upper95") if worst else None,
            "tilt_amplitude": amp * f if amp is not None else None,
            "tilt_low_azimuth_deg": tilt.get("low_azimuth_deg")}


def read_fleet_row(out_dir: Path, tag: str, survey_date: str, kind: str, status: str, error: str = "",
                   seconds: Optional[float] = None) -> FleetRow:
    """A job's row, its values read from its published folder when it has one."""
    rel = f"{tag}/{survey_date}"
    folder = Path(out_dir) / tag / survey_date
    base = dict(tag=tag, survey_date=survey_date, kind=kind, status=status, folder=rel, error=error, seconds=seconds)
    if status == "failed":
        return FleetRow(**base)
    report = f"{rel}/report.html" if (folder / "report.html").exists() else None
    if kind == "run":
        rf = read_run_folder(folder)
        f = rf.metres_per_unit
        js = rf.summary
        noise = (js.get("noise") or {}).get("sigma")
        shell = js.get("shell") or {}
        c = shell.get("center")
        return FleetRow(**base, **_evaluation_fields(rf.evaluation), report=report,
                        noise_sigma=noise * f if noise is not None else None,
                        coverage=(js.get("profile") or {}).get("coverage_ok"),
                        center=(c[0] * f, c[1] * f) if c else None,
                        radius=shell["radius"] * f if shell.get("radius") is not None else None)
    ev = read_json(folder / EVALUATION_JSON)
    return FleetRow(**base, **_evaluation_fields(ev), report=report)


# ---------------------------------------------------------------------------
# histories


@dataclass(frozen=True)
class Interval:
    """Two consecutive surveys of a tank and what changed between them."""

    from_date: str
    to_date: str
    years: float
    change: Optional[SettlementChange]  # None when the profiles could not be compared (note says why)
    note: str  # in words: why the profiles were not compared, or ""
    tilt_amplitude_rate: Optional[float] = None  # m/year, rate of the tilt amplitude (from the two evaluations)
    tilt_amplitude_rate_se: Optional[float] = None  # m/year, 1 sigma
    extrapolation: Optional[Extrapolation] = None  # the governing ratio's trend (the latest interval only)
    caveat: str = ""  # in words: what the uncertainties above leave out, or ""
    units: str = "m"  # every length above is in metres


@dataclass(frozen=True)
class TankHistory:
    """A tank (tag) surveyed on several dates: its surveys oldest first and the change over each interval."""

    tag: str
    surveys: tuple  # FleetRow, oldest first (done or skipped jobs)
    intervals: tuple  # Interval, one per consecutive pair
    extrapolation_note: str  # why there is no extrapolation, or ""


def _survey_series(out_dir: Path, row: FleetRow) -> dict:
    """A survey evaluation's points as a comparable series (lengths in m); its readings' 1 sigma as the error."""
    ev = read_json(Path(out_dir) / row.folder / EVALUATION_JSON)
    f = LENGTH_FACTORS.get(ev.get("units"), 1.0)
    pts = ev.get("points") or []
    try:
        az = np.array([p["azimuth_deg"] for p in pts], dtype=float)
        el = np.array([np.nan if p["elevation"] is None else p["elevation"] * f for p in pts], dtype=float)
    except (KeyError, TypeError) as exc:
        raise InputError(f"{Path(out_dir) / row.folder / EVALUATION_JSON}: malformed points ({exc})") from None
    sigma = (ev.get("settings") or {}).get("reading_sigma") or 0.0
    dense = bool((ev.get("input") or {}).get("dense"))
    return {"az": az, "el": el, "se": np.full(len(az), float(sigma)), "ok": np.isfinite(el), "datum_sigma": 0.0,
            "dense": dense, "evaluation": ev}


def _evaluation_of(out_dir: Path, row: FleetRow) -> Optional[dict]:
    p = Path(out_dir) / row.folder / EVALUATION_JSON
    return read_json(p) if p.exists() else None


def _tilt_coefficients(ev: Optional[dict]) -> Optional[tuple]:
    if not ev:
        return None
    f = LENGTH_FACTORS.get(ev.get("units"), 1.0)
    co = (ev.get("tilt") or {}).get("coefficients") or {}
    if co.get("b_cos") is None or co.get("c_sin") is None:
        return None
    return co["b_cos"] * f, co["c_sin"] * f


def _vertical_reference(out_dir: Path, row: FleetRow) -> float:
    """rad, the scan's vertical reference (levelling) 1 sigma per axis from the run's config (0 for surveys)."""
    if row.kind != "run":
        return 0.0
    rf = read_run_folder(Path(out_dir) / row.folder)
    geo = rf.config.get("geometry") if isinstance(rf.config.get("geometry"), dict) else {}
    v = geo.get("vertical_reference_sigma")
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else 0.0


def registration_unobserved(run: dict) -> bool:
    """A run (``load_run``) of several stations whose datum spread is exactly zero: no two stations shared a bin,
    so their relative registration was not measured and is not in the profile's standard errors."""
    return len(run.get("stations") or []) >= 2 and not run.get("datum_sigma")


def _interval(out_dir: Path, a: FleetRow, b: FleetRow) -> Interval:
    years = years_between(a.survey_date, b.survey_date)
    ev_a, ev_b = _evaluation_of(out_dir, a), _evaluation_of(out_dir, b)
    change, note, caveat = None, "", ""
    if a.kind == "run" and b.kind == "run":
        ra, rb = load_run(Path(out_dir) / a.folder), load_run(Path(out_dir) / b.folder)
        same, pd = profile_change(ra, rb)
        radius, dense = rb["radius"], True
        blind = [x.survey_date for x, r in ((a, ra), (b, rb)) if registration_unobserved(r)]
        if blind:
            scans = " and ".join(blind) + (" scans" if len(blind) > 1 else " scan")
            caveat = UNOBSERVED_REGISTRATION.format(scans=scans)
        if not same:
            note = ("the two scans are not in one coordinate frame (shell centres or radii differ): profiles not "
                    "compared; tie both scans to the site's control")
    elif a.kind == "evaluate" and b.kind == "evaluate":
        sa, sb = _survey_series(out_dir, a), _survey_series(out_dir, b)
        pd = profile_difference(sa["az"], sa["el"], sa["se"], sa["ok"], 0.0, sb["az"], sb["el"], sb["se"], sb["ok"],
                                0.0)
        tank = (ev_b or {}).get("tank") or {}
        radius = (tank.get("diameter") or 0) * LENGTH_FACTORS.get((ev_b or {}).get("units"), 1.0) / 2
        dense = sa["dense"] and sb["dense"]
        same = radius > 0
        if not same:
            note = "the survey evaluations carry no tank diameter: profiles not compared"
    else:
        same, pd, radius, dense = False, {}, 0.0, False
        note = "a scan and a survey: their azimuth conventions cannot be checked against each other; not compared"
    if same and "mean_difference" in pd:
        vref = max(_vertical_reference(out_dir, a), _vertical_reference(out_dir, b))
        change = settlement_change(a.survey_date, b.survey_date, pd, radius, dense=dense, vertical_reference=vref)
    elif same:
        note = f"only {pd.get('n_common', 0)} common azimuths: profiles not compared"
    rate = rate_se = None
    ta, tb = _tilt_coefficients(ev_a), _tilt_coefficients(ev_b)
    if change is not None and ta is not None and tb is not None:
        rate, rate_se = amplitude_rate(*ta, *tb, change)
    return Interval(from_date=a.survey_date, to_date=b.survey_date, years=years, change=change, note=note,
                    tilt_amplitude_rate=rate, tilt_amplitude_rate_se=rate_se, caveat=caveat if change else "")


def _extrapolation(out_dir: Path, a: FleetRow, b: FleetRow) -> tuple:
    """(Extrapolation or None, note) for the latest two surveys' governing ratio."""
    ev_a, ev_b = _evaluation_of(out_dir, a), _evaluation_of(out_dir, b)
    if not ev_a or not ev_b:
        return None, "no extrapolation: both surveys need an evaluation (tank data in the config)"
    checks_b = {c["name"]: c for c in _standard_checks(ev_b)}
    gov = ev_b.get("governing")
    if gov not in checks_b:
        return None, f"no extrapolation: the latest survey has no governing ratio ({gov})"
    # the earlier survey's ratio of the same check, even where that check did not govern or apply there (e.g.
    # B.3.2.1 below the R^2 rule): the ratio is measured the same way; the note says so
    ca = next((c for c in ev_a.get("criteria", []) if c.get("name") == gov and c.get("ratio") is not None), None)
    if ca is None:
        return None, f"no extrapolation: the earlier survey has no ratio for {gov}"
    cb = checks_b[gov]
    sa, sb = _ratio_se(ca), _ratio_se(cb)
    if sa is None or sb is None:
        return None, f"no extrapolation: {gov} carries no uncertainty"
    note = ""
    if ca.get("verdict") not in ("acceptable", "exceeds", "indeterminate"):
        note = (f"the {a.survey_date} ratio of {gov} enters the extrapolation although that check was "
                f"{ca.get('verdict')} in that survey")
    return extrapolate_ratio(gov, a.survey_date, ca["ratio"], sa, b.survey_date, cb["ratio"], sb), note


def tank_histories(out_dir, rows) -> tuple:
    """A TankHistory for every tag with at least two done or skipped surveys."""
    by_tag = {}
    for r in rows:
        if r.has_result:
            by_tag.setdefault(r.tag, []).append(r)
    out = []
    for tag in sorted(by_tag):
        surveys = sorted(by_tag[tag], key=lambda r: r.survey_date)
        if len(surveys) < 2:
            continue
        intervals, note = [], ""
        for a, b in zip(surveys, surveys[1:]):
            try:
                iv = _interval(Path(out_dir), a, b)
            except (ChimelineError, ValueError, np.linalg.LinAlgError) as exc:
                iv = Interval(from_date=a.survey_date, to_date=b.survey_date, years=0.0, change=None,
                              note=f"not compared: {str(exc).splitlines()[0][:200]}")
            intervals.append(iv)
        try:
            ex, note = _extrapolation(Path(out_dir), surveys[-2], surveys[-1])
        except ChimelineError as exc:
            ex, note = None, f"no extrapolation: {str(exc).splitlines()[0][:200]}"
        if ex is not None:
            last = intervals[-1]
            intervals[-1] = Interval(**{**last.__dict__, "extrapolation": ex})
        out.append(TankHistory(tag=tag, surveys=tuple(surveys), intervals=tuple(intervals), extrapolation_note=note))
    return tuple(out)

