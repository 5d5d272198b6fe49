"""E57 scans (ASTM E2807) through pye57, streamed per scan in chunks: each scan a station, its pose applied,
invalid points (the ``cartesianInvalidState`` / ``sphericalInvalidState`` flags) skipped."""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from .source import Chunk, ScanSource, decoder_failure, short


def _load_pye57(path):
    try:
        import pye57
    except ImportError:
        raise InputError(f"{path}: reading E57 needs pye57 (pip install 'chimeline[e57]')") from None
    return pye57


class E57Source(ScanSource):
    """Every scan of an E57 file, in chunks of one scan at a time."""

    has_source_id = True

    def __init__(self, path: Path):
        self.path = path
        self.units_hint = "m"  # E57 coordinates are metres by definition
        self.skipped = {"no_return": 0}
        pye57 = _load_pye57(path)
        try:
            e = pye57.E57(str(path))
            self.counts = [int(e.get_header(i).point_count) for i in range(e.scan_count)]
            e.close()
        except BaseException as exc:
            decoder_failure(exc)
            raise InputError(f"{path}: not a readable E57 file ({short(exc)})") from None
        self.n_points = sum(self.counts)
        if not self.counts:
            raise InputError(f"{path}: the E57 file holds no scans")
        if self.n_points == 0:
            raise InputError(f"{path}: the scan holds no points")

    def chunks(self, chunk_size):
        pye57 = _load_pye57(self.path)
        try:
            e = pye57.E57(str(self.path))
            try:
                for i in range(len(self.counts)):
                    yield from self._scan_chunks(e, i, chunk_size)
            finally:
                e.close()
        except (InputError, GeneratorExit):
            raise
        except BaseException as exc:
            decoder_failure(exc)
            raise InputError(f"{self.path}: corrupt E57 data ({short(exc)})") from None

    def _scan_chunks(self, e, i, chunk_size):
        h = e.get_header(i)
        fields = h.point_fields
        if "cartesianX" in fields:
            names, state = ["cartesianX", "cartesianY", "cartesianZ"], "cartesianInvalidState"
        elif "sphericalRange" in fields:
            names, state = ["sphericalRange", "sphericalAzimuth", "sphericalElevation"], "sphericalInvalidState"
        else:
            raise InputError(f"{self.path}: E57 scan {i + 1} has neither cartesian nor spherical coordinates")
        if state in fields:
            names = names + [state]
        cap = int(min(chunk_size, max(h.point_count, 1)))
        data, buffers = e.make_buffers(names, cap)
        reader = h.points.reader(buffers)
        rot = h.rotation_matrix if h.has_pose() else np.eye(3)
        tr = np.asarray(h.translation, dtype=float) if h.has_pose() else np.zeros(3)
        try:
            while True:
                k = reader.read()
                if k == 0:
                    break
                a, b, c = (np.asarray(data[nm][:k], dtype=np.float64) for nm in names[:3])
                if names[0] == "sphericalRange":  # range, azimuth, elevation -> x, y, z
                    a, b, c = a * np.cos(c) * np.cos(b), a * np.cos(c) * np.sin(b), a * np.sin(c)
                xyz = np.column_stack([a, b, c])
                if state in data:
                    ok = data[state][:k] == 0
                    self.skipped["no_return"] += int((~ok).sum())
                    xyz = xyz[ok]
                xyz = xyz @ rot.T + tr
                yield Chunk(xyz, np.full(len(xyz), i + 1, dtype=np.int64))
        finally:
            reader.close()
