"""The reader interface: ``ScanSource`` yields chunks of raw file coordinates with optional station ids.

Every reader (LAS/LAZ/COPC, E57, PTX, PLY, PCD, ASCII, npy) streams in chunks, so memory does not grow with the
scan; ``sample`` draws a spatially spread subsample for shell detection.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Iterator, Optional

import numpy as np


@dataclass
class Chunk:
    xyz: np.ndarray  # (n, 3) float64, file units, as stored (georeferenced if the file is)
    source_id: Optional[np.ndarray]  # (n,) int, station / point source id, or None


class ScanSource:
    """A scan that can be read in chunks. Subclasses implement ``chunks`` (and may override ``sample``).

    ``stream`` is the pipeline's fast path: it yields, per chunk, the number of points read, the points whose
    up coordinate lies in a band (cut on the raw values before any other work), a strided subsample and the
    number of non-finite points. ``bounds`` ((3,) mins, (3,) maxs in file units, or None) lets a source with a
    spatial index skip data that cannot intersect the band; points outside may still be returned.
    """

    path: Path
    n_points: int
    units_hint: Optional[str] = None  # horizontal unit from the file's CRS, if it says
    crs = None  # io.crs.CrsUnits or None: the file's CRS units, horizontal and vertical
    has_source_id: bool = False
    offset_hint: Optional[np.ndarray] = None
    #: (3,) file units: the step between representable coordinates (LAS scale factors, or the float32 spacing at
    #: the coordinates' magnitude), None when negligible (float64)
    coordinate_quantum: Optional[np.ndarray] = None
    #: "float32" when coordinates are stored as 32-bit floats (precision warnings), else ""
    storage: str = ""
    #: points decoded by ``stream`` so far (a source with a spatial index decodes fewer than ``n_points``)
    decoded: int = 0

    @property
    def skipped_counts(self) -> dict:
        """Points dropped while reading, by reason (class_7, class_18, withheld, ...)."""
        return dict(getattr(self, "skipped", {}) or {})

    def chunks(self, chunk_size: int) -> Iterator[Chunk]:
        raise NotImplementedError

    def stream(self, chunk_size: int, up_index: int, up_range, stride: int, bounds=None):
        lo, hi = up_range
        for ch in self.chunks(chunk_size):
            self.decoded += len(ch.xyz)
            u = ch.xyz[:, up_index]
            m = (u >= lo) & (u <= hi)
            sid = ch.source_id
            yield (len(ch.xyz), Chunk(ch.xyz[m], sid[m] if sid is not None else None),
                   Chunk(ch.xyz[::stride], sid[::stride] if sid is not None else None),
                   int((~np.isfinite(ch.xyz).all(axis=1)).sum()))

    def sample(self, n: int, rng: np.random.Generator) -> Chunk:
        """About ``n`` points in the windows of ``sample_windows`` (the same for every container holding the same
        points in the same order), read in one sequential pass; sources that can seek override this."""
        if n >= self.n_points:
            return concat_chunks(list(self.chunks(max(min(self.n_points, 1_000_000), 1))))
        starts, w = sample_windows(self.n_points, n, rng)
        return windows_from_chunks(self.chunks(WINDOW_GRID), starts, w)


#: sample windows start on multiples of this many points (the LASzip default chunk size, so a LAZ file seeks to a
#: chunk start and decodes nothing it does not keep)
WINDOW_GRID = 50_000
#: most windows a detection sample reads
MAX_WINDOWS = 48


def sample_windows(n_points: int, n: int, rng: np.random.Generator) -> tuple[np.ndarray, int]:
    """(starts, length) of the windows of a detection sample of about ``n`` of ``n_points`` points: spread over
    the file, each starting on a WINDOW_GRID boundary, jittered by ``rng``."""
    n_cells = max(-(-n_points // WINDOW_GRID), 1)
    n_windows = min(MAX_WINDOWS, n_cells)
    w = min(max(n // n_windows, 1), WINDOW_GRID)
    cells = np.unique(np.linspace(0, n_cells - 1, n_windows).round().astype(np.int64))
    if n_cells > n_windows:  # jitter each window within its share of the cells
        share = max(n_cells // n_windows, 1)
        cells = np.unique(np.clip(cells + rng.integers(0, share, len(cells)), 0, n_cells - 1))
    return cells * WINDOW_GRID, w


def windows_from_chunks(chunks, starts, w) -> Chunk:
    """The points of the windows [start, start + w) from a sequential stream of chunks."""
    parts, pos = [], 0
    want = [(int(s), int(s) + w) for s in starts]
    last = want[-1][1] if want else 0
    for ch in chunks:
        end = pos + len(ch.xyz)
        for a, b in want:
            lo, hi = max(a, pos), min(b, end)
            if lo < hi:
                sid = ch.source_id[lo - pos:hi - pos] if ch.source_id is not None else None
                parts.append(Chunk(ch.xyz[lo - pos:hi - pos], sid))
        pos = end
        if pos >= last:
            break
    return concat_chunks(parts)


def concat_chunks(parts) -> Chunk:
    if not parts:
        return Chunk(np.zeros((0, 3)), None)
    xyz = np.concatenate([p.xyz for p in parts])
    sid = np.concatenate([p.source_id for p in parts]) if parts[0].source_id is not None else None
    return Chunk(xyz, sid)


def short(exc) -> str:
    """The first line of an exception's message (at most 160 characters), or its type's name."""
    s = str(exc).strip().splitlines()
    return (s[0] if s else type(exc).__name__)[:160]


def decoder_failure(exc: BaseException) -> None:
    """Re-raise what must not be swallowed (Ctrl-C, exit, generator close, out of memory); anything else that a
    decoder raised, including a Rust panic (a ``BaseException``), is the caller's to turn into an InputError."""
    if isinstance(exc, (KeyboardInterrupt, SystemExit, GeneratorExit, MemoryError)):
        raise exc
