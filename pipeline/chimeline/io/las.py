"""LAS and LAZ scans (laspy with lazrs), streamed in chunks.

The header is checked against the file before laspy reads it (VLR and EVLR counts and sizes against the bytes
there are, the point count against the point data), so a damaged header is one error instead of a hang or a
half scan. Decoder failures, including the LAZ decoder's panics (which derive from ``BaseException``), become one
``InputError``. Points of the skipped classes and withheld points are dropped while streaming and counted.

The detection sample reads windows that start on 50 000-point boundaries (the usual LAZ chunk size), the same
windows whatever the container, so a LAS file and its LAZ copy give the same sample and the same profile.
"""
from __future__ import annotations

import logging
import mmap
import struct
from dataclasses import dataclass
from pathlib import Path
from typing import Optional

import numpy as np

from ..errors import InputError
from .crs import CrsUnits, units_from_geokeys, units_from_wkt
from .source import WINDOW_GRID, Chunk, ScanSource, concat_chunks, decoder_failure, sample_windows, short, \
    windows_from_chunks

log = logging.getLogger(__name__)

#: smallest record of a VLR and an EVLR header (bytes)
VLR_HEADER, EVLR_HEADER = 54, 60


@dataclass(frozen=True)
class LasLayout:
    """What the fixed LAS header says, checked against the file size."""

    version: tuple[int, int]
    header_size: int
    offset_to_points: int
    n_vlrs: int
    point_format: int
    record_length: int
    n_points: int
    evlr_start: int  # 0 when none
    n_evlrs: int
    waveform_start: int  # LAS 1.3+: start of the waveform data packets (0 when none or external)
    compressed: bool
    file_size: int


def read_layout(path: Path) -> LasLayout:
    """Parse and sanity-check the fixed LAS header (no laspy): counts and offsets against the file's bytes."""
    size = path.stat().st_size
    with open(path, "rb") as fh:
        head = fh.read(375)
        if len(head) < 227 or head[:4] != b"LASF":
            raise InputError(f"{path}: not a LAS/LAZ file (no LASF signature or a header shorter than 227 bytes)")
        major, minor = head[24], head[25]
        header_size, offset, n_vlrs = struct.unpack_from("<HII", head, 94)
        fmt_byte, rec_len, legacy_n = struct.unpack_from("<BHI", head, 104)
        compressed = bool(fmt_byte & 0x80) or bool(fmt_byte & 0x40)
        fmt = fmt_byte & 0x3F
        n_points, evlr_start, n_evlrs, waveform = legacy_n, 0, 0, 0
        if (major, minor) >= (1, 3) and len(head) >= 235:
            waveform = struct.unpack_from("<Q", head, 227)[0]
        if (major, minor) >= (1, 4) and len(head) >= 375:
            evlr_start, n_evlrs, n14 = struct.unpack_from("<QIQ", head, 235)
            n_points = n14 or legacy_n
        if header_size < 227 or header_size > size:
            raise InputError(f"{path}: the LAS header size {header_size} bytes is impossible for a "
                             f"{size}-byte file")
        if offset < header_size or offset > size:
            raise InputError(f"{path}: the point data offset {offset} lies outside the file ({size} bytes) or inside "
                             f"the header ({header_size} bytes)")
        room = offset - header_size
        if n_vlrs * VLR_HEADER > room:
            raise InputError(f"{path}: the header claims {n_vlrs} VLRs, but only {room} bytes lie between the "
                             f"header and the point data (room for {room // VLR_HEADER} at most): a damaged header")
        pos = header_size
        for i in range(n_vlrs):  # walk the VLR headers: every record must end before the point data
            fh.seek(pos + 20)
            raw = fh.read(2)
            if len(raw) < 2:
                raise InputError(f"{path}: VLR {i + 1} of {n_vlrs} is cut off by the end of the file")
            pos += VLR_HEADER + struct.unpack("<H", raw)[0]
            if pos > offset:
                raise InputError(f"{path}: VLR {i + 1} of {n_vlrs} runs past the point data offset {offset}: "
                                 f"a damaged header")
        if evlr_start or n_evlrs:
            if evlr_start < offset or evlr_start > size or n_evlrs * EVLR_HEADER > size - evlr_start:
                raise InputError(f"{path}: the header claims {n_evlrs} EVLRs from byte {evlr_start}, which the "
                                 f"{size}-byte file cannot hold: a damaged header")
    if rec_len == 0 and n_points:
        raise InputError(f"{path}: the header gives a point record length of 0 bytes")
    return LasLayout((major, minor), header_size, offset, n_vlrs, fmt, rec_len, int(n_points), int(evlr_start),
                     int(n_evlrs), int(waveform) if offset < waveform <= size else 0, compressed, size)


def check_point_data(path: Path, lay: LasLayout, las_compressed: bool) -> Optional[int]:
    """Point count against the data for an uncompressed file; for LAZ, the number of chunks in its chunk table
    (None when there is no usable table)."""
    end = min([e for e in (lay.evlr_start, lay.waveform_start) if e] or [lay.file_size])
    if not las_compressed:
        n_data = (end - lay.offset_to_points) // lay.record_length
        if n_data < lay.n_points:
            raise InputError(f"{path}: truncated: the header says {lay.n_points} points "
                             f"({lay.offset_to_points + lay.n_points * lay.record_length} bytes) but the file has "
                             f"{lay.file_size} bytes ({n_data} points)")
        if n_data > lay.n_points:
            raise InputError(f"{path}: the header says {lay.n_points} points but the file holds {n_data} point "
                             f"records: a damaged header (reading only the first {lay.n_points} would give half a "
                             f"scan)")
        return None
    with open(path, "rb") as fh:  # LAZ: the chunk table (its offset is the first 8 bytes of the point data)
        fh.seek(lay.offset_to_points)
        raw = fh.read(8)
        table = struct.unpack("<q", raw)[0] if len(raw) == 8 else -1
        if not lay.offset_to_points + 8 <= table <= end - 8:
            return None  # no chunk table (written by a streaming writer): the decoder reads on without it
        fh.seek(table)
        _version, n_chunks = struct.unpack("<II", fh.read(8))
    return n_chunks


class LasSource(ScanSource):
    """A LAS or LAZ file streamed with laspy; classes and withheld points skipped as configured."""

    def __init__(self, path: Path, skip_classes=(7, 18), skip_withheld=True):
        import laspy

        self.path = path
        self.skip_classes = tuple(int(c) for c in skip_classes)
        self.skip_withheld = bool(skip_withheld)
        self.skipped = {}
        lay = read_layout(path)
        self.layout = lay
        try:
            with laspy.open(path) as r:
                h = r.header
                self.n_points = int(h.point_count)
                self.header_version = str(h.version)
                dims = set(h.point_format.dimension_names)
                self.has_source_id = "point_source_id" in dims
                self.point_format_id = int(h.point_format.id)
                self._dtype = h.point_format.dtype()
                self.offset_hint = np.asarray(h.offsets, dtype=float)
                self.compressed = path.suffix.lower() == ".laz" or h.are_points_compressed
                self.crs = _crs_of(path, list(h.vlrs) + list(getattr(r, "evlrs", None) or []))
                self.units_hint = self.crs.horizontal if self.crs else None
                self.bounds = (np.asarray(h.mins, dtype=float), np.asarray(h.maxs, dtype=float),
                               np.asarray(h.scales, dtype=float))
                self.scale = np.asarray(h.scales, dtype=float)
                self.offset = np.asarray(h.offsets, dtype=float)
                self.coordinate_quantum = self.scale.copy()
                self.is_copc = any(type(v).__name__ == "CopcInfoVlr" for v in h.vlrs)
                self.variable_chunks, self.laz_chunk_size = False, 0
                if self.compressed:
                    self._check_laz_backend()
                    lzv = next((v for v in h.vlrs if type(v).__name__ == "LasZipVlr"), None)
                    if lzv is not None:
                        import lazrs

                        vlr = lazrs.LazVlr(lzv.record_data)
                        self.variable_chunks = bool(vlr.uses_variable_size_chunks())
                        self.laz_chunk_size = 0 if self.variable_chunks else int(vlr.chunk_size())
        except InputError:
            raise
        except BaseException as exc:
            decoder_failure(exc)
            raise InputError(f"{path}: not a readable LAS/LAZ file ({short(exc)})") from None
        n_chunks = check_point_data(path, lay, self.compressed)
        c = self.laz_chunk_size
        if n_chunks is not None and c:
            if n_chunks * c < self.n_points:
                raise InputError(f"{path}: truncated: the header says {self.n_points} points but the LAZ chunk table "
                                 f"lists {n_chunks} chunks of {c} (at most {n_chunks * c} points)")
            if (n_chunks - 1) * c >= self.n_points and self.n_points:
                raise InputError(f"{path}: the header says {self.n_points} points but the LAZ chunk table lists "
                                 f"{n_chunks} chunks of {c} (more than {(n_chunks - 1) * c} points): a damaged header "
                                 f"(reading only {self.n_points} would give part of the scan)")
        if self.n_points == 0:
            raise InputError(f"{path}: the scan holds no points")
        for c in self.skip_classes:
            self.skipped[f"class_{c}"] = 0
        if self.skip_withheld:
            self.skipped["withheld"] = 0
        self._skip_lut = np.zeros(256, bool)
        self._skip_lut[[c for c in self.skip_classes if 0 <= c < 256]] = True

    @staticmethod
    def _check_laz_backend():
        import laspy

        if not laspy.LazBackend.detect_available():
            raise InputError("LAZ needs a decompression backend: pip install lazrs")

    def _open(self):
        """laspy reader; LAZ 1.4 layers other than x, y, z, classification, flags and the point source id are not
        decompressed."""
        import laspy

        if not self.compressed:
            return laspy.open(self.path)
        sel = laspy.DecompressionSelection
        want = sel.base() | sel.Z | sel.POINT_SOURCE_ID
        if self.skip_classes or self.skip_withheld:
            want |= sel.CLASSIFICATION | sel.FLAGS
        return laspy.open(self.path, decompression_selection=want)

    def _record_dtype(self):
        """The records' numpy dtype with the file's record length (None if the header's length is too short)."""
        dt = self._dtype
        if self.layout.record_length < dt.itemsize:
            return None
        return np.dtype({"names": list(dt.names), "formats": [dt.fields[n][0] for n in dt.names],
                         "offsets": [dt.fields[n][1] for n in dt.names], "itemsize": self.layout.record_length})

    def _records(self, chunk_size):
        """Raw point records (structured arrays, integer coordinates) in chunks; read errors become InputError."""
        done = 0
        dt = None if self.compressed else self._record_dtype()
        if dt is not None:  # uncompressed: memory-mapped (the sizes were checked); chunks are views
            off = self.layout.offset_to_points
            mm = np.memmap(self.path, dtype=dt, mode="r", offset=off, shape=(self.n_points,))
            base = getattr(mm, "_mmap", None)
            lead = off % mmap.ALLOCATIONGRANULARITY  # numpy maps from the granularity boundary below the offset
            try:
                for s in range(0, self.n_points, chunk_size):
                    part = mm[s:s + chunk_size]
                    self.decoded += len(part)
                    yield part
                    if base is not None and hasattr(base, "madvise"):  # drop the pages read: RSS stays flat
                        a = lead + s * dt.itemsize
                        a -= a % mmap.PAGESIZE
                        base.madvise(mmap.MADV_DONTNEED, a, min(lead + (s + len(part)) * dt.itemsize, len(base)) - a)
            finally:
                del mm
            return
        try:
            with self._open() as r:
                while done < self.n_points:
                    n = min(chunk_size, self.n_points - done)
                    pts = r.read_points(n)
                    if len(pts) != n:
                        raise InputError(f"{self.path}: truncated: could read only {done + len(pts)} of "
                                         f"{self.n_points} points")
                    done += n
                    self.decoded += n
                    yield pts.array
        except (InputError, GeneratorExit):
            raise
        except BaseException as exc:
            decoder_failure(exc)
            raise InputError(f"{self.path}: corrupt or truncated LAS/LAZ data after {done} of "
                             f"{self.n_points} points ({short(exc)})") from None

    @staticmethod
    def _class_flags(raw):
        """(class (n,) uint8, withheld (n,) bool or None) of raw records of any point format."""
        names = raw.dtype.names
        if "classification" in names:  # formats 6-10: a class byte and a flags byte (withheld = bit 2)
            flags = raw["classification_flags"] if "classification_flags" in names else None
            return raw["classification"], ((flags & 0x04) != 0) if flags is not None else None
        rc = raw["raw_classification"]  # formats 0-5: class in bits 0-4, withheld in bit 7
        return rc & 0x1F, (rc & 0x80) != 0

    @property
    def _filtering(self) -> bool:
        return bool(self.skip_classes or self.skip_withheld)

    def _drop(self, raw, count: bool = True) -> Optional[np.ndarray]:
        """Points of ``raw`` to drop (None: none); ``count`` adds them to ``skipped`` by reason (a point of a
        skipped class counts there only)."""
        if not self._filtering:
            return None
        cls, withheld = self._class_flags(raw)
        drop = self._skip_lut[cls]
        k = int(np.count_nonzero(drop))
        if k and count:
            per_class = np.bincount(cls[drop], minlength=256)
            for c in self.skip_classes:
                self.skipped[f"class_{c}"] += int(per_class[c])
        if self.skip_withheld and withheld is not None:
            w = int(np.count_nonzero(withheld & ~drop)) if count or not k else 0
            if count:
                self.skipped["withheld"] += w
            if w or k:
                drop |= withheld
                k = k or w
        return drop if k else None

    def _filtered(self, raw, count: bool = True):
        drop = self._drop(raw, count)
        return raw if drop is None else raw[~drop]

    def chunks(self, chunk_size):
        for raw in self._records(chunk_size):
            yield self._scaled(self._filtered(raw))

    def stream(self, chunk_size, up_index, up_range, stride, bounds=None):
        """Cut on the raw integer up coordinate first, so only the band's fields are copied and scaled to float."""
        dims = "XYZ"
        lo_i = np.floor((up_range[0] - self.offset[up_index]) / self.scale[up_index])
        hi_i = np.ceil((up_range[1] - self.offset[up_index]) / self.scale[up_index])
        for raw in self._records(chunk_size):
            u = raw[dims[up_index]]
            m = (u >= lo_i) & (u <= hi_i)
            drop = self._drop(raw)
            if drop is not None:
                m &= ~drop
            strided = raw[::stride]
            sd = drop[::stride] if drop is not None else None
            yield (len(raw), self._scaled(raw, np.nonzero(m)[0]),
                   self._scaled(strided, np.nonzero(~sd)[0] if sd is not None else None), 0)

    def _scaled(self, raw, index=None):
        """Float coordinates (and station ids) of ``raw``, or of ``raw[index]``; integer coordinates outside the
        header's bounding box (by more than two steps) are a damaged file."""
        k = len(raw) if index is None else len(index)
        xyz = np.empty((k, 3))
        lo, hi, sc = self.bounds
        for i, d in enumerate("XYZ"):
            v = raw[d] if index is None else raw[d][index]
            if k and (v.min() * sc[i] + self.offset[i] < lo[i] - 2 * sc[i] or
                      v.max() * sc[i] + self.offset[i] > hi[i] + 2 * sc[i]):
                f = v * sc[i] + self.offset[i]
                bad = int(((f < lo[i] - 2 * sc[i]) | (f > hi[i] + 2 * sc[i])).sum())
                raise InputError(f"{self.path}: corrupt point data: {bad} points lie outside the header's bounding "
                                 f"box (a damaged LAS/LAZ file, or a header that does not match its points)")
            np.multiply(v, sc[i], out=xyz[:, i])
            xyz[:, i] += self.offset[i]
        sid = None
        if self.has_source_id:
            sid = (raw["point_source_id"] if index is None else raw["point_source_id"][index]).astype(np.int64)
        return Chunk(xyz, sid)

    def sample(self, n, rng):
        """About ``n`` points in windows spread over the file (only the windows are decoded where seeking works)."""
        if n >= self.n_points:
            return concat_chunks(list(self.chunks(max(self.n_points, 1))))
        starts, w = sample_windows(self.n_points, n, rng)
        if self.compressed and self.variable_chunks:  # seeking into variable-size chunks is not safe
            decoded = self.decoded
            raw = windows_from_chunks((Chunk(r, None) for r in self._records(WINDOW_GRID)), starts, w).xyz
            self.decoded = decoded
            return self._scaled(self._filtered(raw, count=False))
        parts = []
        try:
            with self._open() as r:
                for s in starts:
                    r.seek(int(s))
                    m = int(min(w, self.n_points - s))
                    pts = r.read_points(m)
                    if len(pts) != m:
                        raise InputError(f"{self.path}: truncated: could read only {len(pts)} of {m} requested "
                                         f"points at point {int(s)}")
                    parts.append(self._scaled(self._filtered(pts.array, count=False)))
        except InputError:
            raise
        except BaseException as exc:
            decoder_failure(exc)
            raise InputError(f"{self.path}: corrupt or truncated LAS/LAZ data ({short(exc)})") from None
        return concat_chunks(parts)

def _crs_of(path: Path, vlrs) -> Optional[CrsUnits]:
    """Units from the WKT record (preferred, as LAS 1.4 says) or else the GeoTIFF keys."""
    wkt = geo = dbl = None
    for v in vlrs:
        rid = getattr(v, "record_id", None)
        uid = (getattr(v, "user_id", "") or "").rstrip("\x00")
        if uid != "LASF_Projection":
            continue
        data = _record_bytes(v)
        if rid == 2112 and data:
            wkt = data.decode("utf-8", errors="ignore")
        elif rid == 34735:
            geo = data
        elif rid == 34736:
            dbl = data
    if wkt:
        got = units_from_wkt(wkt, path)
        if got is not None:
            return got
    if geo:
        return units_from_geokeys(geo, dbl or b"", path)
    return None


def _record_bytes(v) -> bytes:
    """The raw payload of a laspy VLR (known records are parsed by laspy; re-serialise them)."""
    for attr in ("record_data_bytes",):
        f = getattr(v, attr, None)
        if callable(f):
            try:
                data = f()
                return bytes(data) if data is not None else b""
            except Exception:
                pass
    data = getattr(v, "record_data", None)
    if isinstance(data, (bytes, bytearray)):
        return bytes(data)
    s = getattr(v, "string", None)
    if isinstance(s, str):
        return s.encode()
    return b""


