#!/usr/bin/env python
"""Benchmark: a batch of demo-sized scans on 1 and 2 local Dask workers against running them one after another.

Simulates ``--scans`` demo-scene scans once (seeds 7001, 7002, ...; invented tags FB-TK-01, ...) into ``--dir``
(default ``bench_scans/batch``, gitignored) and writes a manifest there. Then, each in a child process and into a
fresh output folder (so no job is skipped):

- sequential: ``chimeline run`` for every scan, one after another (what a user does without ``batch``);
- ``chimeline batch --workers N`` for each N of ``--workers`` (cluster start-up and the fleet files included).

Prints wall time, throughput (scans per minute), the speed-up against the sequential loop, the children's CPU
time and the load average before and after each measurement (the machine may be shared). Target: >= 1.7x with
two workers on two cores.

    python scripts/bench_batch.py --scans 8 --workers 1 2 --repeat 1
"""
from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SCENE = ROOT / "synthetic_scans" / "demo_tank.yaml"
CONFIG = ROOT / "configs" / "demo.yaml"


def child(cmd):
    """(wall s, CPU s, peak RSS MiB) of one command; CPU and peak RSS include the processes it waited for (the Dask
    nanny reaps its worker processes, so the batch's peak RSS is its largest process: a worker or the client)."""
    t = time.perf_counter()
    p = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    err = p.stderr.read().decode(errors="replace")
    _, status, ru = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t
    if status != 0:
        raise SystemExit(f"failed ({status}): {' '.join(map(str, cmd))}\n{err}")
    return wall, ru.ru_utime + ru.ru_stime, ru.ru_maxrss / 1024.0  # Linux reports KiB


def make_scans(py, folder: Path, n: int) -> list:
    """n demo-scene scans with their own seeds and tags, simulated once."""
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for i in range(n):
        name = f"FB-TK-{i + 1:02d}"
        scan = folder / f"{name}.las"
        if not scan.exists():
            t = time.perf_counter()
            subprocess.run([py, "-m", "chimeline.cli", "-q", "synth", str(SCENE), "--out", str(folder), "--no-plot",
                            "--seed", str(7001 + i), "--set", f"name={name}", "--set", f"tank.tag={name}"],
                           check=True)
            print(f"simulated {scan.name} in {time.perf_counter() - t:.0f} s", flush=True)
        out.append(scan)
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--dir", type=Path, default=ROOT / "bench_scans" / "batch")
    ap.add_argument("--scans", type=int, default=8)
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--repeat", type=int, default=1, help="measurements of each mode (interleaved); medians shown")
    a = ap.parse_args(argv)
    py = sys.executable
    scans = make_scans(py, a.dir, a.scans)
    manifest = a.dir / "manifest.csv"
    manifest.write_text("scan,tag,survey_date,config\n" + "".join(
        f"{s.name},{s.stem},2026-06-15,{CONFIG}\n" for s in scans))
    work = a.dir / "out"
    chimeline = [py, "-m", "chimeline.cli", "-q"]
    modes = ["sequential"] + [f"batch {w} worker{'s' if w > 1 else ''}" for w in a.workers]
    results = {m: [] for m in modes}
    for rep in range(a.repeat):
        for mode in modes:
            shutil.rmtree(work, ignore_errors=True)
            load0 = os.getloadavg()[0]
            if mode == "sequential":
                t, cpu, rss = 0.0, 0.0, 0.0
                for s in scans:
                    dt, dc, dr = child(chimeline + ["run", str(s), "--config", str(CONFIG), "--set",
                                                    f"tank.tag={s.stem}", "--out", str(work / s.stem)])
                    t, cpu, rss = t + dt, cpu + dc, max(rss, dr)
            else:
                w = int(mode.split()[1])
                t, cpu, rss = child(chimeline + ["batch", str(manifest), "--out", str(work), "--workers", str(w)])
            load1 = os.getloadavg()[0]
            results[mode].append((t, cpu, rss, load0, load1))
            print(f"[{rep + 1}/{a.repeat}] {mode}: {t:.1f} s wall, {cpu:.1f} s CPU, peak RSS {rss:.0f} MiB, load "
                  f"{load0:.1f} -> {load1:.1f}", flush=True)
    shutil.rmtree(work, ignore_errors=True)
    seq = sorted(r[0] for r in results["sequential"])[len(results["sequential"]) // 2]
    print(f"\n{len(scans)} demo-scene scans ({os.cpu_count()} cores; medians of {a.repeat})")
    print("| mode | wall | scans per minute | speed-up vs sequential | CPU | peak RSS (largest process) | "
          "load average (before -> after) |")
    print("| --- | --- | --- | --- | --- | --- | --- |")
    for mode in modes:
        rs = sorted(results[mode])
        t, cpu, rss, l0, l1 = rs[len(rs) // 2]
        print(f"| {mode} | {t:.1f} s | {60 * len(scans) / t:.1f} | {seq / t:.2f} | {cpu:.1f} s | {rss:.0f} MiB | "
              f"{l0:.1f} -> {l1:.1f} |")


if __name__ == "__main__":
    main()
