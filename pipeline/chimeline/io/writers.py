"""Scan writers for the simulator: LAS 1.2/1.4, LAZ, PLY, ASCII xyz, npy. Chunked where the format allows.

Each writer takes world coordinates in metres and converts them to the file's
length unit, adding the georeferencing offset (given in file units).
"""
from __future__ import annotations

import datetime
import os
import shutil
from pathlib import Path

import numpy as np

from ..units import to_metres

UNIT_WKT = {
    "m": 'UNIT["metre",1,AUTHORITY["EPSG","9001"]]',
    "ft": 'UNIT["foot",0.3048,AUTHORITY["EPSG","9002"]]',
    "us_ft": 'UNIT["US survey foot",0.304800609601219,AUTHORITY["EPSG","9003"]]',
}
EXTENSIONS = {"las14": ".las", "las12": ".las", "laz": ".laz", "ply": ".ply", "xyz": ".xyz", "npy": ".npy"}


def local_cs_wkt(units: str) -> str:
    """A minimal engineering (local) coordinate system WKT carrying the length unit."""
    u = UNIT_WKT[units]
    return (f'LOCAL_CS["chimeline synthetic site grid",LOCAL_DATUM["site datum",0],{u},'
            f'AXIS["Easting",EAST],AXIS["Northing",NORTH]]')


class ScanWriter:
    """Open with a final path; ``write(xyz_m, intensity, source_id, gps_time)``; ``close()`` renames into place."""

    def __init__(self, path, fmt: str, units: str, offset, date: datetime.date, software: str, *,
                 station_ids: bool = True, scale: float = 1e-4):
        """``station_ids`` false writes a merged cloud (point source id 0; no station column); ``scale`` is the
        coordinate resolution in file units (LAS scale factor; ASCII writes the decimals it implies)."""
        self.path = Path(path)
        self.station_ids = station_ids
        self.scale = float(scale)
        self.decimals = max(0, int(np.ceil(-np.log10(self.scale) - 1e-9)))
        self.fmt = fmt
        self.units = units
        self.factor = to_metres(units)
        self.offset = np.asarray(offset, dtype=float)
        self.tmp = self.path.with_name(f".{self.path.name}.part")
        self.count = 0
        self._buf = []
        self.date = date
        self.software = software
        if fmt in ("las14", "las12", "laz"):
            import laspy

            version, pf = ("1.2", 1) if fmt == "las12" else ("1.4", 6)
            hdr = laspy.LasHeader(point_format=pf, version=version)
            hdr.scales = np.array([self.scale] * 3)
            hdr.offsets = np.round(self.offset, 0)
            hdr.creation_date = date
            hdr.generating_software = software[:32]
            hdr.system_identifier = "chimeline synth"
            from laspy.vlrs.known import WktCoordinateSystemVlr

            hdr.vlrs.append(WktCoordinateSystemVlr(local_cs_wkt(units)))
            if version == "1.4":
                hdr.global_encoding.wkt = True
            self._hdr = hdr
            self._las = laspy.open(self.tmp, mode="w", header=hdr, do_compress=(fmt == "laz"),
                                   laz_backend=laspy.LazBackend.Lazrs if fmt == "laz" else None)
        elif fmt == "ply":
            self._fh = open(self.tmp.with_suffix(".body"), "wb")
        elif fmt == "xyz":
            self._fh = open(self.tmp, "w", encoding="ascii")
            self._fh.write("# x y z intensity station\n" if station_ids else "# x y z intensity\n")

    def file_xyz(self, xyz_m):
        return xyz_m / self.factor + self.offset

    def write(self, xyz_m, intensity, source_id, gps_time):
        n = len(xyz_m)
        if n == 0:
            return
        xyz = self.file_xyz(xyz_m)
        self.count += n
        if not self.station_ids:
            source_id = np.zeros(n, np.uint16)
        if self.fmt in ("las14", "las12", "laz"):
            import laspy

            rec = laspy.ScaleAwarePointRecord.zeros(n, header=self._hdr)
            rec.x, rec.y, rec.z = xyz[:, 0], xyz[:, 1], xyz[:, 2]
            rec.intensity = intensity
            rec.point_source_id = source_id
            rec.return_number = np.ones(n, np.uint8)
            rec.number_of_returns = np.ones(n, np.uint8)
            rec.gps_time = gps_time
            self._las.write_points(rec)
        elif self.fmt == "ply":
            rec = np.empty(n, dtype=self._ply_dtype())
            rec["x"], rec["y"], rec["z"] = xyz[:, 0], xyz[:, 1], xyz[:, 2]
            rec["intensity"] = intensity
            if self.station_ids:
                rec["station"] = source_id
            self._fh.write(rec.tobytes())
        elif self.fmt == "xyz":
            f = f"%.{self.decimals}f"
            if self.station_ids:
                np.savetxt(self._fh, np.column_stack([xyz, intensity, source_id]), fmt=[f, f, f, "%d", "%d"])
            else:
                np.savetxt(self._fh, np.column_stack([xyz, intensity]), fmt=[f, f, f, "%d"])
        else:
            cols = [xyz, intensity, source_id] if self.station_ids else [xyz, intensity]
            self._buf.append(np.column_stack(cols).astype(np.float64))

    def _ply_dtype(self):
        fields = [("x", "<f8"), ("y", "<f8"), ("z", "<f8"), ("intensity", "<u2")]
        return fields + ([("station", "<u2")] if self.station_ids else [])

    def close(self):
        if self.fmt in ("las14", "las12", "laz"):
            self._las.close()
        elif self.fmt == "ply":
            self._fh.close()
            body = self.tmp.with_suffix(".body")
            header = ("ply\nformat binary_little_endian 1.0\ncomment chimeline synthetic scan, units "
                      f"{self.units}\nelement vertex {self.count}\nproperty double x\nproperty double y\n"
                      "property double z\nproperty ushort intensity\n"
                      + ("property ushort station\n" if self.station_ids else "") + "end_header\n")
            with open(self.tmp, "wb") as out, open(body, "rb") as src:
                out.write(header.encode("ascii"))
                shutil.copyfileobj(src, out, 16 << 20)
            body.unlink()
        elif self.fmt == "xyz":
            self._fh.close()
        else:
            arr = np.concatenate(self._buf) if self._buf else np.zeros((0, 5 if self.station_ids else 4))
            with open(self.tmp, "wb") as fh:
                np.save(fh, arr)
        os.replace(self.tmp, self.path)

    def abort(self):
        try:
            if self.fmt in ("las14", "las12", "laz"):
                self._las.close()
            elif self.fmt in ("ply", "xyz"):
                self._fh.close()
        except Exception:
            pass
        for p in (self.tmp, self.tmp.with_suffix(".body")):
            p.unlink(missing_ok=True)
