"""Reruns: the earlier run's input and resolved config with --set changes, and a diff of keys and headline results."""
from __future__ import annotations

import json
from pathlib import Path

import yaml

from .config import merge_sets
from .errors import InputError


def _flatten(d, prefix=""):
    out = {}
    for k, v in (d or {}).items():
        key = f"{prefix}.{k}" if prefix else str(k)
        if isinstance(v, dict):
            out.update(_flatten(v, key))
        else:
            out[key] = v
    return out


def headline(run_dir: Path) -> dict:
    js = json.loads((run_dir / "profile.json").read_text())
    u = js["units"]
    h = {"noise sigma": f"{js['noise']['sigma']:.6g} {u}", "coverage (ok)": f"{100 * js['profile']['coverage_ok']:.1f} %",
         "shell radius": f"{js['shell']['radius']:.4f} {u}"}
    ev = run_dir / "evaluation.json"
    if ev.exists():
        e = json.loads(ev.read_text())
        h["tilt"] = f"{e['tilt']['amplitude']:.5g} {u} low at {e['tilt']['low_azimuth_deg']:.1f} deg, R^2 {e['tilt']['r_squared']:.3f}"
        ratios = [p["ratio"] for p in e["points"] if p["ratio"] is not None]
        h["worst deflection ratio"] = f"{max(ratios):.3f}" if ratios else "-"
        h["verdict"] = e["verdict"]
    return h


def rerun(run_dir, out_dir, sets, progress=None):
    from .runner import run_scan

    run_dir = Path(run_dir)
    pj, cfgp = run_dir / "profile.json", run_dir / "config.resolved.yaml"
    if not pj.exists() or not cfgp.exists():
        raise InputError(f"{run_dir}: not a chimeline run folder (needs profile.json and config.resolved.yaml)")
    js = json.loads(pj.read_text())
    scan = Path(js["input"]["path"])
    if not scan.exists():
        raise InputError(f"{run_dir}: the earlier input {scan} is no longer there")
    old = yaml.safe_load(cfgp.read_text())
    new = merge_sets(old, sets)
    tmp_cfg = Path(out_dir).with_name(f".{Path(out_dir).name}.config.yaml")
    tmp_cfg.parent.mkdir(parents=True, exist_ok=True)
    tmp_cfg.write_text(yaml.safe_dump(new, sort_keys=False))
    try:
        res = run_scan(scan, out_dir, tmp_cfg, (), progress)
    finally:
        tmp_cfg.unlink(missing_ok=True)
    a, b = _flatten(old), _flatten(res.resolved)
    changed = [(k, a.get(k), b.get(k)) for k in sorted(set(a) | set(b)) if a.get(k) != b.get(k)]
    h0, h1 = headline(run_dir), headline(Path(out_dir))
    heads = [(k, h0.get(k, "-"), h1.get(k, "-")) for k in dict.fromkeys(list(h0) + list(h1))]
    return changed, heads
