"""Run many workflow variants: in this process, on a local Dask cluster, or on a running Dask scheduler.

A task is a small dict of paths and ``--set`` strings and its result a small dict of figures; the fields
themselves stay in the stage store, which every worker reaches by path (a shared file system for a
cluster of several machines).  Numerical-library threads are limited per worker so that the workers do
not oversubscribe the cores.
"""

from __future__ import annotations

import json
import logging
import os
import socket
import time
import traceback
from collections.abc import Callable, Iterable
from pathlib import Path

from .. import errors
from . import quantities

log = logging.getLogger(__name__)

#: environment variables that cap the thread pools of BLAS/OpenMP builds
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def run_variant(task: dict) -> dict:
    """Run one variant (``task``: id, workflow, sets, store, folder); return its table row, never raise.

    A variant whose results folder holds a successful summary whose stage keys match the current plan,
    with every entry still in the store, is not run again ("up to date")."""
    from ..flow import runner

    start = time.perf_counter()
    row = {"id": task["id"], "values": task["values"], "worker": f"{socket.gethostname()}:{os.getpid()}",
           "threads": {v: os.environ.get(v) for v in THREAD_VARIABLES}}
    try:
        record = _up_to_date(task)
        status = "up to date"
        if record is None:
            record = runner.run(task["workflow"], task["sets"], task["store"], task["folder"])
            status = "computed"
        stages = {name: _stage_status(st) for name, st in record["stages"].items()}
        row |= {"status": status, "stages": stages, "figures": quantities.flatten(record),
                "warnings": list(record.get("warnings", []))}
    except errors.ThermochainError as exc:
        row |= {"status": "failed", "error": "; ".join(exc.problems), "error_kind": type(exc).__name__}
    except Exception as exc:  # a bug or a crash in one variant must not stop the sweep
        row |= {"status": "failed", "error": f"{type(exc).__name__}: {exc}", "error_kind": "unexpected",
                "traceback": traceback.format_exc()}
    row["seconds"] = time.perf_counter() - start
    return row


def _stage_status(st: dict) -> str:
    method = str((st.get("solver") or {}).get("method", ""))
    return "superposed" if method.startswith("superposition") else st["status"]


def _up_to_date(task: dict) -> dict | None:
    from ..flow import runner

    try:
        previous = json.loads((Path(task["folder"]) / "summary.json").read_text())
    except (OSError, ValueError):
        return None
    if previous.get("status") != "ok":
        return None
    plan = runner.plan(task["workflow"], task["sets"], task["store"], task["folder"])
    for s in plan.stages:
        if previous["stages"].get(s.name, {}).get("key") != s.key or \
                not plan.store.holds(s.kind, s.key):
            return None
    for st in previous["stages"].values():
        st["status"] = "reused"
    return previous


def local_workers(requested: int | None) -> int:
    """Worker processes of a local cluster: as requested, at most one per core (more only compete for the
    cores and memory; 24 workers on 2 cores shut down with errors)."""
    cores = os.cpu_count() or 1
    if requested and requested > cores:
        log.warning("--workers %d is more than the %d cores of this machine; using %d worker processes",
                    requested, cores, cores)
    return min(requested or cores, cores)


class Executor:
    """Where tasks run: ``serial`` (this process), a new LocalCluster of ``workers`` processes, or the
    Dask scheduler at ``scheduler`` (e.g. tcp://10.0.0.5:8786)."""

    def __init__(self, scheduler: str | None = None, workers: int | None = None, threads: int = 1,
                 serial: bool = False):
        if serial and scheduler:
            raise errors.InputError("give either --serial or --scheduler, not both")
        if workers is not None and workers < 1 or threads < 1:
            raise errors.InputError(f"--workers and --threads must be at least 1 (got {workers}, {threads})")
        self.scheduler, self.workers, self.threads, self.serial = scheduler, workers, threads, serial
        self._client = self._cluster = None

    def describe(self) -> str:
        if self.serial:
            return "serial, in this process"
        if self.scheduler:
            return f"Dask scheduler {self.scheduler}"
        return (f"Dask LocalCluster, {self._workers} worker processes, 1 task thread and "
                f"{self.threads} numerical-library thread(s) each")

    def __enter__(self):
        if self.serial:
            return self
        try:
            import dask
            from dask.distributed import Client, LocalCluster
        except ImportError:  # pragma: no cover - a dependency
            raise errors.InputError("the sweep needs dask[distributed]; install it or use --serial") from None
        if self.scheduler:
            logging.getLogger("distributed").setLevel(max(logging.WARNING, logging.getLogger().level))
            try:
                self._client = Client(self.scheduler, timeout="10s")
            except (OSError, TimeoutError) as exc:
                raise errors.InputError(f"--scheduler {self.scheduler}: cannot reach a Dask scheduler there "
                                        f"({exc}); start one with 'dask scheduler' (docs/studies.md)") from None
            return self
        logging.getLogger("distributed").setLevel(max(logging.WARNING, logging.getLogger().level))
        self._workers = local_workers(self.workers)
        limits = {v: self.threads for v in THREAD_VARIABLES}
        environ = dict(dask.config.get("distributed.nanny.pre-spawn-environ", {})) | limits
        with dask.config.set({"distributed.nanny.pre-spawn-environ": environ}):
            self._cluster = LocalCluster(n_workers=self._workers, threads_per_worker=1, processes=True,
                                         dashboard_address=None, silence_logs=logging.ERROR)
        self._client = Client(self._cluster)
        return self

    def __exit__(self, *exc):
        if self._client is not None:
            self._client.close()
        if self._cluster is not None:
            self._cluster.close()
        self._client = self._cluster = None

    def one(self, function: Callable, *args):
        """Run one task and return its (small) result."""
        if self.serial:
            return function(*args)
        return self._client.submit(function, *args, pure=False).result()

    def map(self, function: Callable, tasks: Iterable[dict], done: Callable[[dict], None]) -> list[dict]:
        """Run ``function`` on every task; ``done`` receives each result as it arrives."""
        tasks = list(tasks)
        if self.serial:
            out = []
            for t in tasks:
                out.append(function(t))
                done(out[-1])
            return out
        from dask.distributed import as_completed

        futures = {self._client.submit(function, t, pure=False): t for t in tasks}
        out = []
        for future in as_completed(futures):
            t = futures[future]
            try:
                row = future.result()
            except Exception as exc:  # the worker died or the task could not be sent
                row = {"id": t["id"], "values": t["values"], "status": "failed", "error_kind": "worker",
                       "error": f"the worker running this variant failed: {type(exc).__name__}: {exc}"}
            out.append(row)
            done(row)
        return out
