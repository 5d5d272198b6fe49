"""A small COPC writer (laspy reads COPC but does not write it): for the simulator, tests and benchmarks.

The octree: the root cube encloses the points; each level takes, in every cell of its grid, up to
``node_points`` points not taken by a coarser level (in a seeded random order), so every level is a spatially
even subsample and the finest levels hold the rest. The default, 16 384, is what a node of 128 x 128 x 128 cells
holds on a surface (one point per cell), the usual node size of COPC writers (from memory). Each node is one variable-size LAZ chunk (lazrs), the
hierarchy one EVLR page; the COPC info VLR comes first, as the format requires. Points are held in memory.
"""
from __future__ import annotations

import struct
from pathlib import Path

import numpy as np

#: deepest octree level (a level beyond takes everything left)
MAX_LEVEL = 16
COPC_INFO_SIZE = 160
ENTRY = struct.Struct("<4iQii")  # voxel key (level, x, y, z), offset, byte size, point count


def octree_nodes(ixyz: np.ndarray, mins, halfsize: float, node_points: int, rng: np.random.Generator):
    """{(level, x, y, z): point indices} for integer-scaled coordinates ``ixyz`` (n, 3) as float."""
    n = len(ixyz)
    order = rng.permutation(n)
    left = order  # point indices not yet placed, in random order
    nodes = {}
    rel = (ixyz - mins) / (2 * halfsize)  # in [0, 1)
    for level in range(MAX_LEVEL + 1):
        if len(left) == 0:
            break
        g = 1 << level
        cell = np.minimum((rel[left] * g).astype(np.int64), g - 1)
        key = (cell[:, 0] * g + cell[:, 1]) * g + cell[:, 2]
        srt = np.argsort(key, kind="stable")  # stable: keeps the random order inside a cell
        ks = key[srt]
        starts = np.r_[0, np.nonzero(np.diff(ks))[0] + 1]
        rank = np.arange(len(ks)) - np.repeat(starts, np.diff(np.r_[starts, len(ks)]))
        take = rank < node_points if level < MAX_LEVEL else np.ones(len(ks), bool)
        chosen = srt[take]
        for s, e in zip(starts, np.r_[starts[1:], len(ks)]):
            sel = srt[s:e][take[s:e]]
            if len(sel):
                c = cell[sel[0]]
                nodes[(level, int(c[0]), int(c[1]), int(c[2]))] = left[sel]
        keep = np.ones(len(left), bool)
        keep[chosen] = False
        left = left[keep]
    return nodes


def write_copc(path, points, header, node_points: int = 16_384, seed: int = 0) -> Path:
    """Write ``points`` (a laspy point record of format 6, 7 or 8) as a COPC file with ``header``'s scales,
    offsets and VLRs (a laspy LasHeader; its COPC and LASzip records are replaced)."""
    import laspy
    import lazrs
    from laspy.vlrs.known import LasZipVlr
    from laspy.vlrs.vlrlist import VLRList

    path = Path(path)
    arr = points.array if hasattr(points, "array") else points
    pf = header.point_format.id
    if pf not in (6, 7, 8):
        raise ValueError(f"COPC needs point format 6, 7 or 8, got {pf}")
    X = np.column_stack([arr["X"], arr["Y"], arr["Z"]]).astype(np.float64)
    scales, offsets = np.asarray(header.scales, float), np.asarray(header.offsets, float)
    if np.ptp(scales) > 0:
        raise ValueError(f"this COPC writer needs one scale on all axes, got {scales.tolist()}")
    lo, hi = X.min(axis=0), X.max(axis=0)
    half = float(np.max(hi - lo)) / 2 + 1.0  # integer units
    centre_i = (lo + hi) / 2
    mins_i = centre_i - half
    nodes = octree_nodes(X, mins_i, half, node_points, np.random.default_rng(seed))
    keys = sorted(nodes)  # level by level

    vlr = lazrs.LazVlr.new_for_compression(pf, header.point_format.num_extra_bytes, True)
    hdr = laspy.LasHeader(version="1.4", point_format=header.point_format)
    hdr.scales, hdr.offsets = scales, offsets
    others = [v for v in header.vlrs if type(v).__name__ not in ("CopcInfoVlr", "LasZipVlr", "CopcHierarchyVlr")]
    hdr.vlrs = VLRList([laspy.VLR("copc", 1, "copc info", bytes(COPC_INFO_SIZE))] + others +
                             [LasZipVlr(vlr.record_data())])
    hdr.are_points_compressed = True
    hdr.global_encoding.wkt = any(type(v).__name__ == "WktCoordinateSystemVlr" for v in others)
    ordered = arr[np.concatenate([nodes[k] for k in keys])]
    hdr.update(laspy.PackedPointRecord(ordered, header.point_format))
    with open(path, "w+b") as fh:
        hdr.write_to(fh)
        data_start = fh.tell()
        comp = lazrs.LasZipCompressor(fh, vlr)
        pos = 0
        for k in keys:
            m = len(nodes[k])
            comp.compress_many(np.frombuffer(ordered[pos:pos + m].tobytes(), np.uint8))
            comp.finish_current_chunk()
            pos += m
        comp.done()
        fh.flush()
        fh.seek(data_start)
        table = lazrs.read_chunk_table(fh, vlr)  # [(points, bytes)] per chunk, in order
        fh.seek(0, 2)
        evlr_start = fh.tell()
        offset = data_start + 8  # the chunk table offset comes first
        entries = b""
        for (level, x, y, z), (count, size) in zip(keys, table):
            entries += ENTRY.pack(level, x, y, z, offset, size, count)
            offset += size
        fh.write(struct.pack("<H16sHQ32s", 0, b"copc", 1000, len(entries), b"EPT hierarchy"))
        fh.write(entries)
        spacing = 2 * half * float(scales.max()) / np.sqrt(max(node_points, 1))
        gps = arr["gps_time"] if "gps_time" in arr.dtype.names else np.zeros(1)
        info = struct.pack("<5d2Q2d", *(centre_i * scales + offsets), half * float(scales.max()), spacing,
                           evlr_start + 60, len(entries), float(gps.min()), float(gps.max()))
        fh.seek(375 + 54)  # a LAS 1.4 header, then the COPC info VLR's header
        fh.write(info + bytes(COPC_INFO_SIZE - len(info)))
        fh.seek(235)
        fh.write(struct.pack("<QI", evlr_start, 1))
    return path


def las_to_copc(src, dst, node_points: int = 16_384, seed: int = 0) -> Path:
    """Convert a LAS/LAZ file (point format 6-8) to COPC, the same points in octree order."""
    import laspy

    las = laspy.read(src)
    return write_copc(dst, las.points, las.header, node_points, seed)
