"""Render a graph file end to end: load, plan, guard the sources, execute. Used by ``midframe run``
and by the demo, so both take the same path."""

from __future__ import annotations

import logging
import os
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field

from graphcore.cache import Cache, DiskCache, MemoryCache
from graphcore.errors import GraphError, InputError
from graphcore.evaluate import Evaluator
from graphcore.execute.plan import (FrameResult, RunReport, check_targets, make_tasks, output_frames,
                                    protected_paths, split_complete, unwritable_outputs)
from graphcore.execute.pool import PoolExecutor
from graphcore.execute.serial import SerialExecutor
from graphcore.registry import FrameRange, Registry, default_registry
from graphcore.spec import Graph
from graphcore.validate import load_graph

__all__ = ["render", "Rendered"]

log = logging.getLogger("midframe.render")


@dataclass
class Rendered:
    graph: Graph
    frames: list[int]
    report: RunReport
    warnings: list[GraphError] = field(default_factory=list)
    render_warnings: list[str] = field(default_factory=list)


def render(source, *, sets: Iterable[str] = (), defaults: str | os.PathLike[str] | None = None,
           frames: FrameRange | None = None, jobs: int = 1, cache_dir: str | os.PathLike[str] | None = None,
           memory_bytes: int = 2 << 30, plugins: Iterable[str] = (), registry: Registry | None = None,
           on_loaded: Callable[[list[GraphError]], None] | None = None,
           on_start: Callable[[int], Callable[[FrameResult], None] | None] | None = None,
           file: str | None = None, resume: bool = False, scheduler: str | None = None) -> Rendered:
    """Load and render a graph; returns what happened to every frame.

    Raises ``InputError`` (``GraphErrors``) before anything renders when the graph, its variables or
    its output paths are invalid. Per-frame failures are in ``Rendered.report``. ``scheduler``
    (``tcp://HOST:PORT`` or ``local:N``) renders on Dask distributed instead of ``jobs`` local
    processes (`graphcore.execute.cluster`). With ``resume``,
    outputs already complete at their final path with the content key this render would give them
    are not rendered again (``skipped`` in the report).
    ``on_start(total)`` may return a per-frame progress callback.
    """
    registry = registry or default_registry()
    plugins = list(plugins)
    loaded = load_graph(source, sets=sets, defaults=defaults, registry=registry, file=file)
    if on_loaded is not None:
        on_loaded(loaded.warnings)
    graph = loaded.graph
    disk = None
    if cache_dir is not None:
        try:
            disk = DiskCache(cache_dir)
        except OSError as exc:
            raise InputError(f"cannot use cache folder: {exc.strerror}", file=os.fspath(cache_dir),
                             field="--cache", fix="name a writable folder") from None
    ev = Evaluator(graph, registry, Cache(MemoryCache(memory_bytes), disk))
    if not ev.sinks():
        raise InputError("nothing to render: the graph has no write node", file=graph.file, field="nodes",
                         fix="add a write node")
    wanted = output_frames(ev, frames)
    ev.protected_paths = protected_paths(ev)
    tasks = make_tasks(ev, wanted)
    check_targets(ev, tasks, ev.protected_paths)
    if not scheduler:            # Dask workers write from their own hosts, with their own rights
        problems = unwritable_outputs(ev, tasks)
        if problems:
            raise problems[0]
    skipped: list[FrameResult] = []
    if resume:
        tasks, skipped = split_complete(ev, tasks)
        log.info("resume: %d of %d output file(s) complete already", len(skipped), len(skipped) + len(tasks))
    if scheduler:
        from graphcore.execute.cluster import DaskExecutor

        executor = DaskExecutor(scheduler, memory_bytes=memory_bytes, plugins=plugins)
    elif jobs <= 1:
        executor = SerialExecutor()
    else:
        executor = PoolExecutor(jobs, memory_bytes=memory_bytes, plugins=plugins)
    log.info("rendering %d frame(s) %s-%s of %d output(s) with %s", len(wanted), wanted[0], wanted[-1],
             len(ev.sinks()), f"Dask ({scheduler})" if scheduler else f"{executor.jobs} job(s)")
    progress = on_start(len(tasks)) if on_start is not None else None
    report = executor.run(ev, tasks, progress) if tasks else RunReport()
    report.results = sorted(skipped + report.results, key=lambda r: (r.node_id, r.frame, r.view))
    render_warnings = sorted({w for r in report.results for w in r.warnings})
    return Rendered(graph, wanted, report, loaded.warnings, render_warnings)
