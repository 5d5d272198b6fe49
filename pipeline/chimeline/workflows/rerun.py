"""Reruns: the earlier run's input and resolved config with --set changes, and a diff of keys and headline results."""
from __future__ import annotations

from pathlib import Path

from ..core.mapping import flatten
from ..errors import InputError
from ..io.runfiles import CONFIG_YAML, RunFolder, read_run_folder
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


def rerun(run_dir, out_dir, sets, progress=None):
    """Run again; returns (changed keys [(key, old, new)], headline results [(name, old, new)])."""
    before = read_run_folder(run_dir, need_config=True)
    try:
        inp = before.summary["input"]
        scans = [Path(p) for p in inp.get("paths") or [inp["path"]]]
        h0 = headline(before)
    except (KeyError, TypeError) as exc:
        raise InputError(f"{before.path / 'profile.json'}: missing or malformed entry {exc}") from None
    for scan in scans:
        if not scan.exists():
            raise InputError(f"{before.path}: the earlier input {scan} is no longer there")
    scan = scans if len(scans) > 1 else scans[0]
    res = run_scan(scan, out_dir, sets=sets, progress=progress, base_mapping=before.config,
                   base_source=str(before.path / CONFIG_YAML))
    a, b = flatten(before.config), flatten(res.resolved)
    changed = [(k, a.get(k), b.get(k)) for k in sorted(set(a) | set(b)) if a.get(k) != b.get(k)]
    h1 = headline(read_run_folder(out_dir))
    heads = [(k, h0.get(k, "-"), h1.get(k, "-")) for k in dict.fromkeys(list(h0) + list(h1))]
    return changed, heads
