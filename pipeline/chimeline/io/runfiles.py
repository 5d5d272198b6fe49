"""Everything in a run folder, typed: one writer format and one reader for profile.csv, residuals.csv,
profile.json, config.resolved.yaml and evaluation.json. ``compare``, ``rerun`` and ``evaluate`` read run
folders only through here.

Every folder a command writes (kind run, evaluation or compare) carries ``manifest.json``: its kind, its inputs
(absolute path and SHA-256), the config hash, the software version and the size and SHA-256 of every file;
and ``provenance.json``: when, where and how fast it was made, the one file that differs between two runs of
the same input and config. Commands refuse to replace a folder of another kind and readers refuse to read one.

CSV lengths are in the run's output unit (``units`` in profile.json); the reader returns them in that unit
and says which, with ``metres_per_unit`` to convert.
"""
from __future__ import annotations

import csv
import dataclasses
import datetime
import hashlib
import io
import json
import os
import platform
import socket
from dataclasses import dataclass
from pathlib import Path
from typing import Optional

import numpy as np

from ..config import parse_yaml
from ..errors import ConfigError, InputError, OutputError, clip_repr
from ..notices import CAUTION
from ..units import LENGTH_FACTORS, UNIT_LABELS
from ..version import __version__

PROFILE_CSV = "profile.csv"
PROFILE_JSON = "profile.json"
RESIDUALS_CSV = "residuals.csv"
CONFIG_YAML = "config.resolved.yaml"
EVALUATION_JSON = "evaluation.json"
COMPARE_JSON = "compare.json"
MANIFEST_JSON = "manifest.json"
PROVENANCE_JSON = "provenance.json"

#: folder kinds, the command that writes each, and the file that marks a folder made before manifests existed
KIND_RUN, KIND_EVALUATION, KIND_COMPARE = "run", "evaluation", "compare"
KIND_COMMANDS = {KIND_RUN: "chimeline run or rerun", KIND_EVALUATION: "chimeline evaluate",
                 KIND_COMPARE: "chimeline compare"}
_LEGACY_MARKERS = ((PROFILE_JSON, KIND_RUN), (EVALUATION_JSON, KIND_EVALUATION), (COMPARE_JSON, KIND_COMPARE))
MANIFEST_FORMAT = "chimeline-folder/1"
#: largest JSON, CSV or YAML file read back from a folder
MAX_FILE_BYTES = 256 << 20

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
    try:
        header = next(csv.reader(lines[:1]))
    except csv.Error as exc:
        raise InputError(f"{source}: not a readable CSV table ({str(exc)[:100]})") from None
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
    try:
        rows = list(csv.DictReader(lines))
    except csv.Error as exc:
        raise InputError(f"{source}: not a readable CSV table ({str(exc)[:100]})") from None
    return rows, names, (units.pop() if units else None)


def _cell(row, col, i, source, empty_ok=False):
    v = (row.get(col) or "").strip()
    if v == "" and empty_ok:
        return np.nan
    try:
        x = float(v)
    except ValueError:
        raise InputError(f"{source}: row {i}: '{col}' is not a number: {clip_repr(v, 50)}") from None
    if not np.isfinite(x) or abs(x) > 1e12:
        raise InputError(f"{source}: row {i}: '{col}' must be a finite number (empty where there is no value), got "
                         f"{clip_repr(v, 50)}")
    return x


def _parse_json(raw: bytes, source) -> dict:
    try:
        data = json.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise InputError(f"{source}: cannot read: {str(exc)[:100]}") from None
    except RecursionError:
        raise InputError(f"{source}: not valid JSON (nested too deeply)") from None
    except ValueError as exc:
        raise InputError(f"{source}: not valid JSON ({str(exc)[:120]})") from None
    if not isinstance(data, dict):
        raise InputError(f"{source}: expected a JSON object, got {type(data).__name__}")
    return data


def _read_bytes(path: Path, dir_fd=None) -> bytes:
    """A file's bytes (at most MAX_FILE_BYTES); relative to ``dir_fd`` when given."""
    fd = os.open(path, os.O_RDONLY, dir_fd=dir_fd)
    with os.fdopen(fd, "rb") as fh:
        raw = fh.read(MAX_FILE_BYTES + 1)
    if len(raw) > MAX_FILE_BYTES:
        raise InputError(f"{path}: larger than {MAX_FILE_BYTES >> 20} MiB; not a chimeline output")
    return raw


def read_json(path) -> dict:
    path = Path(path)
    try:
        raw = _read_bytes(path)
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror or exc}") from None
    return _parse_json(raw, path)


def _check_summary(js: dict, path) -> dict:
    units = js.get("units")
    if not isinstance(units, str) or units not in LENGTH_FACTORS:
        raise InputError(f"{path}: 'units' must be one of {', '.join(LENGTH_FACTORS)}, got {clip_repr(units, 40)}")
    return js


def read_summary(path) -> dict:
    """profile.json, with its length unit checked."""
    return _check_summary(read_json(path), path)


# ---------------------------------------------------------------------------
# manifests and provenance


@dataclass(frozen=True)
class FolderInput:
    """One input of a folder's command."""

    role: str  # scan, survey, profile, run (a compared run folder), earlier_run (the run a rerun repeats)
    path: str  # absolute path
    sha256: Optional[str]  # of the file (of a folder's manifest.json for folders); None when unknown


@dataclass(frozen=True)
class Manifest:
    """manifest.json: what a folder is and where it came from."""

    kind: str  # run, evaluation or compare
    version: str  # chimeline version that wrote it
    inputs: tuple  # FolderInput
    config_sha256: str  # of the resolved config (compare: of its settings)
    files: dict  # relative path -> {"bytes": int, "sha256": str}, every file but the manifest and the provenance

    def input(self, role: str) -> Optional[FolderInput]:
        return next((i for i in self.inputs if i.role == role), None)


def _sha(content) -> str:
    return hashlib.sha256(content.encode("utf-8") if isinstance(content, str) else content).hexdigest()


def with_manifest(files: dict, kind: str, inputs, config_sha256: str, provenance: dict) -> dict:
    """``files`` plus manifest.json and provenance.json: everything a command publishes.

    The manifest lists every other file with its size and SHA-256, so it is the same for two runs of the same
    input and config; the time, host and timings go to provenance.json only.
    """
    assert kind in KIND_COMMANDS and MANIFEST_JSON not in files and PROVENANCE_JSON not in files
    listing = {}
    for rel in sorted(files):
        raw = files[rel].encode("utf-8") if isinstance(files[rel], str) else files[rel]
        listing[rel] = {"bytes": len(raw), "sha256": _sha(raw)}
    manifest = {"format": MANIFEST_FORMAT, "kind": kind, "written_by": KIND_COMMANDS[kind],
                "software": {"name": "chimeline", "version": __version__},
                "inputs": [{"role": i.role, "path": i.path, "sha256": i.sha256} for i in inputs],
                "config_sha256": config_sha256, "files": listing, "provenance": PROVENANCE_JSON}
    out = dict(files)
    out[MANIFEST_JSON] = json.dumps(manifest, indent=2) + "\n"
    out[PROVENANCE_JSON] = json.dumps(provenance, indent=2, default=str) + "\n"
    return out


def provenance_record(command: str, timings: Optional[dict] = None, **extra) -> dict:
    """provenance.json: when, on which host and how fast; kept out of every other file (they are reproducible)."""
    return {"note": "time, host and timings of this command: the only file that differs between two runs of the "
                    "same input and config; manifest.json does not list it",
            "command": command, "created_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(
                timespec="seconds"),
            "host": socket.gethostname(), "platform": platform.platform(), "python": platform.python_version(),
            "software": {"name": "chimeline", "version": __version__},
            "timings_s": {k: round(float(v), 3) for k, v in (timings or {}).items()}, **extra}


def _manifest_from(js: dict, source) -> Manifest:
    try:
        kind = js["kind"]
        if kind not in KIND_COMMANDS:
            raise ValueError(f"unknown kind {clip_repr(kind, 40)}")
        inputs = tuple(FolderInput(role=str(i["role"]), path=str(i["path"]),
                                   sha256=None if i.get("sha256") is None else str(i["sha256"]))
                       for i in js.get("inputs", []))
        files = js.get("files", {})
        if not isinstance(files, dict):
            raise ValueError("'files' is not a mapping")
        return Manifest(kind=kind, version=str(js.get("software", {}).get("version", "")), inputs=inputs,
                        config_sha256=str(js.get("config_sha256", "")), files=files)
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise InputError(f"{source}: not a valid chimeline manifest ({clip_repr(exc, 80)})") from None


def read_manifest(folder) -> Optional[Manifest]:
    """The folder's manifest, or None for a folder without one."""
    p = Path(folder) / MANIFEST_JSON
    if not p.exists():
        return None
    return _manifest_from(read_json(p), p)


def folder_kind(folder) -> Optional[str]:
    """run, evaluation or compare; None for an empty folder; "foreign" for a folder chimeline did not write.

    Folders written before manifests existed are known by their main file (profile.json, evaluation.json,
    compare.json).
    """
    folder = Path(folder)
    m = read_manifest(folder)
    if m is not None:
        return m.kind
    for name, kind in _LEGACY_MARKERS:
        if (folder / name).is_file():
            return kind
    try:
        return None if not any(os.scandir(folder)) else "foreign"
    except OSError as exc:
        raise OutputError(f"{folder}: cannot list the output folder: {exc.strerror or exc}") from None


def kind_guard(kind: str):
    """A check for ``io.atomic.OutputSlot``: refuse to replace a folder of another kind (or not chimeline's)."""

    def guard(folder: Path):
        try:
            have = folder_kind(folder)
        except InputError as exc:
            raise OutputError(f"{exc}; choose another --out") from None
        if have in (None, kind):
            return
        if have == "foreign":
            raise OutputError(f"{folder}: exists and is not a chimeline folder; the output folder is replaced as a "
                              f"whole, so choose a new or empty folder")
        article = "an" if kind[0] in "aeiou" else "a"
        raise OutputError(f"{folder}: is a chimeline {have} folder (made by {KIND_COMMANDS[have]}); this command "
                          f"writes {article} {kind} folder: choose another --out, e.g. {folder.name}-{kind}")

    return guard


@dataclass(frozen=True)
class RunFolder:
    """A finished ``chimeline run`` folder, read back."""

    path: Path
    summary: dict  # profile.json
    config: dict  # config.resolved.yaml
    profile: ProfileTable
    residuals: Optional[ResidualTable]
    evaluation: Optional[dict]  # evaluation.json, when the run evaluated
    manifest: Optional[Manifest] = None  # manifest.json; None for a folder written before manifests existed

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


class _Vanished(Exception):
    """A file the folder's manifest lists is gone: the folder was replaced while being read."""


def read_run_folder(run_dir, *, need_config: bool = False) -> RunFolder:
    """A run folder, every file read from the same folder even if another command replaces it meanwhile."""
    d = Path(run_dir)
    for _ in range(2):
        try:
            return _read_run_folder(d, need_config, last=False)
        except _Vanished:
            continue
    return _read_run_folder(d, need_config, last=True)


def _read_run_folder(d: Path, need_config: bool, last: bool) -> RunFolder:
    if not d.is_dir() or not ((d / PROFILE_JSON).exists() or (d / MANIFEST_JSON).exists()):
        raise InputError(f"{d}: not a chimeline run folder (no {PROFILE_JSON})")
    try:
        dir_fd = os.open(d, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0)) if os.open in os.supports_dir_fd else None
    except OSError as exc:
        raise InputError(f"{d}: cannot open: {exc.strerror or exc}") from None
    try:
        listed: dict = {}

        def raw(name, required=False):
            try:
                return _read_bytes(Path(name), dir_fd) if dir_fd is not None else _read_bytes(d / name)
            except FileNotFoundError:
                if name in listed and not last:
                    raise _Vanished() from None  # replaced while we read: read the new folder
                if name in listed:
                    raise InputError(f"{d}: incomplete run folder: {name}, listed in {MANIFEST_JSON}, is missing") \
                        from None
                if required:
                    raise InputError(f"{d}: not a complete run folder (no {name})") from None
                return None
            except OSError as exc:
                raise InputError(f"{d / name}: cannot read: {exc.strerror or exc}") from None

        mraw = raw(MANIFEST_JSON)
        manifest = None
        if mraw is not None:
            manifest = _manifest_from(_parse_json(mraw, d / MANIFEST_JSON), d / MANIFEST_JSON)
            if manifest.kind != KIND_RUN:
                raise InputError(f"{d}: is a chimeline {manifest.kind} folder (made by "
                                 f"{KIND_COMMANDS[manifest.kind]}), not a run folder")
            listed = manifest.files
        summary = _check_summary(_parse_json(raw(PROFILE_JSON, required=True), d / PROFILE_JSON), d / PROFILE_JSON)
        profile = ProfileTable.from_csv(_decode(raw(PROFILE_CSV, required=True), d / PROFILE_CSV), d / PROFILE_CSV)
        if profile.units and profile.units != summary["units"]:
            raise InputError(f"{d / PROFILE_CSV}: its columns are in {profile.units} but {d / PROFILE_JSON} says units "
                             f"{summary['units']!r}")
        profile = dataclasses.replace(profile, units=summary["units"])
        rb = raw(RESIDUALS_CSV)
        residuals = ResidualTable.from_csv(_decode(rb, d / RESIDUALS_CSV), d / RESIDUALS_CSV) if rb is not None else None
        cb = raw(CONFIG_YAML)
        config = {}
        if cb is not None:
            try:
                config = parse_yaml(_decode(cb, d / CONFIG_YAML), str(d / CONFIG_YAML)) or {}
            except ConfigError as exc:
                raise InputError(str(exc)) from None
            if not isinstance(config, dict):
                raise InputError(f"{d / CONFIG_YAML}: expected a mapping of config sections")
        elif need_config:
            raise InputError(f"{d}: not a chimeline run folder (no {CONFIG_YAML})")
        eb = raw(EVALUATION_JSON)
        evaluation = _parse_json(eb, d / EVALUATION_JSON) if eb is not None else None
    finally:
        if dir_fd is not None:
            os.close(dir_fd)
    return RunFolder(path=d, summary=summary, config=config, profile=profile, residuals=residuals,
                     evaluation=evaluation, manifest=manifest)


def _decode(raw: bytes, path) -> str:
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: cannot read: {str(exc)[:100]}") from None
