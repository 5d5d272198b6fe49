"""Length units and quantity parsing.

Internally every length is in metres. Scans and surveys may be in metres,
international feet or US survey feet; the two feet differ by 2 ppm, which is
0.1 mm over a 50 m coordinate span and 10 m at georeferenced offsets of
5 000 000 ft, so they are never mixed up.
"""
from __future__ import annotations

import functools
import math
import re

from .errors import ConfigError, clip_repr

#: metres per international foot (exact by the 1959 agreement) and per inch
FOOT = 0.3048
INCH = 0.0254
#: metres per US survey foot (exact by definition)
US_SURVEY_FOOT = 1200.0 / 3937.0

#: metres per unit
LENGTH_FACTORS: dict[str, float] = {
    "m": 1.0,
    "mm": 1e-3,
    "ft": FOOT,
    "us_ft": US_SURVEY_FOOT,
    "in": INCH,
}

UNIT_LABELS = {"m": "m", "mm": "mm", "ft": "ft", "us_ft": "US survey ft", "in": "in"}

#: pint's names of the length units above
PINT_NAMES = {"us_ft": "survey_foot", "ft": "foot", "m": "meter", "mm": "millimeter", "in": "inch"}


def to_metres(unit: str) -> float:
    """Metres per one `unit`."""
    try:
        return LENGTH_FACTORS[unit]
    except KeyError:
        raise ConfigError(f"unknown length unit {unit!r}; use one of {sorted(LENGTH_FACTORS)}") from None


def small_length(unit: str) -> tuple[float, str]:
    """Factor from metres and label for small lengths (settlements, noise): mm for metric outputs, in for feet."""
    return (1e3, "mm") if unit in ("m", "mm") else (1.0 / INCH, "in")


@functools.lru_cache(maxsize=1)
def _registry():
    import pint

    return pint.UnitRegistry()


#: SI unit (pint name) of each kind of quantity a config may give as "number unit"
QUANTITY_KINDS = {"length": "meter", "stress": "pascal"}

#: "number unit": a decimal number (exponent of at most three digits) and a unit name made of letters, optionally
#: "per" a second name with a power of 2 or 3 ("36 ksi", "250 MPa", "40 ft", "250 N/mm^2"). Nothing
#: else is accepted, so a value is never evaluated as an expression ("10**10**10 m" would take forever).
_QUANTITY = re.compile(r"\s*(?P<num>[+-]?(?:\d{1,30}(?:\.\d{0,30})?|\.\d{1,30})(?:[eE][+-]?\d{1,3})?)\s*"
                       r"(?P<unit>[A-Za-z_]{1,30}(?:\s*/\s*[A-Za-z_]{1,30}(?:\^[23]|\*\*[23])?)?)?\s*")


def split_quantity(text: str) -> tuple[float, str | None]:
    """("36 ksi") -> (36.0, "ksi"); a bare number gives unit None. Raises ValueError for anything else."""
    m = _QUANTITY.fullmatch(text) if len(text) <= 80 else None
    if m is None:
        raise ValueError("not a number followed by a unit")
    value = float(m.group("num"))
    if not math.isfinite(value):
        raise ValueError("not a finite number")
    unit = m.group("unit")
    return value, (re.sub(r"\s+", "", unit) if unit else None)


def parse_quantity(value, kind: str, default_unit: str | None, key: str, source: str = "config") -> float | None:
    """Parse a number or a string "number unit" ("36 ksi", "250 MPa", "40 ft") to SI.

    kind is "length" (returns metres) or "stress" (returns pascals). A bare number is taken in `default_unit` (a
    pint unit name); with ``default_unit`` None a bare number is only checked and None is returned.
    """
    example = "40 ft" if kind == "length" else "250 MPa"
    target = QUANTITY_KINDS[kind]
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise ConfigError(f"{source}: '{key}' must be a number or a quantity string like {example!r}, "
                          f"got {clip_repr(value)}")
    try:
        if isinstance(value, str):
            number, unit = split_quantity(value)
        else:
            number, unit = float(value), None
            if not math.isfinite(number):
                raise ValueError("not a finite number")
    except (ValueError, OverflowError):
        raise ConfigError(f"{source}: '{key}' must be a number and a unit like {example!r}, got "
                          f"{clip_repr(value)}") from None
    if unit is None and default_unit is None:
        return None
    ureg = _registry()
    try:
        q = ureg.Quantity(number, ureg.parse_units(unit or default_unit))
        return float(q.to(target).magnitude)
    except Exception as exc:  # pint raises several unrelated types (undefined unit, wrong dimension)
        raise ConfigError(f"{source}: '{key}' must be a {kind} (e.g. {example}), got {clip_repr(value)} "
                          f"({type(exc).__name__})") from None
