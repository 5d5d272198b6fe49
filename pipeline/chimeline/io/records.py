"""Fixed-size binary point records (binary PLY and PCD): streamed with ``numpy.fromfile`` in chunks, sampled by
seeking to spread windows, 32-bit float coordinates flagged for the precision check."""
from __future__ import annotations

from pathlib import Path
from typing import Optional

import numpy as np

from ..errors import InputError
from .ascii import STATION_NAMES
from .source import Chunk, ScanSource, concat_chunks, sample_windows

def station_field(names) -> Optional[str]:
    """The field that holds the station id, by its (case-insensitive) name, or None."""
    low = {n.lower(): n for n in names}
    return next((low[s] for s in STATION_NAMES if s in low), None)


def xyz_fields(names, path) -> list[str]:
    """The x, y, z field names whatever their case (PCD writers differ); an error names what was found."""
    low = {n.lower(): n for n in names}
    missing = [a for a in "xyz" if a not in low]
    if missing:
        raise InputError(f"{path}: no {', '.join(missing)} field among {', '.join(names) or 'none'}: not a point "
                         f"cloud with coordinates")
    return [low[a] for a in "xyz"]


class RecordSource(ScanSource):
    """``n`` records of ``dtype`` from byte ``offset``; x, y, z and an optional station field by name."""

    def __init__(self, path: Path, offset: int, dtype: np.dtype, n: int, station: Optional[str] = None,
                 drop_nonfinite: bool = False):
        self.path, self.offset, self.dtype, self.n_points = path, offset, np.dtype(dtype), int(n)
        self.fields = xyz_fields(self.dtype.names, path)
        self.station = station
        self.has_source_id = station is not None
        self.drop_nonfinite = drop_nonfinite  # organised clouds mark missing returns with NaN
        self.skipped = {"no_return": 0} if drop_nonfinite else {}
        need = offset + self.n_points * self.dtype.itemsize
        size = path.stat().st_size
        if size < need:
            raise InputError(f"{path}: truncated: the header says {self.n_points} points ({need} bytes) but the file "
                             f"has {size} bytes")
        if self.n_points == 0:
            raise InputError(f"{path}: the scan holds no points")
        if any(self.dtype[f].kind == "f" and self.dtype[f].itemsize == 4 for f in self.fields):
            self.storage = "float32"

    def _chunk(self, rec) -> Chunk:
        xyz = np.column_stack([rec[f].astype(np.float64) for f in self.fields])
        sid = rec[self.station].astype(np.int64) if self.station else None
        if self.drop_nonfinite:
            ok = np.isfinite(xyz).all(axis=1)
            if not ok.all():
                self.skipped["no_return"] += int((~ok).sum())
                xyz, sid = xyz[ok], (sid[ok] if sid is not None else None)
        return Chunk(xyz, sid)

    def chunks(self, chunk_size):
        with open(self.path, "rb") as fh:
            fh.seek(self.offset)
            left = self.n_points
            while left > 0:
                rec = np.fromfile(fh, dtype=self.dtype, count=min(chunk_size, left))
                if len(rec) == 0:
                    raise InputError(f"{self.path}: truncated after {self.n_points - left} of {self.n_points} points")
                left -= len(rec)
                yield self._chunk(rec)

    def sample(self, n, rng):
        """Spread windows (seeking); for 32-bit float coordinates it also sets ``coordinate_quantum``."""
        out = self._sample(n, rng)
        if self.storage == "float32":
            self.coordinate_quantum = float32_quantum(out.xyz)
        return out

    def _sample(self, n, rng):
        if n >= self.n_points:
            return concat_chunks(list(self.chunks(self.n_points)))
        starts, w = sample_windows(self.n_points, n, rng)
        parts = []
        with open(self.path, "rb") as fh:
            for s in starts:
                fh.seek(self.offset + int(s) * self.dtype.itemsize)
                parts.append(self._chunk(np.fromfile(fh, dtype=self.dtype, count=int(min(w, self.n_points - s)))))
        return concat_chunks(parts)


def float32_quantum(xyz: np.ndarray) -> np.ndarray:
    """(3,) the float32 spacing at each axis's largest magnitude in ``xyz`` (n, 3)."""
    fin = xyz[np.isfinite(xyz).all(axis=1)]
    big = np.abs(fin).max(axis=0) if len(fin) else np.zeros(3)
    return np.spacing(big.astype(np.float32)).astype(np.float64)
