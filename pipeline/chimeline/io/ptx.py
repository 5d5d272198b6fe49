"""PTX scans: one block per scanner station, each with its pose, streamed line by line.

A block is: columns, rows, the scanner's registered position, its three axes, a 4 x 4 transform (row-vector
convention: the last row is the translation), then columns x rows lines ``x y z intensity [r g b]`` in the
scanner's own frame. Each point is moved to the registered frame with its block's transform; each block is a
station (1, 2, ...). ``0 0 0`` points are missing returns and are skipped (counted as ``no_return``).
"""
from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np

from ..errors import InputError
from .ascii import count_lines
from .source import Chunk, ScanSource, short

HEADER_LINES = 10


def _numbers(line: str, n: int, path, lineno) -> list[float]:
    toks = line.split()
    try:
        vals = [float(t) for t in toks[:n]]
    except ValueError:
        vals = []
    if len(vals) != n:
        raise InputError(f"{path}: row {lineno}: a PTX block header line needs {n} numbers, got {line.strip()[:60]!r}")
    return vals


class PtxSource(ScanSource):
    """A PTX file; every block a station, its transform applied."""

    has_source_id = True

    def __init__(self, path: Path):
        self.path = path
        self.skipped = {"no_return": 0}
        n_lines = count_lines(path)
        with open(path, "r", encoding="utf-8", errors="replace") as fh:
            first = [next(fh, "") for _ in range(HEADER_LINES)]
        if not first[0].strip():
            raise InputError(f"{path}: empty PTX file")
        cols = _numbers(first[0], 1, path, 1)[0]
        rows = _numbers(first[1], 1, path, 2)[0]
        if cols < 1 or rows < 1 or cols != int(cols) or rows != int(rows):
            raise InputError(f"{path}: row 1: a PTX block starts with its column and row counts, got "
                             f"{first[0].strip()!r}, {first[1].strip()!r}")
        self.n_points = max(n_lines - HEADER_LINES, 1)  # exact for one block; an upper bound otherwise

    def _blocks(self):
        """(station, 4x4 transform, lines iterator position) per block, as a generator over the open file."""
        with open(self.path, "r", encoding="utf-8", errors="replace") as fh:
            lineno, station = 0, 0
            while True:
                head = list(itertools.islice(fh, HEADER_LINES))
                if not head or not any(h.strip() for h in head):
                    return
                if len(head) < HEADER_LINES:
                    raise InputError(f"{self.path}: row {lineno + 1}: a PTX block header is cut off after "
                                     f"{len(head)} of {HEADER_LINES} lines")
                cols = _numbers(head[0], 1, self.path, lineno + 1)[0]
                rows = _numbers(head[1], 1, self.path, lineno + 2)[0]
                m = np.array([_numbers(head[6 + k], 4, self.path, lineno + 7 + k) for k in range(4)])
                if not np.isfinite(m).all() or abs(np.linalg.det(m[:3, :3])) < 1e-6:
                    raise InputError(f"{self.path}: row {lineno + 7}: the PTX block's transform is not a rotation "
                                     f"and translation")
                n = int(cols) * int(rows)
                lineno += HEADER_LINES
                station += 1
                yield station, m, fh, n, lineno
                lineno += n

    def chunks(self, chunk_size):
        seen = 0
        for ch in self._chunks(chunk_size):
            seen += len(ch.xyz)
            yield ch
        self.n_points = max(seen, 1)  # exact once the whole file was read (an upper bound before)

    def _chunks(self, chunk_size):
        for station, m, fh, n, lineno in self._blocks():
            left = n
            while left > 0:
                k = min(chunk_size, left)
                lines = list(itertools.islice(fh, k))
                if len(lines) < k:
                    raise InputError(f"{self.path}: truncated: PTX block {station} needs {n} point lines, the file "
                                     f"ends after {n - left + len(lines)}")
                try:
                    arr = np.loadtxt(lines, usecols=(0, 1, 2), ndmin=2, dtype=np.float64)
                except ValueError as exc:
                    raise InputError(f"{self.path}: PTX block {station} near row {lineno + n - left + 1}: not "
                                     f"numbers x y z ({short(exc)})") from None
                left -= k
                miss = (arr == 0).all(axis=1)
                self.skipped["no_return"] += int(miss.sum())
                arr = arr[~miss]
                xyz = arr @ m[:3, :3] + m[3, :3]
                yield Chunk(xyz, np.full(len(xyz), station, dtype=np.int64))
