"""The local pool executor: contiguous chunks of frames in worker processes.

Each worker builds its own evaluator from the resolved graph (plain data) and shares only the
disk cache with the others. Chunks are contiguous so neighbouring frames, which share upstream
results (vectors for f and f+1), mostly land in the same worker's memory cache. Worker processes
start with ``forkserver`` (never a bare fork of a process whose OpenCV threads are running) and
pin OpenCV to their share of the cores so N workers do not fight over them.
"""

from __future__ import annotations

import multiprocessing as mp
import os
from collections import Counter
import logging
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from typing import Any

from graphcore.cache import Cache, DiskCache, MemoryCache
from graphcore.errors import MidframeError
from graphcore.evaluate import Evaluator
from graphcore.execute.plan import FrameResult, ProgressFn, RunReport, Task, render_task, split_chunks

__all__ = ["PoolExecutor", "start_evaluator", "run_chunk", "failed_chunk", "take_results"]

_worker: dict[str, Any] = {}
log = logging.getLogger("midframe.render")


def _init_worker(payload: dict[str, Any]) -> None:
    try:
        _worker["ev"] = start_evaluator(payload)
    except Exception as exc:  # reported per task by _run_chunk, not as a dead pool
        import traceback

        _worker["error"] = f"worker start-up failed: {type(exc).__name__}: {exc}\n{traceback.format_exc()}"


def take_results(results: list[FrameResult], collected: list[FrameResult], warned: set[str],
                 on_result: ProgressFn | None) -> None:
    """A finished chunk in the parent: each warning logged once per render, each result kept and
    reported."""
    for r in results:
        for w in r.warnings:
            if w not in warned:
                warned.add(w)
                log.warning("%s", w)
        collected.append(r)
        if on_result is not None:
            on_result(r)


def start_evaluator(payload: dict[str, Any]) -> Evaluator:
    """A worker process's evaluator for a render: OpenCV and BLAS pinned to ``payload['threads']``,
    the graph rebuilt from plain data, the shared disk cache opened (also used by the Dask executor)."""
    threads = payload.get("threads", 1)
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[var] = str(threads)
    import cv2

    cv2.setNumThreads(threads)
    # operator warnings travel back in FrameResult.warnings and are logged once by the parent
    logging.getLogger("midframe.render").setLevel(logging.ERROR)
    from graphcore.registry import Registry
    from graphcore.validate import graph_from_source

    registry = Registry.from_entry_points(payload.get("plugins") or [])
    graph = graph_from_source(payload["source"], registry=registry, file=payload["file"])
    disk = DiskCache(payload["cache_dir"]) if payload.get("cache_dir") else None
    cache = Cache(MemoryCache(payload["memory_bytes"]), disk)
    return Evaluator(graph, registry, cache, protected_paths=frozenset(payload["protected"]))


def run_chunk(ev: Evaluator, tasks: list[Task]) -> tuple[list[FrameResult], dict[str, int]]:
    """Render ``tasks`` (a contiguous chunk) on ``ev``; returns the results and the operator calls."""
    ev.calls.clear()
    ev.plan([(t.node_id, t.sample) for t in tasks])
    results = [render_task(ev, t) for t in tasks]
    return results, dict(ev.calls)


def failed_chunk(tasks: list[Task], message: str) -> tuple[list[FrameResult], dict[str, int]]:
    return [FrameResult(t.node_id, t.frame, "failure", message, view=t.view) for t in tasks], {}


def _run_chunk(tasks: list[Task]) -> tuple[list[FrameResult], dict[str, int]]:
    if "error" in _worker:
        return failed_chunk(tasks, _worker["error"])
    return run_chunk(_worker["ev"], tasks)


class PoolExecutor:
    """Runs tasks on ``jobs`` worker processes."""

    def __init__(self, jobs: int, *, memory_bytes: int = 1 << 30, plugins: list[str] | None = None):
        self.jobs = max(1, int(jobs))
        self.memory_bytes = memory_bytes
        self.plugins = plugins or []

    def run(self, ev: Evaluator, tasks: list[Task], on_result: ProgressFn | None = None) -> RunReport:
        report = RunReport()
        if not tasks:
            return report
        disk = ev.cache.disk
        payload = {"source": dict(ev.graph.source), "file": ev.graph.file,
                   "cache_dir": os.fspath(disk.root) if disk is not None else None,
                   "memory_bytes": max(1 << 20, self.memory_bytes // self.jobs),  # --memory is the total
                   "protected": sorted(ev.protected_paths),
                   "plugins": self.plugins, "threads": max(1, (os.cpu_count() or 1) // self.jobs)}
        # near-equal contiguous chunks (see plan.chunk_count): neighbouring frames stay together
        chunks = split_chunks(tasks, self.jobs)
        ctx = mp.get_context("forkserver")
        collected: list[FrameResult] = []
        calls: Counter[str] = Counter()
        warned: set[str] = set()
        try:
            with ProcessPoolExecutor(max_workers=min(self.jobs, len(chunks)), mp_context=ctx,
                                     initializer=_init_worker, initargs=(payload,)) as pool:
                futures = [pool.submit(_run_chunk, c) for c in chunks]
                for fut in as_completed(futures):
                    results, chunk_calls = fut.result()
                    calls.update(chunk_calls)
                    take_results(results, collected, warned, on_result)
        except BrokenProcessPool as exc:
            raise MidframeError(f"a worker process died ({exc}); {len(collected)} of {len(tasks)} frames "
                                "finished. Out of memory is the usual cause: try fewer --jobs or a smaller "
                                "--memory") from None
        collected.sort(key=lambda r: (r.node_id, r.frame, r.view))
        report.results = collected
        report.calls = calls
        return report
