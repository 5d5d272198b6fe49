"""Length units and quantity parsing.

Internally every length is in metres. Scans and surveys may be in metres,
international feet or US survey feet; the two feet differ by 2 ppm, which is
0.1 mm over a 50 m coordinate span and 10 m at georeferenced offsets of
5 000 000 ft, so they are never mixed up.
"""
from __future__ import annotations

import functools

from .errors import ConfigError

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


def parse_quantity(value, kind: str, default_unit: str, key: str, source: str = "config") -> float:
    """Parse a number or a string with units ("36 ksi", "250 MPa", "40 ft") to SI.

    kind is "length" (returns metres) or "stress" (returns pascals). A bare
    number is taken in `default_unit` (a pint unit name).
    """
    ureg = _registry()
    target = {"length": "meter", "stress": "pascal"}[kind]
    try:
        if isinstance(value, bool):
            raise TypeError
        if isinstance(value, (int, float)):
            q = ureg.Quantity(float(value), default_unit)
        elif isinstance(value, str):
            q = ureg.Quantity(value.strip())
            if q.dimensionless:
                q = ureg.Quantity(float(q.magnitude), default_unit)
        else:
            raise TypeError
        return float(q.to(target).magnitude)
    except TypeError:
        raise ConfigError(f"{source}: '{key}' must be a number or a quantity string like '36 ksi', got {value!r}") from None
    except Exception as exc:  # pint raises several unrelated types
        raise ConfigError(
            f"{source}: '{key}' must be a {kind} (e.g. {'40 ft' if kind == 'length' else '250 MPa'}), "
            f"got {value!r} ({type(exc).__name__})"
        ) from None
