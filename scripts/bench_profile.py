#!/usr/bin/env python
"""Benchmark: pipeline wall time and peak RSS against a plain laspy.read of the same file.

Generates (or reuses) single-tank scans of the demo scene at several sizes under --dir, then for each
file runs, each in its own child process: a plain ``laspy.read`` and ``chimeline run``. Prints wall time,
peak RSS (from the child's rusage) and the time ratio. Targets: ratio <= 2.0 (LAS) and <= 1.3 (LAZ) at
20 M points; peak RSS <= 1 GB at 50 M points.

    python scripts/bench_profile.py --sizes 5e6 20e6 50e6 --formats las laz
"""
from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SCENE = ROOT / "synthetic_scans" / "demo_tank.yaml"


def child(cmd):
    t = time.perf_counter()
    p = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, ru = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t
    err = p.stderr.read().decode(errors="replace")
    if status != 0:
        raise SystemExit(f"failed: {' '.join(map(str, cmd))}\n{err}")
    return wall, ru.ru_maxrss / 1024.0  # MiB (Linux reports KiB)


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", nargs="+", type=float, default=[5e6, 20e6, 50e6])
    ap.add_argument("--formats", nargs="+", default=["las", "laz"], choices=["las", "laz"])
    ap.add_argument("--dir", type=Path, default=ROOT / "bench_scans")
    args = ap.parse_args()
    args.dir.mkdir(parents=True, exist_ok=True)
    py = sys.executable
    rows = []
    for fmt in args.formats:
        for n in args.sizes:
            name = f"bench_{fmt}_{int(n / 1e6)}M"
            scan = args.dir / f"{name}.{fmt}"
            if not scan.exists():
                t = time.perf_counter()
                subprocess.run([py, "-m", "chimeline.cli", "-q", "synth", str(SCENE), "--out", str(args.dir), "--points",
                                str(n), "--no-plot", "--set", f"output.format={'laz' if fmt == 'laz' else 'las14'}",
                                "--set", "name=" + name], check=True)
                print(f"generated {scan.name} in {time.perf_counter() - t:.0f} s", flush=True)
            ref_t, ref_rss = child([py, "-c", f"import laspy; laspy.read({str(scan)!r})"])
            out = args.dir / f"{name}_run"
            run_t, run_rss = child([py, "-m", "chimeline.cli", "-q", "run", str(scan), "--out", str(out),
                                    "--set", "output.plots=false"])
            import laspy

            with laspy.open(scan) as r:
                npts = r.header.point_count
            rows.append((scan.name, npts, ref_t, ref_rss, run_t, run_rss, run_t / ref_t))
            print(f"{scan.name:22s} {npts / 1e6:6.1f} M pts  laspy.read {ref_t:6.1f} s {ref_rss:7.0f} MiB   "
                  f"chimeline run {run_t:6.1f} s {run_rss:7.0f} MiB   ratio {run_t / ref_t:4.2f}", flush=True)
    return rows


if __name__ == "__main__":
    main()
