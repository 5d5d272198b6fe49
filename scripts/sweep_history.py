#!/usr/bin/env python
"""Randomized sweep of the settlement history: pairs of simulated surveys of fresh tanks, run as one batch.

For each pair a small tank is drawn over wide ranges (diameter 8-24 m, height 5-12 m, range noise 0.5-3 mm,
registration error 0-2 mm per station, 3-6 stations), surveyed twice 0.5-6 years apart with a random change of the
uniform settlement (-20..+5 mm), of the tilt (a change vector of 0-15 mm in a random direction added to a tilt of
0-30 mm) and of the mode-2 ovalisation (0-4 mm growth). Every scan is simulated once into ``--dir``; all pairs run
as one ``chimeline batch`` on a local Dask cluster; then each tank's history is compared with the simulated change:

- uniform: z = (measured - true) / its 1 sigma (the datum uncertainty of both scans included);
- tilt change (the vector difference of the two tilt planes): z of its amplitude and the error of its direction;
- per azimuth: the share of bins whose difference lies within 1.96 sigma of the truth (truth: the simulator's
  junction elevation averaged over each bin, both surveys), after removing the weighted mean offset (the two
  scans' datums are not observable, see DEVELOPERS.md).

    python scripts/sweep_history.py --pairs 12 --seed 9401
"""
from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np
import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from chimeline.core.robust import Z95  # noqa: E402
from chimeline.synth import run_synth, scene_from_mapping  # noqa: E402
from chimeline.workflows.batch import run_batch  # noqa: E402
from chimeline.evaluate.history import date_after  # noqa: E402


def draw(rng) -> dict:
    """One tank and its two surveys."""
    tilt_a = rng.uniform(0, 0.03)
    low_a = rng.uniform(0, 360)
    dv = rng.uniform(0, 0.015)
    dir_v = rng.uniform(0, 360)
    # tilt vectors as z = -A cos(theta - low): coefficients (b, c) = -A (cos low, sin low)
    va = -tilt_a * np.array([math.cos(math.radians(low_a)), math.sin(math.radians(low_a))])
    dvec = -dv * np.array([math.cos(math.radians(dir_v)), math.sin(math.radians(dir_v))])
    vb = va + dvec
    amp_b = float(np.hypot(*vb))
    low_b = float(np.degrees(np.arctan2(-vb[1], -vb[0])) % 360)
    m2a = rng.uniform(0, 0.005)
    return {"diameter": float(rng.uniform(8, 24)), "height": float(rng.uniform(5, 12)),
            "noise": float(rng.uniform(0.0005, 0.003)), "registration": float(rng.uniform(0, 0.002)),
            "stations": int(rng.integers(3, 7)), "years": float(rng.uniform(0.5, 6)),
            "uniform_a": float(rng.uniform(-0.03, 0)), "d_uniform": float(rng.uniform(-0.02, 0.005)),
            "tilt_a": (float(tilt_a), float(low_a)), "tilt_b": (amp_b, low_b), "d_tilt": (float(dv), float(dir_v)),
            "mode2_a": float(m2a), "mode2_b": float(m2a + rng.uniform(0, 0.004)), "phase2": float(rng.uniform(0, 180))}


def scene(case: dict, which: str, seed: int, tag: str, date: str) -> dict:
    m = yaml.safe_load((ROOT / "synthetic_scans" / "small_tank.yaml").read_text())
    m["seed"] = seed
    m["name"] = f"{tag}_{date}"
    m["survey_date"] = date
    m["tank"].update(tag=tag, diameter=case["diameter"], height=case["height"])
    amp, low = case[f"tilt_{which}"]
    m["settlement"] = {"uniform": case["uniform_a"] + (case["d_uniform"] if which == "b" else 0.0),
                       "tilt": {"amplitude": amp, "low_azimuth_deg": low},
                       "modes": [{"k": 2, "amplitude": case[f"mode2_{which}"], "phase_deg": case["phase2"]}],
                       "dips": []}
    st = m["stations"]
    st["ring_count"] = case["stations"]
    st["ring_distance"] = 7.0
    st["common"]["range_noise"] = case["noise"]
    st["common"]["registration"] = {"translation": case["registration"], "rotation_deg": 0.0}
    return m


def truth_bins(truth: dict, az, width=1.0) -> np.ndarray:
    taz = np.asarray(truth["junction"]["azimuth_deg"])
    tz = np.asarray(truth["junction"]["elevation"])
    return np.array([tz[np.abs(np.mod(taz - a + 180, 360) - 180) < width / 2].mean() for a in az])


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--pairs", type=int, default=12)
    ap.add_argument("--seed", type=int, default=9401)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--dir", type=Path, default=ROOT / "bench_scans" / "history_sweep")
    a = ap.parse_args(argv)
    rng = np.random.default_rng(a.seed)
    d = a.dir / f"seed{a.seed}"
    (d / "scans").mkdir(parents=True, exist_ok=True)
    cases, lines = [], ["scan,tag,survey_date,set"]
    t0 = time.perf_counter()
    for i in range(a.pairs):
        case = draw(rng)
        tag = f"SW-{i + 1:02d}"
        dates = ("2020-03-01", date_after("2020-03-01", case["years"]))
        case.update(tag=tag, dates=dates, truth={})
        for which, date in zip("ab", dates):
            name = f"{tag}_{date}"
            scan = d / "scans" / f"{name}.las"
            truth_path = d / "scans" / f"{name}.truth.json"
            if not scan.exists():
                run_synth(scene_from_mapping(scene(case, which, a.seed * 100 + 2 * i + (which == "b"), tag, date)),
                          d / "scans", name=name)
            case["truth"][which] = json.loads(truth_path.read_text())
            sets = f"tank.shell_height={case['height']:.3f} m; tank.yield_strength=250 MPa; output.plots=false"
            lines.append(f"scans/{name}.las,{tag},{date},{sets}")
        cases.append(case)
    (d / "manifest.csv").write_text("\n".join(lines) + "\n")
    print(f"{2 * a.pairs} scans ready in {time.perf_counter() - t0:.0f} s; running the batch", flush=True)
    res = run_batch(d / "manifest.csv", d / "out", workers=a.workers, force=True)
    print(f"batch: {res.engine}, {res.seconds:.0f} s, {res.n_failed} failed")
    hist = {h.tag: h for h in res.histories}
    print("| tank | D m | stations | noise mm | years | uniform true / meas +- se mm | z | tilt change true / meas +- se"
          " mm | z | dir err deg | bins within 1.96 se | caveat |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |")
    zu, zt, cov, flagged = [], [], [], []
    for c in cases:
        h = hist.get(c["tag"])
        ch = h.intervals[0].change if h and h.intervals else None
        if ch is None:
            print(f"| {c['tag']} | not compared: {h.intervals[0].note if h else 'no history'} |")
            continue
        z1 = (ch.mean - c["d_uniform"]) / ch.mean_se
        dv, ddir = c["d_tilt"]
        z2 = (ch.tilt_amplitude - dv) / ch.tilt_amplitude_se
        derr = (ch.tilt_low_azimuth_deg - ddir + 180) % 360 - 180
        true_d = truth_bins(c["truth"]["b"], ch.azimuth_deg) - truth_bins(c["truth"]["a"], ch.azimuth_deg)
        w = 1 / ch.difference_se ** 2
        shift = np.sum(w * (ch.difference - true_d)) / np.sum(w)
        inside = float(np.mean(np.abs(ch.difference - true_d - shift) < Z95 * ch.difference_se))
        zu.append(z1)
        zt.append(z2)
        cov.append(inside)
        flagged.append(bool(h.intervals[0].caveat))
        print(f"| {c['tag']} | {c['diameter']:.1f} | {c['stations']} | {c['noise'] * 1e3:.1f} | {c['years']:.2f} | "
              f"{c['d_uniform'] * 1e3:+.2f} / {ch.mean * 1e3:+.2f} +- {ch.mean_se * 1e3:.2f} | {z1:+.2f} | "
              f"{dv * 1e3:.2f} / {ch.tilt_amplitude * 1e3:.2f} +- {ch.tilt_amplitude_se * 1e3:.2f} | {z2:+.2f} | "
              f"{derr:+.1f} | {100 * inside:.1f} % | {'stations share no bins' if flagged[-1] else ''} |")
    zu, zt, cov, flagged = np.abs(zu), np.abs(zt), np.array(cov), np.array(flagged)
    for name, sel in (("all", np.ones(len(cov), bool)), ("without the caveat", ~flagged), ("with it", flagged)):
        if not sel.any():
            continue
        print(f"{name} ({sel.sum()}): uniform {np.mean(zu[sel] < Z95):.0%} within 1.96 sigma (max |z| "
              f"{zu[sel].max():.2f}); tilt change amplitude {np.mean(zt[sel] < Z95):.0%} (max |z| {zt[sel].max():.2f}); "
              f"per-azimuth coverage median {np.median(cov[sel]):.1%}, worst {np.min(cov[sel]):.1%}")
    print(f"{len(cov)} of {len(cases)} pairs compared")


if __name__ == "__main__":
    main()
