"""Nested mappings (YAML configs and scenes)."""
from __future__ import annotations

import copy


def deep_update(a: dict, b: dict) -> dict:
    """A copy of ``a`` with ``b`` merged in: nested mappings merge, everything else replaces."""
    out = copy.deepcopy(a)
    for k, v in b.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = deep_update(out[k], v)
        else:
            out[k] = copy.deepcopy(v)
    return out


def flatten(d: dict, prefix: str = "") -> dict:
    """Nested mapping to {dotted.key: value}."""
    out = {}
    for k, v in (d or {}).items():
        key = f"{prefix}.{k}" if prefix else str(k)
        if isinstance(v, dict):
            out.update(flatten(v, key))
        else:
            out[key] = v
    return out
