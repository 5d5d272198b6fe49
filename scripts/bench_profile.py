#!/usr/bin/env python
"""Benchmark: pipeline wall time and peak RSS against a plain laspy.read of the same file.

Generates (or reuses) single-tank scans of the demo scene at several sizes under --dir, then for each
file runs, each in its own child process: a plain ``laspy.read`` and ``chimeline run``. Prints wall time,
peak RSS (from the child's rusage) and the time ratio. Formats: las, laz, copc (the LAS file rewritten as COPC
by chimeline's writer; the reference is laspy.read of the COPC file, which decodes it whole) and multi (the LAS
file cut into four tiles by azimuth around the scene centre, run as four inputs; the reference reads all four).
Targets: LAS <= 3.0x laspy.read at 20 M points and <= 1.5x at 100 M; LAZ <= 1.3x at 50 M; COPC faster than
laspy.read; peak RSS <= 1 GB at any size.

    python scripts/bench_profile.py --sizes 5e6 20e6 50e6 --formats las laz copc multi
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
    return wall, ru.ru_maxrss / 1024.0, ru.ru_utime + ru.ru_stime  # s, MiB (Linux reports KiB), CPU s


def median(runs):
    """(median wall s, largest peak RSS MiB, median CPU s): CPU time is less sensitive to a shared machine."""
    ts = sorted(r[0] for r in runs)
    cpu = sorted(r[2] for r in runs)
    return ts[len(ts) // 2], max(r[1] for r in runs), cpu[len(cpu) // 2]


def _count(path):
    import laspy

    with laspy.open(path) as r:
        return r.header.point_count


def make_scan(py, folder, fmt, n):
    """The scan file(s) of one benchmark row, generated once."""
    name = f"bench_las_{int(n / 1e6)}M"
    base = folder / f"{name}.las"
    if fmt == "laz":  # the same points compressed (laspy with lazrs, 50 000-point chunks)
        laz = folder / f"bench_laz_{int(n / 1e6)}M.laz"
        if not laz.exists():  # in a child process: a large parent would inflate the children's peak RSS
            make_scan(py, folder, "las", n)
            subprocess.run([py, "-c", f"import laspy; laspy.read({str(base)!r}).write({str(laz)!r})"], check=True)
        return [laz]
    if not base.exists():
        t = time.perf_counter()
        subprocess.run([py, "-m", "chimeline.cli", "-q", "synth", str(SCENE), "--out", str(folder), "--points",
                        str(n), "--no-plot", "--set", f"output.format={'laz' if fmt == 'laz' else 'las14'}",
                        "--set", "name=" + name], check=True)
        print(f"generated {base.name} in {time.perf_counter() - t:.0f} s", flush=True)
    if fmt == "las":
        return [base]
    if fmt == "copc":
        out = folder / f"{name}.copc.laz"
        if not out.exists():
            t = time.perf_counter()
            subprocess.run([py, "-c", "from chimeline.io.copc_writer import las_to_copc; "
                            f"las_to_copc({str(base)!r}, {str(out)!r})"], check=True)
            print(f"wrote {out.name} in {time.perf_counter() - t:.0f} s", flush=True)
        return [out]
    tiles = [folder / f"{name}_tile{k}.las" for k in range(4)]
    if not all(t.exists() for t in tiles):
        code = (f"import laspy, numpy as np\nlas = laspy.read({str(base)!r})\n"
                "cx, cy = np.median(las.x), np.median(las.y)\n"
                "quad = (np.asarray(las.x) > cx).astype(int) * 2 + (np.asarray(las.y) > cy)\n"
                f"for k, path in enumerate({[str(t) for t in tiles]!r}):\n"
                "    t = laspy.LasData(las.header)\n    t.points = las.points[quad == k]\n    t.write(path)\n")
        subprocess.run([py, "-c", code], check=True)
    return tiles


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", nargs="+", type=float, default=[5e6, 20e6, 50e6])
    ap.add_argument("--formats", nargs="+", default=["las", "laz"], choices=["las", "laz", "copc", "multi"])
    ap.add_argument("--repeat", type=int, default=1, help="runs of each command; the median is printed")
    ap.add_argument("--dir", type=Path, default=ROOT / "bench_scans")
    args = ap.parse_args()
    args.dir.mkdir(parents=True, exist_ok=True)
    py = sys.executable
    rows = []
    for fmt in args.formats:
        for n in args.sizes:
            scans = make_scan(py, args.dir, fmt, n)
            read = "import laspy\n" + "".join(f"laspy.read({str(p)!r})\n" for p in scans)
            out = args.dir / f"{scans[0].stem}_{fmt}_run"
            ref, run = [], []
            for _ in range(args.repeat):  # interleaved, so a drifting machine load hits both alike
                ref.append(child([py, "-c", read]))
                run.append(child([py, "-m", "chimeline.cli", "-q", "run", *map(str, scans), "--out", str(out),
                                  "--set", "output.plots=false"]))
            ref_t, ref_rss, ref_cpu = median(ref)
            run_t, run_rss, run_cpu = median(run)
            import json

            decoded = json.loads((out / "profile.json").read_text())["input"].get("decoded_fraction")
            npts = sum(_count(p) for p in scans)
            rows.append((fmt, npts, ref_t, ref_rss, run_t, run_rss, run_t / ref_t, decoded, ref_cpu, run_cpu))
            print(f"{fmt:5s} {npts / 1e6:6.1f} M pts  laspy.read {ref_t:6.2f} s (cpu {ref_cpu:5.2f}) {ref_rss:6.0f} MiB"
                  f"   chimeline run {run_t:6.2f} s (cpu {run_cpu:5.2f}) {run_rss:6.0f} MiB   ratio "
                  f"{run_t / ref_t:5.2f}   decoded {decoded}   load {os.getloadavg()[0]:.1f}", flush=True)
    return rows


if __name__ == "__main__":
    main()
