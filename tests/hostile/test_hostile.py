"""The hostile-input suite: every kind of bad input the commands met in the field, generated from the config
schema where possible. Each case asserts exit code 2, exactly one line on stderr (no traceback, no internal
error), and that the output folder and everything beside it are exactly as before.

Most cases run in-process (click's CliRunner); a few run as real processes, where text that C libraries print
and Python warnings would reach the terminal.
"""
from __future__ import annotations

import dataclasses
import json
import os
import shutil
import subprocess
import sys
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Optional

import numpy as np
import pytest
from click.testing import CliRunner

from chimeline.config import ChimelineConfig
from chimeline.io.atomic import FolderLock
from tests.helpers import ROOT, make_immutable
from tests.hostile.conftest import TANK, survey_rows


@dataclass(frozen=True)
class Case:
    id: str
    argv: tuple  # arguments; "{name}" placeholders: scan, survey, scene, dir (the case folder), out, src, src2
    target: str = "run"  # what --out holds before: run, evaluation, compare, scans or none
    files: dict = field(default_factory=dict)  # case-folder files: name -> str, bytes or f(paths) -> str/bytes
    phrase: str = ""  # expected in the message
    prepare: Optional[Callable] = None  # f(paths) before the command (corrupt a copied run, take a lock, ...)


def run_args(*extra, target="run", **kw):
    return Case(argv=("run", "{scan}", "--out", "{out}", *extra), target=target, **kw)


def ev_args(*extra, inp="{dir}/s.csv", **kw):
    return Case(argv=("evaluate", inp, "--out", "{out}", *extra), target="evaluation", **kw)


def csv_text(header, rows):
    return header + "\n" + "\n".join(",".join(map(str, r)) for r in rows) + "\n"


SURVEY = csv_text("azimuth_deg,elevation", survey_rows())


# ---------------------------------------------------------------------------
# 1. every numeric and choice key of the config, through --set (generated from the schema)


def _numeric_arity(tp):
    """(is numeric, tuple length or 0) of a field type, through Optional/Union."""
    args = [a for a in typing.get_args(tp) if a is not type(None)] or [tp]
    for a in args:
        if typing.get_origin(a) is tuple:
            return True, len(typing.get_args(a))
        if a in (int, float):
            return True, 0
    return False, 0


def _config_cases():
    out = []
    sections = {name: tp for name, tp in typing.get_type_hints(ChimelineConfig).items() if dataclasses.is_dataclass(tp)}
    for sname, cls in sections.items():
        hints = typing.get_type_hints(cls)
        for f in dataclasses.fields(cls):
            key = f"{sname}.{f.name}"
            md = f.metadata
            if md.get("choices"):
                out.append((key, "not-a-choice"))
                continue
            numeric, arity = _numeric_arity(hints[f.name])
            if not numeric or md.get("min") is None:
                continue
            lo, hi = md["min"], md["max"]
            values = [lo if md.get("min_open") else lo - abs(lo) / 2 - 1, hi + abs(hi) + 1, ".nan", "-.inf"]
            for v in values:
                text = v if isinstance(v, str) else repr(float(v))
                out.append((key, f"[{', '.join([text] * arity)}]" if arity else text))
    return out


CONFIG_SET_CASES = [run_args("--set", f"{k}={v}", id=f"set-{k}={v}"[:70], phrase=f"'{k}" + ("[0]'" if v[0] == "[" else "'"))
                    for k, v in _config_cases()]


# ---------------------------------------------------------------------------
# 2. hostile values and --set pairs

def _bomb(levels, key_line):
    text = 'a: &a ["x","x","x","x","x","x","x","x","x"]\n'
    names = "abcdefghijk"
    for i in range(1, levels):
        text += f"{names[i]}: &{names[i]} [" + ",".join([f"*{names[i - 1]}"] * 9) + "]\n"
    return text + key_line.replace("*LAST", f"*{names[levels - 1]}")


VALUE_CASES = [
    run_args("--set", "tank.survey_date=2026-13-45", id="date-month-13", phrase="'tank.survey_date'"),
    run_args("--set", "tank.survey_date=2026-02-30", id="date-feb-30", phrase="'tank.survey_date'"),
    run_args("--set", "tank.survey_date=yesterday", id="date-word", phrase="'tank.survey_date'"),
    run_args("--set", "tank.survey_date=20260615", id="date-number", phrase="'tank.survey_date'"),
    run_args("--set", "tank.diameter=10**10**10 m", id="unit-expression", phrase="number and a unit"),
    run_args("--set", "tank.yield_strength=1e999 ksi", id="unit-overflow", phrase="'tank.yield_strength'"),
    run_args("--set", "tank.yield_strength=36 ksi ksi", id="unit-twice", phrase="'tank.yield_strength'"),
    run_args("--set", "tank.youngs_modulus=200 kg", id="unit-wrong-dimension", phrase="must be a stress"),
    run_args("--set", "tank.shell_height=nan ft", id="unit-nan", phrase="'tank.shell_height'"),
    run_args("--set", "tank.diameter=__import__('os') m", id="unit-python", phrase="'tank.diameter'"),
    run_args("--set", "tank.center_hint=[.inf, 0]", id="center-hint-inf", phrase="'tank.center_hint[0]'"),
    run_args("--set", "tank.center_hint=[1, 2, 3]", id="center-hint-three", phrase="'tank.center_hint'"),
    run_args("--set", "evaluate.decimate_start_deg=.inf", id="decimate-start-inf", phrase="decimate_start_deg"),
    run_args("--set", "evaluate.deflection_spacing=.inf", id="deflection-spacing-inf", phrase="deflection_spacing"),
    run_args("--set", "evaluate.deflection_spacing=wide", id="deflection-spacing-word", phrase="deflection_spacing"),
    run_args("--set", "profile.bin_arc_length=1e-9", id="bin-arc-tiny", phrase="'profile.bin_arc_length'"),
    run_args("--set", "profile.bin_arc_length=0", id="bin-arc-zero", phrase="'profile.bin_arc_length'"),
    run_args("--set", "seed=" + "9" * 5000, id="seed-5000-digits", phrase="--set seed"),
    run_args("--set", "profile=", id="set-whole-section-empty", phrase="is a section"),
    run_args("--set", "profile=3", id="set-whole-section-number", phrase="is a section"),
    run_args("--set", "tank.tag.x=1", id="set-below-a-value", phrase="is not a section"),
    run_args("--set", "profile={bin_width_deg: -1}", id="set-section-mapping-bad", phrase="'profile.bin_width_deg'"),
    run_args("--set", "novalue", id="set-without-equals", phrase="KEY=VALUE"),
    run_args("--set", "a..b=1", id="set-empty-key-part", phrase="KEY=VALUE"),
    run_args("--set", "=1", id="set-empty-key", phrase="KEY=VALUE"),
    run_args("--set", "profile.bin_width_deg=" + "[" * 100 + "]" * 100, id="set-deep-value", phrase="nested deeper"),
    run_args("--set", "x={a: 1, a: 2}", id="set-duplicate-key", phrase="duplicate key"),
    run_args("--set", "tank.tag=" + "[" + ",".join(["1"] * 50) + "]", id="set-list-for-string", phrase="'tank.tag'"),
    run_args("--set", "profile.bin_widht_deg=1", id="set-typo", phrase="did you mean 'profile.bin_width_deg'"),
    run_args("--set", "tank.tag=!!float", id="set-empty-float-tag", phrase="cannot be read"),
    run_args("--set", "seed=!!int 0b", id="set-empty-binary-int", phrase="cannot be read"),
    run_args("--set", "shell.min_radius=50", "--set", "shell.max_radius=40", id="set-cross-key", phrase="min_radius"),
]


# ---------------------------------------------------------------------------
# 3. config files

def cfg(name, text, phrase):
    return run_args("--config", "{dir}/c.yaml", id=f"config-{name}", files={"c.yaml": text}, phrase=phrase)


CONFIG_FILE_CASES = [
    cfg("deep-flow-33", "profile: " + "[" * 33 + "]" * 33 + "\n", "nested deeper than 32"),
    cfg("deep-flow-100000", "profile: " + "[" * 100000 + "]" * 100000 + "\n", "nested deeper than 32"),
    cfg("deep-block-40", "".join("  " * i + f"k{i}:\n" for i in range(40)), "nested deeper than 32"),
    cfg("alias-bomb-typed-key", _bomb(9, "tank:\n  tag: *LAST\n"), "alias bomb"),
    cfg("alias-bomb-number-key", _bomb(7, "profile:\n  bin_width_deg: *LAST\n"), "alias bomb"),
    cfg("alias-small-bomb-typed", _bomb(4, "tank:\n  tag: *LAST\n").replace("a: &a", "x: &a"), "unknown key"),
    cfg("alias-recursive", "a: &a [*a]\n", "its own ancestor"),
    cfg("duplicate-section", "profile:\n  min_points: 4\nprofile:\n  min_points: 5\n", "duplicate key 'profile'"),
    cfg("duplicate-key", "profile:\n  min_points: 4\n  min_points: 5\n", "duplicate key 'min_points'"),
    cfg("root-list", "- 1\n- 2\n", "must be a mapping"),
    cfg("root-scalar", "42\n", "must be a mapping"),
    cfg("syntax-bracket", "profile: [1, 2\n", "not valid YAML"),
    cfg("syntax-tab", "profile:\n\tbin_width_deg: 1\n", "not valid YAML"),
    cfg("syntax-quote", "tank:\n  tag: 'open\n", "not valid YAML"),
    cfg("two-documents", "seed: 1\n---\nseed: 2\n", "not valid YAML"),
    cfg("nul-byte", "seed: 1\x00\n", "not valid YAML"),
    cfg("binary", bytes(range(256)) * 8, "cannot read config"),
    cfg("huge", "# padding\n" * 120_000, "larger than 1024 KiB"),
    cfg("date-impossible", "tank:\n  survey_date: 2026-13-45\n", "'tank.survey_date'"),
    cfg("date-timestamp", "tank:\n  survey_date: 2026-06-15 10:00:00\n", "'tank.survey_date'"),
    cfg("unit-expression", "tank:\n  diameter: '10**10**10 m'\n", "'tank.diameter'"),
    cfg("section-scalar", "profile: 3\n", "'profile' must be a mapping"),
    cfg("unknown-section", "profiles:\n  bin_width_deg: 2\n", "did you mean 'profile'"),
    cfg("bigint", "seed: " + "9" * 6000 + "\n", "cannot be read"),
    cfg("bool-for-number", "profile:\n  bin_width_deg: yes\n", "'profile.bin_width_deg'"),
    cfg("inf-range", "noise:\n  confidence: .inf\n", "'noise.confidence'"),
    cfg("merge-key-unknown", "base: &b {bin_width_deg: 2}\nprofile:\n  <<: *b\n", "unknown key 'base'"),
    cfg("long-key", "profile:\n  " + "k" * 5000 + ": 1\n", "not valid YAML"),
    cfg("long-explicit-key", "profile:\n  ? " + "k" * 5000 + "\n  : 1\n", "unknown key 'profile.kkkk"),
    run_args("--config", "{dir}", id="config-is-a-folder", phrase="is a directory"),
    run_args("--config", "{dir}/missing.yaml", id="config-missing", phrase="config file not found"),
]


# ---------------------------------------------------------------------------
# 4. scans

def _las_cut(fraction):
    return lambda p: Path(p["scan"]).read_bytes()[: int(Path(p["scan"]).stat().st_size * fraction)]


def _patch(p, offset, new: bytes):
    b = bytearray(Path(p["scan"]).read_bytes())
    b[offset:offset + len(new)] = new
    return bytes(b)


def _ply(n, props, body, fmt="binary_little_endian"):
    head = f"ply\nformat {fmt} 1.0\nelement vertex {n}\n" + "".join(f"property {t} {k}\n" for t, k in props)
    return (head + "end_header\n").encode() + body


XYZ3 = [("double", "x"), ("double", "y"), ("double", "z")]
_rng = np.random.default_rng(5)
_pts = _rng.normal(size=(2000, 3))


def _npy(arr):
    import io

    buf = io.BytesIO()
    np.save(buf, arr, allow_pickle=arr.dtype == object)
    return buf.getvalue()


def scan_case(name, fname, content, phrase):
    return Case(argv=("run", "{dir}/" + fname, "--out", "{out}"), id=f"scan-{name}", files={fname: content},
                phrase=phrase)


SCAN_CASES = [
    Case(argv=("run", "{dir}/missing.las", "--out", "{out}"), id="scan-missing", phrase="scan file not found"),
    Case(argv=("run", "{dir}/empty", "--out", "{out}"), id="scan-folder-without-scans", files={"empty/notes.doc": "x"},
         phrase="holds no scan files"),
    scan_case("empty", "s.las", b"", "the file is empty"),
    scan_case("extension", "s.dwg", b"xxxx", "unknown scan extension"),
    scan_case("las-half", "s.las", _las_cut(0.5), "truncated"),
    scan_case("las-90", "s.las", _las_cut(0.9), "truncated"),
    scan_case("las-header-only", "s.las", _las_cut(0.0002), "truncated: the header says"),
    scan_case("las-garbage", "s.las", bytes(_rng.integers(0, 256, 4000, dtype=np.uint8)), "not a LAS/LAZ file"),
    scan_case("las-vlr-count", "s.las", lambda p: _patch(p, 100, (16_056_320).to_bytes(4, "little")),
              "VLRs, but only"),
    scan_case("las-point-offset", "s.las", lambda p: _patch(p, 96, (10**9).to_bytes(4, "little")),
              "the point data offset 1000000000 lies outside the file"),
    scan_case("ply-binary-cut", "s.ply", _ply(2000, XYZ3, _pts.astype("<f8").tobytes()[:20000]), "truncated"),
    scan_case("ply-station-cut", "s.ply", _ply(2000, XYZ3 + [("ushort", "station")],
                                               np.zeros(1000, "<f8,<f8,<f8,<u2").tobytes()), "truncated"),
    scan_case("ply-ascii-cut", "s.ply", _ply(2000, XYZ3, b"1 2 3\n" * 100, "ascii"), "truncated"),
    scan_case("ply-ascii-word", "s.ply", _ply(3, XYZ3, b"1 a 3\n" * 3, "ascii"), "expected numbers"),
    scan_case("ply-no-header", "s.ply", b"\x00" * 500, "not a PLY file"),
    scan_case("pcd-cut", "s.pcd", b"VERSION 0.7\nFIELDS x y z\nSIZE 4 4 4\nTYPE F F F\nCOUNT 1 1 1\nWIDTH 100\n"
              b"HEIGHT 1\nPOINTS 100\nDATA ascii\n1 2 3\n", "truncated"),
    scan_case("pcd-no-header", "s.pcd", b"1 2 3\n", "not a PCD file"),
    scan_case("npy-strings", "s.npy", _npy(np.array([["a", "b", "c"]] * 10)), "must be a numeric"),
    scan_case("npy-object", "s.npy", _npy(np.array([[1, 2, 3]] * 10, dtype=object)), "not a readable .npy"),
    scan_case("npy-complex", "s.npy", _npy(np.ones((10, 3), complex)), "must be a numeric"),
    scan_case("npy-1d", "s.npy", _npy(np.ones(30)), "(n, 3+) array"),
    scan_case("npy-two-columns", "s.npy", _npy(np.ones((30, 2))), "(n, 3+) array"),
    scan_case("npy-all-nan", "s.npy", _npy(np.full((300, 3), np.nan)), "no point has finite coordinates"),
    scan_case("npy-not-npy", "s.npy", b"\x93NUMPY garbage", "not a readable .npy"),
    scan_case("xyz-words", "s.xyz", b"1 2 3\n4 five 6\n", "row 2"),
    scan_case("xyz-two-columns", "s.xyz", b"1 2\n3 4\n", "expected numbers in columns 0, 1, 2"),
    scan_case("csv-header-only", "s.csv", b"x,y,z\n", "no point"),
    run_args("--set", "profile.bin_arc_length=0.005", id="bin-arc-below-range-on-this-tank",
             phrase="gives bins of 0.04"),
]


# ---------------------------------------------------------------------------
# 5. evaluate: survey rows, sibling profile.json, arc tables, tank data

def ev_csv(name, text, phrase, *extra):
    return ev_args(*TANK, *extra, id=f"survey-{name}", files={"s.csv": text}, phrase=phrase)


_rows = survey_rows()
EVAL_CASES = [
    ev_csv("label-cell-missing", "azimuth_deg,elevation,label\n" + "\n".join(f"{a},{e},p{i}" for i, (a, e) in
                                                                            enumerate(_rows[:-1])) + f"\n{_rows[-1][0]},{_rows[-1][1]}\n",
           "no 'label' cell"),
    ev_csv("status-cell-missing", "azimuth_deg,elevation,std_error,status\n" + "\n".join(
        f"{a},{e},0.001,ok" for a, e in _rows[:-1]) + f"\n{_rows[-1][0]},{_rows[-1][1]},0.001\n", "no 'status' cell"),
    ev_csv("elevation-1e308", csv_text("azimuth_deg,elevation", _rows[:-1] + [(_rows[-1][0], "1e308")]), "beyond"),
    ev_csv("elevation-inf", csv_text("azimuth_deg,elevation", _rows[:-1] + [(_rows[-1][0], "inf")]), "NaN or infinite"),
    ev_csv("elevation-nan", csv_text("azimuth_deg,elevation", _rows[:-1] + [(_rows[-1][0], "nan")]), "NaN or infinite"),
    ev_csv("elevation-word", csv_text("azimuth_deg,elevation", _rows[:-1] + [(_rows[-1][0], "high")]), "not a number"),
    ev_csv("azimuth-400", csv_text("azimuth_deg,elevation", [("400", "10")] + _rows[1:]), "outside [0, 360)"),
    ev_csv("azimuth-duplicate", csv_text("azimuth_deg,elevation", _rows + [_rows[3]]), "duplicate azimuth"),
    ev_csv("three-points", csv_text("azimuth_deg,elevation", _rows[:3]), "at least 4"),
    ev_csv("header-only", "azimuth_deg,elevation\n", "no data rows"),
    ev_csv("empty", "", "the file is empty"),
    ev_csv("no-known-columns", csv_text("a,b", _rows), "needs columns"),
    ev_csv("nul-byte", "azimuth_deg,elevation\n0,10\x00\n", "not a number"),
    ev_csv("huge-cell", "azimuth_deg,elevation\n0," + "9" * 200_000 + "\n", "not a readable CSV"),
    ev_csv("std-error-zero", csv_text("azimuth_deg,elevation,std_error", [(a, e, 0) for a, e in _rows]), "std_error"),
    ev_csv("xyz-collinear", csv_text("x,y,z", [(i, 2 * i, 10) for i in range(10)]), "lie on a line"),
    ev_csv("xyz-one-spot", csv_text("x,y,z", [(5, 5, 10)] * 10), "lie on a line"),
    ev_csv("xyz-straight-arc", csv_text("x,y,z", [(i, 1e-3 * i * i, 10) for i in range(10)]), "straight arc"),
    ev_csv("xyz-inf", csv_text("x,y,z", [(1, 2, 3)] * 5 + [("inf", 1, 1)]), "NaN or infinite"),
    ev_csv("point-zero", csv_text("point,elevation", [(i, 10) for i in range(0, 8)]), "whole number >= 1"),
    ev_csv("point-fraction", csv_text("point,elevation", [(i + 0.5, 10) for i in range(8)]), "whole number >= 1"),
    ev_csv("point-huge", csv_text("point,elevation", [(i + 1, 10) for i in range(7)] + [("1e20", 10)]), "beyond"),
    ev_csv("point-duplicate", csv_text("point,elevation", [(1, 10)] + [(i + 1, 10) for i in range(7)]),
           "appears more than once"),
    ev_csv("binary", bytes(range(256)) * 4, "cannot read"),
    ev_args(*TANK, inp="{dir}", id="survey-is-a-folder", phrase="is a folder"),
    ev_args(*TANK, inp="{dir}/missing.csv", id="survey-missing", phrase="input file not found"),
    ev_args("--set", "tank.diameter=30", "--set", "tank.shell_height=12", "--set", "tank.yield_strength=250 MPa",
            id="sibling-profile-json-broken", files={"s.csv": SURVEY, "profile.json": "{not json"},
            phrase="not valid JSON"),
    ev_args("--set", "tank.diameter=30", "--set", "tank.shell_height=12", "--set", "tank.yield_strength=250 MPa",
            id="sibling-profile-json-deep", files={"s.csv": SURVEY, "profile.json": "[" * 100000 + "]" * 100000},
            phrase="not valid JSON"),
    ev_args("--set", "tank.diameter=30", "--set", "tank.shell_height=12", "--set", "tank.yield_strength=250 MPa",
            id="sibling-profile-json-units", files={"s.csv": SURVEY, "profile.json": json.dumps({"units": ["m"]})},
            phrase="'units'"),
    ev_args(*TANK, "--set", "evaluate.arc_table={dir}", id="arc-table-folder", files={"s.csv": SURVEY},
            phrase="is a folder"),
    ev_args(*TANK, "--set", "evaluate.arc_table={dir}/t.yaml", id="arc-table-bomb",
            files={"s.csv": SURVEY, "t.yaml": _bomb(9, "curves: *LAST\n")}, phrase="alias bomb"),
    ev_args(*TANK, "--set", "evaluate.arc_table={dir}/t.yaml", id="arc-table-nan",
            files={"s.csv": SURVEY, "t.yaml": "curves:\n- arc_length: [1, .nan]\n  permissible_depth: [1, 2]\n"},
            phrase="finite numbers"),
    ev_args(*TANK, "--set", "evaluate.arc_table={dir}/t.yaml", id="arc-table-not-a-table",
            files={"s.csv": SURVEY, "t.yaml": "- 1\n"}, phrase="not a valid permissible settlement table"),
    ev_args("--set", "tank.diameter=30", "--set", "tank.shell_height=12", "--set", "evaluate.input_units=m",
            id="tank-no-yield", files={"s.csv": SURVEY}, phrase="'tank.yield_strength' is missing"),
    ev_args("--set", "tank.diameter=30", "--set", "tank.shell_height=12", "--set", "tank.yield_strength=250",
            "--set", "evaluate.input_units=m", id="tank-yield-no-unit", files={"s.csv": SURVEY}, phrase="needs a unit"),
    ev_args("--set", "tank.diameter=30", "--set", "tank.shell_height=12", "--set", "tank.yield_strength=250 kPa",
            "--set", "evaluate.input_units=m", id="tank-yield-implausible", files={"s.csv": SURVEY},
            phrase="plausible range"),
    ev_args(*TANK, "--decimate", "0", id="decimate-zero", files={"s.csv": SURVEY}, phrase="--decimate"),
    ev_args(*TANK, "--decimate", "nan", id="decimate-nan", files={"s.csv": SURVEY}, phrase="--decimate"),
    ev_args(*TANK, "--decimate", "5000", id="decimate-huge", files={"s.csv": SURVEY}, phrase="--decimate"),
    Case(argv=("evaluate", "{src}/profile.csv", "--out", "{src}", *TANK[:6]), target="none",
         id="evaluate-into-its-run-folder", phrase="is a chimeline run folder"),
    Case(argv=("evaluate", "{dir}/s.csv", "--out", "{out}", *TANK), target="run", files={"s.csv": SURVEY},
         id="evaluate-into-a-run-folder", phrase="writes an evaluation folder"),
]


# ---------------------------------------------------------------------------
# 6. compare: damaged or odd run folders, alpha, kinds

def _edit_json(name, change):
    def prepare(p):
        f = Path(p["src2"]) / name
        js = json.loads(f.read_text())
        change(js)
        f.write_text(json.dumps(js))
    return prepare


def _write(name, text, folder="src2"):
    def prepare(p):
        (Path(p[folder]) / name).write_text(text)
    return prepare


def _delete(name, folder="src2"):
    return lambda p: (Path(p[folder]) / name).unlink()


def cmp_case(name, prepare, phrase, *extra):
    return Case(argv=("compare", "{src}", "{src2}", "--out", "{out}", *extra), target="compare", id=f"compare-{name}",
                prepare=prepare, phrase=phrase)


def _set(path, value):
    def change(js):
        node = js
        for k in path[:-1]:
            node = node[k]
        node[path[-1]] = value
    return change


COMPARE_CASES = [
    cmp_case("no-profile-csv", _delete("profile.csv"), "is missing"),
    cmp_case("no-profile-json", _delete("profile.json"), "profile.json, listed in manifest.json, is missing"),
    cmp_case("profile-json-broken", _write("profile.json", "{"), "not valid JSON"),
    cmp_case("profile-json-list", _write("profile.json", "[1, 2]"), "expected a JSON object"),
    cmp_case("profile-json-deep", _write("profile.json", "[" * 100000 + "]" * 100000), "nested too deeply"),
    cmp_case("noise-list", _edit_json("profile.json", _set(["noise"], [1, 2])), "'noise' must be a mapping"),
    cmp_case("sigma-zero", _edit_json("profile.json", _set(["noise", "sigma"], 0)), "'noise.sigma' must be > 0"),
    cmp_case("sigma-negative", _edit_json("profile.json", _set(["noise", "sigma"], -1e-3)), "must be > 0"),
    cmp_case("sigma-text", _edit_json("profile.json", _set(["noise", "sigma"], "small")), "finite number"),
    cmp_case("sigma-bool", _edit_json("profile.json", _set(["noise", "sigma"], True)), "finite number"),
    cmp_case("ci-missing", _edit_json("profile.json", lambda js: js["noise"].pop("ci95")), "'noise.ci'"),
    cmp_case("dof-zero", _edit_json("profile.json", _set(["noise", "within_bin", "dof"], 0)), "dof"),
    cmp_case("center-three", _edit_json("profile.json", _set(["shell", "center"], [1, 2, 3])), "'shell.center'"),
    cmp_case("radius-zero", _edit_json("profile.json", _set(["shell", "radius"], 0)), "'shell.radius'"),
    cmp_case("units-odd", _edit_json("profile.json", _set(["units"], "cubit")), "'units'"),
    cmp_case("profile-csv-inf", _write("profile.csv", "azimuth_deg,elevation,std_error,n_points,n_rejected,"
                                                      "n_stations,n_eff,scale,status\n1,inf,1,1,1,1,1,1,ok\n"),
             "finite number"),
    cmp_case("profile-csv-columns", _write("profile.csv", "azimuth_deg,elevation\n1,2\n"), "missing column"),
    cmp_case("manifest-broken", _write("manifest.json", "{"), "not valid JSON"),
    cmp_case("manifest-kind", _edit_json("manifest.json", _set(["kind"], "evaluation")), "not a run folder"),
    cmp_case("manifest-kind-unknown", _edit_json("manifest.json", _set(["kind"], "banana")), "not a valid"),
    cmp_case("alpha-nan", None, "--alpha", "--alpha", "nan"),
    cmp_case("alpha-zero", None, "--alpha", "--alpha", "0"),
    cmp_case("alpha-two", None, "--alpha", "--alpha", "2"),
    cmp_case("alpha-word", None, "--alpha", "--alpha", "low"),
    Case(argv=("compare", "{src}", "--out", "{out}"), target="compare", id="compare-one-run", phrase="at least two"),
    Case(argv=("compare", "{src}", "{dir}/nothing", "--out", "{out}"), target="compare", id="compare-missing-run",
         phrase="not a chimeline run folder"),
    Case(argv=("compare", "{src}", "{src2}", "--out", "{out}"), target="run", id="compare-into-a-run-folder",
         phrase="writes a compare folder"),
]


# ---------------------------------------------------------------------------
# 7. rerun: damaged earlier runs, moved scans, the same folder

def rr_case(name, prepare, phrase, *extra, target="run"):
    return Case(argv=("rerun", "{src2}", "--out", "{out}", *extra), target=target, id=f"rerun-{name}",
                prepare=prepare, phrase=phrase)


RERUN_CASES = [
    rr_case("profile-json-broken", _write("profile.json", "{"), "not valid JSON"),
    rr_case("sigma-text", _edit_json("profile.json", _set(["noise", "sigma"], "abc")), "malformed entry"),
    rr_case("config-syntax", _write("config.resolved.yaml", "profile: [1\n"), "config.resolved.yaml: not valid YAML"),
    rr_case("config-deep", _write("config.resolved.yaml", "p: " + "[" * 5000 + "]" * 5000 + "\n"), "nested deeper"),
    rr_case("config-bomb", _write("config.resolved.yaml", _bomb(9, "tank:\n  tag: *LAST\n")), "alias bomb"),
    rr_case("config-duplicate", _write("config.resolved.yaml", "seed: 1\nseed: 2\n"), "duplicate key"),
    rr_case("config-bad-value", _write("config.resolved.yaml", "profile:\n  bin_width_deg: -1\n"),
            "config.resolved.yaml: 'profile.bin_width_deg'"),
    rr_case("config-date", _write("config.resolved.yaml", "tank:\n  survey_date: 2026-13-45\n"), "'tank.survey_date'"),
    rr_case("config-missing", _delete("config.resolved.yaml"), "is missing"),
    rr_case("manifest-kind", _edit_json("manifest.json", _set(["kind"], "compare")), "not a run folder"),
    rr_case("scan-moved", _edit_json("manifest.json", lambda js: js["inputs"][0].update(path="/nowhere/scan.las")),
            "is no longer there; give the moved scan with --scan"),
    rr_case("scan-other-file", None, "differs from the earlier run's input", "--scan", "{dir}/other.las"),
    rr_case("scan-not-there", None, "scan file not found", "--scan", "{dir}/missing.las"),
    rr_case("set-typo", None, "--set: unknown key", "--set", "profile.bin_widht_deg=2"),
    rr_case("set-section", None, "is a section", "--set", "profile="),
    Case(argv=("rerun", "{src2}", "--out", "{src2}"), target="none", id="rerun-into-itself", phrase="is the run being rerun"),
    Case(argv=("rerun", "{dir}/evaluation", "--out", "{out}"), target="run", id="rerun-of-an-evaluation",
         prepare=lambda p: shutil.copytree(p["templates"].evaluation, Path(p["dir"]) / "evaluation"),
         phrase="not a run folder"),
]


# ---------------------------------------------------------------------------
# 8. synth

def sy_case(name, *extra, phrase="", target="scans", argv=None, **kw):
    return Case(argv=argv or ("synth", "{scene}", "--out", "{out}", *extra), target=target, id=f"synth-{name}",
                phrase=phrase, **kw)


SYNTH_CASES = [
    *[sy_case(f"{opt}={v}", f"--{opt}", v, phrase=f"--{opt}") for opt, values in (
        ("points", ("0", "-5", "nan", "inf", "1e13", "many")), ("density", ("0", "nan")), ("seed", ("-1",)))
      for v in values],
    sy_case("date", "--set", "survey_date=2026-13-45", phrase="'survey_date'"),
    sy_case("diameter", "--set", "tank.diameter=1e9", phrase="'tank.diameter'"),
    sy_case("format", "--set", "output.format=e57", phrase="'output.format'"),
    sy_case("set-malformed", "--set", "novalue", phrase="KEY=VALUE"),
    sy_case("out-empty", argv=("synth", "{scene}", "--out", ""), phrase="empty"),
    sy_case("out-inside-a-file", argv=("synth", "{scene}", "--out", "{dir}/afile/sub"), target="none",
            files={"afile": "x"}, phrase="inside a file"),
    sy_case("scene-missing", argv=("synth", "{dir}/none.yaml", "--out", "{out}"), phrase="not found"),
    sy_case("scene-folder", argv=("synth", "{dir}", "--out", "{out}"), phrase="is a directory"),
    sy_case("scene-deep", argv=("synth", "{dir}/sc.yaml", "--out", "{out}"),
            files={"sc.yaml": "tank: " + "[" * 1000 + "]" * 1000}, phrase="nested deeper"),
    sy_case("scene-bomb", argv=("synth", "{dir}/sc.yaml", "--out", "{out}"),
            files={"sc.yaml": _bomb(9, "name: *LAST\n")}, phrase="alias bomb"),
]


# ---------------------------------------------------------------------------
# 9. --out and the command line itself

def _lock(p):
    lock = FolderLock(Path(p["out"]))
    lock.acquire()
    p["cleanup"].append(lock.release)


def _read_only(p):
    ro = Path(p["dir"]) / "ro"
    ro.mkdir()
    if not make_immutable(ro):
        pytest.skip("chattr +i is not available here")
    p["cleanup"].append(lambda: make_immutable(ro, on=False))


def _symlink(p):
    os.symlink(p["out"], Path(p["dir"]) / "link")


OUT_CASES = [
    run_args(id="out-locked-by-another-command", prepare=_lock, phrase="another chimeline command"),
    Case(argv=("run", "{scan}", "--out", ""), id="out-empty", phrase="empty"),
    Case(argv=("run", "{scan}", "--out", "."), id="out-current-folder", phrase="current folder"),
    Case(argv=("run", "{scan}", "--out", "/"), id="out-root", phrase="root"),
    Case(argv=("run", "{scan}", "--out", "{dir}/" + "a" * 300), id="out-300-characters", phrase="300 bytes"),
    Case(argv=("run", "{scan}", "--out", "{dir}/afile/sub"), id="out-inside-a-file", files={"afile": "x"},
         phrase="inside a file"),
    Case(argv=("run", "{scan}", "--out", "{dir}/afile"), id="out-is-a-file", files={"afile": "x"}, phrase="file"),
    Case(argv=("run", "{scan}", "--out", "{dir}/mine"), id="out-foreign-folder", files={"mine/notes.txt": "keep"},
         phrase="not a chimeline folder"),
    Case(argv=("run", "{scan}", "--out", "{dir}/ro/run"), id="out-under-a-read-only-folder", prepare=_read_only,
         phrase="not writable"),
    Case(argv=("synth", "{scene}", "--out", "{dir}/ro/scans"), id="synth-out-under-a-read-only-folder",
         target="none", prepare=_read_only, phrase="not writable"),
    run_args(target="evaluation", id="out-an-evaluation-folder", phrase="writes a run folder"),
    run_args(target="compare", id="out-a-compare-folder", phrase="writes a run folder"),
    Case(argv=("run", "{scan}", "--out", "{dir}/link"), id="out-symlink", prepare=_symlink, phrase="symbolic link"),
    Case(argv=("run", "{out}/inside.las", "--out", "{out}"), id="out-holds-the-input",
         prepare=lambda p: shutil.copy(p["scan"], Path(p["out"]) / "inside.las"), phrase="lies inside the output"),
    Case(argv=("run",), id="usage-no-argument", phrase="Missing argument"),
    Case(argv=("run", "{scan}"), id="usage-no-out", phrase="Missing option '--out'"),
    Case(argv=("run", "{scan}", "--out", "{out}", "--bogus"), id="usage-unknown-option", phrase="No such option"),
    Case(argv=("bogus",), id="usage-unknown-command", phrase="No such command"),
    Case(argv=("-q", "evaluate"), id="usage-evaluate-no-input", phrase="Missing argument"),
]

ALL_CASES = (CONFIG_SET_CASES + VALUE_CASES + CONFIG_FILE_CASES + SCAN_CASES + EVAL_CASES + COMPARE_CASES
             + RERUN_CASES + SYNTH_CASES + OUT_CASES)


def test_the_suite_is_large_and_covers_every_command():
    assert len(ALL_CASES) >= 150
    assert len({c.id for c in ALL_CASES}) == len(ALL_CASES)
    assert {c.argv[0] for c in ALL_CASES} | {"-q"} >= {"run", "evaluate", "compare", "rerun", "synth"}


# ---------------------------------------------------------------------------
# the runner


def snapshot(folder: Path) -> dict:
    if not folder.exists():
        return {}
    return {str(p.relative_to(folder)): (p.read_bytes() if p.is_file() else None)
            for p in sorted(folder.rglob("*"))}


def fill(arg: str, p: dict) -> str:
    """Replace the {name} placeholders (and nothing else: values may hold braces)."""
    for k, v in p.items():
        if isinstance(v, str):
            arg = arg.replace("{" + k + "}", v)
    return arg


def _setup(case: Case, tmp_path: Path, templates) -> dict:
    d = tmp_path / "case"
    d.mkdir()
    out = d / "out"
    src = {"run": templates.run, "evaluation": templates.evaluation, "compare": templates.compare,
           "scans": templates.scans}.get(case.target)
    if src is not None:
        shutil.copytree(src, out)
    shutil.copytree(templates.run, d / "src")
    shutil.copytree(templates.run, d / "src2")
    (d / "other.las").write_bytes(b"LASF another file")
    p = {"scan": str(templates.scan), "survey": str(templates.survey), "scene": str(templates.scene),
         "dir": str(d), "out": str(out), "src": str(d / "src"), "src2": str(d / "src2"), "templates": templates,
         "cleanup": []}
    for name, content in case.files.items():
        f = d / name
        f.parent.mkdir(parents=True, exist_ok=True)
        content = content(p) if callable(content) else content
        f.write_bytes(content.encode("utf-8") if isinstance(content, str) else content)
    if case.prepare is not None:
        case.prepare(p)
    return p


def check_refused(case: Case, code: int, stderr: str, stdout: str, before: dict, after: dict):
    lines = stderr.splitlines()
    assert code == 2, f"exit {code}: {stderr}{stdout[-2000:]}"
    assert len(lines) == 1, stderr
    assert lines[0].startswith("chimeline: error: "), stderr
    assert "Traceback" not in stderr + stdout and "internal error" not in stderr
    assert case.phrase in lines[0], lines[0]
    assert after == before  # the target and everything beside it, byte for byte: nothing written, no debris


@pytest.mark.parametrize("case", ALL_CASES, ids=lambda c: c.id)
def test_hostile_input_is_refused_with_one_line_and_nothing_written(case, templates, tmp_path):
    from chimeline.cli import cli

    p = _setup(case, tmp_path, templates)
    try:
        argv = [fill(a, p) for a in case.argv]
        before = snapshot(tmp_path)
        r = CliRunner().invoke(cli, argv)
        after = snapshot(tmp_path)
    finally:
        for undo in p["cleanup"]:
            undo()
    check_refused(case, r.exit_code, r.stderr, r.stdout, before, after)


PROCESS_CASES = [c for c in ALL_CASES if c.id in {
    "scan-ply-ascii-word", "scan-las-half", "config-alias-bomb-typed-key", "synth-points=nan", "compare-sigma-zero",
    "rerun-scan-moved", "usage-no-out", "scan-csv-header-only"}]  # the last one raises a numpy UserWarning


@pytest.mark.parametrize("case", PROCESS_CASES, ids=lambda c: c.id)
def test_as_a_process_too(case, templates, tmp_path):
    """Real processes: text that open3d's C code prints (the RPly case) and Python warnings do not reach stderr."""
    p = _setup(case, tmp_path, templates)
    argv = [fill(a, p) for a in case.argv]
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT / "pipeline"), os.environ.get("PYTHONPATH", "")]),
               PYTHONWARNINGS="always")
    before = snapshot(tmp_path)
    r = subprocess.run([sys.executable, "-m", "chimeline", *argv], capture_output=True, text=True, env=env,
                       timeout=120)
    check_refused(case, r.returncode, r.stderr, r.stdout, before, snapshot(tmp_path))
