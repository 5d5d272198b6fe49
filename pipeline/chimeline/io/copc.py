"""COPC scans (cloud-optimised LAZ: an octree of variable-size LAZ chunks), read through laspy's COPC support.

The detection sample is the octree's coarse levels (a spatially even subsample, what the format is built for);
nothing seeks into the middle of a variable-size chunk. Once the shell is found, ``stream`` decodes only the
octree nodes whose boxes meet the tank's base band, so a site scan of a billion points costs a few of its nodes.
"""
from __future__ import annotations

import logging
import struct
from pathlib import Path

import numpy as np

from ..errors import InputError
from .las import LasSource
from .source import decoder_failure, short

log = logging.getLogger(__name__)


class CopcSource(LasSource):
    """A COPC file: octree-aware sample and band-limited streaming; otherwise a LAZ file."""

    def __init__(self, path: Path, skip_classes=(7, 18), skip_withheld=True):
        super().__init__(path, skip_classes, skip_withheld)
        self._nodes = None

    def _reader(self):
        import laspy

        sel = laspy.DecompressionSelection
        want = sel.base() | sel.Z | sel.POINT_SOURCE_ID | sel.CLASSIFICATION | sel.FLAGS
        return laspy.CopcReader.open(self.path, decompression_selection=want)

    def _all_nodes(self, reader, bounds=None):
        """Octree nodes holding points, as (level, (3,) mins, (3,) maxs, offset, byte size, point count)."""
        from laspy.copc import Bounds, load_octree_for_query

        qb = None
        if bounds is not None:
            qb = Bounds(np.asarray(bounds[0], float), np.asarray(bounds[1], float))
        nodes = load_octree_for_query(reader.source, reader.copc_info, reader.root_page, query_bounds=qb)
        return [(n.key.level, n.bounds.mins, n.bounds.maxs, n.offset, n.byte_size, n.point_count)
                for n in nodes if n.point_count > 0]

    def _decode(self, reader, nodes):
        """Decode a group of nodes (one read per node, one decompression call); raw structured records."""
        import lazrs
        from laspy.point.record import PackedPointRecord

        nodes = sorted(nodes, key=lambda t: t[3])
        total = sum(t[5] for t in nodes)
        data = bytearray(sum(t[4] for t in nodes))
        pos = 0
        src = reader.source
        for t in nodes:
            src.seek(t[3])
            got = src.read(t[4])
            if len(got) != t[4]:
                raise InputError(f"{self.path}: truncated COPC file: a node at byte {t[3]} needs {t[4]} bytes")
            data[pos:pos + t[4]] = got
            pos += t[4]
        out = np.zeros(total * reader.header.point_format.size, dtype=np.uint8)
        lazrs.decompress_points_with_chunk_table(bytes(data), reader.laszip_vlr.record_data, out,
                                                 [(t[5], t[4]) for t in nodes], reader.decompression_selection)
        self.decoded += total
        return PackedPointRecord.from_buffer(out, reader.header.point_format).array

    def _guarded(self, fn, what):
        try:
            return fn()
        except InputError:
            raise
        except BaseException as exc:
            decoder_failure(exc)
            raise InputError(f"{self.path}: corrupt COPC data while {what} ({short(exc)})") from None

    def sample(self, n, rng):
        """The coarsest octree levels that hold about ``n`` points, thinned at random to ``n``."""
        def run():
            with self._reader() as r:
                nodes = self._all_nodes(r)
                by_level = {}
                for t in nodes:
                    by_level.setdefault(t[0], []).append(t)
                chosen, count = [], 0
                for lev in sorted(by_level):
                    chosen += by_level[lev]
                    count += sum(t[5] for t in by_level[lev])
                    if count >= n:
                        break
                before = self.decoded
                raw = self._decode(r, chosen)
                self.decoded = before
            return raw

        raw = self._filtered(self._guarded(run, "reading the octree's coarse levels"), count=False)
        if len(raw) > n:
            raw = raw[np.sort(rng.choice(len(raw), n, replace=False))]
        return self._scaled(raw)

    def stream(self, chunk_size, up_index, up_range, stride, bounds=None):
        """Decode only the nodes whose boxes meet ``bounds`` (all of them without bounds), in groups of about
        ``chunk_size`` points."""
        if bounds is None:
            yield from super().stream(chunk_size, up_index, up_range, stride)
            return
        lo, hi = np.array(bounds[0], float), np.array(bounds[1], float)
        lo[up_index], hi[up_index] = up_range
        reader = self._guarded(self._reader, "opening it")
        try:
            nodes = self._guarded(lambda: self._all_nodes(reader, (lo, hi)), "reading the octree")
            nodes.sort(key=lambda t: t[3])
            log.info("copc: %d of the octree's nodes meet the base band", len(nodes))
            group, size = [], 0
            for t in nodes + [None]:
                if t is not None and (not group or size + t[5] <= chunk_size):
                    group.append(t)
                    size += t[5]
                    continue
                if group:
                    raw = self._guarded(lambda g=group: self._decode(reader, g), "decoding the base band")
                    yield (len(raw), *self._band(raw, up_index, up_range, stride))
                group, size = ([t], t[5]) if t is not None else ([], 0)
        finally:
            reader.source.close()

    def _band(self, raw, up_index, up_range, stride):
        q = self.scale[up_index]
        u = raw["XYZ"[up_index]]
        m = (u >= np.floor((up_range[0] - self.offset[up_index]) / q)) & (
            u <= np.ceil((up_range[1] - self.offset[up_index]) / q))
        drop = self._drop(raw)
        if drop is not None:
            m &= ~drop
        sd = drop[::stride] if drop is not None else None
        return (self._scaled(raw, np.nonzero(m)[0]),
                self._scaled(raw[::stride], np.nonzero(~sd)[0] if sd is not None else None), 0)


def is_copc(path: Path) -> bool:
    """True when the first VLR after the header is the COPC info record (user "copc", record 1)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(375)
            if len(head) < 227 or head[:4] != b"LASF":
                return False
            header_size = struct.unpack_from("<H", head, 94)[0]
            fh.seek(header_size + 2)
            vlr = fh.read(18)
            return len(vlr) == 18 and vlr[:16].rstrip(b"\x00") == b"copc" and struct.unpack_from("<H", vlr, 16)[0] == 1
    except OSError:
        return False
