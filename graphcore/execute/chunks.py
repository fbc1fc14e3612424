"""Frame chunks for farm queues: ``midframe chunks``.

A render is split into contiguous chunks of output frames, each one ``midframe run`` with its own
``--frames A-B``, so any farm queue can dispatch them. The chunks cover the range exactly once, in
order. For each chunk the plan also says which source frames it reads (per ``read`` node, from
the graph's own dependency walk: a retime's chunk reads the source frames its in-betweens sit
between, and the neighbours its vectors need), so a wrangler can see what each task touches and
stage files accordingly.

Neighbouring chunks that need the same vectors compute them once when they share a disk cache
(``--cache`` on shared storage): pass it and every chunk's command carries it.
"""

from __future__ import annotations

import shlex
from collections.abc import Sequence
from dataclasses import dataclass, field
from fractions import Fraction

from graphcore.evaluate import Evaluator
from graphcore.execute.plan import Task, make_tasks
from graphcore.sample import Sample, compact_frames

__all__ = ["Chunk", "split", "reads", "plan_chunks"]


@dataclass
class Chunk:
    """One farm task: output frames ``first..last`` and the command that renders them."""

    index: int
    first: int
    last: int
    command: list[str]
    reads: dict[str, dict] = field(default_factory=dict)

    def as_json(self) -> dict:
        return {"index": self.index, "frames": [self.first, self.last], "command": self.command,
                "command_line": shlex.join(self.command), "reads": self.reads}


def split(frames: Sequence[int], size: int) -> list[tuple[int, int]]:
    """Contiguous ``(first, last)`` chunks of at most ``size`` frames covering ``frames`` (a
    contiguous, increasing list) exactly once."""
    if size < 1:
        raise ValueError("chunk size must be 1 or more")
    return [(frames[i], frames[min(i + size, len(frames)) - 1]) for i in range(0, len(frames), size)]


def reads(ev: Evaluator, tasks: list[Task]) -> dict[str, dict]:
    """Per source node (one that reads files): the integer frames (and views, for rigs) it is asked
    for to render ``tasks``, and how many files that is."""
    seen: set[tuple[str, Sample]] = set()
    stack = [(t.node_id, t.sample) for t in tasks]
    wanted: dict[str, set[Sample]] = {}
    while stack:
        nid, s = stack.pop()
        if (nid, s) in seen:
            continue
        seen.add((nid, s))
        op = ev.ops[nid]
        if op.sources is not None and not op.sink:
            wanted.setdefault(nid, set()).add(s)
        for _, src, samples, _ in ev.requests(nid, s):
            stack.extend((src, x) for x in samples if x is not None)
    out: dict[str, dict] = {}
    for nid in sorted(wanted):
        node = ev.graph.nodes[nid]
        op = ev.ops[nid]
        files: set[str] = set()
        for s in wanted[nid]:
            try:
                files.update(op.sources(node.params, s))
            except Exception:     # a sample with no file (e.g. beyond the plate) fails at render
                pass
        frames = sorted({int(s.frame) for s in wanted[nid] if Fraction(s.frame).denominator == 1})
        views = sorted({int(s.view) for s in wanted[nid] if Fraction(s.view).denominator == 1})
        entry: dict = {"frames": compact_frames(frames) if frames else "", "files": len(files)}
        if views != [0]:
            entry["views"] = compact_frames(views)
        out[nid] = entry
    return out


def plan_chunks(ev: Evaluator, frames: Sequence[int], size: int, base_command: list[str]) -> list[Chunk]:
    """Chunks of ``frames`` with their commands (``base_command`` + ``--frames A-B``) and reads."""
    chunks = []
    for i, (a, b) in enumerate(split(list(frames), size)):
        tasks = make_tasks(ev, range(a, b + 1))
        chunks.append(Chunk(i, a, b, [*base_command, "--frames", f"{a}-{b}"], reads(ev, tasks)))
    return chunks
