"""Reruns: the earlier run's input and resolved config with --set changes, and a diff of keys and headline results.

The earlier run's manifest names its scan by absolute path and SHA-256: a rerun finds the scan there, or at
``scan`` (a moved copy), and refuses a file whose SHA-256 differs unless ``allow_different_input``.
"""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

from ..core.hashing import sha256_file
from ..core.mapping import flatten
from ..errors import InputError, OutputError
from ..io.runfiles import CONFIG_YAML, MANIFEST_JSON, FolderInput, RunFolder, read_run_folder
from .run import run_scan


def headline(rf: RunFolder) -> dict:
    js = rf.summary
    u = rf.units
    h = {"noise sigma": f"{js['noise']['sigma']:.6g} {u}", "coverage (ok)": f"{100 * js['profile']['coverage_ok']:.1f} %",
         "shell radius": f"{js['shell']['radius']:.4f} {u}"}
    e = rf.evaluation
    if e is not None:
        h["tilt"] = (f"{e['tilt']['amplitude']:.5g} {u} low at {e['tilt']['low_azimuth_deg']:.1f} deg, "
                     f"R^2 {e['tilt']['r_squared']:.3f}")
        ratios = [p["ratio"] for p in e["points"] if p["ratio"] is not None]
        h["worst deflection ratio"] = f"{max(ratios):.3f}" if ratios else "-"
        h["verdict"] = e["verdict"]
    return h


def earlier_inputs(rf: RunFolder) -> list[tuple[str, str | None]]:
    """[(path, SHA-256)] of the earlier run's scan files: from its manifest, or profile.json for older folders."""
    if rf.manifest is not None:
        scans = [(i.path, i.sha256) for i in rf.manifest.inputs if i.role == "scan"]
        if scans:
            return scans
    try:
        inp = rf.summary["input"]
        paths = [str(p) for p in (inp.get("paths") or [inp["path"]])]
        shas = list(inp.get("sha256_files") or ([inp.get("sha256")] if len(paths) == 1 else []))
        shas = [str(h) if h else None for h in shas] if len(shas) == len(paths) else [None] * len(paths)
        return list(zip(paths, shas))
    except (KeyError, TypeError, AttributeError) as exc:
        raise InputError(f"{rf.path / 'profile.json'}: missing or malformed entry {exc}") from None




def rerun(run_dir, out_dir, sets, progress=None, *, scan=None, allow_different_input: bool = False):
    """Run again; returns (changed keys [(key, old, new)], headline results [(name, old, new)], notes [str])."""
    before = read_run_folder(run_dir, need_config=True)
    if os.path.realpath(run_dir) == os.path.realpath(out_dir):
        raise OutputError(f"{out_dir}: is the run being rerun; it stays as the baseline of the comparison: choose a "
                          f"new --out")
    try:
        h0 = headline(before)
    except (KeyError, TypeError, ValueError, IndexError, AttributeError) as exc:
        raise InputError(f"{before.path / 'profile.json'}: missing or malformed entry {exc}") from None
    stored = earlier_inputs(before)
    notes = []
    if scan:
        scans = [Path(os.path.abspath(p)) for p in (scan if isinstance(scan, (list, tuple)) else [scan])]
    else:
        scans = [Path(p) for p, _ in stored]
        for p, sha in stored:
            if not Path(p).exists():
                hint = f" (SHA-256 {sha[:16]}...)" if sha else ""
                raise InputError(f"{before.path}: the earlier input {p} is no longer there; give the moved scan with "
                                 f"--scan PATH{hint}")
    for p in scans:
        if not p.is_file():
            raise InputError(f"{p}: scan file not found")
    actual = [sha256_file(p) for p in scans]
    expected = [sha for _, sha in stored]
    if all(expected) and sorted(actual) != sorted(expected):
        if not allow_different_input:
            raise InputError(f"{scans[0] if len(scans) == 1 else ', '.join(map(str, scans))}: its SHA-256 "
                             f"{actual[0][:16]}... differs from the earlier run's input ({expected[0][:16]}...); pass "
                             f"--allow-different-input to rerun on a different scan")
        notes.append(f"the scan differs from the earlier run's input (SHA-256 {actual[0][:16]}... instead of "
                     f"{expected[0][:16]}...)")
    mp = before.path / MANIFEST_JSON
    earlier = FolderInput("earlier_run", os.path.abspath(before.path),
                          hashlib.sha256(mp.read_bytes()).hexdigest() if before.manifest is not None else None)
    scan = scans if len(scans) > 1 else scans[0]
    res = run_scan(scan, out_dir, sets=sets, progress=progress, base_mapping=before.config,
                   base_source=str(before.path / CONFIG_YAML), extra_inputs=[earlier])
    a, b = flatten(before.config), flatten(res.resolved)
    changed = [(k, a.get(k), b.get(k)) for k in sorted(set(a) | set(b)) if a.get(k) != b.get(k)]
    h1 = headline(read_run_folder(out_dir))
    heads = [(k, h0.get(k, "-"), h1.get(k, "-")) for k in dict.fromkeys(list(h0) + list(h1))]
    return changed, heads, notes
