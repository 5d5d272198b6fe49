"""chimeline batch: every job of a manifest as a Dask task, then the fleet table, the tank histories and the
index page.

Jobs run on a Dask cluster: a local one started here (``workers`` processes of one thread, a memory limit each)
or an existing one (``scheduler`` address, or a ``client`` the caller made). Each job runs on its worker exactly
as ``chimeline run`` or ``chimeline evaluate`` would (``workflows.run.run_scan``, ``workflows.evaluate.
evaluate_file``) into ``OUT/<tag>/<survey_date>/``, so the worker reads the scan: paths must be visible to
every worker. A ``ChimelineError`` (a bad scan, a stage that cannot produce a result) fails that job alone and
is not retried; any other exception (a worker that died, a full disk) is retried by Dask (``retries``) and then
fails the job. A job whose folder already holds the same kind of result from the same input (SHA-256 of every
input file) and the same resolved config is skipped unless ``force``.
"""
from __future__ import annotations

import logging
import os
import socket
import time
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Optional

from ..config import config_hash, load_config
from ..core.hashing import sha256_file
from ..errors import ChimelineError, ConfigError, DependencyError, InputError, one_line as message_line
from ..io.atomic import FolderLock, check_target, check_writable, json_text, write_files
from ..io.batch_manifest import BatchJob, read_batch_manifest
from ..io.readers import expand_inputs
from ..io.runfiles import KIND_EVALUATION, KIND_RUN, provenance_record, read_manifest
from ..report.fleet import fleet_outputs
from ..version import __version__
from .evaluate import evaluate_file
from .fleet import FleetRow, read_fleet_row, tank_histories
from .run import run_scan

log = logging.getLogger(__name__)

EXIT_SOME_FAILED = 3  # the batch ran, some jobs failed (their rows carry the error)
WORKER_WAIT_S = 60.0  # how long to wait for the first worker of an existing cluster


@dataclass(frozen=True)
class JobOutcome:
    """What a job's task returned (or its failure, as recorded by the client)."""

    index: int  # position in the manifest
    tag: str
    survey_date: str
    kind: str  # run | evaluate
    status: str  # done | failed | skipped
    error: str = ""  # one line, for a failed job
    seconds: float = 0.0  # s on the worker
    worker: str = ""  # the worker's host and process


@dataclass(frozen=True)
class BatchResult:
    out_dir: Path
    manifest: Path
    outcomes: tuple  # JobOutcome, manifest order
    rows: tuple  # FleetRow, manifest order
    histories: tuple  # TankHistory
    engine: str  # the cluster, in words
    seconds: float  # s, wall time of the whole batch

    @property
    def n_failed(self) -> int:
        return sum(o.status == "failed" for o in self.outcomes)

    @property
    def exit_code(self) -> int:
        return EXIT_SOME_FAILED if self.n_failed else 0


def one_line(exc: BaseException) -> str:
    """A failed job's error as the one line the command line would print for it (after ``chimeline: error:``):
    a ChimelineError's message; anything else as the CLI shows a bug, ``internal error: Type: message``."""
    if isinstance(exc, ChimelineError):
        return message_line(exc)
    return f"internal error: {type(exc).__name__}: {message_line(exc, 300)}"


def _job_inputs(job: BatchJob) -> list:
    """The job's input files (several for a multi-file scan)."""
    if job.kind == "evaluate":
        return [job.scan]
    return [Path(p) for p in expand_inputs([job.scan])]


def is_current(folder: Path, job: BatchJob, resolved: dict) -> bool:
    """The folder holds this job's result: its manifest.json names the same kind, the same input files (SHA-256, in
    order) and the same resolved config hash, and every file it lists is there with its size."""
    try:
        m = read_manifest(folder)
    except ChimelineError:  # a damaged manifest: redo the job (its publish replaces the folder)
        return False
    if m is None or m.kind != (KIND_RUN if job.kind == "run" else KIND_EVALUATION):
        return False
    if m.config_sha256 != config_hash(resolved):
        return False
    have = [i.sha256 for i in m.inputs if i.role in ("scan", "survey", "profile")]
    try:
        want = [sha256_file(p) for p in _job_inputs(job)]
    except (OSError, ChimelineError):
        return False  # the input is gone or unreadable: the job runs and fails with the reader's message
    if have != want:
        return False
    for rel, info in m.files.items():
        p = folder / rel
        if not p.is_file() or (isinstance(info, dict) and p.stat().st_size != info.get("bytes")):
            return False
    return True


def _where() -> str:
    return f"{socket.gethostname()}:{os.getpid()}"


def run_job(job: BatchJob, out_root: str, force: bool = False, index: int = 0,
            quiet_logs: bool = True) -> JobOutcome:
    """One job, on a Dask worker: skip it when its folder is current, else run or evaluate into it.

    A ChimelineError ends as a failed outcome (not retried: the same input fails the same way); anything else
    propagates, so that Dask retries the task."""
    if quiet_logs:  # the worker's own log stays readable; results and errors travel in the outcome
        logging.getLogger("chimeline").setLevel(logging.WARNING)
    t0 = time.perf_counter()
    folder = Path(out_root) / job.tag / job.survey_date
    base = dict(index=index, tag=job.tag, survey_date=job.survey_date, kind=job.kind, worker=_where())
    try:
        _, resolved, _ = load_config(job.config, job.config_sets())
        if not force and folder.is_dir() and is_current(folder, job, resolved):
            return JobOutcome(status="skipped", seconds=time.perf_counter() - t0, **base)
        if job.kind == "run":
            run_scan(job.scan, folder, job.config, job.config_sets())
        else:
            evaluate_file(job.scan, folder, job.config, job.config_sets())
    except ChimelineError as exc:
        return JobOutcome(status="failed", error=one_line(exc), seconds=time.perf_counter() - t0, **base)
    return JobOutcome(status="done", seconds=time.perf_counter() - t0, **base)


def worker_version() -> str:
    """The chimeline version a worker runs (checked against the client's before any job)."""
    return __version__


def check_jobs(jobs) -> None:
    """Every job's config resolves (file, keys, values) before any work: a ConfigError names the row."""
    for job in jobs:
        if job.config is not None and not job.config.is_file():
            raise ConfigError(f"{job.where}: config file not found: {job.config}")
        try:
            load_config(job.config, job.config_sets())
        except ConfigError as exc:
            raise ConfigError(f"{job.where}: {exc}") from None


@contextmanager
def dask_client(workers: Optional[int] = None, memory_limit="auto", scheduler: Optional[str] = None, client=None):
    """(client, description) of the cluster the jobs run on; a local cluster started here is closed after."""
    try:
        from distributed import Client, LocalCluster
    except ImportError as exc:  # pragma: no cover - a dependency of the package
        raise DependencyError(f"batch needs dask.distributed ({exc}); install it: pip install 'dask[distributed]'") \
            from None
    if not log.isEnabledFor(logging.DEBUG):  # the cluster's own INFO lines (start, stop) only with -v
        for name in ("distributed", "tornado"):
            logging.getLogger(name).setLevel(logging.WARNING)
    if client is not None:
        yield client, f"the given Dask client ({client.scheduler.address})"
        return
    if scheduler is not None:
        try:
            c = Client(scheduler, timeout="15s", set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(f"--scheduler {scheduler}: cannot connect ({one_line(exc)}); start a scheduler there "
                             f"(dask scheduler) or check the address") from None
        try:
            try:
                c.wait_for_workers(1, timeout=WORKER_WAIT_S)
            except (TimeoutError, OSError):
                raise InputError(f"--scheduler {scheduler}: no worker joined within {WORKER_WAIT_S:.0f} s; start "
                                 f"workers with: dask worker {scheduler}") from None
            n = len(c.nthreads())
            yield c, f"the Dask cluster at {scheduler} ({n} worker{'s' if n != 1 else ''} at the start)"
        finally:
            c.close()
        return
    n = workers or _cores()
    cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, memory_limit=memory_limit,
                           dashboard_address=":0", silence_logs=logging.ERROR)
    try:
        c = Client(cluster, set_as_default=False)
        try:
            mem = cluster.workers[next(iter(cluster.workers))].memory_manager.memory_limit if cluster.workers else None
            yield c, (f"a local Dask cluster of {n} worker process{'es' if n != 1 else ''}"
                      + (f", {mem / 2 ** 30:.1f} GiB each" if mem else ""))
        finally:
            c.close()
    finally:
        cluster.close()


def _cores() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not Linux
        return max(1, os.cpu_count() or 1)


def _check_workers(client) -> None:
    """Every worker imports chimeline at the client's version (a mismatch would give other results)."""
    try:
        versions = client.run(worker_version)
    except (ImportError, ModuleNotFoundError) as exc:
        raise DependencyError(f"the Dask workers cannot import chimeline ({one_line(exc)}); install chimeline "
                              f"{__version__} in every worker's environment") from None
    bad = {w: v for w, v in versions.items() if v != __version__}
    if bad:
        w, v = next(iter(bad.items()))
        raise DependencyError(f"Dask worker {w} runs chimeline {v}, this client {__version__}; install the same version "
                              f"on every worker ({len(bad)} differ)")


def run_batch(manifest, out_dir, *, workers: Optional[int] = None, memory_limit="auto",
              scheduler: Optional[str] = None, client=None, retries: int = 0, force: bool = False,
              on_job: Optional[Callable] = None) -> BatchResult:
    """Run every job of ``manifest`` and write the fleet outputs into ``out_dir``.

    ``on_job(outcome, n_finished, n_jobs)`` is called on the client as each job finishes (in finishing order).
    Raises ConfigError for a bad manifest (nothing is run); job failures are recorded in their rows.
    """
    t0 = time.perf_counter()
    m = read_batch_manifest(manifest)
    out = check_target(out_dir, replaced=False)
    check_writable(out)
    check_jobs(m.jobs)
    outcomes: list = [None] * len(m.jobs)
    lock = FolderLock(out)  # one batch at a time writes DIR's fleet files (each job locks its own folder too)
    out.parent.mkdir(parents=True, exist_ok=True)
    lock.acquire()
    try:
        return _run_locked(m, out, t0, outcomes, workers, memory_limit, scheduler, client, retries, force, on_job)
    finally:
        lock.release()


def _run_locked(m, out: Path, t0: float, outcomes: list, workers, memory_limit, scheduler, client, retries, force,
                on_job) -> BatchResult:
    with dask_client(workers, memory_limit, scheduler, client) as (c, engine):
        from distributed import as_completed

        _check_workers(c)
        log.info("batch: %d job(s) on %s", len(m.jobs), engine)
        futures = {}
        for i, job in enumerate(m.jobs):
            fut = c.submit(run_job, job, str(out), force, i, key=f"chimeline-job-{i}-{job.tag}-{job.survey_date}",
                           retries=retries, pure=False)
            futures[fut] = i
        for n, fut in enumerate(as_completed(list(futures), loop=c.loop), start=1):
            i = futures[fut]
            job = m.jobs[i]
            try:
                oc = fut.result()
            except Exception as exc:  # the task failed after Dask's retries (worker died, bug, disk full)
                oc = JobOutcome(index=i, tag=job.tag, survey_date=job.survey_date, kind=job.kind, status="failed",
                                error=one_line(exc))
            outcomes[i] = oc
            if on_job is not None:
                on_job(oc, n, len(m.jobs))
    rows = tuple(_row(out, oc) for oc in outcomes)
    histories = tank_histories(out, rows)
    seconds = time.perf_counter() - t0
    files = fleet_outputs(rows, histories, manifest=str(m.path))
    files["provenance.json"] = json_text(_provenance(engine, seconds, outcomes, force, retries))
    write_files(out, files)
    return BatchResult(out_dir=out, manifest=m.path, outcomes=tuple(outcomes), rows=rows, histories=histories,
                       engine=engine, seconds=seconds)


def _provenance(engine: str, seconds: float, outcomes, force: bool, retries: int) -> dict:
    """provenance.json of the batch folder: where, when and how fast (the file two identical batches differ in)."""
    return provenance_record("batch", {"total": seconds}, engine=engine, force=force, retries=retries,
                             jobs=[{"tag": o.tag, "survey_date": o.survey_date, "status": o.status,
                                    "seconds": round(o.seconds, 3), "worker": o.worker} for o in outcomes])


def _row(out: Path, oc: JobOutcome) -> FleetRow:
    """The job's fleet row; a finished folder that cannot be read back makes the row failed, with the reason."""
    seconds = oc.seconds if oc.status == "done" else None
    try:
        return read_fleet_row(out, oc.tag, oc.survey_date, oc.kind, oc.status, oc.error, seconds)
    except ChimelineError as exc:
        return read_fleet_row(out, oc.tag, oc.survey_date, oc.kind, "failed", one_line(exc), seconds)
