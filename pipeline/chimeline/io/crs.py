"""Length units of a scan from its coordinate reference system (pyproj): OGC WKT or GeoTIFF keys.

Horizontal and vertical units are read separately, since compound systems (a projected system in metres with
heights in US survey feet, say) are common. A geographic system (degrees) is refused: the scan must be in a
projected or local frame. Units that chimeline does not know (Clarke's foot, links, ...) are reported by name so
the caller can say which key to set.
"""
from __future__ import annotations

import logging
import re
import struct
from dataclasses import dataclass
from typing import Optional

from ..errors import InputError
from ..units import LENGTH_FACTORS

log = logging.getLogger(__name__)

#: GeoTIFF keys (GeoKeyDirectoryTag) used here
GT_MODEL_TYPE = 1024  # 1 projected, 2 geographic, 3 geocentric
GEOGRAPHIC_TYPE = 2048
PROJECTED_CS_TYPE = 3072
PROJ_LINEAR_UNITS = 3076
VERTICAL_CS_TYPE = 4096
VERTICAL_UNITS = 4099
USER_DEFINED = 32767


@dataclass(frozen=True)
class CrsUnits:
    """What a file's CRS says about lengths."""

    horizontal: Optional[str]  # m, ft, us_ft, mm, or None when the CRS does not say (or the unit is unknown)
    vertical: Optional[str]  # likewise for heights; None when the CRS has no vertical part
    name: str  # the CRS name, for messages
    source: str  # "WKT" or "GeoTIFF keys"
    unknown_unit: str = ""  # a length unit the CRS names that chimeline does not support ("Clarke's foot 0.3048")


def unit_code(factor: float) -> Optional[str]:
    """chimeline's unit name for a metres-per-unit factor, or None (relative tolerance 1e-9)."""
    for name, f in LENGTH_FACTORS.items():
        if name != "in" and abs(factor - f) <= 1e-9 * f:
            return name
    return None


def _axis_units(crs) -> tuple[Optional[tuple[str, float]], Optional[tuple[str, float]]]:
    """((name, factor) horizontal, (name, factor) vertical) from a pyproj CRS's axes."""
    horiz = vert = None
    parts = crs.sub_crs_list if crs.is_compound else [crs]
    for part in parts:
        for ax in part.axis_info:
            if ax.unit_name in ("", "unknown") or ax.unit_conversion_factor in (None, 0):
                continue
            pair = (ax.unit_name, float(ax.unit_conversion_factor))
            if ax.direction in ("up", "down") or part.is_vertical:
                vert = vert or pair
            else:
                horiz = horiz or pair
    return horiz, vert


def _refuse_geographic(crs, what: str, path) -> None:
    parts = crs.sub_crs_list if crs.is_compound else [crs]
    if any(p.is_geographic for p in parts) or crs.is_geocentric:
        raise InputError(f"{path}: the {what} is geographic or geocentric ({crs.name}): chimeline needs the scan in a "
                         f"projected or local frame with lengths on every axis; reproject it first")


def _classify(horiz, vert, name, source) -> CrsUnits:
    unknown = []
    h = v = None
    if horiz:
        h = unit_code(horiz[1])
        if h is None:
            unknown.append(f"{horiz[0]} ({horiz[1]:.12g} m)")
    if vert:
        v = unit_code(vert[1])
        if v is None:
            unknown.append(f"{vert[0]} ({vert[1]:.12g} m)")
    return CrsUnits(horizontal=h, vertical=v, name=name, source=source, unknown_unit=", ".join(unknown))


def units_from_wkt(wkt: str, path="scan") -> Optional[CrsUnits]:
    """Units of an OGC WKT string (WKT1 or WKT2, compound or not); None if the text names no unit."""
    import pyproj

    text = wkt.strip().rstrip("\x00")
    if not text:
        return None
    try:
        crs = pyproj.CRS.from_wkt(text)
    except Exception:  # pyproj.exceptions.CRSError and friends; fall back to the last UNIT[...] in the text
        code = wkt_units(text)
        log.debug("%s: pyproj cannot parse the WKT; unit from the text: %s", path, code)
        return CrsUnits(code, code, "unparsed WKT", "WKT") if code else None
    _refuse_geographic(crs, "WKT coordinate system", path)
    horiz, vert = _axis_units(crs)
    if horiz is None and vert is None:
        return None
    return _classify(horiz, vert, crs.name, "WKT")


def wkt_units(wkt: str) -> Optional[str]:
    """Length unit of the last UNIT[...] in a WKT string (fallback when pyproj cannot parse it)."""
    units = re.findall(r'UNIT\["([^"]+)"\s*,\s*([0-9.eE+-]+)', wkt)
    if not units:
        return None
    return unit_code(float(units[-1][1]))


def parse_geokeys(directory: bytes) -> dict[int, tuple[int, int, int]]:
    """GeoKeyDirectoryTag bytes (unsigned shorts, little endian) -> {key id: (location, count, value)}."""
    if len(directory) < 8:
        return {}
    n = struct.unpack_from("<4H", directory, 0)[3]
    n = min(n, (len(directory) - 8) // 8)
    keys = {}
    for i in range(n):
        kid, loc, count, val = struct.unpack_from("<4H", directory, 8 + 8 * i)
        keys[kid] = (loc, count, val)
    return keys


def _unit_of_code(code: int) -> Optional[tuple[str, float]]:
    import pyproj.database

    for name, unit in pyproj.database.get_units_map(auth_name="EPSG", category="linear").items():
        if unit.code == str(code):
            return name, float(unit.conv_factor)
    return None


def units_from_geokeys(directory: bytes, doubles: bytes = b"", path="scan") -> Optional[CrsUnits]:
    """Units from GeoTIFF keys: the projected system's EPSG code or the explicit linear-unit keys, the vertical
    system's code or its unit key. Geographic models are refused."""
    import pyproj

    keys = parse_geokeys(directory)
    if not keys:
        return None

    def value(kid):
        k = keys.get(kid)
        return k[2] if k is not None and k[0] == 0 else None  # location 0: the value is in the directory itself

    model = value(GT_MODEL_TYPE)
    if model in (2, 3) or (value(GEOGRAPHIC_TYPE) and value(PROJECTED_CS_TYPE) is None and model != 1):
        raise InputError(f"{path}: the GeoTIFF keys describe a geographic or geocentric system (model type {model}, "
                         f"geographic code {value(GEOGRAPHIC_TYPE)}): chimeline needs the scan in a projected or "
                         f"local frame; reproject it first")
    name = "GeoTIFF keys"
    horiz = vert = None
    pcs = value(PROJECTED_CS_TYPE)
    if pcs and pcs != USER_DEFINED:
        try:
            crs = pyproj.CRS.from_epsg(pcs)
            name = crs.name
            _refuse_geographic(crs, f"GeoTIFF projected system EPSG:{pcs}", path)
            horiz, _ = _axis_units(crs)
        except InputError:
            raise
        except Exception:
            log.debug("%s: EPSG:%s not in the pyproj database", path, pcs)
    lin = value(PROJ_LINEAR_UNITS)
    if lin and lin != USER_DEFINED:
        horiz = _unit_of_code(lin) or horiz
    vcs = value(VERTICAL_CS_TYPE)
    if vcs and vcs != USER_DEFINED:
        try:
            vcrs = pyproj.CRS.from_epsg(vcs)
            _, vert = _axis_units(vcrs)
            name = f"{name} + {vcrs.name}"
        except Exception:
            log.debug("%s: vertical EPSG:%s not in the pyproj database", path, vcs)
    vu = value(VERTICAL_UNITS)
    if vu and vu != USER_DEFINED:
        vert = _unit_of_code(vu) or vert
    if horiz is None and vert is None:
        return None
    return _classify(horiz, vert, name, "GeoTIFF keys")
