"""PCD scans (ascii, binary streamed; binary_compressed loaded whole, as the format compresses the cloud in one
block). Field names and header keywords in any case (``FIELDS X Y Z``). NaN points of organised clouds are missing
returns: skipped and counted as ``no_return``."""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from .ascii import RowsSource
from .records import RecordSource, float32_quantum, station_field, xyz_fields
from .source import Chunk, ScanSource

KINDS = {"F": "f", "I": "i", "U": "u"}


def read_header(path: Path) -> tuple[dict, int, int]:
    """({KEYWORD: [values]}, byte offset of the data, header lines)."""
    head: dict[str, list[str]] = {}
    with open(path, "rb") as fh:
        for lines in range(1, 101):
            line = fh.readline()
            if not line:
                break
            toks = line.decode("ascii", errors="replace").split()
            if not toks or toks[0].startswith("#"):
                continue
            head[toks[0].upper()] = toks[1:]
            if toks[0].upper() == "DATA":
                return head, fh.tell(), lines
    raise InputError(f"{path}: no DATA line in the first 100 lines: not a PCD file")


def open_pcd(path: Path) -> ScanSource:
    head, offset, n_head = read_header(path)
    names = head.get("FIELDS", [])
    n = len(names)
    sizes = head.get("SIZE", ["4"] * n)
    types = head.get("TYPE", ["F"] * n)
    counts = head.get("COUNT", ["1"] * n)
    if not names or len(sizes) != n or len(types) != n or len(counts) != n:
        raise InputError(f"{path}: FIELDS, SIZE, TYPE and COUNT must list the same number of entries "
                         f"({len(names)}, {len(sizes)}, {len(types)}, {len(counts)})")
    try:
        npts = int(head.get("POINTS", [None])[0] or int(head["WIDTH"][0]) * int(head.get("HEIGHT", ["1"])[0]))
        dtype = np.dtype([(nm, "<" + KINDS[t.upper()] + s, (int(c),)) if int(c) > 1 else
                          (nm, "<" + KINDS[t.upper()] + s) for nm, s, t, c in zip(names, sizes, types, counts)])
    except (KeyError, ValueError, TypeError) as exc:
        raise InputError(f"{path}: unreadable PCD header (POINTS/WIDTH/SIZE/TYPE: {exc})") from None
    fields = xyz_fields(names, path)
    station = station_field(names)
    mode = (head.get("DATA") or [""])[0].lower()
    if mode == "binary":
        return RecordSource(path, offset, dtype, npts, station, drop_nonfinite=True)
    if mode == "ascii":
        col, cols = 0, {}
        for nm, c in zip(names, counts):
            cols[nm] = col
            col += int(c)
        return RowsSource(path, n_head, npts, [cols[f] for f in fields], cols[station] if station else None,
                          drop_nonfinite=True)
    if mode == "binary_compressed":
        return CompressedPcdSource(path, offset, dtype, npts, fields, station)
    raise InputError(f"{path}: unknown PCD DATA type {mode!r} (ascii, binary or binary_compressed)")


def lzf_decompress(data: bytes, size: int) -> bytes:
    """LZF (liblzf's format, as PCL writes it): literal runs and back references."""
    out = bytearray(size)
    i = o = 0
    n = len(data)
    while i < n:
        ctrl = data[i]
        i += 1
        if ctrl < 32:  # a run of ctrl + 1 literal bytes
            k = ctrl + 1
            if i + k > n or o + k > size:
                raise ValueError("literal run past the end")
            out[o:o + k] = data[i:i + k]
            i += k
            o += k
        else:  # a back reference
            length = ctrl >> 5
            if length == 7:
                length += data[i]
                i += 1
            ref = o - ((ctrl & 0x1F) << 8) - data[i] - 1
            i += 1
            length += 2
            if ref < 0 or o + length > size:
                raise ValueError("back reference out of range")
            for _ in range(length):  # may overlap itself
                out[o] = out[ref]
                o += 1
                ref += 1
    if o != size:
        raise ValueError(f"decompressed {o} bytes, the header says {size}")
    return bytes(out)


class CompressedPcdSource(ScanSource):
    """binary_compressed PCD: one LZF block holding each field's values for all points in turn."""

    def __init__(self, path, offset, dtype, n, fields, station):
        self.path, self.n_points = path, n
        with open(path, "rb") as fh:
            fh.seek(offset)
            sizes = np.fromfile(fh, dtype="<u4", count=2)
            if len(sizes) != 2:
                raise InputError(f"{path}: truncated binary_compressed PCD (no block sizes)")
            comp, raw = int(sizes[0]), int(sizes[1])
            if raw != n * dtype.itemsize:
                raise InputError(f"{path}: the compressed block holds {raw} bytes, {n} points of "
                                 f"{dtype.itemsize} bytes need {n * dtype.itemsize}")
            data = fh.read(comp)
        if len(data) != comp:
            raise InputError(f"{path}: truncated: the compressed block needs {comp} bytes, {len(data)} remain")
        try:
            buf = lzf_decompress(data, raw)
        except (ValueError, IndexError) as exc:
            raise InputError(f"{path}: corrupt binary_compressed PCD data ({exc})") from None
        cols, pos = {}, 0
        for name in dtype.names:
            dt = dtype[name]
            k = dt.itemsize * n
            cols[name] = np.frombuffer(buf, dtype=dt.base, count=n * max(1, int(np.prod(dt.shape))), offset=pos)
            pos += k
        xyz = np.column_stack([cols[f][:n].astype(np.float64) for f in fields])
        sid = cols[station][:n].astype(np.int64) if station else None
        ok = np.isfinite(xyz).all(axis=1)
        self.skipped = {"no_return": int((~ok).sum())}
        self.xyz, self.sid = xyz[ok], (sid[ok] if sid is not None else None)
        self.has_source_id = station is not None
        if any(dtype[f].base.kind == "f" and dtype[f].base.itemsize == 4 for f in fields):
            self.storage = "float32"
            self.coordinate_quantum = float32_quantum(self.xyz)

    def chunks(self, chunk_size):
        for s in range(0, len(self.xyz), chunk_size):
            yield Chunk(self.xyz[s:s + chunk_size], self.sid[s:s + chunk_size] if self.sid is not None else None)

