"""Length units and quantity parsing.

Internally every length is in metres. Scans and surveys may be in metres,
international feet or US survey feet; the two feet differ by 2 ppm, which is
0.1 mm over a 50 m coordinate span and 10 m at georeferenced offsets of
5 000 000 ft, so they are never mixed up.
"""
from __future__ import annotations

import functools

from .errors import ConfigError

#: metres per unit; US survey foot = 1200/3937 m, international foot = 0.3048 m
LENGTH_FACTORS: dict[str, float] = {
    "m": 1.0,
    "mm": 1e-3,
    "ft": 0.3048,
    "us_ft": 1200.0 / 3937.0,
    "in": 0.0254,
}

UNIT_LABELS = {"m": "m", "mm": "mm", "ft": "ft", "us_ft": "US survey ft", "in": "in"}


def to_metres(unit: str) -> float:
    """Metres per one `unit`."""
    try:
        return LENGTH_FACTORS[unit]
    except KeyError:
        raise ConfigError(f"unknown length unit {unit!r}; use one of {sorted(LENGTH_FACTORS)}") from None


@functools.lru_cache(maxsize=1)
def _registry():
    import pint

    ureg = pint.UnitRegistry()
    return ureg


def parse_quantity(value, kind: str, default_unit: str, key: str, source: str = "config") -> float:
    """Parse a number or a string with units ("36 ksi", "250 MPa", "40 ft") to SI.

    kind is "length" (returns metres) or "stress" (returns pascals). A bare
    number is taken in `default_unit`.
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
