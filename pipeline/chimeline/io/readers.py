"""Scan readers behind one interface: ``open_scan(path, cfg)`` picks the reader by extension (and by content for
COPC), ``open_scans(paths, cfg)`` joins several files (tiles, or one file per station) into one ``ScanSource``.

Formats: LAS/LAZ/COPC (``io.las``, ``io.copc``), E57 (``io.e57``), PTX (``io.ptx``), PLY (``io.ply``), PCD
(``io.pcd``), ASCII and .npy (``io.ascii``). Every reader streams in chunks; ``io.source`` holds the interface.
"""
from __future__ import annotations

import glob
import logging
import re
import struct
from pathlib import Path
from typing import Optional

import numpy as np

from ..config import InputConfig
from ..errors import DependencyError, InputError
from .ascii import NpySource, TextSource
from .copc import CopcSource, is_copc
from .crs import wkt_units
from .e57 import E57Source
from .las import LasSource
from .pcd import open_pcd
from .ply import open_ply
from .ptx import PtxSource
from .source import Chunk, ScanSource, concat_chunks, short

log = logging.getLogger(__name__)

LAS_EXT = {".las", ".laz"}
TEXT_EXT = {".xyz", ".txt", ".pts", ".csv", ".asc"}
SUPPORTED = sorted(LAS_EXT | TEXT_EXT | {".npy", ".e57", ".ptx", ".ply", ".pcd"})

__all__ = ["Chunk", "ScanSource", "MultiSource", "open_scan", "open_scans", "expand_inputs", "load_open3d",
           "wkt_units", "SUPPORTED"]


def open_scan(path, cfg: Optional[InputConfig] = None) -> ScanSource:
    """Open one scan file by its extension. Raises InputError for missing, empty, unknown or unreadable files."""
    cfg = cfg or InputConfig()
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: scan file not found")
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a scan file")
    ext = path.suffix.lower()
    if ext not in SUPPORTED:
        raise InputError(f"{path}: unknown scan extension {ext or '(none)'!r}; supported: {', '.join(SUPPORTED)}")
    if path.stat().st_size == 0:
        raise InputError(f"{path}: the file is empty")
    try:
        if ext in LAS_EXT:
            if is_copc(path):
                return CopcSource(path, cfg.skip_classes, cfg.skip_withheld)
            return LasSource(path, cfg.skip_classes, cfg.skip_withheld)
        if ext == ".ply":
            return open_ply(path)
        if ext == ".pcd":
            return open_pcd(path)
        if ext == ".npy":
            return NpySource(path, cfg.columns)
        if ext == ".e57":
            return E57Source(path)
        if ext == ".ptx":
            return PtxSource(path)
        return TextSource(path, cfg.columns)
    except (OSError, UnicodeError, ValueError, IndexError, KeyError, struct.error) as exc:
        raise InputError(f"{path}: cannot read the scan as {ext} ({short(exc)})") from None


def expand_inputs(items) -> list[Path]:
    """Paths from the command line: files as given, folders to their scan files, glob patterns expanded (sorted)."""
    out: list[Path] = []
    for item in items:
        s = str(item)
        p = Path(s)
        if p.is_dir():
            found = sorted(q for q in p.iterdir() if q.is_file() and q.suffix.lower() in SUPPORTED)
            if not found:
                raise InputError(f"{p}: the folder holds no scan files ({', '.join(SUPPORTED)})")
            out += found
        elif not p.exists() and any(c in s for c in "*?["):
            found = sorted(Path(q) for q in glob.glob(s) if Path(q).suffix.lower() in SUPPORTED)
            if not found:
                raise InputError(f"{s}: no scan file matches the pattern")
            out += found
        else:
            out.append(p)
    seen, unique = set(), []
    for p in out:
        key = p.resolve() if p.exists() else p
        if key not in seen:
            seen.add(key)
            unique.append(p)
    return unique


def open_scans(paths, cfg: Optional[InputConfig] = None) -> ScanSource:
    """One file: its reader. Several: a ``MultiSource`` over them (checked for agreeing units)."""
    cfg = cfg or InputConfig()
    paths = [Path(p) for p in paths]
    if not paths:
        raise InputError("no scan file given")
    if len(paths) == 1:
        return open_scan(paths[0], cfg)
    return MultiSource([open_scan(p, cfg) for p in paths], cfg.file_stations)


class MultiSource(ScanSource):
    """Several scan files read as one scan: tiles of one registered scan, or one file per station.

    Station ids: a file that carries none gives its points the file's number (1, 2, ...) with
    ``input.file_stations: auto``; ``always`` numbers every file's points so; ``never`` keeps the files' own ids
    (0 where none). The detection sample takes from each file in proportion to its points.
    """

    def __init__(self, sources: list[ScanSource], file_stations: str = "auto"):
        self.sources = sources
        self.path = sources[0].path
        self.paths = tuple(s.path for s in sources)
        self.n_points = sum(s.n_points for s in sources)
        self.file_stations = file_stations
        self._relabel = [file_stations == "always" or (file_stations == "auto" and not s.has_source_id)
                         for s in sources]
        self.has_source_id = file_stations != "never" or any(s.has_source_id for s in sources)
        first = sources[0]
        for s in sources[1:]:
            a = (first.crs.horizontal, first.crs.vertical) if first.crs else None
            b = (s.crs.horizontal, s.crs.vertical) if s.crs else None
            if a and b and a != b:
                raise InputError(f"{s.path}: its CRS units {b} differ from {first.path}'s {a}: convert the files "
                                 f"to one unit first")
        self.crs = next((s.crs for s in sources if s.crs), None)
        self.units_hint = next((s.units_hint for s in sources if s.units_hint), None)
        self.offset_hint = first.offset_hint
        self.storage = "float32" if any(s.storage == "float32" for s in sources) else ""
        self._update_quantum()

    def _update_quantum(self):
        qs = [s.coordinate_quantum for s in self.sources if s.coordinate_quantum is not None]
        self.coordinate_quantum = np.max(np.array(qs), axis=0) if qs else None

    @property
    def decoded(self) -> int:
        return sum(s.decoded for s in self.sources)

    @decoded.setter
    def decoded(self, value):  # the base class's default; the files count their own
        pass

    @property
    def skipped_counts(self) -> dict:
        out: dict = {}
        for s in self.sources:
            for k, v in s.skipped_counts.items():
                out[k] = out.get(k, 0) + v
        return out

    def _ids(self, i: int, ch: Chunk) -> Chunk:
        if self._relabel[i]:
            return Chunk(ch.xyz, np.full(len(ch.xyz), i + 1, dtype=np.int64))
        if ch.source_id is None and self.has_source_id:
            return Chunk(ch.xyz, np.zeros(len(ch.xyz), dtype=np.int64))
        return ch

    def chunks(self, chunk_size):
        for i, s in enumerate(self.sources):
            for ch in s.chunks(chunk_size):
                yield self._ids(i, ch)

    def stream(self, chunk_size, up_index, up_range, stride, bounds=None):
        for i, s in enumerate(self.sources):
            for n, band, strided, bad in s.stream(chunk_size, up_index, up_range, stride, bounds):
                yield n, self._ids(i, band), self._ids(i, strided), bad

    def sample(self, n, rng):
        parts = []
        for i, s in enumerate(self.sources):
            k = max(int(round(n * s.n_points / self.n_points)), 1)
            parts.append(self._ids(i, s.sample(k, rng)))
        self._update_quantum()
        return concat_chunks(parts)


def load_open3d():
    """The open3d module, or a DependencyError naming what to install (it needs Debian's libusb-1.0-0)."""
    try:
        import open3d
    except (ImportError, OSError) as exc:
        msg = short(exc)
        lib = re.search(r"(lib[\w.+-]+\.so[\w.]*)", msg)
        if isinstance(exc, OSError) or lib:  # a system library it links against is missing
            pkg = "libusb-1.0-0" if lib is None or "usb" in lib.group(1) else lib.group(1)
            raise DependencyError(f"open3d cannot be loaded: the system library {lib.group(1) if lib else ''} is "
                                  f"missing ({msg}); on Debian/Ubuntu: sudo apt-get install {pkg}") from None
        raise DependencyError(f"open3d is not installed ({msg}); install it with pip install open3d-cpu "
                              f"(Linux x86_64) or pip install open3d") from None
    return open3d
