"""Planning a render: which sinks at which samples, and what must never be overwritten."""

from __future__ import annotations

import os
import time
from collections import Counter
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from fractions import Fraction

from graphcore.errors import InputError
from graphcore.evaluate import Evaluator, NodeFailure
from graphcore.registry import FrameRange
from graphcore.sample import Sample

__all__ = ["Task", "FrameResult", "RunReport", "make_tasks", "sink_views", "split_complete", "split_chunks", "chunk_count", "output_frames", "protected_paths",
           "check_targets", "unwritable_outputs", "render_task"]


@dataclass(frozen=True)
class Task:
    """Produce sink ``node_id`` at ``frame`` (and ``view``)."""

    node_id: str
    frame: int
    view: int = 0

    @property
    def sample(self) -> Sample:
        return Sample(Fraction(self.frame), Fraction(self.view))


@dataclass
class FrameResult:
    """What became of one task. Plain data, so it crosses process boundaries without pickling
    exception objects."""

    node_id: str
    frame: int
    status: str  # "ok" | "input-error" | "failure" | "skipped" (complete already, --resume)
    message: str = ""
    error: dict = field(default_factory=dict)  # InputError fields for input errors
    seconds: float = 0.0
    warnings: list[str] = field(default_factory=list)
    view: int = 0   # the view of a per-view sink's task (0 otherwise)

    @property
    def where(self) -> str:
        """``frame F`` or, for a per-view task, ``frame F view V``."""
        return f"frame {self.frame}" + (f" view {self.view}" if self.view else "")


@dataclass
class RunReport:
    results: list[FrameResult] = field(default_factory=list)
    calls: Counter = field(default_factory=Counter)

    @property
    def failed(self) -> list[FrameResult]:
        return [r for r in self.results if r.status not in ("ok", "skipped")]

    @property
    def skipped(self) -> list[FrameResult]:
        """Tasks ``--resume`` found complete at their final path."""
        return [r for r in self.results if r.status == "skipped"]

    @property
    def exit_code(self) -> int:
        if not self.failed:
            return 0
        return 1 if any(r.status == "failure" for r in self.failed) else 2


#: Most frames one render may span (a feature film at 24 fps is under 200 000): a larger range comes
#: from a mistake such as a slowdown of 1e9, and listing it would exhaust memory.
MAX_FRAMES = 1_000_000


def output_frames(ev: Evaluator, frames: FrameRange | None) -> list[int]:
    """Frames to render: ``frames`` when given, else the union of the sinks' frame ranges.

    Raises ``InputError`` for a range of more than :data:`MAX_FRAMES` frames."""
    if frames is not None:
        if frames.last - frames.first + 1 > MAX_FRAMES:
            raise InputError(f"--frames {frames.first}-{frames.last} spans {frames.last - frames.first + 1} "
                             f"frames, more than the {MAX_FRAMES} one render may span", field="--frames",
                             fix="render a shorter range (split it with `midframe chunks`)")
        return list(frames)
    ranges = {s: r for s, r in ((s, ev.frames(s)) for s in ev.sinks()) if r is not None}
    if not ranges:
        raise InputError("cannot tell which frames to render: no sink has a file-backed input",
                         file=ev.graph.file, field="--frames", fix="pass --frames FIRST-LAST")
    for sink, r in sorted(ranges.items()):
        if r.last - r.first + 1 > MAX_FRAMES:
            raise InputError(f"the output would span frames {r.first}-{r.last} ({r.last - r.first + 1} frames), "
                             f"more than the {MAX_FRAMES} one render may span", file=ev.graph.file,
                             node_id=sink, field=f"nodes.{sink}.inputs",
                             fix="check the timing upstream of this node (a retime's slowdown or frame "
                                 "rates), or pass --frames FIRST-LAST")
    lo = min(r.first for r in ranges.values())
    hi = max(r.last for r in ranges.values())
    if hi - lo + 1 > MAX_FRAMES:
        raise InputError(f"the outputs together span frames {lo}-{hi}, more than the {MAX_FRAMES} one render "
                         "may span", file=ev.graph.file, field="nodes",
                         fix="render each output with its own --frames range")
    return list(range(lo, hi + 1))


def sink_views(ev: Evaluator, sink: str) -> list[int] | None:
    """The views a per-view sink writes (its input's view range), None for other sinks."""
    op = ev.ops[sink]
    if op.per_view is None or not op.per_view(ev.graph.nodes[sink].params):
        return None
    views = ev.views(sink)
    if views is None:
        raise InputError("this write numbers its files by view, but its input has no views to write",
                         file=ev.graph.file, node_id=sink, field=f"nodes.{sink}.params.view_token",
                         fix="feed it a rig (cameras read with axis 'view' or a view_token, or a "
                             "view-path in mode 'views'), or remove view_token")
    return list(views)


#: Fewest tasks per chunk a worker is given when there are enough to go round.
MIN_CHUNK = 8


def chunk_count(tasks: int, workers: int) -> int:
    """How many contiguous chunks to cut ``tasks`` into for ``workers`` processes.

    A chunk boundary costs the upstream results both sides need (a retime's vectors of two or three
    source frames, computed again in the other worker unless a shared disk cache holds them), so
    chunks hold at least ``MIN_CHUNK`` tasks; up to four per worker, so a slow chunk does not leave
    the others idle at the end. At least one per worker while there are tasks.
    """
    if tasks <= 0:
        return 0
    return max(min(workers, tasks), min(workers * 4, tasks // MIN_CHUNK))


def split_chunks(tasks: list[Task], workers: int) -> list[list[Task]]:
    """``tasks`` cut into ``chunk_count`` near-equal contiguous chunks, in order."""
    n = chunk_count(len(tasks), workers)
    bounds = [round(i * len(tasks) / n) for i in range(n + 1)]
    return [tasks[bounds[i]:bounds[i + 1]] for i in range(n) if bounds[i] < bounds[i + 1]]


def make_tasks(ev: Evaluator, frames: Iterable[int]) -> list[Task]:
    """One task per sink per frame (per frame and view for a per-view sink); a frame outside a
    sink's input range fails on its own, with the operator's message (e.g. the missing file),
    rather than being silently dropped. Frame-major: chunks keep a frame (all its views) together."""
    frames = list(frames)
    views = {sink: sink_views(ev, sink) for sink in ev.sinks()}
    tasks = []
    for f in frames:
        for sink in ev.sinks():
            if views[sink] is None:
                tasks.append(Task(sink, f))
            else:
                tasks.extend(Task(sink, f, v) for v in views[sink])
    return tasks


def protected_paths(ev: Evaluator) -> frozenset[str]:
    """Real paths of every file a source node of the graph reads, over its frame and view ranges."""
    paths: set[str] = set()
    for nid, op in ev.ops.items():
        if op.sources is None or op.sink:
            continue
        node = ev.graph.nodes[nid]
        rng, vrng = ev.frames(nid), ev.views(nid)
        frames: Iterable[int] = list(rng) if rng is not None else [0]
        views: list[int] = list(vrng) if vrng is not None else [0]
        for f in frames:
            for v in views:
                for p in op.sources(node.params, Sample(f, v)):
                    paths.add(os.path.realpath(p))
    return frozenset(paths)


def check_targets(ev: Evaluator, tasks: list[Task], protected: frozenset[str]) -> None:
    """Refuse, before anything renders, a sink that would replace a source plate or another sink's
    frame."""
    seen: dict[str, str] = {}
    by_sink: dict[str, list] = {}
    source_files = _file_ids(protected)
    per_view = {sink: sink_views(ev, sink) is not None for sink in {t.node_id for t in tasks}}
    for t in tasks:
        by_sink.setdefault(t.node_id, []).append((t.frame, t.view) if per_view[t.node_id] else t.frame)
    for sink, frames in sorted(by_sink.items()):
        op = ev.ops[sink]
        if op.targets is None:
            continue
        for path in op.targets(ev.graph.nodes[sink].params, frames):
            real = os.path.realpath(path)
            if real in protected:
                raise InputError(f"would overwrite source plate {path}", file=ev.graph.file, node_id=sink,
                                 field=f"nodes.{sink}.params.path",
                                 fix="write somewhere else: midframe never replaces a file the graph reads")
            if source_files and _file_id(real) in source_files:
                raise InputError(f"would overwrite source plate {path} (the same file as one the graph "
                                 "reads, under another name: a hard link)", file=ev.graph.file,
                                 node_id=sink, field=f"nodes.{sink}.params.path",
                                 fix="write somewhere else: midframe never replaces a file the graph reads")
            if real in seen and seen[real] != sink:
                raise InputError(f"writes {path}, which node '{seen[real]}' also writes", file=ev.graph.file,
                                 node_id=sink, field=f"nodes.{sink}.params.path",
                                 fix="give each write node its own path")
            seen[real] = sink


def _file_id(path: str) -> tuple[int, int] | None:
    try:
        st = os.stat(path)
    except OSError:
        return None
    return (st.st_dev, st.st_ino)


def _file_ids(paths: Iterable[str]) -> set[tuple[int, int]]:
    """(device, inode) of every existing file in ``paths``: the same file under any name."""
    return {i for i in map(_file_id, paths) if i is not None}


def unwritable_outputs(ev: Evaluator, tasks: list[Task]) -> list[InputError]:
    """Output folders this process could not write into, one error per folder, found before
    anything renders: for each folder a sink writes to, the nearest one that exists (missing ones
    are created on write) must be a folder this process may create files in (``os.access``, which
    also reports a read-only file system)."""
    by_sink: dict[str, list] = {}
    per_view = {sink: sink_views(ev, sink) is not None for sink in {t.node_id for t in tasks}}
    for t in tasks:
        by_sink.setdefault(t.node_id, []).append((t.frame, t.view) if per_view[t.node_id] else t.frame)
    problems: list[InputError] = []
    seen: set[str] = set()
    for sink, frames in sorted(by_sink.items()):
        op = ev.ops[sink]
        if op.targets is None:
            continue
        folders = dict.fromkeys(os.path.dirname(os.path.abspath(p)) for p in op.targets(ev.graph.nodes[sink].params, frames))
        for folder in folders:
            existing = folder
            while not os.path.lexists(existing) and os.path.dirname(existing) != existing:
                existing = os.path.dirname(existing)
            if existing in seen:
                continue
            seen.add(existing)
            where = {"file": existing, "node_id": sink, "field": f"nodes.{sink}.params.path"}
            if not os.path.isdir(existing):
                problems.append(InputError(f"cannot write into {folder}: {existing} is a file, not a folder",
                                           fix="write somewhere else, or move that file away", **where))
            elif not os.access(existing, os.W_OK | os.X_OK):
                read_only = _read_only_mount(existing)
                problems.append(InputError(
                    f"cannot write into the folder {existing}: "
                    + ("its file system is mounted read-only" if read_only else "permission denied"),
                    fix=("write to a writable disk" if read_only else
                         "make the folder writable for this user (e.g. chmod u+w) or write somewhere else"),
                    **where))
    return problems


def _read_only_mount(folder: str) -> bool:
    try:
        return bool(os.statvfs(folder).f_flag & os.ST_RDONLY)
    except (OSError, AttributeError):
        return False


def split_complete(ev: Evaluator, tasks: list[Task]) -> tuple[list[Task], list[FrameResult]]:
    """``--resume``: the tasks still to render, and a ``skipped`` result for each task whose output
    is already complete at its final path with the content key this render would give it (same
    graph, params, operator versions and source files)."""
    todo, done = [], []
    for t in tasks:
        op = ev.ops[t.node_id]
        if op.complete is not None and op.complete(ev.graph.nodes[t.node_id].params, t.sample,
                                                   ev.key(t.node_id, t.sample)):
            done.append(FrameResult(t.node_id, t.frame, "skipped", "complete at its final path", view=t.view))
        else:
            todo.append(t)
    return todo, done


def render_task(ev: Evaluator, task: Task) -> FrameResult:
    """Evaluate one sink at one sample, turning errors into a plain record."""
    t0 = time.perf_counter()
    before = set(ev.warnings)
    try:
        ev.evaluate(task.node_id, task.sample)
        status, message, error = "ok", "", {}
    except InputError as exc:
        status, message = "input-error", exc.describe()
        error = {"message": exc.message, "file": exc.file, "node_id": exc.node_id, "field": exc.field,
                 "fix": exc.fix}
    except NodeFailure as exc:
        status, message, error = "failure", str(exc), {"node_id": exc.node_id}
    new = [f"node '{n}': {m}" for (n, m) in ev.warnings if (n, m) not in before]
    return FrameResult(task.node_id, task.frame, status, message, error, time.perf_counter() - t0, new,
                       view=task.view)


ProgressFn = Callable[[FrameResult], None]
