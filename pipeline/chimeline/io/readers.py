"""Scan readers, one per format family, behind one interface.

``open_scan(path)`` returns a ``ScanSource`` that yields chunks of raw file
coordinates (float64, file units, offsets not yet removed) with optional
station ids, and can draw a spatially spread sample for shell detection.
LAS/LAZ stream from disk (laspy + lazrs); other formats are loaded whole.
"""
from __future__ import annotations

import logging
import re
import struct
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator, Optional

import numpy as np

from ..core.native import captured_native_output
from ..errors import DependencyError, InputError

log = logging.getLogger(__name__)

LAS_EXT = {".las", ".laz"}
O3D_EXT = {".ply", ".pcd"}
TEXT_EXT = {".xyz", ".txt", ".pts", ".csv"}
SUPPORTED = sorted(LAS_EXT | O3D_EXT | TEXT_EXT | {".npy", ".e57"})


@dataclass
class Chunk:
    xyz: np.ndarray  # (n, 3) float64, file units, as stored (georeferenced if the file is)
    source_id: Optional[np.ndarray]  # (n,) int, station / point source id, or None


class ScanSource:
    """A scan that can be read in chunks. Subclasses implement ``chunks`` and ``sample``.

    ``stream`` is the pipeline's fast path: it yields, per chunk, the number of points read, the points whose
    up coordinate lies in a band (cut on the raw values before any other work) and a strided subsample.
    """

    path: Path
    n_points: int
    units_hint: Optional[str] = None  # from the file's CRS, if it says
    has_source_id: bool = False
    offset_hint: Optional[np.ndarray] = None
    #: (3,) file units: the step between representable coordinates (LAS scale factors), None when negligible
    coordinate_quantum: Optional[np.ndarray] = None

    def chunks(self, chunk_size: int) -> Iterator[Chunk]:
        raise NotImplementedError

    def stream(self, chunk_size: int, up_index: int, up_range, stride: int):
        lo, hi = up_range
        for ch in self.chunks(chunk_size):
            u = ch.xyz[:, up_index]
            m = (u >= lo) & (u <= hi)
            sid = ch.source_id
            yield (len(ch.xyz), Chunk(ch.xyz[m], sid[m] if sid is not None else None),
                   Chunk(ch.xyz[::stride], sid[::stride] if sid is not None else None), int((~np.isfinite(ch.xyz).all(axis=1)).sum()))

    def sample(self, n: int, rng: np.random.Generator) -> Chunk:
        raise NotImplementedError


def wkt_units(wkt: str) -> Optional[str]:
    """Length unit of the last UNIT[...] in an OGC WKT string (the horizontal/projected unit)."""
    units = re.findall(r'UNIT\["([^"]+)"\s*,\s*([0-9.eE+-]+)', wkt)
    if not units:
        return None
    name, factor = units[-1]
    name = name.lower()
    f = float(factor)
    if "survey" in name or abs(f - 1200 / 3937) < 1e-9:
        return "us_ft"
    if "foot" in name or "feet" in name or abs(f - 0.3048) < 1e-9:
        return "ft"
    if name.startswith("met") or abs(f - 1.0) < 1e-12:
        return "m"
    return None


def check_las_header(path: Path) -> None:
    """Refuse a LAS/LAZ header whose record counts cannot fit in the file, before laspy reads it.

    A damaged count of variable length records made laspy read millions of records one by one (minutes).
    The fixed fields (ASPRS LAS 1.0-1.4): header size at byte 94, offset to the point data at 96, number of
    VLRs at 100 (54-byte record headers); LAS 1.4 also: start of the first EVLR at 235, number of EVLRs at 243
    (60-byte record headers).
    """
    size = path.stat().st_size
    with open(path, "rb") as fh:
        head = fh.read(375)
    if len(head) < 227 or head[:4] != b"LASF":
        raise InputError(f"{path}: not a LAS/LAZ file (no 'LASF' header)")
    header_size, offset, n_vlr = struct.unpack_from("<HII", head, 94)
    if not 227 <= header_size <= offset <= size:
        raise InputError(f"{path}: corrupt LAS header: header size {header_size} and point data offset {offset} do "
                         f"not fit a file of {size} bytes")
    if n_vlr * 54 > offset - header_size:
        raise InputError(f"{path}: corrupt LAS header: {n_vlr} variable length records cannot fit in the "
                         f"{offset - header_size} bytes before the point data")
    if head[24:26] >= b"\x01\x04" and len(head) >= 247:
        start, n_evlr = struct.unpack_from("<QI", head, 235)
        if n_evlr and (start < offset or start + n_evlr * 60 > size):
            raise InputError(f"{path}: corrupt LAS header: {n_evlr} extended records at byte {start} do not fit a file "
                             f"of {size} bytes")


class LasSource(ScanSource):
    def __init__(self, path: Path):
        import laspy

        self.path = path
        check_las_header(path)
        try:
            with laspy.open(path) as r:
                h = r.header
                self.n_points = int(h.point_count)
                self.has_source_id = "point_source_id" in h.point_format.dimension_names
                self.offset_hint = np.asarray(h.offsets, dtype=float)
                self.units_hint = None
                for v in list(h.vlrs) + list(getattr(r, "evlrs", None) or []):
                    s = getattr(v, "string", None)
                    if s:
                        self.units_hint = wkt_units(s if isinstance(s, str) else s.decode(errors="ignore"))
                    if self.units_hint:
                        break
                self.compressed = path.suffix.lower() == ".laz" or h.are_points_compressed
                if self.compressed:
                    self._check_laz_backend()
                else:
                    need = h.offset_to_point_data + self.n_points * h.point_format.size
                    have = path.stat().st_size
                    if have < need:
                        raise InputError(f"{path}: truncated: the header says {self.n_points} points "
                                         f"({need} bytes) but the file has {have} bytes")
                self.bounds = (np.asarray(h.mins, dtype=float), np.asarray(h.maxs, dtype=float),
                               np.asarray(h.scales, dtype=float))
                self.scale = np.asarray(h.scales, dtype=float)
                self.offset = np.asarray(h.offsets, dtype=float)
                self.coordinate_quantum = self.scale.copy()
        except InputError:
            raise
        except Exception as exc:
            raise InputError(f"{path}: not a readable LAS/LAZ file ({_short(exc)})") from None
        if self.n_points == 0:
            raise InputError(f"{path}: the scan holds no points")

    @staticmethod
    def _check_laz_backend():
        import laspy

        if not laspy.LazBackend.detect_available():
            raise InputError("LAZ needs a decompression backend: pip install lazrs")

    def _raw_chunks(self, chunk_size):
        """Raw point records (unscaled integer coordinates) in chunks; every read error becomes one InputError."""
        done = 0
        try:
            with self._open() as r:
                while done < self.n_points:
                    n = min(chunk_size, self.n_points - done)
                    pts = r.read_points(n)
                    if len(pts) != n:
                        raise InputError(f"{self.path}: truncated: could read only {done + len(pts)} of "
                                         f"{self.n_points} points")
                    done += n
                    yield pts.array
        except InputError:
            raise
        except Exception as exc:
            raise InputError(f"{self.path}: corrupt or truncated LAS/LAZ data after {done} of "
                             f"{self.n_points} points ({_short(exc)})") from None

    def chunks(self, chunk_size):
        for raw in self._raw_chunks(chunk_size):
            yield self._scaled(raw)

    def _open(self):
        """laspy reader; LAZ 1.4 layers other than x, y, z and the point source id are not decompressed."""
        import laspy

        if not self.compressed:
            return laspy.open(self.path)
        sel = laspy.DecompressionSelection
        return laspy.open(self.path, decompression_selection=sel.base() | sel.Z | sel.POINT_SOURCE_ID)

    def stream(self, chunk_size, up_index, up_range, stride):
        """Cut on the raw integer up coordinate first, so only the band is scaled to float."""
        dims = "XYZ"
        lo_i = np.floor((up_range[0] - self.offset[up_index]) / self.scale[up_index])
        hi_i = np.ceil((up_range[1] - self.offset[up_index]) / self.scale[up_index])
        for raw in self._raw_chunks(chunk_size):
            u = raw[dims[up_index]]
            m = (u >= lo_i) & (u <= hi_i)
            yield len(raw), self._scaled(raw[m]), self._scaled(raw[::stride]), 0

    def _scaled(self, raw):
        xyz = np.empty((len(raw), 3))
        for i, d in enumerate("XYZ"):
            xyz[:, i] = raw[d] * self.scale[i] + self.offset[i]
        lo, hi, sc = self.bounds
        if len(xyz) and ((xyz < lo - 2 * sc) | (xyz > hi + 2 * sc)).any():
            k = int(((xyz < lo - 2 * sc) | (xyz > hi + 2 * sc)).any(axis=1).sum())
            raise InputError(f"{self.path}: corrupt point data: {k} points lie outside the header's bounding box "
                             f"(a damaged LAS/LAZ file, or a header that does not match its points)")
        sid = raw["point_source_id"].astype(np.int64) if self.has_source_id else None
        return Chunk(xyz, sid)

    def sample(self, n, rng):
        """About ``n`` points in contiguous windows spread over the file (seeking, so only the windows are decoded)."""
        if n >= self.n_points:
            return _concat(list(self.chunks(max(self.n_points, 1))))
        # each window of a LAZ file costs a whole compressed chunk (typically 50 000 points) to decode
        n_windows = 24 if self.compressed else 96
        w = max(n // n_windows, 1)
        starts = np.linspace(0, self.n_points - w, n_windows).astype(np.int64)
        jitter = rng.integers(0, max((self.n_points - w) // n_windows, 1), n_windows)
        starts = np.clip(starts + jitter, 0, self.n_points - w)
        parts = []
        try:
            with self._open() as r:
                for s in np.sort(starts):
                    r.seek(int(s))
                    pts = r.read_points(w)
                    if len(pts) != w:
                        raise InputError(f"{self.path}: truncated: could read only {len(pts)} of {w} requested "
                                         f"points at point {int(s)}")
                    parts.append(self._scaled(pts.array))
        except InputError:
            raise
        except Exception as exc:
            raise InputError(f"{self.path}: corrupt or truncated LAS/LAZ data ({_short(exc)})") from None
        return _concat(parts)


class ArraySource(ScanSource):
    """Formats read whole: PLY/PCD (open3d), ASCII, npy, E57."""

    def __init__(self, path: Path, xyz: np.ndarray, source_id=None, units_hint=None):
        self.path = path
        self.xyz = xyz
        self.source_id = source_id
        self.has_source_id = source_id is not None
        self.units_hint = units_hint
        self.n_points = len(xyz)
        if self.n_points == 0:
            raise InputError(f"{path}: the scan holds no points")

    def chunks(self, chunk_size):
        for s in range(0, self.n_points, chunk_size):
            sid = self.source_id[s:s + chunk_size] if self.source_id is not None else None
            yield Chunk(self.xyz[s:s + chunk_size], sid)

    def sample(self, n, rng):
        if n >= self.n_points:
            idx = np.arange(self.n_points)
        else:
            idx = np.sort(rng.choice(self.n_points, n, replace=False))
        return Chunk(self.xyz[idx], self.source_id[idx] if self.source_id is not None else None)


def _concat(parts):
    xyz = np.concatenate([p.xyz for p in parts])
    sid = np.concatenate([p.source_id for p in parts]) if parts and parts[0].source_id is not None else None
    return Chunk(xyz, sid)


def _short(exc) -> str:
    s = str(exc).strip().splitlines()
    return (s[0] if s else type(exc).__name__)[:160]


def open_scan(path) -> ScanSource:
    """Open a scan by its extension. Raises InputError for missing, empty, unknown or unreadable files."""
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
    if ext in LAS_EXT:
        return LasSource(path)
    if ext in O3D_EXT:
        return _read_open3d(path)
    if ext == ".npy":
        try:
            arr = np.load(path, allow_pickle=False)
        except Exception as exc:
            raise InputError(f"{path}: not a readable .npy array ({_short(exc)})") from None
        if arr.ndim != 2 or arr.shape[1] < 3:
            raise InputError(f"{path}: .npy must be an (n, 3+) array of x y z [...], got shape {arr.shape}")
        if arr.dtype.kind not in "fiu":
            raise InputError(f"{path}: .npy must hold numbers (x y z [...]), got dtype {arr.dtype}")
        sid = arr[:, 4].astype(np.int64) if arr.shape[1] >= 5 else None
        return ArraySource(path, np.ascontiguousarray(arr[:, :3], dtype=np.float64), sid)
    if ext == ".e57":
        return _read_e57(path)
    return _read_text(path)


def load_open3d():
    """The open3d module, or a DependencyError naming what to install (it needs Debian's libusb-1.0-0)."""
    try:
        import open3d
    except (ImportError, OSError) as exc:
        msg = _short(exc)
        lib = re.search(r"(lib[\w.+-]+\.so[\w.]*)", msg)
        if isinstance(exc, OSError) or lib:  # a system library it links against is missing
            pkg = "libusb-1.0-0" if lib is None or "usb" in lib.group(1) else lib.group(1)
            raise DependencyError(f"open3d cannot be loaded: the system library {lib.group(1) if lib else ''} is "
                                  f"missing ({msg}); on Debian/Ubuntu: sudo apt-get install {pkg}") from None
        raise DependencyError(f"open3d is not installed ({msg}); install it with pip install open3d-cpu "
                              f"(Linux x86_64) or pip install open3d") from None
    return open3d


_PLY_SIZES = {"char": 1, "uchar": 1, "int8": 1, "uint8": 1, "short": 2, "ushort": 2, "int16": 2, "uint16": 2,
              "int": 4, "uint": 4, "int32": 4, "uint32": 4, "float": 4, "float32": 4, "double": 8, "float64": 8}


def _ply_vertex_count(path) -> Optional[int]:
    """The vertex count a PLY header declares; a binary file too short for it is refused (truncated)."""
    with open(path, "rb") as fh:
        head = b""
        while not head.endswith(b"end_header\n") and not head.endswith(b"end_header\r\n") and len(head) < 65536:
            line = fh.readline()
            if not line:
                break
            head += line
    text = head.decode("ascii", errors="replace")
    if not text.startswith("ply") or "end_header" not in text:
        raise InputError(f"{path}: not a PLY file (no 'ply' ... 'end_header' header)")
    fmt = re.search(r"^format (\w+)", text, re.M)
    elements = re.findall(r"^element (\w+) (\d+)", text, re.M)
    counts = dict(elements)
    if "vertex" not in counts:
        raise InputError(f"{path}: the PLY header declares no vertex element")
    n = int(counts["vertex"])
    if fmt and fmt.group(1).startswith("binary") and elements and elements[0][0] == "vertex":
        block = text.split("element vertex", 1)[1].split("element ", 1)[0]
        props = re.findall(r"^property (\w+) \w+", block, re.M)
        if "list" not in props and all(t in _PLY_SIZES for t in props):
            need = len(head) + n * sum(_PLY_SIZES[t] for t in props)
            have = path.stat().st_size
            if have < need:
                raise InputError(f"{path}: truncated: the header declares {n} points ({need} bytes) but the file has "
                                 f"{have} bytes")
    elif fmt and fmt.group(1) == "ascii":  # open3d fills the points of missing lines with garbage: count them
        _check_lines(path, len(head), n)
    return n


def _check_lines(path, offset: int, n: int) -> None:
    """An ASCII point file must have at least ``n`` lines after its header (``offset`` bytes)."""
    lines = 0
    with open(path, "rb") as fh:
        fh.seek(offset)
        tail = b"\n"
        for block in iter(lambda: fh.read(1 << 24), b""):
            lines += block.count(b"\n")
            tail = block[-1:]
    lines += tail != b"\n"
    if lines < n:
        raise InputError(f"{path}: truncated: the header declares {n} points but the file has {lines} data lines")


def _pcd_point_count(path) -> Optional[int]:
    """The point count a PCD header declares; a file too short for it is refused (open3d reads garbage)."""
    head, fields = b"", {}
    with open(path, "rb") as fh:
        while len(head) < 65536:
            line = fh.readline()
            if not line:
                break
            head += line
            words = line.decode("ascii", errors="replace").split()
            if words and not words[0].startswith("#"):
                fields[words[0].upper()] = words[1:]
            if words and words[0].upper() == "DATA":
                break
    try:
        n = int(fields["POINTS"][0])
        data = fields["DATA"][0].lower()
    except (KeyError, IndexError, ValueError):
        raise InputError(f"{path}: not a PCD file (its header lacks POINTS or DATA)") from None
    if data == "ascii":
        _check_lines(path, len(head), n)
    elif data == "binary":
        try:
            size = sum(int(a) * int(b) for a, b in zip(fields["SIZE"], fields.get("COUNT", ["1"] * len(fields["SIZE"]))))
        except (KeyError, ValueError):
            raise InputError(f"{path}: not a PCD file (bad SIZE or COUNT line)") from None
        if path.stat().st_size < len(head) + n * size:
            raise InputError(f"{path}: truncated: the header declares {n} points ({len(head) + n * size} bytes) but "
                             f"the file has {path.stat().st_size} bytes")
    return n


def _read_open3d(path):
    o3d = load_open3d()
    declared = _ply_vertex_count(path) if path.suffix.lower() == ".ply" else _pcd_point_count(path)
    with captured_native_output() as said:  # open3d reports a failed read only by printing (RPly, PCD reader)
        pc = o3d.io.read_point_cloud(str(path))
    said = " ".join(line.strip() for line in "".join(said).splitlines() if line.strip())
    if said:
        log.debug("open3d: %s", said)
    if re.search(r"fail|error", said, re.I):
        raise InputError(f"{path}: cannot be read ({said[:160]})")
    xyz = np.asarray(pc.points, dtype=np.float64)
    if len(xyz) == 0:
        raise InputError(f"{path}: no points could be read (empty or not a point cloud)")
    if declared is not None and len(xyz) != declared:
        raise InputError(f"{path}: read {len(xyz)} of the {declared} points the header declares (truncated or damaged)")
    sid = None
    if path.suffix.lower() == ".ply":
        sid = _ply_station(path, len(xyz))
    return ArraySource(path, xyz, sid)


def _ply_station(path, n):
    """Read a 'station' vertex property if the PLY has one (open3d drops unknown properties)."""
    try:
        with open(path, "rb") as fh:
            head = b""
            while b"end_header\n" not in head and len(head) < 65536:
                head += fh.readline()
            text = head.decode("ascii", errors="ignore")
            if "binary_little_endian" not in text or "property ushort station" not in text:
                return None
            props = re.findall(r"property (\w+) (\w+)", text)
            typemap = {"double": "<f8", "float": "<f4", "ushort": "<u2", "uchar": "u1", "int": "<i4", "uint": "<u4",
                       "short": "<i2"}
            dt = np.dtype([(name, typemap[t]) for t, name in props])
            arr = np.fromfile(fh, dtype=dt, count=n)
            return arr["station"].astype(np.int64)
    except Exception:
        return None


def _read_e57(path):
    try:
        import pye57
    except ImportError:
        raise InputError(f"{path}: reading E57 needs pye57 (pip install 'chimeline[e57]')") from None
    try:
        e = pye57.E57(str(path))
        parts, sids = [], []
        for i in range(e.scan_count):
            d = e.read_scan(i, ignore_missing_fields=True, transform=True)
            xyz = np.column_stack([d["cartesianX"], d["cartesianY"], d["cartesianZ"]])
            parts.append(xyz)
            sids.append(np.full(len(xyz), i + 1, dtype=np.int64))
    except Exception as exc:
        raise InputError(f"{path}: not a readable E57 file ({_short(exc)})") from None
    if not parts:
        raise InputError(f"{path}: the E57 file holds no scans")
    return ArraySource(path, np.concatenate(parts), np.concatenate(sids) if len(parts) > 1 else None, units_hint="m")


def _read_text(path):
    """ASCII x y z [more columns]; '#' comments and one header line are skipped; comma or whitespace separated."""
    try:
        with open(path, "r", encoding="utf-8", errors="replace") as fh:
            first = ""
            for line in fh:
                if line.strip() and not line.lstrip().startswith("#"):
                    first = line
                    break
        delim = "," if "," in first else None
        skip = 0
        try:
            [float(v) for v in (first.split(delim) if delim else first.split())[:3]]
        except ValueError:
            skip = 1  # a header row
        arr = np.loadtxt(path, delimiter=delim, comments="#", skiprows=skip, ndmin=2)
    except ValueError as exc:
        m = re.search(r"at row (\d+)", str(exc))
        where = f" (row {int(m.group(1)) + 1 + skip})" if m else ""
        raise InputError(f"{path}: not a table of numbers x y z [...]{where}: {_short(exc)}") from None
    if arr.size == 0:
        raise InputError(f"{path}: the scan holds no points")
    if arr.shape[1] < 3:
        raise InputError(f"{path}: needs at least 3 columns (x y z), found {arr.shape[1]}")
    sid = arr[:, 4].astype(np.int64) if arr.shape[1] >= 5 and np.all(arr[:, 4] == np.round(arr[:, 4])) else None
    return ArraySource(path, np.ascontiguousarray(arr[:, :3]), sid)
