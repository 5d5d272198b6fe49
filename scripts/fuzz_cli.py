"""Randomized hostile-input sweep of the command line, in real processes, with fresh seeds.

Each case mutates a valid input at random (a config key set to a random hostile value, a config file, a LAS file,
a survey CSV, a file of a run folder, a command-line option) and runs the command in a child process with a
time limit. Outcomes: ok (exit 0), clean (exit 2, one stderr line "chimeline: error: ..."), and the failures the
promise excludes: bug (exit 1 or a traceback), lines (more than one stderr line), hang (over the time limit),
dirty (a failed command that changed its output folder or left files beside it).

    python scripts/fuzz_cli.py --cases 300             # a fresh seed (printed); --seed S to repeat a sweep
    python scripts/fuzz_cli.py --cases 40 --family las

The suite keeps small seeded versions (tests/hostile, tests/*properties*); this script is for wide sweeps.
Failing cases are copied to fuzz_failures/ with the command line.
"""
from __future__ import annotations

import argparse
import dataclasses
import json
import os
import random
import shutil
import subprocess
import sys
import tempfile
import time
import typing
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "pipeline"))

from chimeline.config import ChimelineConfig  # noqa: E402

FAMILIES = ("set", "config", "las", "survey", "runfolder", "options")


def schema_keys():
    out = []
    for sec, tp in typing.get_type_hints(ChimelineConfig).items():
        if dataclasses.is_dataclass(tp):
            out += [f"{sec}.{f.name}" for f in dataclasses.fields(tp)]
    return out + ["seed", "profile", "tank", "nosuch.key"]


def hostile_value(r: random.Random) -> str:
    pool = [
        lambda: repr(r.choice([0.0, -0.0, 1e-300, 1e300, -1e300, 5e-324])),
        lambda: repr(r.uniform(-1e6, 1e6)),
        lambda: str(r.randint(-10**12, 10**12)),
        lambda: r.choice([".nan", ".inf", "-.inf", "~", "null", "yes", "''", "[]", "{}", "!!float", "!!int 0x",
                          "2026-13-45", "2026-02-29", "10**10**10 m", "36 ksi ksi", "1e999 ft", "auto", "all"]),
        lambda: "[" * r.randint(1, 60) + "1" + "]" * r.randint(0, 60),
        lambda: "[" + ", ".join(repr(r.uniform(-1e10, 1e10)) for _ in range(r.randint(0, 5))) + "]",
        lambda: "".join(r.choice("ab: -[]{}&*!|>'\"#,?\t") for _ in range(r.randint(1, 30))),
        lambda: "9" * r.randint(20, 6000),
        lambda: f"{r.uniform(-1e4, 1e4):.3g} {r.choice(['m', 'ft', 'ksi', 'MPa', 'kg', 'furlong', 'm**2', 'N/mm^2'])}",
    ]
    return r.choice(pool)()


def mutate_bytes(data: bytes, r: random.Random, region: int | None = None) -> bytes:
    b = bytearray(data)
    span = min(len(b), region or len(b))
    for _ in range(r.randint(1, 12)):
        op = r.random()
        i = r.randrange(max(span, 1))
        if op < 0.6 and b:
            b[i % len(b)] = r.randrange(256)
        elif op < 0.8:
            b[i:i] = bytes(r.randrange(256) for _ in range(r.randint(1, 8)))
        else:
            del b[i:i + r.randint(1, 16)]
    if r.random() < 0.2:
        b = b[: r.randrange(max(len(b), 1))]
    return bytes(b)


class Sweep:
    def __init__(self, work: Path, seed: int, timeout: float):
        self.work, self.seed, self.timeout = work, seed, timeout
        self.base = work / "base"
        self.env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT / "pipeline"), os.environ.get("PYTHONPATH", "")]),
                        PYTHONWARNINGS="always")

    def cli(self, *args, cwd=None, timeout=None):
        return subprocess.run([sys.executable, "-m", "chimeline", *map(str, args)], capture_output=True, text=True,
                              env=self.env, cwd=cwd, timeout=timeout or self.timeout)

    def prepare(self):
        """A small simulated scan, a run of it, a survey, an evaluation and a comparison (once; reused)."""
        b = self.base
        if (b / "ready").exists():
            return
        b.mkdir(parents=True, exist_ok=True)
        self.cli("-q", "synth", ROOT / "synthetic_scans" / "small_tank.yaml", "--out", b, "--no-plot", timeout=600)
        self.cli("-q", "run", b / "small_tank.las", "--out", b / "run", "--set", "output.plots=false", timeout=600)
        az = [i * 36.0 for i in range(10)]
        (b / "survey.csv").write_text("azimuth_deg,elevation,label\n" + "".join(
            f"{a:.1f},{10 + 0.01 * (i % 3):.4f},P{i}\n" for i, a in enumerate(az)))
        tank = ["--set", "tank.diameter=12", "--set", "tank.shell_height=6", "--set", "tank.yield_strength=250 MPa",
                "--set", "evaluate.input_units=m"]
        self.cli("-q", "evaluate", b / "survey.csv", "--out", b / "evaluation", *tank, timeout=600)
        self.cli("-q", "compare", b / "run", b / "run", "--out", b / "compare", timeout=600)
        (b / "ready").write_text("")

    # one case: (family, argv, target kind); inputs are written into the case folder
    def make_case(self, family: str, r: random.Random, d: Path):
        b = self.base
        tank = ["--set", "tank.diameter=12", "--set", "tank.shell_height=6", "--set", "tank.yield_strength=250 MPa",
                "--set", "evaluate.input_units=m"]
        if family == "set":
            pairs = []
            for _ in range(r.randint(1, 3)):
                pairs += ["--set", f"{r.choice(schema_keys())}={hostile_value(r)}"]
            return ["run", b / "small_tank.las", "--out", d / "out", "--set", "output.plots=false", *pairs], "run"
        if family == "config":
            src = (ROOT / "configs" / r.choice(["demo.yaml", "default.yaml", "noisy_scanner.yaml"])).read_bytes()
            (d / "c.yaml").write_bytes(mutate_bytes(src, r))
            return ["run", b / "small_tank.las", "--config", d / "c.yaml", "--out", d / "out", "--set",
                    "output.plots=false"], "run"
        if family == "las":
            (d / "s.las").write_bytes(mutate_bytes((b / "small_tank.las").read_bytes(), r, region=r.choice([375, 2048])))
            return ["run", d / "s.las", "--out", d / "out", "--set", "output.plots=false"], "run"
        if family == "survey":
            (d / "s.csv").write_bytes(mutate_bytes((b / "survey.csv").read_bytes(), r))
            return ["evaluate", d / "s.csv", "--out", d / "out", *tank], "evaluation"
        if family == "runfolder":
            run = d / "earlier"
            shutil.copytree(b / "run", run)
            name = r.choice(["profile.json", "profile.csv", "config.resolved.yaml", "manifest.json", "residuals.csv"])
            f = run / name
            f.write_bytes(mutate_bytes(f.read_bytes(), r))
            if r.random() < 0.5:
                return ["compare", b / "run", run, "--out", d / "out"], "compare"
            return ["rerun", run, "--out", d / "out", "--set", "output.plots=false"], "run"
        opt = r.choice(["points", "alpha", "decimate", "out", "density", "seed"])
        # valid-looking values stay small: a valid request for a huge scan is slow, not a hang
        small = {"points": r.uniform(-1e5, 1e6), "density": r.uniform(-0.5, 1.5), "seed": r.randint(-10, 10**19)}
        v = hostile_value(r) if r.random() < 0.7 else str(small.get(opt, r.uniform(-1e3, 1e3)))
        if opt in ("points", "density", "seed"):
            return ["synth", ROOT / "synthetic_scans" / "small_tank.yaml", "--out", d / "out", f"--{opt}", v,
                    "--no-plot"], "scans"
        if opt == "alpha":
            return ["compare", b / "run", b / "run", "--out", d / "out", "--alpha", v], "compare"
        if opt == "decimate":
            return ["evaluate", b / "survey.csv", "--out", d / "out", "--decimate", v, *tank], "evaluation"
        return ["run", b / "small_tank.las", "--out", v, "--set", "output.plots=false"], "none"

    def run_case(self, i: int, family: str):
        r = random.Random(f"{self.seed}:{i}")
        d = Path(tempfile.mkdtemp(prefix=f"case{i}-", dir=self.work))
        argv, kind = self.make_case(family, r, d)
        template = {"run": self.base / "run", "evaluation": self.base / "evaluation",
                    "compare": self.base / "compare"}.get(kind)
        if template is not None:
            shutil.copytree(template, d / "out")
        before = snapshot(d)
        t = time.perf_counter()
        try:
            p = self.cli(*argv, cwd=d)
            code, err = p.returncode, p.stderr
        except subprocess.TimeoutExpired:
            code, err = None, ""
        dt = time.perf_counter() - t
        lines = err.splitlines()
        if code is None:
            outcome = "hang"
        elif code == 0:
            outcome = "ok"
        elif code == 1 or "Traceback" in err:
            outcome = "bug"
        elif len(lines) != 1 or not lines[0].startswith("chimeline: error: "):
            outcome = "lines"
        elif snapshot(d) != before:
            outcome = "dirty"
        else:
            outcome = "clean"
        return {"case": i, "family": family, "outcome": outcome, "seconds": round(dt, 2), "exit": code,
                "stderr": err[-600:], "argv": [str(a) for a in argv], "dir": str(d)}


def snapshot(folder: Path) -> dict:
    return {str(p.relative_to(folder)): (p.read_bytes() if p.is_file() else None) for p in sorted(folder.rglob("*"))}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cases", type=int, default=120)
    ap.add_argument("--seed", type=int, default=None, help="default: a fresh seed from the clock (printed)")
    ap.add_argument("--family", choices=FAMILIES, action="append", help="only these families (repeatable)")
    ap.add_argument("--timeout", type=float, default=90.0, help="seconds before a case counts as a hang")
    ap.add_argument("--work", type=Path, default=ROOT / "fuzz_work")
    a = ap.parse_args(argv)
    seed = a.seed if a.seed is not None else int(time.time() * 1000) % 2**31
    print(f"seed {seed}; {a.cases} cases; time limit {a.timeout:.0f} s", flush=True)
    sweep = Sweep(a.work, seed, a.timeout)
    sweep.prepare()
    fams = a.family or list(FAMILIES)
    results = []
    for i in range(a.cases):
        res = sweep.run_case(i, fams[i % len(fams)])
        results.append(res)
        if res["outcome"] in ("ok", "clean"):
            shutil.rmtree(res["dir"], ignore_errors=True)
        else:
            keep = ROOT / "fuzz_failures" / f"seed{seed}-case{i}"
            shutil.copytree(res["dir"], keep, dirs_exist_ok=True)
            (keep / "case.json").write_text(json.dumps(res, indent=2))
            shutil.rmtree(res["dir"], ignore_errors=True)
            print(f"case {i} ({res['family']}): {res['outcome']}: {' '.join(res['argv'])[:200]}\n  {res['stderr'][-300:]}",
                  flush=True)
    outcomes = ["ok", "clean", "bug", "lines", "hang", "dirty"]
    print(f"\n| family | cases | {' | '.join(outcomes)} | slowest (s) |")
    print("| --- | --- |" + " --- |" * len(outcomes) + " --- |")
    for fam in fams + ["all"]:
        rs = [x for x in results if fam in ("all", x["family"])]
        if rs:
            counts = " | ".join(str(sum(x["outcome"] == o for x in rs)) for o in outcomes)
            print(f"| {fam} | {len(rs)} | {counts} | {max(x['seconds'] for x in rs):.1f} |")
    bad = [x for x in results if x["outcome"] not in ("ok", "clean")]
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
