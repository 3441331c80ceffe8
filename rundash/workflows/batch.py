"""Batch re-processing: :func:`rundash.workflows.pipeline.process_run` over many runs on Dask.

``reprocess(url, run_ids)`` sends one task per run to a Dask cluster — a local one of
worker processes by default (``dask.distributed.LocalCluster``, one single-threaded
worker per core), or a running scheduler given by its address — and collects one
:class:`RunOutcome` per run:

- each task opens the database by URL in its worker process and calls ``process_run``,
  which replaces the run's results in **one write transaction**: a task that fails, or a
  worker that dies mid-task, leaves the run's previous results as they were;
- a worker that dies is replaced, and the scheduler runs its task again on another
  worker (up to Dask's ``distributed.scheduler.allowed-failures``, default 3); a run whose
  task keeps killing workers is reported as failed;
- a run that cannot be processed (``RundashError``: no tach edges, too few revolutions,
  ...) is reported with its one-line reason; the other runs go on.

Numerical libraries in the workers are held to one thread each (``OMP_NUM_THREADS`` and
friends), so N workers use N cores. Needs the ``fleet`` extra (dask[distributed]).
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass, field
from typing import Any, Callable, Sequence

from rundash.errors import ConfigError, RundashError
from rundash.progress import Progress, no_progress

THREAD_ENV = {k: "1" for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                               "NUMEXPR_NUM_THREADS")}


@dataclass(frozen=True)
class RunOutcome:
    """One run's re-processing: ``ok`` with its verdict, or the reason it failed."""

    run_id: int
    ok: bool
    verdict: str | None = None
    n_findings: int = 0
    elapsed_s: float = 0.0
    error: str | None = None

    def line(self) -> str:
        if self.ok:
            return (f"run {self.run_id}: processed in {self.elapsed_s:.1f} s, verdict "
                    f"{self.verdict or 'none'} ({self.n_findings} critical-speed findings)")
        return f"run {self.run_id}: FAILED: {self.error}"


@dataclass
class BatchReport:
    outcomes: list[RunOutcome] = field(default_factory=list)
    n_workers: int = 0
    scheduler: str = ""
    elapsed_s: float = 0.0

    @property
    def n_ok(self) -> int:
        return sum(o.ok for o in self.outcomes)

    @property
    def failed(self) -> list[RunOutcome]:
        return [o for o in self.outcomes if not o.ok]

    def summary(self) -> str:
        rate = len(self.outcomes) / self.elapsed_s if self.elapsed_s > 0 else 0.0
        return (f"{self.n_ok} of {len(self.outcomes)} runs processed, {len(self.failed)} "
                f"failed, in {self.elapsed_s:.1f} s on {self.n_workers} workers "
                f"({rate:.2f} runs/s; scheduler {self.scheduler})")


_OPEN: dict[str, Any] = {}


def _database(url: str):
    """One open database per worker process and URL (engines do not cross processes)."""
    from rundash.storage.engine import open_database
    db = _OPEN.get(url)
    if db is None:
        db = _OPEN[url] = open_database(url)
    return db


def process_one(url: str, run_id: int, params: dict[str, Any] | None = None) -> RunOutcome:
    """The task a worker runs: process one run, its results saved in one transaction."""
    from rundash.workflows.pipeline import ProcessingParams, process_run

    t0 = time.monotonic()
    try:
        p = ProcessingParams(**{**(params or {}), **_tuples(params or {})})
        res = process_run(_database(url), run_id, params=p)
    except RundashError as exc:
        return RunOutcome(run_id=run_id, ok=False, error=f"{type(exc).__name__}: {exc}",
                          elapsed_s=time.monotonic() - t0)
    f = res.findings or {}
    return RunOutcome(run_id=run_id, ok=True, verdict=f.get("run_verdict"),
                      n_findings=len(f.get("criticals", [])), elapsed_s=time.monotonic() - t0)


def _tuples(params: dict[str, Any]) -> dict[str, Any]:
    out = {}
    if params.get("orders") is not None:
        out["orders"] = tuple(params["orders"])
    if params.get("slow_roll_rpm") is not None:
        out["slow_roll_rpm"] = tuple(params["slow_roll_rpm"])
    return out


def local_cluster(n_workers: int):
    """A local Dask cluster of ``n_workers`` single-threaded worker processes."""
    from dask.distributed import LocalCluster
    return LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                        dashboard_address=None, env=dict(THREAD_ENV), silence_logs=40)


def reprocess(url: str, run_ids: Sequence[int], *, workers: int = 2,
              scheduler: str | None = None, params: dict[str, Any] | None = None,
              progress: Progress = no_progress, log: Callable[[str], None] | None = None
              ) -> BatchReport:
    """Process ``run_ids`` of the database at ``url`` in parallel; see the module docstring.

    ``workers`` sizes the local cluster (ignored with ``scheduler``, a running Dask
    scheduler's address such as ``tcp://10.0.0.5:8786``). ``params`` are
    :class:`~rundash.workflows.pipeline.ProcessingParams` fields as a dict. Returns a
    :class:`BatchReport` with one outcome per run, in the order given.
    """
    if workers < 1:
        raise ConfigError(f"Invalid value for 'workers': allowed 1 or more, got {workers!r}")
    try:
        from dask.distributed import Client, as_completed
    except ImportError:
        raise ConfigError("batch re-processing needs Dask: install rundash[fleet] "
                          "(dask[distributed])") from None
    t0 = time.monotonic()
    cluster = None
    try:
        if scheduler:
            client = Client(scheduler, timeout="20s")
        else:
            cluster = local_cluster(workers)
            client = Client(cluster)
    except OSError as exc:
        if cluster is not None:
            cluster.close()
        raise ConfigError(f"cannot reach the Dask scheduler {scheduler}: {exc}") from None
    report = BatchReport(scheduler=scheduler or "local cluster")
    try:
        report.n_workers = len(client.scheduler_info().get("workers", {}))
        token = f"{os.getpid()}-{time.time_ns()}"
        futures = {client.submit(process_one, url, int(r), params, key=f"reprocess-{r}-{token}",
                                 pure=False): int(r) for r in run_ids}
        done: dict[int, RunOutcome] = {}
        progress(0.0, "reprocessing")
        for fut in as_completed(futures):
            rid = futures[fut]
            try:
                out = fut.result()
            except Exception as exc:  # a dead worker (KilledWorker) or a bug in a task
                out = RunOutcome(run_id=rid, ok=False, error=f"{type(exc).__name__}: {exc}")
            done[rid] = out
            if log is not None:
                log(out.line())
            progress(len(done) / max(len(futures), 1), "reprocessing")
        report.outcomes = [done[int(r)] for r in run_ids]
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    report.elapsed_s = time.monotonic() - t0
    return report
