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
import datetime
import difflib
import importlib.resources
import math
import re
import types
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal, Optional, Union

import yaml

from .core.hashing import sha256_text
from .core.mapping import deep_update
from .errors import ConfigError, clip_repr
from .units import QUANTITY_KINDS, parse_quantity

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


def date_field(default="", doc="calendar date YYYY-MM-DD, or empty"):
    """A date written as YYYY-MM-DD (kept as text); an impossible date is refused naming the key."""
    return field(default=default, metadata={"date": True, "doc": doc})


def quantity_field(default, kind: str, lo, hi, doc=""):
    """A number (in a unit the consumer knows) or a quantity string "number unit" of ``kind`` (length, stress).

    Bare numbers are checked against [lo, hi]; strings are parsed (number and unit only) when the config is
    loaded, so a bad unit fails before any work; the plausible range in SI is checked where the unit is known.
    """
    assert kind in QUANTITY_KINDS
    return field(default=default, metadata={"min": lo, "max": hi, "min_open": True, "quantity": kind, "doc": doc})


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
        return f" in {'(' if md.get('min_open') else '['}{lo}, {hi}]"
    if lo is not None:
        return f" {'>' if md.get('min_open') else '>='} {lo}"
    if hi is not None:
        return f" <= {hi}"
    return ""


def _fail(source, key, what, value):
    raise ConfigError(f"{source}: '{key}' must be {what}, got {clip_repr(value)}")


_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")


def _check_date(value: str, key, source):
    if value == "":
        return value
    try:
        if not _DATE.fullmatch(value):
            raise ValueError
        datetime.date.fromisoformat(value)
    except ValueError:
        _fail(source, key, "a calendar date YYYY-MM-DD (or empty)", value)
    return value


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
                errors.append((a, exc))
        # the error of the branch the value looks like (a unit string's own error rather than "a number", a list's
        # own error rather than "a string")
        def looks_like(a):
            origin = typing.get_origin(a)
            if isinstance(value, str):
                return a is str
            if isinstance(value, (list, tuple)):
                return origin in (list, tuple)
            return a in (int, float)

        raise next((e for a, e in errors if looks_like(a)), errors[0][1])
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
        try:
            value = tp(value)
        except OverflowError:
            _fail(source, key, "a finite number" + _range_text(md), value)
        if tp is float and not math.isfinite(value):
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
        if isinstance(value, datetime.date):  # YAML reads 2026-06-15 as a date
            value = value.isoformat()
        if not isinstance(value, str):
            _fail(source, key, "a string", value)
        ch = md.get("choices")
        if ch and value not in ch:
            near = difflib.get_close_matches(value, ch, n=1) if len(value) < 100 else []
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise ConfigError(f"{source}: '{key}' must be one of {', '.join(ch)}, got {clip_repr(value)}{hint}")
        if md.get("date"):
            return _check_date(value, key, source)
        if md.get("quantity") and value != "auto":
            parse_quantity(value, md["quantity"], None, key, source)
        return value
    return value


def build(cls, mapping: dict, prefix: str, source: str):
    """Build dataclass ``cls`` from ``mapping``; errors name ``source`` and dotted keys."""
    hints = typing.get_type_hints(cls)
    fields = {f.name: f for f in dataclasses.fields(cls) if f.init}
    for k in mapping:
        if k not in fields:
            near = difflib.get_close_matches(str(k)[:100], list(fields), n=1)
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
    name = str(name) if len(str(name)) <= 80 else str(name)[:77] + "..."
    return f"{prefix}.{name}" if prefix else name


def to_dict(obj) -> Any:
    """Dataclasses to plain YAML/JSON-safe structures (tuples become lists)."""
    if dataclasses.is_dataclass(obj):
        return {f.name: to_dict(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, (list, tuple)):
        return [to_dict(v) for v in obj]
    if isinstance(obj, dict):
        return {k: to_dict(v) for k, v in obj.items()}
    return obj


# ---------------------------------------------------------------------------
# YAML with limits: every config, scene, arc table and resolved config is read through ``parse_yaml``

#: largest YAML text read (bytes); configs and scenes are a few kilobytes
MAX_YAML_BYTES = 1 << 20
#: deepest nesting of mappings and lists (a config is 3 levels deep, a scene 5)
MAX_YAML_DEPTH = 32
#: most nodes once aliases are expanded (an alias bomb expands exponentially)
MAX_YAML_NODES = 200_000


class _Refused(yaml.MarkedYAMLError):
    """YAML that parses but is refused: nested too deep, too large once aliases expand, a duplicate key."""


class _BoundedLoader(yaml.SafeLoader):
    """PyYAML's safe loader with a nesting limit, duplicate keys refused and dates kept as text."""

    def __init__(self, stream):
        super().__init__(stream)
        self.depth = 0

    def compose_node(self, parent, index):
        self.depth += 1
        try:
            if self.depth > MAX_YAML_DEPTH:
                raise _Refused(None, None, f"nested deeper than {MAX_YAML_DEPTH} levels",
                                                  self.peek_event().start_mark)
            return super().compose_node(parent, index)
        finally:
            self.depth -= 1

    def construct_mapping(self, node, deep=False):
        if isinstance(node, yaml.MappingNode):
            seen = set()
            for key_node, _ in node.value:
                if key_node.tag == "tag:yaml.org,2002:merge" or not isinstance(key_node, yaml.ScalarNode):
                    continue
                key = self.construct_object(key_node)
                if key in seen:
                    raise _Refused(None, None, f"duplicate key {clip_repr(key)}",
                                                            key_node.start_mark)
                seen.add(key)
        return super().construct_mapping(node, deep=deep)


# dates stay text (YAML would turn 2026-06-15 into a date and raise on 2026-13-45); fields validate them
_BoundedLoader.add_constructor("tag:yaml.org,2002:timestamp", lambda loader, node: loader.construct_scalar(node))


def _expanded_size(node, depth, memo, active) -> int:
    """Nodes of the document with aliases expanded; refuses recursive aliases and expanded depth over the limit."""
    key = id(node)
    if key in memo:
        return memo[key]
    if key in active:
        raise _Refused(None, None, "an alias refers to its own ancestor (recursive data)",
                                          node.start_mark)
    if depth > MAX_YAML_DEPTH:
        raise _Refused(None, None, f"nested deeper than {MAX_YAML_DEPTH} levels once aliases "
                                          "are expanded", node.start_mark)
    active.add(key)
    n = 1
    if isinstance(node, yaml.SequenceNode):
        n += sum(_expanded_size(c, depth + 1, memo, active) for c in node.value)
    elif isinstance(node, yaml.MappingNode):
        n += sum(_expanded_size(k, depth + 1, memo, active) + _expanded_size(v, depth + 1, memo, active)
                 for k, v in node.value)
    active.discard(key)
    memo[key] = n
    if n > MAX_YAML_NODES:
        raise _Refused(None, None, f"more than {MAX_YAML_NODES} values once aliases are "
                                          "expanded (an alias bomb?)", node.start_mark)
    return n


def parse_yaml(text: str, source: str, *, text_if_not_yaml: bool = False):
    """YAML text to Python data with limits on size, nesting and alias expansion; duplicate keys are errors.

    Every problem is a ConfigError naming ``source`` (and the line where YAML knows it); with
    ``text_if_not_yaml`` a syntax error gives the text itself (``--set`` values), a refused document still fails.
    """
    if len(text) > MAX_YAML_BYTES:
        raise ConfigError(f"{source}: larger than {MAX_YAML_BYTES // 1024} KiB; a config or scene is a few KiB")
    loader = None
    try:
        loader = _BoundedLoader(text)  # its reader already refuses some characters
        node = loader.get_single_node()
        if node is None:
            return None
        _expanded_size(node, 1, {}, set())
        return loader.construct_document(node)
    except yaml.YAMLError as exc:
        if text_if_not_yaml and not isinstance(exc, _Refused):
            return text
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        what = "YAML refused" if isinstance(exc, _Refused) else "not valid YAML"
        raise ConfigError(f"{source}: {what}{where}: {str(problem)[:160]}") from None
    except Exception as exc:  # PyYAML's constructors raise ValueError (5000-digit int), IndexError ('!!float ')...
        raise ConfigError(f"{source}: a value cannot be read ({type(exc).__name__}: {str(exc)[:120]})") from None
    finally:
        if loader is not None:
            loader.dispose()


def read_yaml_text(path: Path, what: str = "config") -> str:
    """The text of a YAML file (at most MAX_YAML_BYTES); errors name the file."""
    path = Path(path)
    if not path.exists():
        raise ConfigError(f"{path}: {what} file not found")
    if not path.is_file():
        raise ConfigError(f"{path}: is a folder, not a file ({what})")
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_YAML_BYTES + 1)
        if len(raw) > MAX_YAML_BYTES:
            raise ConfigError(f"{path}: larger than {MAX_YAML_BYTES // 1024} KiB; a {what} file is a few KiB")
        return raw.decode("utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: cannot read {what}: {str(exc)[:120]}") from None


def load_yaml(path: Path) -> dict:
    """Read a YAML mapping (with the limits of ``parse_yaml``); errors name the file."""
    path = Path(path)
    data = parse_yaml(read_yaml_text(path), str(path))
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
            raise ValueError(f"--set expects KEY=VALUE with a dotted key, got {clip_repr(p)}")
        k, v = p.split("=", 1)
        k = k.strip()
        if not k or any(not part for part in k.split(".")):
            raise ValueError(f"--set expects KEY=VALUE with a dotted key, got {clip_repr(p)}")
        try:  # text that is not YAML stays text (a unit string, a path)
            val = parse_yaml(v, f"--set {clip_repr(k)[1:-1]}", text_if_not_yaml=True) if v.strip() else None
        except ConfigError as exc:
            raise ValueError(str(exc)) from None
        out.append((k, val))
    return out


def merge_sets(mapping: dict, sets) -> dict:
    """Merge (dotted key, value) overrides into a copy of ``mapping``.

    A mapping value merges into a section; anything else given for a whole section (``--set profile=``) is
    refused, as it would silently reset every key of that section.
    """
    out = copy.deepcopy(mapping)
    for key, val in sets:
        node = out
        parts = key.split(".")
        for part in parts[:-1]:
            nxt = node.get(part)
            if nxt is None:
                nxt = node[part] = {}
            if not isinstance(nxt, dict):
                raise ConfigError(f"--set {clip_repr(key)[1:-1]}: '{clip_repr(part)[1:-1]}' is not a section")
            node = nxt
        last = parts[-1]
        if isinstance(node.get(last), dict):
            if not isinstance(val, dict):
                raise ConfigError(f"--set {clip_repr(key)[1:-1]}: '{clip_repr(key)[1:-1]}' is a section; set one "
                                  f"of its keys ({clip_repr(key)[1:-1]}.KEY=VALUE)")
            node[last] = deep_update(node[last], val)
        else:
            node[last] = val
    return out


def config_hash(mapping: dict) -> str:
    return sha256_text(yaml.safe_dump(mapping, sort_keys=True))


def default_yaml_text() -> str:
    return importlib.resources.files("chimeline").joinpath("data/default.yaml").read_text(encoding="utf-8")


def default_mapping() -> dict:
    return parse_yaml(default_yaml_text(), "default config") or {}


# ---------------------------------------------------------------------------
# the pipeline's schema: one section per stage


@dataclass(frozen=True)
class ColumnsConfig:
    """0-based column numbers of an ASCII or .npy scan (``input.columns``)."""

    x: int = rng_field(0, 0, 10_000)
    y: int = rng_field(1, 0, 10_000)
    z: int = rng_field(2, 0, 10_000)
    station: Optional[int] = rng_field(None, 0, 10_000, doc="column of the station (scan position) id; None: none")

    def _check(self, prefix, source):
        used = [self.x, self.y, self.z] + ([self.station] if self.station is not None else [])
        if self.station is not None and not (isinstance(self.station, int) and 0 <= self.station <= 10_000):
            raise ConfigError(f"{source}: '{_join(prefix, 'station')}' must be an int in [0, 10000], got "
                              f"{clip_repr(self.station)}")
        if len(set(used)) != len(used):
            raise ConfigError(f"{source}: '{prefix}' maps two names to one column: {used}")


LENGTH_UNIT_CHOICES = ("auto", "m", "ft", "us_ft", "mm")


@dataclass(frozen=True)
class InputConfig:
    units: str = choice_field("auto", LENGTH_UNIT_CHOICES,
                              doc="length unit of the scan, both axes; auto: the file's CRS unit if present, else m")
    up_axis: str = choice_field("z", ("z", "y"), doc="which file axis points up")
    chunk_size: int = rng_field(1_000_000, 10_000, 100_000_000, doc="points read per chunk")
    max_nonfinite_fraction: float = rng_field(0.01, 0.0, 1.0, doc="refuse the scan above this share of NaN/inf points")
    setup: str = ""  # name of the scanner setup (instrument, step, stations), shown by compare
    units_horizontal: str = choice_field("auto", LENGTH_UNIT_CHOICES, doc="horizontal unit; auto: input.units")
    units_vertical: str = choice_field("auto", LENGTH_UNIT_CHOICES, doc="vertical unit; auto: input.units")
    units_priority: str = choice_field("error", ("error", "config", "file"),
                                       doc="when the file's CRS and the configured units disagree: refuse, or which "
                                           "one wins")
    skip_classes: tuple[int, ...] = rng_field((7, 18), 0, 255, doc="LAS classes not used (7 low, 18 high noise)")
    skip_withheld: bool = True  # LAS points flagged withheld are not used
    columns: Optional[ColumnsConfig] = None  # ASCII/.npy column map; None: header names, else x y z first, no station
    file_stations: str = choice_field("auto", ("auto", "always", "never"),
                                      doc="several input files: number their points' stations by file (auto: only "
                                          "files without station ids)")


@dataclass(frozen=True)
class FrameConfig:
    origin: Optional[tuple[float, float, float]] = rng_field(None, -1e9, 1e9, doc="scan units; default: rounded median of the sample")
    azimuth_reference_deg: float = rng_field(0.0, -360.0, 360.0, doc="direction of azimuth 0, degrees clockwise from +Y")
    azimuth_direction: str = choice_field("cw", ("cw", "ccw"))
    azimuth_zero_at: Optional[tuple[float, float]] = rng_field(None, -1e9, 1e9, doc="scan coordinates [x, y] of a "
                                                                                    "feature: azimuth 0 points at it")

    def _check(self, prefix, source):
        if self.azimuth_zero_at is not None and self.azimuth_reference_deg != 0.0:
            raise ConfigError(f"{source}: set either '{_join(prefix, 'azimuth_zero_at')}' or "
                              f"'{_join(prefix, 'azimuth_reference_deg')}', not both")


@dataclass(frozen=True)
class TankConfig:
    tag: str = ""
    survey_date: str = date_field("")
    center_hint: Optional[tuple[float, float]] = rng_field(None, -1e9, 1e9,
                                                           doc="scan units (with any georeferencing offset)")
    diameter: Optional[Union[float, str]] = quantity_field(None, "length", 0.0, 1e6,
                                                           doc='nominal; number in scan units or "100 ft"')
    shell_height: Optional[Union[float, str]] = quantity_field(None, "length", 0.0, 1e6)
    yield_strength: Optional[Union[float, str]] = quantity_field(None, "stress", 0.0, 1e12, doc='"36 ksi", "250 MPa"')
    youngs_modulus: Union[float, str] = quantity_field("200 GPa", "stress", 0.0, 1e13)
    roof: str = choice_field("fixed", ("fixed", "floating", "none"))


@dataclass(frozen=True)
class ShellConfig:
    sample_points: int = rng_field(200_000, 5_000, 20_000_000, doc="points read for detection")
    voxel_size: float = rng_field(0.05, 0.001, 2.0, doc="m, downsampling before normals")
    normal_radius: float = rng_field(0.25, 0.01, 5.0, doc="m, neighbourhood for normals")
    max_normal_z: float = rng_field(0.3, 0.01, 1.0, doc="|n_z| of shell candidates (near-horizontal normals)")
    min_radius: float = rng_field(1.5, 0.1, 1000.0, doc="m")
    max_radius: float = rng_field(60.0, 0.2, 1000.0, doc="m")
    max_trials: int = rng_field(1500, 10, 1_000_000, doc="RANSAC trials per tank")
    inlier_tolerance: float = rng_field(0.03, 0.001, 1.0, doc="m, radial distance of RANSAC inliers")
    min_inliers: int = rng_field(500, 10, 10_000_000, doc="shell inliers (on the voxel-thinned sample) a tank "
                                                            "shell must have")
    min_height: float = rng_field(1.0, 0.1, 100.0, doc="m, vertical extent a shell must show")
    max_tanks: int = rng_field(4, 1, 20, doc="cylinders to look for")
    max_tilt_deg: float = rng_field(2.0, 0.0, 20.0)
    base_fit_height: float = rng_field(0.5, 0.2, 5.0, doc="m above the base used for the radius at the base")
    min_coverage: float = rng_field(0.2, 0.0, 1.0, doc="share of the 72 five-degree sectors of the circle a tank "
                                                       "shell's inliers must cover")

    def _check(self, prefix, source):
        if self.min_radius >= self.max_radius:
            raise ConfigError(f"{source}: '{_join(prefix, 'min_radius')}' ({self.min_radius}) must be below "
                              f"'{_join(prefix, 'max_radius')}' ({self.max_radius})")


@dataclass(frozen=True)
class JunctionConfig:
    band_below: float = rng_field(0.3, 0.05, 10.0, doc="m below the shell foot kept while streaming")
    band_above: float = rng_field(0.6, 0.2, 10.0, doc="m above the shell foot kept while streaming")
    band_outside: float = rng_field(0.15, 0.05, 5.0, doc="m outside the shell face kept while streaming")
    face_budget: int = rng_field(600_000, 10_000, 100_000_000, doc="shell-face points kept from the whole scan")
    radial_min: float = rng_field(0.006, 0.0, 0.5, doc="m outside the shell face where projection candidates start")
    radial_max: Union[float, str] = rng_field("auto", 0.001, 1.0,
                                              doc="m, or auto: estimated projection width minus radial_margin")
    radial_margin: float = rng_field(0.008, 0.0, 0.1, doc="m kept clear of the projection's outer edge")
    radial_max_limit: float = rng_field(0.12, 0.01, 1.0, doc="m, largest projection width considered by auto")
    sector_deg: float = rng_field(5.0, 0.5, 45.0, doc="sector for the coarse junction prior")
    search_window: float = rng_field(0.08, 0.005, 1.0, doc="m around the shell foot searched for the plate")
    height_gate: float = rng_field(0.025, 0.002, 0.5, doc="m around the prior kept as junction candidates")

    def _check(self, prefix, source):
        if isinstance(self.radial_max, str) and self.radial_max != "auto":
            raise ConfigError(f"{source}: '{_join(prefix, 'radial_max')}' must be a number (m) or 'auto', "
                              f"got {clip_repr(self.radial_max)}")
        if not isinstance(self.radial_max, str) and self.radial_max <= self.radial_min:
            raise ConfigError(f"{source}: '{_join(prefix, 'radial_max')}' ({self.radial_max}) must exceed "
                              f"'{_join(prefix, 'radial_min')}' ({self.radial_min})")


@dataclass(frozen=True)
class ProfileConfig:
    bin_width_deg: float = rng_field(1.0, 0.05, 45.0)
    bin_arc_length: Optional[float] = rng_field(None, 0.005, 100.0, doc="m along the shell; overrides bin_width_deg")
    min_points: int = rng_field(1, 1, 10_000, doc="kept projection-top points for an 'ok' bin that has no other "
                                                  "evidence (the standard error decides otherwise)")
    reject_k: float = rng_field(3.0, 1.5, 20.0, doc="robust z-score beyond which points are rejected")
    max_iterations: int = rng_field(10, 1, 100)
    max_reject_fraction: float = rng_field(0.5, 0.0, 1.0, doc="bins rejecting more are 'suspect'")
    min_coverage: float = rng_field(0.5, 0.0, 1.0, doc="share of the circumference with ok bins")
    on_low_coverage: str = choice_field("refuse", ("refuse", "flag"))
    station_leveling: str = choice_field("adjust", ("adjust", "report"),
                                         doc="remove relative station vertical offsets, or only report them")
    max_std_error: float = rng_field(0.003, 0.0001, 1.0, doc="m: bins with a larger standard error are 'sparse'")
    max_bin_width_deg: float = rng_field(3.0, 0.05, 45.0, doc="a thin bin widens up to this (never across a gap)")


@dataclass(frozen=True)
class NoiseConfig:
    confidence: float = rng_field(0.95, 0.5, 0.999)
    pair_max_gap_deg: float = rng_field(0.2, 0.001, 5.0, doc="azimuth gap of neighbour pairs in the difference estimator")
    agreement_p: float = rng_field(0.01, 0.0, 0.5, doc="estimators disagree when the F test p-value is below this")
    agreement_ratio: float = rng_field(0.2, 0.0, 5.0, doc="... and the sigma ratio differs from 1 by more")


@dataclass(frozen=True)
class EvaluateConfig:
    input_units: str = choice_field("auto", ("auto", "m", "mm", "ft", "us_ft", "in"),
                                    doc="length unit of an evaluate input; auto: from the sibling profile.json")
    alpha: float = rng_field(0.05, 1e-6, 0.5, doc="significance level of the tests")
    screening_alpha: float = rng_field(0.01, 1e-6, 0.5, doc="false-flag rate of each screening flag on noise alone")
    r2_min: float = rng_field(0.9, 0.0, 1.0, doc="the standard's R^2 acceptance of the cosine fit (from memory)")
    order_selection: str = choice_field("auto", ("auto", "blocked_cv", "nested_f", "bic", "fixed"),
                                        doc="auto: blocked cross-validation for dense profiles, nested F for surveys")
    order: Optional[int] = rng_field(None, 1, 500, doc="the Fourier order with order_selection: fixed")
    max_order: int = rng_field(30, 1, 500, doc="cap on the Fourier order")
    min_wavelength: float = rng_field(3.0, 0.1, 1000.0, doc="m of arc: shortest Fourier wavelength fitted")
    cv_block_deg: float = rng_field(10.0, 1.0, 90.0, doc="contiguous arc left out together in cross-validation")
    cv_folds: int = rng_field(6, 2, 20, doc="folds of the blocked cross-validation")
    deflection_spacing: Union[float, str] = rng_field("auto", 0.0, 1e4, lo_open=True,
                                                      doc="m of arc between a point and its neighbours (dense), or auto")
    curvature_smoothing: Union[float, str] = rng_field("auto", 0.0, 1e4, lo_open=True,
                                                       doc="m: spacing the curvature screening is smoothed at; auto: L")
    dip_min_length: float = rng_field(1.0, 0.05, 50.0, doc="m: shorter features are plate texture, not dips")
    min_evidence_coverage: float = rng_field(0.9, 0.0, 1.0, doc="share of the circumference a check needs")
    survey_std_error: float = rng_field(0.0015, 0.0, 0.1, doc="m, 1 sigma of a survey reading (floor when estimated)")
    curvature_step_deg: float = rng_field(0.5, 0.01, 10.0, doc="azimuth step of the evaluation grid")
    arc_table: Optional[str] = None  # permissible settled-arc table (YAML path), illustrative-demo, or none
    survey_center: Optional[tuple[float, float]] = rng_field(None, -1e9, 1e9,
                                                             doc="for x y z surveys, file units; None: fitted circle")
    start_azimuth_deg: float = rng_field(0.0, 0.0, 360.0, doc="azimuth of point 1 in numbered surveys")
    survey_points: Optional[int] = rng_field(None, 4, 1000, doc="numbered surveys: points around the tank "
                                                                 "(default: the highest number)")
    decimate: Optional[int] = rng_field(None, 4, 360, doc="points of a simulated conventional survey taken from a "
                                                          "dense profile")
    decimate_start_deg: Union[float, str] = rng_field(0.0, 0.0, 360.0, doc='or "all": every start within one spacing')

    def _check(self, prefix, source):
        if self.order_selection == "fixed" and self.order is None:
            raise ConfigError(f"{source}: '{_join(prefix, 'order')}' is required with order_selection: fixed")
        if self.order is not None and not (isinstance(self.order, int) and 1 <= self.order <= 500):
            raise ConfigError(f"{source}: '{_join(prefix, 'order')}' must be an int in [1, 500], got {clip_repr(self.order)}")
        for key in ("deflection_spacing", "curvature_smoothing"):
            v = getattr(self, key)
            if isinstance(v, str) and v != "auto":
                raise ConfigError(f"{source}: '{_join(prefix, key)}' must be a number (m) or 'auto', got {clip_repr(v)}")
            if not isinstance(v, str) and not (0 < v < 1e4):
                raise ConfigError(f"{source}: '{_join(prefix, key)}' must be a number of metres in (0, 10000) or "
                                  f"'auto', got {clip_repr(v)}")
        if self.decimate is not None and not (isinstance(self.decimate, int) and 4 <= self.decimate <= 360):
            raise ConfigError(f"{source}: '{_join(prefix, 'decimate')}' must be an int in [4, 360], got {clip_repr(self.decimate)}")
        if self.survey_points is not None and not (isinstance(self.survey_points, int) and 4 <= self.survey_points <= 1000):
            raise ConfigError(f"{source}: '{_join(prefix, 'survey_points')}' must be an int in [4, 1000], got "
                              f"{clip_repr(self.survey_points)}")
        d = self.decimate_start_deg
        if isinstance(d, str) and d != "all":
            raise ConfigError(f"{source}: '{_join(prefix, 'decimate_start_deg')}' must be degrees or 'all', got {clip_repr(d)}")
        if not isinstance(d, str) and not (0 <= d < 360):
            raise ConfigError(f"{source}: '{_join(prefix, 'decimate_start_deg')}' must be degrees in [0, 360) or "
                              f"'all', got {clip_repr(d)}")


@dataclass(frozen=True)
class OutputConfig:
    length_unit: str = choice_field("input", ("input", "m", "mm", "ft", "us_ft", "in"))
    plots: bool = True
    pdf: bool = False  # also print report.html to report.pdf with headless Chromium


#: radius tolerance by nominal diameter, from memory of API 650 7.5.3 (stated there at 1 ft above the bottom corner
#: weld): rows [smallest diameter m, +- tolerance m]; < 40 ft: 1/2 in, 40-150 ft: 3/4 in, 150-250 ft: 1 in,
#: >= 250 ft: 1-1/4 in. Verify against the governing edition.
RADIUS_TOLERANCE_TABLE = [[0.0, 0.0127], [12.192, 0.01905], [45.72, 0.0254], [76.2, 0.03175]]
PLUMB_RULES = ("reconstruction", "new_construction")


@dataclass(frozen=True)
class GeometryConfig:
    enabled: bool = True  # measure out-of-plumbness, roundness and the deviation map from the shell face
    face_budget: int = rng_field(800_000, 10_000, 100_000_000, doc="shell-face points kept at all heights from the "
                                                                    "whole scan (bounds memory)")
    face_band: float = rng_field(0.15, 0.02, 2.0, doc="m either side of the fitted shell kept while streaming")
    azimuth_step_deg: float = rng_field(1.0, 0.1, 10.0, doc="azimuth bins of the roundness and the deviation map")
    height_step: float = rng_field(0.25, 0.05, 2.0, doc="m, height rows of the deviation map")
    band_height: float = rng_field(0.2, 0.05, 1.0, doc="m, height of the band averaged at each measuring height")
    edge_margin: float = rng_field(0.1, 0.0, 1.0, doc="m between a measuring band and a course seam or the shell top")
    min_points: int = rng_field(8, 3, 100_000, doc="face points a bin, cell or plumb line needs; fewer is a gap")
    reject_k: float = rng_field(3.5, 2.0, 20.0, doc="robust z-score beyond which face points are rejected")
    course_height: float = rng_field(2.4, 0.5, 5.0, doc="m, equal courses unless course_heights is given")
    course_heights: Optional[tuple[float, ...]] = rng_field(None, 0.3, 10.0, doc="m per course, bottom first")
    plumb_step_deg: float = rng_field(10.0, 1.0, 90.0, doc="azimuth step of the vertical plumb lines")
    plumb_reference_height: float = rng_field(0.3, 0.05, 3.0, doc="m above the junction: the bottom of each line")
    plumb_tolerance: Union[float, str] = rng_field("reconstruction", 0.0, 1.0, lo_open=True,
                                                   doc="reconstruction | new_construction | m")
    vertical_reference_sigma: float = rng_field(2e-5, 0.0, 0.01, doc="rad, 1 sigma per axis of the scan's vertical "
                                                                      "(levelling, registration)")
    registration_sigma_prior: float = rng_field(0.002, 0.0, 0.05, doc="m, 1 sigma plan shift of a station's points "
                                                                       "(registration) assumed where not observed")
    roundness_heights: Union[str, tuple[float, ...]] = rng_field("auto", 0.05, 100.0,
                                                                 doc="auto: 0.3 m and each course's mid-height; or m")
    roundness_reference: str = choice_field("fitted", ("fitted", "nominal"),
                                            doc="radius deviation from the fitted circle, or from tank.diameter / 2")
    radius_tolerance_table: tuple[tuple[float, float], ...] = rng_field(RADIUS_TOLERANCE_TABLE, 0.0, 1000.0,
                                                                        doc="[smallest diameter m, tolerance m]")
    fourier_max_mode: int = rng_field(8, 2, 60, doc="highest Fourier mode of the radius reported per height")

    def _check(self, prefix, source):
        t = self.plumb_tolerance
        if isinstance(t, str) and t not in PLUMB_RULES:
            raise ConfigError(f"{source}: '{_join(prefix, 'plumb_tolerance')}' must be {' or '.join(PLUMB_RULES)} "
                              f"or a length in m, got {clip_repr(t)}")
        if not isinstance(t, str) and not 0 < t <= 1.0:
            raise ConfigError(f"{source}: '{_join(prefix, 'plumb_tolerance')}' must be a length in (0, 1] m, got {clip_repr(t)}")
        h = self.roundness_heights
        if isinstance(h, str) and h != "auto":
            raise ConfigError(f"{source}: '{_join(prefix, 'roundness_heights')}' must be 'auto' or a list of heights "
                              f"in m, got {clip_repr(h)}")
        if not isinstance(h, str) and (not h or any(not 0.05 <= v <= 100.0 for v in h)):
            raise ConfigError(f"{source}: '{_join(prefix, 'roundness_heights')}' must be 'auto' or a list of heights "
                              f"in [0.05, 100] m, got {clip_repr(list(h))}")
        rows = self.radius_tolerance_table
        if not rows or rows[0][0] != 0 or any(b[0] <= a[0] for a, b in zip(rows, rows[1:])):
            raise ConfigError(f"{source}: '{_join(prefix, 'radius_tolerance_table')}' must list [smallest diameter m, "
                              f"tolerance m] rows starting at 0 with increasing diameters, got "
                              f"{clip_repr([list(r) for r in rows])}")
        if any(r[1] <= 0 for r in rows):
            raise ConfigError(f"{source}: '{_join(prefix, 'radius_tolerance_table')}' tolerances must be > 0 m, got "
                              f"{clip_repr([list(r) for r in rows])}")


@dataclass(frozen=True)
class ChimelineConfig:
    """The whole run configuration: one section per stage plus the tank data and the evaluation."""

    seed: int = rng_field(0, 0, 2**63 - 1)
    input: InputConfig = field(default_factory=InputConfig)
    frame: FrameConfig = field(default_factory=FrameConfig)
    tank: TankConfig = field(default_factory=TankConfig)
    shell: ShellConfig = field(default_factory=ShellConfig)
    junction: JunctionConfig = field(default_factory=JunctionConfig)
    profile: ProfileConfig = field(default_factory=ProfileConfig)
    noise: NoiseConfig = field(default_factory=NoiseConfig)
    output: OutputConfig = field(default_factory=OutputConfig)
    evaluate: EvaluateConfig = field(default_factory=EvaluateConfig)
    geometry: GeometryConfig = field(default_factory=GeometryConfig)


def load_config(path=None, sets=(), *, mapping: dict | None = None,
                mapping_source: str = "") -> tuple[ChimelineConfig, dict, str]:
    """Resolve the config: embedded default, then the file (or an already loaded ``mapping``), then --set pairs.

    Returns the validated config, the resolved mapping and the source label used in messages.
    """
    base = default_mapping()
    source = "default config"
    if path is not None:
        user = load_yaml(path)
        base = deep_update(base, user)
        source = str(path)
    elif mapping is not None:
        base = deep_update(base, mapping)
        source = mapping_source or "config"
    if sets:
        build(ChimelineConfig, base, "", source)  # the file (or earlier run) alone: its errors name it
        base = merge_sets(base, sets)
        cfg = build(ChimelineConfig, base, "", "--set")  # what fails now comes from a --set pair
        source = f"{source} with --set" if path is None else source
    else:
        cfg = build(ChimelineConfig, base, "", source)
    return cfg, to_dict(cfg), source

