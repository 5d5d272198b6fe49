"""ASCII scans (.xyz .txt .csv .asc .pts) and .npy arrays, streamed in chunks, with a column map.

Columns: ``input.columns`` ({x: 0, y: 1, z: 2, station: 5}) when given; else the names of a header row (or of a
comment line right before the data: ``# x y z intensity station``); else x y z are the first three columns and
no column is the station (a colour or intensity column is never taken for one). Comment lines (``#``, ``//``),
blank lines and count lines (a single integer, as PTS files start) are skipped wherever they are; row numbers in
messages are the file's line numbers.
"""
from __future__ import annotations

import itertools
import logging
import re
from pathlib import Path
from typing import Optional

import numpy as np

from ..errors import InputError
from .source import Chunk, ScanSource, sample_windows, short

log = logging.getLogger(__name__)

#: header names taken as the station (scan position) column
STATION_NAMES = ("station", "station_id", "point_source_id", "source_id", "scan_id", "scan_index", "scan")
_SPLIT = re.compile(r"[\s,;]+")


def column_map(names, columns, path) -> tuple[list[int], Optional[int]]:
    """([x, y, z] column numbers, station column or None) from the config map or header names."""
    if columns is not None:
        return [columns.x, columns.y, columns.z], columns.station
    if names:
        low = [n.strip().lower().lstrip("/") for n in names]
        if all(a in low for a in ("x", "y", "z")):
            st = next((low.index(s) for s in STATION_NAMES if s in low), None)
            return [low.index("x"), low.index("y"), low.index("z")], st
    return [0, 1, 2], None


def _is_comment(line: str) -> bool:
    s = line.lstrip()
    return not s or s[0] == "#" or s.startswith("//")


def _is_count(tokens) -> bool:
    return len(tokens) == 1 and tokens[0].isdigit()


def _numeric(tok: str) -> bool:
    try:
        float(tok)
        return True
    except ValueError:
        return False


def sniff(path: Path, max_lines: int = 200):
    """(delimiter or None for whitespace, header names or None, number of lines before the first data row)."""
    last_comment = None
    with open(path, "r", encoding="utf-8", errors="replace") as fh:
        for i, line in enumerate(itertools.islice(fh, max_lines)):
            if _is_comment(line):
                if line.strip():
                    last_comment = line.strip().lstrip("#/").strip()
                continue
            toks = [t for t in _SPLIT.split(line.strip()) if t]
            if _is_count(toks):
                last_comment = None
                continue
            delim = "," if "," in line else (";" if ";" in line else None)
            if not all(_numeric(t) for t in toks[:3]):  # a header row of names
                return delim, toks, i + 1
            names = [t for t in _SPLIT.split(last_comment) if t] if last_comment else None
            if names and len(names) != len(toks):
                names = None
            return delim, names, i
    raise InputError(f"{path}: no row of numbers found in the first {max_lines} lines (x y z [...] expected)")


def count_lines(path: Path) -> int:
    """Newlines in the file (fast, in binary blocks): an upper bound on the points before streaming."""
    n = 0
    last = b"\n"
    with open(path, "rb") as fh:
        while True:
            block = fh.read(1 << 22)
            if not block:
                break
            n += block.count(b"\n")
            last = block[-1:]
    return n + (0 if last == b"\n" else 1)


def parse_rows(lines, first_lineno, delim, usecols, path) -> np.ndarray:
    """Numeric rows (m, len(usecols)) from text lines, skipping comments, blanks and count lines."""
    keep = [ln for ln in lines if not _is_comment(ln) and not _is_count(ln.split())]
    if not keep:
        return np.zeros((0, len(usecols)))
    try:
        return np.loadtxt(keep, delimiter=delim, usecols=usecols, ndmin=2, dtype=np.float64)
    except (ValueError, IndexError) as exc:
        for k, ln in enumerate(lines):  # find the offending line for the message
            if _is_comment(ln) or _is_count(ln.split()):
                continue
            toks = [t for t in (ln.split(delim) if delim else ln.split())]
            if len(toks) <= max(usecols) or not all(_numeric(toks[c]) for c in usecols):
                raise InputError(f"{path}: row {first_lineno + k}: expected numbers in columns "
                                 f"{', '.join(str(c) for c in usecols)} (0-based; set input.columns to map them), "
                                 f"got {ln.strip()[:80]!r}") from None
        raise InputError(f"{path}: not a table of numbers ({short(exc)})") from None


class TextSource(ScanSource):
    """An ASCII table of points, streamed line by line."""

    def __init__(self, path: Path, columns=None):
        self.path = path
        self.delim, names, self.skip = sniff(path)
        self.cols, self.station_col = column_map(names, columns, path)
        self.usecols = self.cols + ([self.station_col] if self.station_col is not None else [])
        self.has_source_id = self.station_col is not None
        self.n_points = max(count_lines(path) - self.skip, 1)

    def chunks(self, chunk_size):
        with open(self.path, "r", encoding="utf-8", errors="replace") as fh:
            lineno, seen = 1 + self.skip, 0
            for _ in range(self.skip):
                next(fh)
            while True:
                lines = list(itertools.islice(fh, chunk_size))
                if not lines:
                    break
                arr = parse_rows(lines, lineno, self.delim, self.usecols, self.path)
                lineno += len(lines)
                seen += len(arr)
                if len(arr):
                    yield split_columns(arr, self.has_source_id)
        self.n_points = max(seen, 1)  # exact once the whole file was read (an upper bound before)


def split_columns(arr: np.ndarray, has_station: bool) -> Chunk:
    """(m, 3 or 4) rows -> Chunk; a station column must hold whole numbers."""
    xyz = np.ascontiguousarray(arr[:, :3], dtype=np.float64)
    sid = None
    if has_station:
        st = arr[:, 3]
        ok = np.isfinite(st) & (st == np.round(st))
        sid = np.where(ok, st, -1).astype(np.int64)
    return Chunk(xyz, sid)


class NpySource(ScanSource):
    """An (n, 3+) .npy array, memory-mapped and read in slices; columns as for ASCII (no header names)."""

    def __init__(self, path: Path, columns=None):
        self.path = path
        try:
            self.arr = np.load(path, mmap_mode="r", allow_pickle=False)
        except Exception as exc:
            raise InputError(f"{path}: not a readable .npy array ({short(exc)})") from None
        if self.arr.ndim != 2 or self.arr.shape[1] < 3 or self.arr.dtype.kind not in "fiu":
            raise InputError(f"{path}: .npy must be a numeric (n, 3+) array of x y z [...], got shape "
                             f"{self.arr.shape} of {self.arr.dtype}")
        self.cols, self.station_col = column_map(None, columns, path)
        used = self.cols + ([self.station_col] if self.station_col is not None else [])
        if max(used) >= self.arr.shape[1]:
            raise InputError(f"{path}: input.columns asks for column {max(used)} but the array has "
                             f"{self.arr.shape[1]} columns")
        self.usecols = used
        self.has_source_id = self.station_col is not None
        self.n_points = int(self.arr.shape[0])
        if self.arr.dtype.kind == "f" and self.arr.dtype.itemsize == 4:
            self.storage = "float32"

    def chunks(self, chunk_size):
        for s in range(0, self.n_points, chunk_size):
            yield split_columns(np.asarray(self.arr[s:s + chunk_size][:, self.usecols], dtype=np.float64),
                                self.has_source_id)

    def sample(self, n, rng):
        """A random sample; for 32-bit float arrays it also sets ``coordinate_quantum``."""
        if n >= self.n_points:
            idx = np.arange(self.n_points)
        else:
            starts, w = sample_windows(self.n_points, n, rng)
            idx = np.unique(np.concatenate([np.arange(s, min(s + w, self.n_points)) for s in starts]))
        out = split_columns(np.asarray(self.arr[idx][:, self.usecols], dtype=np.float64), self.has_source_id)
        if self.storage == "float32":
            fin = out.xyz[np.isfinite(out.xyz).all(axis=1)]
            big = np.abs(fin).max(axis=0) if len(fin) else np.zeros(3)
            self.coordinate_quantum = np.spacing(big.astype(np.float32)).astype(np.float64)
        return out


class RowsSource(ScanSource):
    """Whitespace-separated rows after a header of ``skip`` lines (ASCII PLY and PCD): ``n`` rows, columns
    ``cols`` (x, y, z) and an optional station column; NaN points dropped as missing returns if asked."""

    def __init__(self, path: Path, skip: int, n: int, cols, station_col=None, drop_nonfinite: bool = False):
        self.path, self.skip, self.n_points = path, skip, n
        self.usecols = list(cols) + ([station_col] if station_col is not None else [])
        self.has_source_id = station_col is not None
        self.drop_nonfinite = drop_nonfinite
        self.skipped = {"no_return": 0} if drop_nonfinite else {}
        if n == 0:
            raise InputError(f"{path}: the scan holds no points")

    def chunks(self, chunk_size):
        with open(self.path, "r", encoding="ascii", errors="replace") as fh:
            for _ in range(self.skip):
                next(fh)
            left, lineno = self.n_points, self.skip + 1
            while left > 0:
                lines = list(itertools.islice(fh, min(chunk_size, left)))
                if not lines:
                    raise InputError(f"{self.path}: truncated: {self.n_points - left} of {self.n_points} points")
                ch = split_columns(parse_rows(lines, lineno, None, self.usecols, self.path), self.has_source_id)
                left -= len(lines)
                lineno += len(lines)
                if self.drop_nonfinite:
                    ok = np.isfinite(ch.xyz).all(axis=1)
                    self.skipped["no_return"] += int((~ok).sum())
                    ch = Chunk(ch.xyz[ok], ch.source_id[ok] if ch.source_id is not None else None)
                yield ch
