"""Tank data for the evaluation: diameter, shell height, yield strength, Young's modulus, roof type."""
from __future__ import annotations

from ..config import TankConfig
from ..errors import ConfigError
from ..units import PINT_NAMES, parse_quantity
from .results import TankData


def tank_data(tc: TankConfig, length_unit: str, fitted_diameter_m: float | None = None) -> TankData:
    """Tank data from the config; bare lengths are in ``length_unit``; stresses need a unit."""
    if tc.diameter is not None:
        D = parse_quantity(tc.diameter, "length", PINT_NAMES[length_unit], "tank.diameter")
        src = "config"
    elif fitted_diameter_m is not None:
        D, src = fitted_diameter_m, "fitted"
    else:
        raise ConfigError("tank.diameter is missing: give the nominal diameter (e.g. '100 ft') for a survey")
    for key, val in (("tank.shell_height", tc.shell_height), ("tank.yield_strength", tc.yield_strength)):
        if val is None:
            raise ConfigError(f"'{key}' is missing: the settlement evaluation needs it (e.g. "
                              f"{'40 ft' if 'height' in key else '36 ksi or 250 MPa'})")
    H = parse_quantity(tc.shell_height, "length", PINT_NAMES[length_unit], "tank.shell_height")
    for key, val in (("tank.yield_strength", tc.yield_strength), ("tank.youngs_modulus", tc.youngs_modulus)):
        if isinstance(val, (int, float)) and not isinstance(val, bool):
            raise ConfigError(f"'{key}' needs a unit, e.g. '36 ksi', '250 MPa' or '29e6 psi'; got {val!r}")
    Y = parse_quantity(tc.yield_strength, "stress", "Pa", "tank.yield_strength")
    E = parse_quantity(tc.youngs_modulus, "stress", "Pa", "tank.youngs_modulus")
    for key, v, lo, hi, u, k in (("tank.diameter", D, 1.0, 200.0, "m", 1.0),
                                 ("tank.shell_height", H, 1.0, 50.0, "m", 1.0),
                                 ("tank.yield_strength", Y, 100e6, 1000e6, "MPa", 1e-6),
                                 ("tank.youngs_modulus", E, 100e9, 300e9, "GPa", 1e-9)):
        if not lo <= v <= hi:
            raise ConfigError(f"'{key}' = {v * k:.4g} {u} is outside a plausible range of {lo * k:.4g}-{hi * k:.4g} "
                              f"{u} for a steel tank; check its value and unit")
    return TankData(diameter=D, radius=D / 2, shell_height=H, yield_strength=Y, youngs_modulus=E, roof=tc.roof,
                    diameter_source=src)


def has_tank_data(tc: TankConfig) -> bool:
    """True when the config carries what the evaluation needs beyond the scan."""
    return tc.shell_height is not None and tc.yield_strength is not None
