"""Configuration: the schema of every section, loading, ``--set`` merging, validation.

Every section is a frozen dataclass named after its stage. Field metadata carries
the allowed range (``min``/``max``, inclusive unless ``min_open``) and allowed
strings (``choices``); ``_build`` turns a YAML mapping into the dataclasses and
refuses unknown keys (with the nearest valid key), wrong types and out-of-range
values, always naming the file and the dotted key.
"""
from __future__ import annotations

import copy
import dataclasses
import difflib
import hashlib
import importlib.resources
import types
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal, Optional, Union

import yaml

from .errors import ConfigError

# ---------------------------------------------------------------------------
# generic dataclass builder (also used by the simulator's scene schema)


def rng_field(default, lo=None, hi=None, *, lo_open=False, doc=""):
    """A numeric field with an allowed range."""
    md = {"min": lo, "max": hi, "min_open": lo_open, "doc": doc}
    if isinstance(default, (list, dict)):
        return field(default_factory=lambda: copy.deepcopy(default), metadata=md)
    return field(default=default, metadata=md)


def choice_field(default, choices, doc=""):
    return field(default=default, metadata={"choices": tuple(choices), "doc": doc})


def _type_name(tp) -> str:
    origin = typing.get_origin(tp)
    if tp is float:
        return "a number"
    if tp is int:
        return "an int"
    if tp is bool:
        return "true or false"
    if tp is str:
        return "a string"
    if origin in (list, tuple):
        args = typing.get_args(tp)
        return f"a list of {_type_name(args[0]).removeprefix('a ').removeprefix('an ')}s" if args else "a list"
    if dataclasses.is_dataclass(tp):
        return "a mapping"
    return str(tp)


def _range_text(md) -> str:
    lo, hi = md.get("min"), md.get("max")
    if lo is not None and hi is not None:
        return f" in [{lo}, {hi}]"
    if lo is not None:
        return f" {'>' if md.get('min_open') else '>='} {lo}"
    if hi is not None:
        return f" <= {hi}"
    return ""


def _fail(source, key, what, value):
    raise ConfigError(f"{source}: '{key}' must be {what}, got {value!r}")


def _convert(tp, value, key, source, md):
    origin = typing.get_origin(tp)
    args = typing.get_args(tp)
    if origin in (Union, types.UnionType):
        non_none = [a for a in args if a is not type(None)]
        if value is None and len(non_none) < len(args):
            return None
        errors = []
        for a in non_none:
            try:
                return _convert(a, value, key, source, md)
            except ConfigError as exc:
                errors.append(exc)
        raise errors[0]
    if origin is Literal:
        if value not in args:
            _fail(source, key, "one of " + ", ".join(repr(a) for a in args), value)
        return value
    if dataclasses.is_dataclass(tp):
        if value is None:
            value = {}
        if not isinstance(value, dict):
            _fail(source, key, "a mapping", value)
        return build(tp, value, key, source)
    if origin in (list, tuple):
        if not isinstance(value, (list, tuple)):
            _fail(source, key, _type_name(tp), value)
        if origin is tuple and args and args[-1] is not Ellipsis:
            if len(value) != len(args):
                _fail(source, key, f"a list of {len(args)} values", value)
            return tuple(_convert(a, v, f"{key}[{i}]", source, md) for i, (a, v) in enumerate(zip(args, value)))
        inner = args[0] if args else Any
        out = [_convert(inner, v, f"{key}[{i}]", source, md) for i, v in enumerate(value)]
        return tuple(out)
    if tp is Any:
        return value
    if tp is bool:
        if not isinstance(value, bool):
            _fail(source, key, "true or false", value)
        return value
    if tp in (int, float):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            if isinstance(value, str):
                try:
                    value = float(value) if tp is float else int(value)
                except ValueError:
                    _fail(source, key, _type_name(tp) + _range_text(md), value)
            else:
                _fail(source, key, _type_name(tp) + _range_text(md), value)
        if tp is int and isinstance(value, float):
            if not value.is_integer():
                _fail(source, key, "an int" + _range_text(md), value)
            value = int(value)
        value = tp(value)
        if tp is float and value != value:
            _fail(source, key, "a finite number" + _range_text(md), value)
        lo, hi = md.get("min"), md.get("max")
        ok = True
        if lo is not None:
            ok = value > lo if md.get("min_open") else value >= lo
        if hi is not None and value > hi:
            ok = False
        if not ok:
            _fail(source, key, _type_name(tp) + _range_text(md), value)
        return value
    if tp is str:
        if not isinstance(value, str):
            _fail(source, key, "a string", value)
        ch = md.get("choices")
        if ch and value not in ch:
            near = difflib.get_close_matches(value, ch, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise ConfigError(f"{source}: '{key}' must be one of {', '.join(ch)}, got {value!r}{hint}")
        return value
    return value


def build(cls, mapping: dict, prefix: str, source: str):
    """Build dataclass ``cls`` from ``mapping``; errors name ``source`` and dotted keys."""
    hints = typing.get_type_hints(cls)
    fields = {f.name: f for f in dataclasses.fields(cls) if f.init}
    for k in mapping:
        if k not in fields:
            near = difflib.get_close_matches(str(k), list(fields), n=1)
            hint = f" (did you mean '{_join(prefix, near[0])}'?)" if near else ""
            raise ConfigError(f"{source}: unknown key '{_join(prefix, k)}'{hint}")
    kwargs = {}
    for name, f in fields.items():
        key = _join(prefix, name)
        if name in mapping:
            kwargs[name] = _convert(hints[name], mapping[name], key, source, f.metadata)
        elif dataclasses.is_dataclass(hints[name]) and f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING:
            kwargs[name] = build(hints[name], {}, key, source)
        elif f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING:
            raise ConfigError(f"{source}: missing required key '{key}'")
    obj = cls(**kwargs)
    check = getattr(obj, "_check", None)
    if check is not None:
        check(prefix, source)
    return obj


def _join(prefix, name):
    return f"{prefix}.{name}" if prefix else str(name)


def to_dict(obj) -> Any:
    """Dataclasses to plain YAML/JSON-safe structures (tuples become lists)."""
    if dataclasses.is_dataclass(obj):
        return {f.name: to_dict(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, (list, tuple)):
        return [to_dict(v) for v in obj]
    if isinstance(obj, dict):
        return {k: to_dict(v) for k, v in obj.items()}
    return obj


def load_yaml(path: Path) -> dict:
    """Read a YAML mapping; errors name the file."""
    path = Path(path)
    if not path.exists():
        raise ConfigError(f"{path}: config file not found")
    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}" if mark else ""
        raise ConfigError(f"{path}: not valid YAML{where}: {getattr(exc, 'problem', exc)}") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: cannot read config: {exc}") from None
    if data is None:
        data = {}
    if not isinstance(data, dict):
        raise ConfigError(f"{path}: the config must be a mapping of sections, got {type(data).__name__}")
    return data


def parse_set_pairs(pairs) -> list[tuple[str, Any]]:
    """``a.b=value`` strings to (dotted key, YAML-parsed value); raises ValueError if malformed."""
    out = []
    for p in pairs or ():
        if "=" not in p:
            raise ValueError(f"--set expects KEY=VALUE with a dotted key, got {p!r}")
        k, v = p.split("=", 1)
        k = k.strip()
        if not k or any(not part for part in k.split(".")):
            raise ValueError(f"--set expects KEY=VALUE with a dotted key, got {p!r}")
        try:
            val = yaml.safe_load(v) if v.strip() else None
        except yaml.YAMLError:
            val = v
        out.append((k, val))
    return out


def merge_sets(mapping: dict, sets) -> dict:
    """Merge (dotted key, value) overrides into a copy of ``mapping``."""
    out = copy.deepcopy(mapping)
    for key, val in sets:
        node = out
        parts = key.split(".")
        for part in parts[:-1]:
            nxt = node.get(part)
            if nxt is None:
                nxt = node[part] = {}
            if not isinstance(nxt, dict):
                raise ConfigError(f"--set {key}: '{part}' is not a section")
            node = nxt
        node[parts[-1]] = val
    return out


def config_hash(mapping: dict) -> str:
    text = yaml.safe_dump(mapping, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


def default_yaml_text() -> str:
    return importlib.resources.files("pipeline").joinpath("data/default.yaml").read_text(encoding="utf-8")


def default_mapping() -> dict:
    return yaml.safe_load(default_yaml_text()) or {}
