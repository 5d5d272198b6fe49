"""PLY scans (binary little or big endian, ASCII), streamed; a station property (``station``, ``scan_id``,
``point_source_id``, ...) is the station id. The vertex element must not follow an element with list
properties (faces come after vertices in point clouds)."""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from .ascii import RowsSource
from .records import RecordSource, station_field, xyz_fields
from .source import ScanSource

TYPES = {"char": "i1", "int8": "i1", "uchar": "u1", "uint8": "u1", "short": "i2", "int16": "i2", "ushort": "u2",
         "uint16": "u2", "int": "i4", "int32": "i4", "uint": "u4", "uint32": "u4", "float": "f4", "float32": "f4",
         "double": "f8", "float64": "f8"}


def read_header(path: Path):
    """(format, [(element, count, [(type, name) or ('list', name)])], header bytes, header lines)."""
    with open(path, "rb") as fh:
        first = fh.readline()
        if first.strip() != b"ply":
            raise InputError(f"{path}: not a PLY file (first line {first[:20]!r}, expected 'ply')")
        fmt, elements, lines = None, [], 1
        while True:
            line = fh.readline()
            lines += 1
            if not line:
                raise InputError(f"{path}: the PLY header has no end_header line")
            if lines > 10_000:
                raise InputError(f"{path}: the PLY header runs past 10 000 lines")
            toks = line.decode("ascii", errors="replace").split()
            if not toks or toks[0] in ("comment", "obj_info"):
                continue
            if toks[0] == "format":
                fmt = toks[1] if len(toks) > 1 else ""
            elif toks[0] == "element" and len(toks) == 3:
                try:
                    elements.append((toks[1], int(toks[2]), []))
                except ValueError:
                    raise InputError(f"{path}: header line {lines}: bad element count {toks[2]!r}") from None
            elif toks[0] == "property" and elements:
                if len(toks) >= 5 and toks[1] == "list":
                    elements[-1][2].append(("list", toks[-1]))
                elif len(toks) == 3 and toks[1] in TYPES:
                    elements[-1][2].append((toks[1], toks[2]))
                else:
                    raise InputError(f"{path}: header line {lines}: unknown PLY property {' '.join(toks[1:])!r}")
            elif toks[0] == "end_header":
                return fmt, elements, fh.tell(), lines


def open_ply(path: Path) -> ScanSource:
    fmt, elements, offset, n_head = read_header(path)
    if fmt not in ("binary_little_endian", "binary_big_endian", "ascii"):
        raise InputError(f"{path}: unknown PLY format {fmt!r} (binary_little_endian, binary_big_endian or ascii)")
    names = [e[0] for e in elements]
    if "vertex" not in names:
        raise InputError(f"{path}: the PLY file has no vertex element")
    vi = names.index("vertex")
    _, n, props = elements[vi]
    if any(t == "list" for t, _ in props):
        raise InputError(f"{path}: the PLY vertex element has list properties; not a point cloud chimeline reads")
    order = "<" if fmt == "binary_little_endian" else ">"
    skip_bytes = skip_lines = 0
    for name, count, pr in elements[:vi]:
        if any(t == "list" for t, _ in pr):
            raise InputError(f"{path}: the PLY element {name!r} with list properties comes before the vertices")
        skip_bytes += count * sum(np.dtype(TYPES[t]).itemsize for t, _ in pr)
        skip_lines += count
    pnames = [p for _, p in props]
    fields = xyz_fields(pnames, path)
    station = station_field(pnames)
    if fmt == "ascii":
        return RowsSource(path, n_head + skip_lines, n, [pnames.index(f) for f in fields],
                              pnames.index(station) if station else None)
    dtype = np.dtype([(p, order + TYPES[t]) for t, p in props])
    return RecordSource(path, offset + skip_bytes, dtype, n, station)
