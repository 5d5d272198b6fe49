"""The batch manifest: one row per job of ``chimeline batch``, as CSV or YAML.

CSV: a header row with the columns ``scan, tag, survey_date`` and optionally ``config``, ``set`` (several
``KEY=VALUE`` pairs separated by ``;``) and ``kind``; ``#`` lines are comments. YAML: a mapping with ``jobs`` (a
list of mappings with the same keys; ``set`` a list of ``KEY=VALUE`` strings or a mapping) and optional
``defaults`` (``config``, ``set``, ``kind`` for every job). Paths are relative to the manifest's folder.

Every problem is one ``ConfigError`` naming the manifest, the line (CSV) or job (YAML) and what to change; the
scans themselves are not opened here (a bad scan fails its own job, not the batch).
"""
from __future__ import annotations

import csv
import datetime
import difflib
import io
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Optional

from ..config import load_yaml, parse_set_pairs
from ..errors import ConfigError

KINDS = ("run", "evaluate")
COLUMNS = ("scan", "tag", "survey_date", "config", "set", "kind")
REQUIRED = ("scan", "tag", "survey_date")
#: a tag names a folder: letters, digits, '.', '_', '-', not starting with '.'
TAG_PATTERN = re.compile(r"[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}")
MAX_JOBS = 100_000
MAX_BYTES = 16 << 20


@dataclass(frozen=True)
class BatchJob:
    """One job of the batch: a scan to run (or a survey CSV / profile.csv to evaluate) into ``<tag>/<date>/``."""

    where: str  # the manifest and the row, for messages ("fleet.csv: line 4")
    scan: Path  # absolute path (or glob pattern / folder for a multi-file scan)
    tag: str
    survey_date: str  # ISO date YYYY-MM-DD
    config: Optional[Path]  # absolute path of the job's config, None: the embedded default
    sets: tuple  # ((dotted key, value), ...) overrides, in order
    kind: str  # run | evaluate

    @property
    def folder(self) -> str:
        """The job's folder relative to the batch output folder."""
        return f"{self.tag}/{self.survey_date}"

    def config_sets(self) -> list:
        """The job's overrides, then the tag and the survey date from the manifest (they win)."""
        return [*self.sets, ("tank.tag", self.tag), ("tank.survey_date", self.survey_date)]


@dataclass(frozen=True)
class BatchManifest:
    path: Path  # absolute
    jobs: tuple  # BatchJob, in manifest order


def read_batch_manifest(path) -> BatchManifest:
    """Parse and check a manifest (.csv, or .yaml / .yml); raises ConfigError naming the row."""
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"{path}: batch manifest not found")
    if path.stat().st_size > MAX_BYTES:
        raise ConfigError(f"{path}: larger than {MAX_BYTES >> 20} MiB; not a batch manifest")
    base = path.resolve().parent
    suffix = path.suffix.lower()
    if suffix == ".csv":
        rows = _csv_rows(path)
        defaults = {}
    elif suffix in (".yaml", ".yml"):
        rows, defaults = _yaml_rows(path)
    else:
        raise ConfigError(f"{path}: a batch manifest must be .csv, .yaml or .yml, got {suffix or 'no extension'!r}")
    if not rows:
        raise ConfigError(f"{path}: the manifest lists no jobs")
    if len(rows) > MAX_JOBS:
        raise ConfigError(f"{path}: {len(rows)} jobs; at most {MAX_JOBS} per manifest")
    jobs, seen = [], {}
    for where, row in rows:
        job = _job(path, base, where, {**defaults, **{k: v for k, v in row.items() if v not in (None, "")}},
                   defaults.get("set"))
        key = (job.tag, job.survey_date)
        if key in seen:
            raise ConfigError(f"{where}: tag {job.tag!r} and survey_date {job.survey_date} repeat {seen[key]}; "
                              f"each tank and date is one job (one folder)")
        seen[key] = where.split(": ", 1)[-1]
        jobs.append(job)
    return BatchManifest(path=path.resolve(), jobs=tuple(jobs))


def _unknown(where, key, allowed) -> ConfigError:
    near = difflib.get_close_matches(str(key), allowed, n=1)
    hint = f" (did you mean {near[0]!r}?)" if near else ""
    return ConfigError(f"{where}: unknown column or key {str(key)[:40]!r}{hint}; allowed: {', '.join(allowed)}")


def _csv_rows(path: Path) -> list:
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: cannot read the manifest: {exc}") from None
    numbered = [(i, ln) for i, ln in enumerate(text.splitlines(), start=1)
                if ln.strip() and not ln.lstrip().startswith("#")]
    if not numbered:
        return []
    try:
        table = list(csv.reader(io.StringIO("\n".join(ln for _, ln in numbered))))
    except csv.Error as exc:
        raise ConfigError(f"{path}: not a readable CSV table ({str(exc)[:100]})") from None
    header = [h.strip().lower() for h in table[0]]
    for h in header:
        if h not in COLUMNS:
            raise _unknown(f"{path}: line {numbered[0][0]}", h, COLUMNS)
    missing = [c for c in REQUIRED if c not in header]
    if missing:
        raise ConfigError(f"{path}: line {numbered[0][0]}: the header lacks the column(s) {', '.join(missing)} "
                          f"(columns: {', '.join(COLUMNS)})")
    rows = []
    for (line, _), cells in zip(numbered[1:], table[1:]):
        if len(cells) > len(header):
            raise ConfigError(f"{path}: line {line}: {len(cells)} cells for {len(header)} columns (quote a value "
                              f"that holds a comma)")
        row = {h: c.strip() for h, c in zip(header, cells)}
        if isinstance(row.get("set"), str):
            row["set"] = [p.strip() for p in row["set"].split(";") if p.strip()]
        rows.append((f"{path}: line {line}", row))
    return rows


def _yaml_rows(path: Path):
    data = load_yaml(path)
    for k in data:
        if k not in ("jobs", "defaults"):
            raise _unknown(str(path), k, ("jobs", "defaults"))
    defaults = data.get("defaults") or {}
    if not isinstance(defaults, dict):
        raise ConfigError(f"{path}: 'defaults' must be a mapping of config, set and kind")
    for k in defaults:
        if k not in ("config", "set", "kind"):
            raise _unknown(f"{path}: defaults", k, ("config", "set", "kind"))
    jobs = data.get("jobs")
    if not isinstance(jobs, list):
        raise ConfigError(f"{path}: 'jobs' must be a list of jobs (scan, tag, survey_date, ...), got "
                          f"{type(jobs).__name__}")
    rows = []
    for i, j in enumerate(jobs):
        where = f"{path}: job {i + 1} (jobs[{i}])"
        if not isinstance(j, dict):
            raise ConfigError(f"{where}: must be a mapping with scan, tag and survey_date")
        for k in j:
            if k not in COLUMNS:
                raise _unknown(where, k, COLUMNS)
        rows.append((where, dict(j)))
    return rows, defaults


def _text(where, key, value) -> str:
    if isinstance(value, bool) or not isinstance(value, (str, int, float, datetime.date)):
        raise ConfigError(f"{where}: '{key}' must be text, got {type(value).__name__}")
    return value.isoformat() if isinstance(value, datetime.date) else str(value).strip()


def _sets(where, value) -> list:
    if value is None or value == "":
        return []
    if isinstance(value, dict):  # YAML mapping {key: value}
        return [(str(k), v) for k, v in value.items()]
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
        raise ConfigError(f"{where}: 'set' must be KEY=VALUE text (several separated by ';' in CSV), a list of them "
                          f"or a mapping")
    try:
        return parse_set_pairs(value)
    except ValueError as exc:
        raise ConfigError(f"{where}: 'set': {exc}") from None


def _job(path: Path, base: Path, where: str, row: dict, default_sets) -> BatchJob:
    for k in REQUIRED:
        if row.get(k) in (None, ""):
            raise ConfigError(f"{where}: '{k}' is missing (every job needs scan, tag and survey_date)")
    scan_text = _text(where, "scan", row["scan"])
    tag = _text(where, "tag", row["tag"])
    if not TAG_PATTERN.fullmatch(tag):
        raise ConfigError(f"{where}: 'tag' names a folder: use 1-64 letters, digits, '.', '_' or '-' (not starting "
                          f"with '.'), got {tag[:40]!r}")
    date_text = _text(where, "survey_date", row["survey_date"])
    try:
        date = datetime.date.fromisoformat(date_text)
    except ValueError:
        date = None
    if date is None or len(date_text) != 10:
        raise ConfigError(f"{where}: 'survey_date' must be a date YYYY-MM-DD, got {date_text[:40]!r}")
    kind = _text(where, "kind", row["kind"]).lower() if row.get("kind") not in (None, "") else None
    if kind is not None and kind not in KINDS:
        raise ConfigError(f"{where}: 'kind' must be run or evaluate, got {kind[:40]!r}")
    scan = (base / scan_text).absolute() if not Path(scan_text).is_absolute() else Path(scan_text)
    if kind is None:  # a CSV is a survey (or a profile.csv) unless the row says run
        kind = "evaluate" if scan.suffix.lower() == ".csv" else "run"
    cfg = None
    if row.get("config") not in (None, ""):
        c = Path(_text(where, "config", row["config"]))
        cfg = c if c.is_absolute() else (base / c).absolute()
    sets = tuple(_sets(where, default_sets) + (_sets(where, row.get("set")) if row.get("set") is not default_sets
                                                else []))
    return BatchJob(where=where, scan=scan, tag=tag, survey_date=date.isoformat(), config=cfg, sets=sets, kind=kind)
