#!/usr/bin/env python
"""Benchmark: what the geometry stage costs a run (target: at most 15 % of the run time at 20 M points, no memory
growth).

Generates (or reuses) a demo-scene LAS scan of each size under --dir (the names bench_profile.py uses), then runs
``chimeline run --set output.plots=false`` in child processes, alternating ``geometry.enabled=false`` and ``true``
``--repeats`` times, and prints the median wall time and peak RSS of each, their ratio, and the stream and
geometry timings the runs recorded in profile.json (the face sampler works inside the stream).

    python scripts/bench_geometry.py --sizes 20e6 --repeats 3
"""
from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
SCENE = ROOT / "synthetic_scans" / "demo_tank.yaml"
sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_profile import child  # noqa: E402  (wall time and peak RSS of a child process)


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", nargs="+", type=float, default=[20e6])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--dir", type=Path, default=ROOT / "bench_scans")
    args = ap.parse_args()
    args.dir.mkdir(parents=True, exist_ok=True)
    py = sys.executable
    for n in args.sizes:
        name = f"bench_las_{int(n / 1e6)}M"
        scan = args.dir / f"{name}.las"
        if not scan.exists():
            t = time.perf_counter()
            subprocess.run([py, "-m", "chimeline.cli", "-q", "synth", str(SCENE), "--out", str(args.dir), "--points",
                            str(n), "--no-plot", "--set", "output.format=las14", "--set", "name=" + name], check=True)
            print(f"generated {scan.name} in {time.perf_counter() - t:.0f} s", flush=True)
        res = {False: [], True: []}
        for _ in range(args.repeats):
            for on in (False, True):
                out = args.dir / f"{name}_geometry_{'on' if on else 'off'}"
                wall, rss = child([py, "-m", "chimeline.cli", "-q", "run", str(scan), "--out", str(out), "--set",
                                   "output.plots=false", "--set", f"geometry.enabled={'true' if on else 'false'}"])
                js = json.loads((out / "profile.json").read_text())
                res[on].append((wall, rss, js["timings_s"].get("stream", np.nan), js["timings_s"].get("geometry", 0.0),
                                js["counts"].get("face_sample", 0), js["counts"]["n_points_read"]))
        off, on = (np.median(np.array(res[k]), axis=0) for k in (False, True))
        print(f"{scan.name}: {on[5] / 1e6:.1f} M points, {args.repeats} repeats (medians)\n"
              f"  geometry off: {off[0]:6.2f} s {off[1]:6.0f} MiB   stream {off[2]:.2f} s\n"
              f"  geometry on:  {on[0]:6.2f} s {on[1]:6.0f} MiB   stream {on[2]:.2f} s, geometry stage {on[3]:.2f} s, "
              f"face sample {on[4]:.0f} points\n"
              f"  cost: +{on[0] - off[0]:.2f} s = {100 * (on[0] / off[0] - 1):.1f} % of the run, "
              f"+{on[1] - off[1]:.0f} MiB peak RSS", flush=True)


if __name__ == "__main__":
    main()
