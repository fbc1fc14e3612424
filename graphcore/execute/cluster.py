"""The Dask distributed executor: ``midframe run --scheduler tcp://HOST:PORT`` (or ``local:N``).

For studios without a farm queue of their own, a running Dask scheduler (Dask distributed, the
``farm`` extra) takes the render: the tasks go out in contiguous chunks of frames (neighbouring
frames share upstream results such as vectors), each worker process builds the evaluator once from
the resolved graph (plain data) and keeps it for later chunks of the same render, and every
worker shares the disk cache (``--cache`` on storage all hosts see). A chunk whose worker dies is
run again elsewhere (Dask's own rescheduling plus ``retries``). Progress is reported from the
client as chunks finish. ``local:N`` starts a local cluster of N single-threaded worker processes
for the length of the render.

Workers must run the same midframe (and plugins) as the client: start them from the same
installation (``dask worker tcp://HOST:PORT`` in its environment). Outputs are pixel-identical to a
serial render: each worker pins OpenCV and the BLAS libraries to one thread.

Task transport between the client and the workers uses Dask's own serialisation (trusted processes
of one render); the disk cache itself never stores pickles.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import uuid
from collections import Counter
from typing import Any

from graphcore.errors import InputError
from graphcore.evaluate import Evaluator
from graphcore.execute.plan import FrameResult, ProgressFn, RunReport, Task, split_chunks

__all__ = ["DaskExecutor", "CONNECT_TIMEOUT"]

log = logging.getLogger("midframe.render")

#: Seconds to wait for a scheduler before giving up with a clear error.
CONNECT_TIMEOUT = 10
#: Times a chunk is retried after a failure of its worker.
RETRIES = 2

_evaluators: dict[str, Any] = {}


def _keep_freed_memory() -> None:
    """Undo the aggressive memory trimming Dask's nanny sets for its workers (``MALLOC_TRIM_THRESHOLD_``
    = 64 KiB): with it every large array freed goes back to the system and the next one faults its
    pages in again, which made 2K frames about three times slower on a worker than in a plain
    process. glibc only (elsewhere nothing happens)."""
    import ctypes

    try:
        libc = ctypes.CDLL("libc.so.6")
        libc.mallopt(-1, 1 << 30)      # M_TRIM_THRESHOLD: keep up to 1 GiB of freed memory
        libc.mallopt(-3, 256 << 20)    # M_MMAP_THRESHOLD: blocks below 256 MiB come from the heap
    except (OSError, AttributeError):
        pass


def _run_chunk(payload: dict[str, Any], digest: str, tasks: list[Task]) -> tuple[list[FrameResult], dict[str, int]]:
    """Runs on a Dask worker: render ``tasks`` with the evaluator of ``payload`` (built once per
    worker process and render)."""
    from graphcore.execute.pool import failed_chunk, run_chunk, start_evaluator

    ev = _evaluators.get(digest)
    if ev is None:
        _keep_freed_memory()
        try:
            ev = start_evaluator(payload)
        except Exception as exc:
            return failed_chunk(tasks, f"worker start-up failed: {type(exc).__name__}: {exc}")
        _evaluators.clear()            # one render at a time per worker: drop older evaluators
        _evaluators[digest] = ev
    return run_chunk(ev, tasks)


class DaskExecutor:
    """Runs tasks on a Dask distributed cluster."""

    def __init__(self, scheduler: str, *, memory_bytes: int = 1 << 30, plugins: list[str] | None = None):
        self.scheduler = scheduler
        self.memory_bytes = memory_bytes
        self.plugins = plugins or []
        self.jobs = 0          # known once connected

    def _client(self):
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError:
            raise InputError("--scheduler needs Dask distributed, which is not installed", field="--scheduler",
                             fix="pip install 'midframe[farm]' (or dask[distributed])") from None
        # Dask's own INFO chatter (workers, comms) is not the render's business: warnings only
        for name in list(logging.root.manager.loggerDict):
            if name == "distributed" or name.startswith("distributed."):
                logging.getLogger(name).setLevel(logging.WARNING)
        if self.scheduler.startswith("local:"):
            try:
                n = int(self.scheduler.split(":", 1)[1])
            except ValueError:
                n = 0
            if n < 1:
                raise InputError(f"{self.scheduler!r} names no worker count", field="--scheduler",
                                 fix="write local:N with N >= 1, e.g. local:2")
            cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None,
                                   silence_logs=logging.WARNING)
            return Client(cluster), cluster
        try:
            client = Client(self.scheduler, timeout=CONNECT_TIMEOUT)
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(f"cannot reach the Dask scheduler at {self.scheduler} within {CONNECT_TIMEOUT} s "
                             f"({type(exc).__name__}: {exc})", field="--scheduler",
                             fix="start it (dask scheduler) and its workers (dask worker ADDRESS), check the "
                                 "address and port, or render with --jobs N on this machine") from None
        return client, None

    def run(self, ev: Evaluator, tasks: list[Task], on_result: ProgressFn | None = None) -> RunReport:
        from dask.distributed import as_completed

        from graphcore.execute.pool import take_results

        report = RunReport()
        if not tasks:
            return report
        client, cluster = self._client()
        try:
            workers = client.scheduler_info().get("workers", {})
            if not workers:
                client.wait_for_workers(1, timeout=CONNECT_TIMEOUT)
                workers = client.scheduler_info().get("workers", {})
            self.jobs = max(1, len(workers))
            disk = ev.cache.disk
            payload = {"source": dict(ev.graph.source), "file": ev.graph.file,
                       "cache_dir": os.fspath(disk.root) if disk is not None else None,
                       "memory_bytes": self.memory_bytes, "protected": sorted(ev.protected_paths),
                       "plugins": self.plugins, "threads": 1}
            digest = hashlib.sha256(json.dumps(payload, sort_keys=True, default=str).encode()).hexdigest()
            chunks = split_chunks(tasks, self.jobs)
            run_id = uuid.uuid4().hex[:8]
            futures = [client.submit(_run_chunk, payload, digest, c, key=f"midframe-{run_id}-{i}",
                                     retries=RETRIES, pure=False) for i, c in enumerate(chunks)]
            collected: list[FrameResult] = []
            calls: Counter[str] = Counter()
            warned: set[str] = set()
            for fut in as_completed(futures):
                try:
                    results, chunk_calls = fut.result()
                except Exception as exc:         # the chunk failed on every try
                    i = futures.index(fut)
                    results = [FrameResult(t.node_id, t.frame, "failure", f"chunk lost on the cluster after "
                                           f"{RETRIES + 1} tries: {type(exc).__name__}: {exc}", view=t.view)
                               for t in chunks[i]]
                    chunk_calls = {}
                calls.update(chunk_calls)
                take_results(results, collected, warned, on_result)
        finally:
            client.close()
            if cluster is not None:
                cluster.close()
        collected.sort(key=lambda r: (r.node_id, r.frame, r.view))
        report.results = collected
        report.calls = calls
        return report
