"""Property-based tests (hypothesis) of the config loader and the --set parser: whatever the text or the data,
the result is a valid config or one ConfigError (ValueError for a malformed --set pair), never another
exception; a value inside a key's range is accepted unchanged."""
import dataclasses
import math
import typing

import pytest
import yaml
from hypothesis import given
from hypothesis import strategies as st

from chimeline.config import ChimelineConfig, load_config, parse_set_pairs, parse_yaml, to_dict
from chimeline.errors import ConfigError

SECTIONS = {n: tp for n, tp in typing.get_type_hints(ChimelineConfig).items() if dataclasses.is_dataclass(tp)}
KEYS = sorted({f.name for tp in SECTIONS.values() for f in dataclasses.fields(tp)} | set(SECTIONS) | {"seed"})
RANGED = [(f"{s}.{f.name}", f.metadata, typing.get_type_hints(tp)[f.name]) for s, tp in SECTIONS.items()
          for f in dataclasses.fields(tp) if f.metadata.get("min") is not None]

scalars = (st.none() | st.booleans() | st.integers(-10**30, 10**30) | st.floats(allow_nan=True, allow_infinity=True)
           | st.text(max_size=30) | st.sampled_from(["auto", "36 ksi", "40 ft", "2026-13-45", "2026-06-15", "all"]))
keys = st.sampled_from(KEYS) | st.text(min_size=1, max_size=12)
values = st.recursive(scalars, lambda inner: st.lists(inner, max_size=4) | st.dictionaries(keys, inner, max_size=5),
                      max_leaves=25)
sections = st.dictionaries(st.sampled_from(sorted(SECTIONS) + ["seed"]) | keys, values, max_size=6)


def _check_valid(cfg):
    """A config that loaded has only finite numbers and every ranged value inside its range."""
    flat = []

    def walk(v):
        if isinstance(v, dict):
            for x in v.values():
                walk(x)
        elif isinstance(v, (list, tuple)):
            for x in v:
                walk(x)
        elif isinstance(v, float):
            flat.append(v)

    walk(to_dict(cfg))
    assert all(math.isfinite(v) for v in flat)
    for key, md, _ in RANGED:
        sec, name = key.split(".")
        v = getattr(getattr(cfg, sec), name)
        for x in (v if isinstance(v, tuple) else (v,)):
            if isinstance(x, (int, float)) and not isinstance(x, bool):
                assert md["min"] <= x <= md["max"], (key, x)


@given(sections)
def test_any_mapping_gives_a_config_or_one_config_error(data):
    try:
        cfg, _, _ = load_config(mapping=data, mapping_source="generated")
    except ConfigError as exc:
        assert str(exc).startswith("generated: ") and len(str(exc)) < 400
        return
    _check_valid(cfg)


#: pieces of YAML syntax, so that generated text reaches tags, anchors, merges and number forms, not only the
#: scanner's first error
TOKENS = ["!!int ", "!!float ", "!!binary ", "!!str ", "!!map ", "!!seq ", "!!timestamp ", "!!python/name:os ", "0b",
          "0x", "0o", "1_0", ".5", "1e9", ".inf", "-.nan", "2026-13-45", "a", "profile", "seed", ": ", "- ", "[", "]",
          "{", "}", ", ", "&a ", "*a", "<<: ", "? ", "\n", "\n  ", " ", "'", '"', "~", "null", "yes", "#", "|", ">"]


@given(st.text(alphabet=st.characters(codec="utf-8") | st.sampled_from(list("[]{}:&*-!?,|>'\"#%@` \n\t")),
               max_size=300) | st.lists(st.sampled_from(TOKENS), max_size=40).map("".join))
def test_any_text_parses_or_is_one_config_error(text):
    try:
        parse_yaml(text, "t.yaml")
    except ConfigError as exc:
        assert str(exc).startswith("t.yaml: ")


@given(sections)
def test_a_dumped_mapping_read_back_as_a_file(tmp_path, data):
    p = tmp_path / "c.yaml"
    p.write_text(yaml.safe_dump(data))
    try:
        cfg, _, _ = load_config(p)
    except ConfigError as exc:
        assert str(p) in str(exc) or str(exc).startswith(f"{p}")
        return
    _check_valid(cfg)


@given(st.lists(st.text(max_size=40) | st.tuples(st.sampled_from(KEYS), st.lists(st.sampled_from(TOKENS), max_size=8)
                                                 ).map(lambda t: f"{t[0]}={''.join(t[1])}"), max_size=4))
def test_any_set_pairs_parse_or_fail_cleanly(pairs):
    try:
        parsed = parse_set_pairs(pairs)
    except ValueError as exc:
        assert "--set" in str(exc)
        return
    assert len(parsed) == len(pairs)
    try:
        cfg, _, _ = load_config(None, parsed)
    except ConfigError as exc:
        assert str(exc).startswith("--set")
        return
    _check_valid(cfg)


@st.composite
def in_range(draw):
    key, md, tp = draw(st.sampled_from(RANGED))
    args = [a for a in typing.get_args(tp) if a is not type(None)] or [tp]
    is_int = int in args or any(typing.get_args(a) and typing.get_args(a)[0] is int for a in args)
    lo = md["min"]
    if is_int:
        v = draw(st.integers(int(math.ceil(lo)) + (1 if md.get("min_open") else 0), int(md["max"])))
    else:
        v = draw(st.floats(lo, md["max"], exclude_min=bool(md.get("min_open"))))
    arity = next((len(typing.get_args(a)) for a in args if typing.get_origin(a) is tuple), 0)
    return key, (tuple([v] * arity) if arity else v)


@given(in_range())
def test_a_value_inside_its_range_is_accepted_unchanged(kv):
    key, v = kv
    text = f"[{', '.join(repr(x) for x in v)}]" if isinstance(v, tuple) else repr(v)
    sets = parse_set_pairs([f"{key}={text}"])
    if key == "evaluate.order":
        sets.append(("evaluate.order_selection", "fixed"))
    try:
        cfg, _, _ = load_config(None, sets)
    except ConfigError as exc:  # only the cross-key checks may refuse a value inside its own range
        assert any(k in str(exc) for k in ("min_radius", "max_radius", "radial_max", "radial_min")), str(exc)
        return
    sec, name = key.split(".")
    got = getattr(getattr(cfg, sec), name)
    assert got == v or (isinstance(v, float) and got == pytest.approx(v, rel=1e-15))
