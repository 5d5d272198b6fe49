"""Numbers for machine outputs at full precision: JSON values and CSV cells (rounding is for people only)."""
from __future__ import annotations

import math


def json_num(v):
    """A float at full precision for JSON; None where missing or not finite."""
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def csv_cell(v) -> str:
    """A CSV cell: a float at full precision ('' where missing or not finite), text as is, booleans as true/false."""
    if v is None:
        return ""
    if isinstance(v, str):
        return v
    if isinstance(v, bool):
        return "true" if v else "false"
    v = float(v)
    return repr(v) if math.isfinite(v) else ""
