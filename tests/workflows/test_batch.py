"""chimeline batch on real Dask clusters: a LocalCluster of two worker processes started here, and a scheduler
and a worker started as separate processes on 127.0.0.1 for --scheduler.

Two small scans of one invented tank two years apart (6 mm more uniform settlement, the tilt grown from 14 to
20 mm, lowest at 100 deg) and one corrupt scan: the fleet has three rows with the right statuses, the corrupt
job's error is one line, the history recovers the simulated change within its uncertainty, a second run skips
both good jobs, and the exit codes are as documented."""
import csv
import json
import os
import subprocess
import sys
import time

import numpy as np
import pytest

from chimeline.core.robust import Z95
from tests.helpers import cli_output, truth_bin_means

pytest.importorskip("distributed")

EARLY = dict(survey_date="2023-05-10", settlement__uniform=-0.004,
             settlement__tilt={"amplitude": 0.014, "low_azimuth_deg": 100})
LATE = dict(survey_date="2025-05-12", settlement__uniform=-0.010,
            settlement__tilt={"amplitude": 0.020, "low_azimuth_deg": 100})
SETS = "tank.shell_height=6 m; tank.yield_strength=250 MPa; output.plots=false"


@pytest.fixture(scope="module")
def fleet(simulate, tmp_path_factory):
    """(manifest, scans' truths, folder): two good scans of GM-TK-02 and a corrupt scan of GM-TK-09."""
    a, ta = simulate("small_tank.yaml", 131, **EARLY)
    b, tb = simulate("small_tank.yaml", 132, **LATE)
    d = tmp_path_factory.mktemp("fleet")
    (d / "scans").mkdir()
    (d / "scans" / "broken.las").write_bytes(b.read_bytes()[:3000])  # a scan cut short in transfer
    manifest = d / "fleet.csv"
    with open(manifest, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["scan", "tag", "survey_date", "set"])
        w.writerow([a, "GM-TK-02", "2023-05-10", SETS])
        w.writerow([b, "GM-TK-02", "2025-05-12", SETS])
        w.writerow(["scans/broken.las", "GM-TK-09", "2025-05-12", ""])  # relative to the manifest
    return manifest, ta, tb, d


@pytest.fixture(scope="module")
def first_batch(fleet):
    """The batch run once on a LocalCluster with two worker processes, then again on the same cluster."""
    from distributed import Client, LocalCluster

    from chimeline.workflows.batch import run_batch

    manifest, _, _, d = fleet
    out = d / "out"
    seen = []
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster, \
            Client(cluster) as client:
        first = run_batch(manifest, out, client=client, on_job=lambda oc, n, t: seen.append((oc.status, n, t)))
        snapshot = {name: (out / name).read_text() for name in ("fleet.csv", "fleet.json", "index.html")}
        second = run_batch(manifest, out, client=client)
    return first, second, seen, out, snapshot


def test_fleet_rows_statuses_and_the_one_line_error(fleet, first_batch):
    first, _, seen, out, snap = first_batch
    d = fleet[3]
    assert [o.status for o in first.outcomes] == ["done", "done", "failed"]
    assert first.exit_code == 3
    assert sorted(n for _, n, _ in seen) == [1, 2, 3] and {t for _, _, t in seen} == {3}
    rows = list(csv.DictReader(ln for ln in snap["fleet.csv"].splitlines() if not ln.startswith("#")))
    assert [(r["tag"], r["survey_date"], r["status"]) for r in rows] == [
        ("GM-TK-02", "2023-05-10", "done"), ("GM-TK-02", "2025-05-12", "done"), ("GM-TK-09", "2025-05-12", "failed")]
    err = rows[2]["error"]
    assert "broken.las" in err and "\n" not in err and "Traceback" not in err
    # the same line `chimeline run` prints for that scan (issue 12's funnel), without its "chimeline: error: "
    from click.testing import CliRunner

    from chimeline.cli import cli

    r = CliRunner().invoke(cli, ["run", str(d / "scans" / "broken.las"), "--out", str(d / "direct")])
    assert r.exit_code == 2 and cli_output(r).strip() == f"chimeline: error: {err}"
    assert rows[2]["verdict"] == "" and rows[2]["report"] == ""
    good = rows[1]
    assert good["verdict"] in ("acceptable", "indeterminate", "exceeds") and float(good["noise_sigma_m"]) > 0
    assert float(good["tilt_amplitude_m"]) == pytest.approx(0.020, abs=0.002)
    assert abs(float(good["tilt_low_azimuth_deg"]) - 100) < 5
    # each job's folder is what `chimeline run` writes, with the manifest's tag and date in its config
    js = json.loads((out / "GM-TK-02" / "2025-05-12" / "profile.json").read_text())
    assert js["tank"] == {"tag": "GM-TK-02", "survey_date": "2025-05-12"}
    assert not (out / "GM-TK-09" / "2025-05-12").exists()  # the failed job wrote nothing
    fj = json.loads(snap["fleet.json"])
    assert fj["status_counts"] == {"done": 2, "skipped": 0, "failed": 1} and "qualified tank engineer" in fj["caution"]
    html = snap["index.html"]
    assert "qualified tank engineer or authorized inspector" in html
    assert 'href="GM-TK-02/2025-05-12/report.html"' in html and err.split(":")[0] in html
    assert "Settlement history" in html and "GM-TK-02/history.json" in html


def test_history_shows_the_simulated_change_within_its_uncertainty(fleet, first_batch):
    _, ta, tb, _ = fleet
    out = first_batch[3]
    h = json.loads((out / "GM-TK-02" / "history.json").read_text())
    iv = h["intervals"][0]
    assert (iv["from_date"], iv["to_date"]) == ("2023-05-10", "2025-05-12")
    # truth: the junction elevation of both simulated scans, averaged over the same bins
    az = np.array(iv["per_azimuth"]["azimuth_deg"])
    true_d = truth_bin_means(tb, az, 1.0) - truth_bin_means(ta, az, 1.0)
    u = iv["uniform"]
    assert abs(u["mean_difference"] - (-0.006)) < 3 * u["mean_difference_se"] + 2e-4  # datum: see the docstring
    t = iv["tilt_change"]
    assert abs(t["amplitude"] - 0.006) < 3 * t["amplitude_se"] + 2e-4
    assert abs(t["low_azimuth_deg"] - 100) < 5
    d = np.array(iv["per_azimuth"]["difference"])
    sd = np.array(iv["per_azimuth"]["difference_se"])
    shift = np.average(d - true_d, weights=1 / sd ** 2)  # the two scans' datums differ by their levelling error
    assert abs(shift) < 3 * u["mean_difference_se"] + 2e-4
    assert np.mean(np.abs(d - true_d - shift) < Z95 * sd) > 0.9
    rate = np.array(iv["per_azimuth"]["rate_per_year"])
    assert np.allclose(rate, d / iv["years"])
    assert iv["tilt_amplitude_rate_per_year"] == pytest.approx(0.006 / iv["years"], abs=0.0015)
    # nothing out of plane was simulated: no significant shape change
    assert iv["out_of_plane_change"]["shape_change_p_value"] is None or \
        iv["out_of_plane_change"]["shape_change_p_value"] > 0.001
    with open(out / "GM-TK-02" / "history.csv") as fh:
        hrows = list(csv.DictReader(ln for ln in fh if not ln.startswith("#")))
    assert len(hrows) == len(az) and float(hrows[0]["difference_m"]) == d[0]


def test_second_run_skips_both_good_jobs(first_batch):
    _, second, _, out, _ = first_batch
    assert [o.status for o in second.outcomes] == ["skipped", "skipped", "failed"]
    assert second.exit_code == 3
    fj = json.loads((out / "fleet.json").read_text())
    assert [j["status"] for j in fj["jobs"]] == ["skipped", "skipped", "failed"]
    assert fj["jobs"][1]["verdict"] == second.rows[1].verdict is not None  # read back from the kept folder


@pytest.fixture
def scheduler_and_worker(tmp_path):
    """A Dask scheduler and one worker as separate processes on 127.0.0.1; stopped after the test."""
    sf = tmp_path / "scheduler.json"
    env = {**os.environ, "DASK_DISTRIBUTED__WORKER__DAEMON": "False"}
    procs = [subprocess.Popen([sys.executable, "-m", "dask", "scheduler", "--host", "127.0.0.1", "--port", "0",
                               "--no-dashboard", "--scheduler-file", str(sf)], env=env,
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)]
    address = None
    try:
        t0 = time.monotonic()
        while not sf.exists() or not sf.read_text().strip():
            assert time.monotonic() - t0 < 60, "the scheduler did not start"
            time.sleep(0.2)
        address = json.loads(sf.read_text())["address"]
        procs.append(subprocess.Popen([sys.executable, "-m", "dask", "worker", address, "--host", "127.0.0.1",
                                       "--nworkers", "1", "--nthreads", "1", "--no-dashboard"], env=env,
                                      stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        yield address
    finally:
        if address is not None:  # the scheduler stops its workers and itself; faster than SIGTERM to the worker
            from distributed import Client

            try:
                with Client(address, timeout="10s", set_as_default=False) as c:
                    c.shutdown()
            except (OSError, TimeoutError):
                pass
        for p in reversed(procs):
            try:
                p.wait(timeout=10)
            except subprocess.TimeoutExpired:
                p.terminate()
        for p in reversed(procs):
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()


def test_scheduler_option_runs_on_an_existing_cluster(fleet, first_batch, scheduler_and_worker, tmp_path):
    """--scheduler: the good jobs, already done, are skipped on the external worker (exit 0); the corrupt one
    fails there with its one line (exit 3)."""
    from click.testing import CliRunner

    from chimeline.cli import cli

    manifest, _, _, d = fleet
    out = first_batch[3]
    good = tmp_path / "good.csv"
    lines = manifest.read_text().splitlines()
    good.write_text("\n".join(lines[:3]) + "\n")
    r = CliRunner().invoke(cli, ["batch", str(good), "--out", str(out), "--scheduler", scheduler_and_worker])
    text = cli_output(r)
    assert r.exit_code == 0, text
    assert "[1/2]" in text and text.count(": skipped") == 2 and "qualified tank engineer" in text
    r = CliRunner().invoke(cli, ["batch", str(manifest), "--out", str(out), "--scheduler", scheduler_and_worker])
    text = cli_output(r)
    assert r.exit_code == 3, text
    failed = [ln for ln in text.splitlines() if ": failed: " in ln]
    assert len(failed) == 1 and "broken.las" in failed[0]
    prov = json.loads((out / "provenance.json").read_text())
    assert prov["engine"].startswith(f"the Dask cluster at {scheduler_and_worker}")


def test_local_cluster_from_the_cli_skips_then_force_redoes_with_the_same_bytes(fleet, first_batch, tmp_path):
    """--workers 2 starts (and closes) a local cluster: the done job is skipped (exit 0); --force runs it again and
    its folder's files come out byte for byte the same (same input, same config), provenance.json aside."""
    from click.testing import CliRunner

    from chimeline.cli import cli

    manifest, _, _, _ = fleet
    out = first_batch[3]
    one = tmp_path / "one.csv"
    one.write_text("\n".join(manifest.read_text().splitlines()[:2]) + "\n")
    folder = out / "GM-TK-02" / "2023-05-10"
    before = {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()}
    args = ["batch", str(one), "--out", str(out), "--workers", "2", "--memory-limit", "2GiB"]
    r = CliRunner().invoke(cli, args)
    assert r.exit_code == 0, cli_output(r)
    assert "[1/1] GM-TK-02 2023-05-10: skipped" in cli_output(r)
    assert "a local Dask cluster of 2 worker processes, 2.0 GiB each" in cli_output(r)
    r = CliRunner().invoke(cli, args + ["--force"])
    assert r.exit_code == 0, cli_output(r)
    assert "[1/1] GM-TK-02 2023-05-10: done" in cli_output(r)
    after = {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()}
    assert sorted(before) == sorted(after)
    changed = [n for n in before if before[n] != after[n]]
    assert changed == ["provenance.json"], changed  # time, host and timings live there only
    assert "manifest.json" in after


def test_is_current_reads_the_folders_manifest(fleet, first_batch, tmp_path):
    """Skipping rests on manifest.json: same kind, same input SHA-256, same resolved config hash, every listed file
    present with its size; any difference redoes the job."""
    import dataclasses
    import shutil

    from chimeline.config import load_config
    from chimeline.io.batch_manifest import read_batch_manifest
    from chimeline.workflows.batch import is_current

    manifest, _, _, _ = fleet
    out = first_batch[3]
    job = read_batch_manifest(manifest).jobs[1]
    src = out / job.tag / job.survey_date
    folder = tmp_path / "copy"
    shutil.copytree(src, folder)

    def resolved(j):
        return load_config(j.config, j.config_sets())[1]

    assert is_current(folder, job, resolved(job))
    other = dataclasses.replace(job, sets=job.sets + (("profile.bin_width_deg", 2.0),))
    assert not is_current(folder, other, resolved(other))  # another config
    assert not is_current(folder, dataclasses.replace(job, kind="evaluate"), resolved(job))  # another kind
    scan = tmp_path / "scan.las"
    scan.write_bytes(job.scan.read_bytes()[:-1] + b"\x01")  # one byte changed
    assert not is_current(folder, dataclasses.replace(job, scan=scan), resolved(job))
    (folder / "report.html").write_text("")  # a listed file damaged (its size differs)
    assert not is_current(folder, job, resolved(job))
    (folder / "report.html").unlink()
    assert not is_current(folder, job, resolved(job))
    assert not is_current(tmp_path / "none", job, resolved(job))
