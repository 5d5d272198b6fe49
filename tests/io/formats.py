"""Writers of small test fixtures in the formats surveyors deliver, from a simulated scan's points.

Each writes the same points in the same order (so readers can be compared point for point); formats with a pose
(PTX, E57) store each station in its own frame with a transform that moves it back.
"""
from __future__ import annotations

import struct
from pathlib import Path

import laspy
import numpy as np


def scan_points(las_path):
    """(xyz (n, 3) float64 file units, station (n,) int) of a simulated LAS scan."""
    las = laspy.read(las_path)
    return np.column_stack([las.x, las.y, las.z]).astype(float), np.asarray(las.point_source_id, dtype=np.int64)


def pose(station: int):
    """A rotation about z plus a small tilt, and a translation, different per station (row-vector convention)."""
    a, b = 0.7 * station, 0.01 * station
    rz = np.array([[np.cos(a), np.sin(a), 0], [-np.sin(a), np.cos(a), 0], [0, 0, 1]])
    rx = np.array([[1, 0, 0], [0, np.cos(b), np.sin(b)], [0, -np.sin(b), np.cos(b)]])
    return rz @ rx, np.array([3.0 * station, -2.0 * station, 0.5])


def write_ptx(path, xyz, station, missing_every: int = 97):
    """One block per station, points in the station's own frame; a 0 0 0 missing return every ``missing_every``."""
    with open(path, "w") as fh:
        for st in np.unique(station):
            p = xyz[station == st]
            m, t = pose(int(st))
            local = (p - t) @ np.linalg.inv(m)
            rows = []
            for i, q in enumerate(local):
                if missing_every and i % missing_every == 0:
                    rows.append("0 0 0 0.5")
                rows.append(f"{q[0]:.6f} {q[1]:.6f} {q[2]:.6f} 0.5")
            fh.write(f"{len(rows)}\n1\n")
            g = lambda v: " ".join(f"{float(x):.17g}" for x in v)  # noqa: E731
            fh.write(g(t) + "\n")
            for r in m:
                fh.write(g(r) + "\n")
            for r in m:
                fh.write(g(r) + " 0\n")
            fh.write(g(t) + " 1\n")
            fh.write("\n".join(rows) + "\n")
    return Path(path)


def write_pts(path, xyz):
    """PTS: a count line, then x y z intensity r g b (the green column must not be read as a station)."""
    rgb = np.column_stack([np.arange(len(xyz)) % 31, np.arange(len(xyz)) % 7, np.arange(len(xyz)) % 5])
    with open(path, "w") as fh:
        fh.write(f"{len(xyz)}\n")
        np.savetxt(fh, np.column_stack([xyz, np.full(len(xyz), -1200), rgb]), fmt="%.4f %.4f %.4f %d %d %d %d")
    return Path(path)


def lzf_literal(data: bytes) -> bytes:
    """LZF encoding with literal runs only (a valid stream that any LZF decoder reads)."""
    out = bytearray()
    for i in range(0, len(data), 32):
        block = data[i:i + 32]
        out.append(len(block) - 1)
        out += block
    return bytes(out)


def write_pcd(path, xyz, station, data="binary", upper=True, dtype="f8"):
    """PCD with upper-case field names (X Y Z) and a station field; ascii, binary or binary_compressed."""
    names = ["X", "Y", "Z", "INTENSITY", "STATION"] if upper else ["x", "y", "z", "intensity", "station"]
    size = 8 if dtype == "f8" else 4
    n = len(xyz)
    head = (f"# .PCD v0.7 - Point Cloud Data file format\nVERSION 0.7\nFIELDS {' '.join(names)}\n"
            f"SIZE {size} {size} {size} 2 2\nTYPE F F F U U\nCOUNT 1 1 1 1 1\nWIDTH {n}\nHEIGHT 1\n"
            f"VIEWPOINT 0 0 0 1 0 0 0\nPOINTS {n}\nDATA {data}\n")
    rec = np.zeros(n, dtype=[(names[0], "<" + dtype), (names[1], "<" + dtype), (names[2], "<" + dtype),
                             (names[3], "<u2"), (names[4], "<u2")])
    rec[names[0]], rec[names[1]], rec[names[2]] = xyz[:, 0], xyz[:, 1], xyz[:, 2]
    rec[names[3]], rec[names[4]] = 100, station
    with open(path, "wb") as fh:
        fh.write(head.encode())
        if data == "binary":
            fh.write(rec.tobytes())
        elif data == "ascii":
            lines = [f"{a:.17g} {b:.17g} {c:.17g} 100 {s}" for (a, b, c), s in zip(xyz.tolist(), station.tolist())]
            fh.write(("\n".join(lines) + "\n").encode())
        else:  # binary_compressed: each field for all points in turn, LZF
            raw = b"".join(rec[nm].tobytes() for nm in names)
            comp = lzf_literal(raw)
            fh.write(struct.pack("<II", len(comp), len(raw)) + comp)
    return Path(path)


def write_ply(path, xyz, station, endian="big", coord="double"):
    """Binary PLY (big or little endian) with a station property after x y z and an intensity."""
    order = ">" if endian == "big" else "<"
    ct = "f8" if coord == "double" else "f4"
    rec = np.zeros(len(xyz), dtype=[("x", order + ct), ("y", order + ct), ("z", order + ct),
                                    ("intensity", order + "u2"), ("station", order + "u2")])
    rec["x"], rec["y"], rec["z"], rec["intensity"], rec["station"] = xyz[:, 0], xyz[:, 1], xyz[:, 2], 7, station
    head = (f"ply\nformat binary_{endian}_endian 1.0\ncomment test fixture\nelement vertex {len(xyz)}\n"
            f"property {coord} x\nproperty {coord} y\nproperty {coord} z\nproperty ushort intensity\n"
            f"property ushort station\nelement face 0\nproperty list uchar int vertex_indices\nend_header\n")
    with open(path, "wb") as fh:
        fh.write(head.encode())
        fh.write(rec.tobytes())
    return Path(path)


def write_e57(path, xyz, station):
    """One E57 scan per station, each stored in its own frame with its pose."""
    import pye57

    from pyquaternion import Quaternion

    e = pye57.E57(str(path), mode="w")
    for st in np.unique(station):
        p = xyz[station == st]
        m, t = pose(int(st))
        rot = m.T  # column-vector convention: world = rot @ local + t
        local = (p - t) @ rot
        q = Quaternion(matrix=rot, atol=1e-9)
        e.write_scan_raw({"cartesianX": local[:, 0], "cartesianY": local[:, 1], "cartesianZ": local[:, 2]},
                         rotation=np.array([q.w, q.x, q.y, q.z]), translation=t)
    e.close()
    return Path(path)


def las_like(src, dst, *, scale_z: float = 1.0, vlrs=(), point_format=None, classification=None,
             withheld=None):
    """A copy of LAS ``src`` with z multiplied by ``scale_z``, the given VLRs instead of the CRS records, and
    optionally new classes / withheld flags."""
    las = laspy.read(src)
    hdr = laspy.LasHeader(point_format=point_format or las.header.point_format.id, version="1.4")
    hdr.scales, hdr.offsets = las.header.scales, las.header.offsets
    hdr.offsets = np.array([hdr.offsets[0], hdr.offsets[1], hdr.offsets[2] * scale_z])
    for v in vlrs:
        hdr.vlrs.append(v)
    out = laspy.LasData(hdr)
    out.x, out.y, out.z = las.x, las.y, np.asarray(las.z) * scale_z
    out.point_source_id = las.point_source_id
    out.intensity = las.intensity
    if classification is not None:
        out.classification = classification
    if withheld is not None:
        out.withheld = withheld
    out.write(dst)
    return Path(dst)


def geokeys(*keys) -> bytes:
    """GeoKeyDirectoryTag bytes from (key id, value) pairs (values stored in the directory)."""
    body = b"".join(struct.pack("<4H", k, 0, 1, v) for k, v in keys)
    return struct.pack("<4H", 1, 1, 0, len(keys)) + body
