"""Config schema: the embedded default, unknown keys, types, ranges, --set merging."""
import dataclasses
import importlib.resources
import re

import pytest
import yaml

from chimeline.config import ChimelineConfig, default_yaml_text, load_config, parse_set_pairs, to_dict
from chimeline.errors import ConfigError
from tests.helpers import ROOT


def test_embedded_default_matches_schema_and_copy():
    cfg, resolved, _ = load_config()
    assert to_dict(cfg) == to_dict(ChimelineConfig())  # the YAML states the schema's defaults
    assert (ROOT / "configs" / "default.yaml").read_text() == default_yaml_text()


def test_example_configs_validate():
    """Every example in configs/ is valid: configs through the schema, batch manifests (a ``jobs`` list) through
    the manifest parser and each job's config."""
    import yaml

    from chimeline.io.batch_manifest import read_batch_manifest
    from chimeline.workflows.batch import check_jobs

    manifests = 0
    for p in sorted((ROOT / "configs").glob("*.yaml")):
        if "jobs" in (yaml.safe_load(p.read_text()) or {}):
            check_jobs(read_batch_manifest(p).jobs)
            manifests += 1
        else:
            load_config(p)
    assert manifests >= 1  # configs/fleet_demo.yaml


BAD_VALUES = [
    ("seed", -1), ("input.units", "yards"), ("input.chunk_size", 5), ("input.max_nonfinite_fraction", 2),
    ("input.up_axis", "x"), ("frame.azimuth_direction", "left"), ("frame.azimuth_reference_deg", 500),
    ("tank.roof", "dome"), ("shell.sample_points", 10), ("shell.voxel_size", 0), ("shell.max_normal_z", 2),
    ("shell.min_radius", 0.0), ("shell.max_trials", -3), ("shell.inlier_tolerance", 5), ("shell.max_tanks", 0),
    ("shell.max_tilt_deg", 45), ("junction.radial_min", -0.1), ("junction.radial_max", "wide"),
    ("junction.height_gate", 2), ("junction.sector_deg", 0.1), ("profile.bin_width_deg", 0), ("profile.min_points", 0),
    ("profile.reject_k", 1), ("profile.on_low_coverage", "ignore"), ("profile.station_leveling", "yes"),
    ("noise.confidence", 1.5), ("noise.pair_max_gap_deg", 0), ("output.length_unit", "cubit"), ("output.plots", "yes"),
    ("input.skip_withheld", "yes"), ("input.skip_classes", "noise"), ("input.columns.x", -1),
    ("input.columns.station", 1.5), ("input.units_priority", "both"),
]


@pytest.mark.parametrize("key,value", BAD_VALUES)
def test_invalid_value_names_the_dotted_key(key, value):
    with pytest.raises(ConfigError) as e:
        load_config(None, [(key, value)])
    assert f"'{key}'" in str(e.value)
    assert repr(value) in str(e.value)


def _generated_bad_values():
    """One out-of-range or not-allowed value for every ranged or choice key of every section."""
    out = []
    cfg = ChimelineConfig()
    for sec in dataclasses.fields(ChimelineConfig):
        obj = getattr(cfg, sec.name)
        if not dataclasses.is_dataclass(obj):
            continue
        for f in dataclasses.fields(obj):
            md = f.metadata
            key = f"{sec.name}.{f.name}"
            if md.get("choices"):
                out.append((key, "not-a-choice"))
            elif md.get("min") is not None:
                lo = md["min"]
                out.append((key, lo if md.get("min_open") else lo - 1))
            elif md.get("max") is not None:
                out.append((key, md["max"] + 1))
    return out


@pytest.mark.parametrize("key,value", _generated_bad_values())
def test_every_ranged_key_rejects_out_of_range(key, value):
    with pytest.raises(ConfigError) as e:
        load_config(None, [(key, value)])
    assert f"'{key}'" in str(e.value)


def test_generated_cases_cover_the_stage_sections():
    keys = {k.split(".")[0] for k, _ in _generated_bad_values()}
    assert {"input", "frame", "shell", "junction", "profile", "noise", "output", "evaluate", "geometry"} <= keys


def test_unknown_key_suggests_the_nearest():
    with pytest.raises(ConfigError, match=r"unknown key 'shell.max_trails' \(did you mean 'shell.max_trials'\?\)"):
        load_config(None, [("shell.max_trails", 10)])


def test_choice_typo_suggests():
    with pytest.raises(ConfigError, match="did you mean 'refuse'"):
        load_config(None, [("profile.on_low_coverage", "refus")])


def test_cross_key_check():
    with pytest.raises(ConfigError, match="shell.min_radius"):
        load_config(None, [("shell.min_radius", 50), ("shell.max_radius", 40)])


def test_file_errors_name_the_file(tmp_path):
    p = tmp_path / "c.yaml"
    p.write_text("profile: [1, 2\n")
    with pytest.raises(ConfigError, match=str(p)):
        load_config(p)
    p.write_text("profile:\n  bin_width_deg: -1\n")
    with pytest.raises(ConfigError, match=rf"{p}: 'profile.bin_width_deg'"):
        load_config(p)
    with pytest.raises(ConfigError, match="not found"):
        load_config(tmp_path / "missing.yaml")


def test_set_pairs_parse_yaml_values():
    assert parse_set_pairs(["a.b=1", "c=[1, 2]", "d.e=auto"]) == [("a.b", 1), ("c", [1, 2]), ("d.e", "auto")]
    for bad in ["nokey", "=3", "a..b=1"]:
        with pytest.raises(ValueError):
            parse_set_pairs([bad])


def test_set_overrides_file(tmp_path):
    p = tmp_path / "c.yaml"
    p.write_text(yaml.safe_dump({"profile": {"bin_width_deg": 2.0, "min_points": 7}}))
    cfg, _, _ = load_config(p, [("profile.bin_width_deg", 0.5)])
    assert cfg.profile.bin_width_deg == 0.5 and cfg.profile.min_points == 7


def test_demo_config_is_packaged_verbatim():
    packaged = importlib.resources.files("chimeline").joinpath("data/demo_config.yaml").read_text()
    assert (ROOT / "configs" / "demo.yaml").read_text() == packaged
    cfg, _, _ = load_config(ROOT / "configs" / "demo.yaml")
    assert cfg.tank.tag == "GM-TK-07" and cfg.evaluate.decimate == 10


def test_load_config_from_a_mapping_names_its_source():
    cfg, resolved, source = load_config(mapping={"profile": {"bin_width_deg": 2.0}}, mapping_source="runs/a/x.yaml")
    assert cfg.profile.bin_width_deg == 2.0 and source == "runs/a/x.yaml"
    with pytest.raises(ConfigError, match="runs/a/x.yaml: 'profile.bin_width_deg'"):
        load_config(mapping={"profile": {"bin_width_deg": -2.0}}, mapping_source="runs/a/x.yaml")


def _numeric_fields(cls, prefix=""):
    """(dotted key, metadata) of every numeric field (int, float, tuples of them, optional or with a text form) of a
    schema dataclass and its nested sections."""
    import typing

    out = []
    hints = typing.get_type_hints(cls)
    for f in dataclasses.fields(cls):
        tp = hints[f.name]
        args = [a for a in typing.get_args(tp) if a is not type(None)] or [tp]
        inner = [typing.get_args(a)[0] if typing.get_origin(a) is tuple and typing.get_args(a) else a for a in args]
        if any(dataclasses.is_dataclass(a) for a in inner):
            for a in inner:
                if dataclasses.is_dataclass(a):
                    out += _numeric_fields(a, f"{prefix}{f.name}.")
        elif any(a in (int, float) for a in inner):
            out.append((f"{prefix}{f.name}", f.metadata))
    return out


def test_every_numeric_key_has_a_finite_range():
    """Config and simulator scene: no number is unbounded (an unchecked bin_arc_length once asked for 281 GiB)."""
    from chimeline.synth.scene import Scene

    keys = _numeric_fields(ChimelineConfig) + [(f"scene:{k}", md) for k, md in _numeric_fields(Scene)]
    assert len(keys) > 80
    unbounded = [k for k, md in keys if md.get("min") is None or md.get("max") is None
                 or not all(map(lambda v: abs(v) < float("inf"), (md["min"], md["max"])))]
    assert unbounded == []


@pytest.mark.parametrize("text,phrase", [
    ("profile: " + "[" * 40 + "]" * 40, "nested deeper than 32 levels"),
    ("a: &a [1, 2, 3, 4, 5, 6, 7, 8, 9, 10]\n" + "".join(
        f"{c}: &{c} [" + ", ".join([f"*{p}"] * 10) + "]\n" for p, c in zip("abcde", "bcdef")), "alias bomb"),
    ("a: &a [*a]\n", "its own ancestor"),
    ("profile:\n  min_points: 4\n  min_points: 5\n", "line 3: duplicate key 'min_points'"),
    ("tank:\n  survey_date: 2026-13-45\n", "'tank.survey_date' must be a calendar date YYYY-MM-DD"),
    ("tank:\n  survey_date: 2025-02-29\n", "'tank.survey_date'"),  # not a leap year
    ("tank:\n  diameter: '10**10**10 m'\n", "'tank.diameter' must be a number and a unit"),
    ("seed: !!float\n", "cannot be read"),
])
def test_yaml_limits_and_dates(tmp_path, text, phrase):
    p = tmp_path / "c.yaml"
    p.write_text(text)
    with pytest.raises(ConfigError, match=re.escape(phrase)) as e:
        load_config(p)
    assert str(e.value).startswith(str(p)) and len(str(e.value)) < 300


def test_valid_dates_and_anchors_still_load(tmp_path):
    p = tmp_path / "c.yaml"
    p.write_text("tank:\n  survey_date: 2024-02-29\n  tag: &t TK-9\nprofile: {min_points: 5}\n")
    cfg, resolved, _ = load_config(p)
    assert cfg.tank.survey_date == "2024-02-29" and resolved["tank"]["survey_date"] == "2024-02-29"


def test_values_are_clipped_in_messages():
    huge = ["x" * 1000] * 1000
    with pytest.raises(ConfigError) as e:
        load_config(None, [("tank.tag", huge)])
    assert len(str(e.value)) < 200 and "..." in str(e.value)


def test_set_merges_a_mapping_into_its_section_and_refuses_resetting_it(tmp_path):
    p = tmp_path / "c.yaml"
    p.write_text("profile:\n  min_points: 7\n")
    cfg, _, _ = load_config(p, [("profile", {"bin_width_deg": 2.0})])
    assert cfg.profile.min_points == 7 and cfg.profile.bin_width_deg == 2.0  # merged, not replaced
    with pytest.raises(ConfigError, match="--set profile: 'profile' is a section"):
        load_config(p, [("profile", None)])
