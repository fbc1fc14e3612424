"""The evaluation core shared by every executor: pull-based evaluation of a node at a sample.

Policy
------
To produce node ``n`` at sample ``s`` the evaluator asks ``n``'s operator which input samples it
needs (``needs``; by default every connected port at ``s``), derives the cache key from the
operator, its params, ``s``, its identity text and the keys of those inputs, and looks the key up
in the cache. Only on a miss are the inputs evaluated (recursively, the same way) and the
operator's pure ``compute`` called. So a changed downstream param changes only downstream keys:
upstream results are found in the cache and never recomputed.

State
-----
``_keys`` / ``_sources`` memoise per (node, sample); ``calls`` counts compute calls per node (the
tests count them); ``warnings`` collects what operators reported through ``ctx.warn``, once per
(node, message). Executors differ only in how they hand out (sink, sample) tasks.
"""

from __future__ import annotations

import logging
from collections import Counter
from collections.abc import Mapping, Sequence
from typing import Any

from graphcore import __version__
from graphcore.cache import Cache
from graphcore.errors import InputError, MidframeError, OpError
from graphcore.image import Image
from graphcore.keys import node_key
from graphcore.registry import FrameRange, InputRange, OpContext, Operator, Registry, default_registry
from graphcore.sample import Sample
from graphcore.spec import Graph

__all__ = ["Evaluator", "NodeFailure"]

log = logging.getLogger("midframe.render")


class NodeFailure(MidframeError):
    """An operator raised something that is not an input error: a bug (exit status 1)."""

    def __init__(self, message: str, node_id: str):
        super().__init__(message)
        self.node_id = node_id


Request = tuple[str, str, tuple[Sample, ...], bool]  # port, source node, samples, single?


class Evaluator:
    """Evaluates nodes of one resolved graph at samples, through a cache.

    Parameters
    ----------
    graph : Graph
        A validated graph (``graphcore.validate.load_graph``).
    registry : Registry, optional
        Where operators come from (installed ones by default).
    cache : Cache, optional
        Memory (and optionally disk) tiers; a fresh memory-only cache by default.
    protected_paths : frozenset of str
        Real paths sinks must never replace (the graph's source plates).
    """

    def __init__(self, graph: Graph, registry: Registry | None = None, cache: Cache | None = None, *,
                 protected_paths: frozenset[str] = frozenset()) -> None:
        self.graph = graph
        registry = registry or default_registry()
        self.ops: dict[str, Operator] = {nid: registry.get(node.op) for nid, node in graph.nodes.items()}
        self.cache = cache if cache is not None else Cache()
        self.protected_paths = protected_paths
        self.calls: Counter[str] = Counter()
        self.warnings: dict[tuple[str, str], None] = {}
        self._keys: dict[tuple[str, Sample], str] = {}
        self._requests: dict[tuple[str, Sample], list[Request]] = {}
        self._sources: dict[tuple[str, Sample], tuple[str, ...]] = {}
        self._frames: dict[str, FrameRange | None] = {}
        self._views: dict[str, FrameRange | None] = {}
        self._uses: Counter[tuple[str, Sample]] | None = None
        self._params_json = {nid: node.params_json() for nid, node in graph.nodes.items()}
        self._graph_hash = graph.hash
        self._path_nodes = {nid: tuple({"id": u, "op": graph.nodes[u].op,
                                        "params": graph.nodes[u].params_dict()}
                                       for u in graph.upstream(nid)) for nid in graph.nodes}

    # -- errors -----------------------------------------------------------------------------
    def _fill(self, exc: InputError, nid: str) -> InputError:
        if exc.node_id is None:
            exc.node_id = nid
        if exc.file is None:
            exc.file = self.graph.file
        return exc

    # -- what a node asks of its inputs ---------------------------------------------------------
    def _input_ranges(self, nid: str) -> dict[str, InputRange]:
        """``InputRange(frames, views)`` of each connected input of ``nid``."""
        return {port: InputRange(self.frames(src), self.views(src))
                for port, src in self.graph.nodes[nid].inputs.items()}

    def requests(self, nid: str, sample: Sample) -> list[Request]:
        memo = self._requests.get((nid, sample))
        if memo is not None:
            return memo
        node = self.graph.nodes[nid]
        op = self.ops[nid]
        try:
            if op.needs_ranges:
                asked = op.needs(node.params, sample, self._input_ranges(nid))
            else:
                asked = op.needs(node.params, sample)
        except InputError as exc:
            raise self._fill(exc, nid) from None
        out: list[Request] = []
        if asked is None:
            for port in op.inputs:
                if port.name in node.inputs:
                    out.append((port.name, node.inputs[port.name], (sample,), True))
        else:
            for port_name, want in asked.items():
                if port_name not in node.inputs:
                    if op.port(port_name) is not None and op.port(port_name).optional:  # type: ignore[union-attr]
                        continue
                    raise OpError(f"operator asked for input '{port_name}', which is not connected",
                                  node_id=nid, file=self.graph.file, field=f"inputs.{port_name}",
                                  fix=f"connect '{port_name}'")
                src = node.inputs[port_name]
                samples = (want,) if isinstance(want, Sample) else tuple(want)
                if op.edge_samples:
                    samples = tuple(s if s is not None and self.in_range(src, s) else None for s in samples)
                out.append((port_name, src, samples, isinstance(want, Sample)))
        self._requests[(nid, sample)] = out
        return out

    # -- keys ---------------------------------------------------------------------------------
    def _canonical(self, nid: str, sample: Sample) -> Sample:
        op = self.ops[nid]
        if op.canonical_sample is None:
            return sample
        return op.canonical_sample(self.graph.nodes[nid].params, sample)

    def key(self, nid: str, sample: Sample) -> str:
        sample = self._canonical(nid, sample)
        memo = self._keys.get((nid, sample))
        if memo is not None:
            return memo
        node = self.graph.nodes[nid]
        op = self.ops[nid]
        identity = ""
        if op.identity is not None:
            try:
                identity = op.identity(node.params, sample)
            except InputError as exc:
                raise self._fill(exc, nid) from None
        inputs = [(port, [self.key(src, s) if s is not None else "-" for s in samples])
                  for port, src, samples, _ in self.requests(nid, sample)]
        k = node_key(op.name, op.version, self._params_json[nid], sample.token(), identity, inputs)
        self._keys[(nid, sample)] = k
        return k

    def sources(self, nid: str, sample: Sample) -> tuple[str, ...]:
        """Every file read upstream of ``nid`` at ``sample`` (sorted, unique)."""
        memo = self._sources.get((nid, sample))
        if memo is not None:
            return memo
        node = self.graph.nodes[nid]
        op = self.ops[nid]
        found: set[str] = set()
        if op.sources is not None:
            found.update(op.sources(node.params, sample))
        for _, src, samples, _ in self.requests(nid, sample):
            for s in samples:
                if s is not None:
                    found.update(self.sources(src, s))
        out = tuple(sorted(found))
        self._sources[(nid, sample)] = out
        return out

    # -- frame ranges ---------------------------------------------------------------------------
    def frames(self, nid: str) -> FrameRange | None:
        """Integer frames ``nid`` has data for; None when unbounded (no file-backed input)."""
        return self._range(nid, "frames", self._frames)

    def views(self, nid: str) -> FrameRange | None:
        """Integer views (rig cameras) ``nid`` has data for; None when unbounded or not a rig."""
        return self._range(nid, "views", self._views)

    def _range(self, nid: str, axis: str, memo: dict[str, FrameRange | None]) -> FrameRange | None:
        if nid in memo:
            return memo[nid]
        node = self.graph.nodes[nid]
        op = self.ops[nid]
        hook = getattr(op, axis)
        inputs: dict[str, Any]
        if hook is not None and op.range_inputs:
            inputs = {port: InputRange(self.frames(src), self.views(src)) for port, src in node.inputs.items()}
        else:
            inputs = {port: self._range(src, axis, memo) for port, src in node.inputs.items()}
        try:
            if hook is not None:
                rng = hook(node.params, inputs)
            else:
                rng = None
                for port in op.inputs:
                    if port.name in inputs and inputs[port.name] is not None:
                        r = inputs[port.name]
                        if rng is None:
                            rng = r
                        else:
                            both = rng.intersect(r)
                            if both is None:
                                word = "frames" if axis == "frames" else "views"
                                raise OpError(f"inputs have no {word} in common ({rng} and {r})",
                                              field="inputs", fix=f"check the source {word} ranges")
                            rng = both
        except InputError as exc:
            raise self._fill(exc, nid) from None
        memo[nid] = rng
        return rng

    def in_range(self, nid: str, sample: Sample) -> bool:
        """False when ``sample`` lies outside ``nid``'s known frame or view range."""
        fr, vr = self.frames(nid), self.views(nid)
        if fr is not None and not (fr.first <= sample.frame <= fr.last):
            return False
        if vr is not None and not (vr.first <= sample.view <= vr.last):
            return False
        return True

    # -- retention ----------------------------------------------------------------------------
    def plan(self, wanted: list[tuple[str, Sample]]) -> None:
        """Count, for every (node, sample) the ``wanted`` results depend on, how many consumers will
        ask for it. During evaluation a result leaves the memory cache once its last consumer has
        run, so a sequence render holds only what later frames still need (neighbouring frames
        for vectors, a still background) instead of every finished frame. Without a plan the
        memory cache is a plain LRU."""
        uses: Counter[tuple[str, Sample]] = Counter()
        seen: set[tuple[str, Sample]] = set()
        stack = [(nid, self._canonical(nid, s)) for nid, s in wanted]
        while stack:
            nid, s = stack.pop()
            if (nid, s) in seen:
                continue
            seen.add((nid, s))
            for _, src, samples, _ in self.requests(nid, s):
                for x in samples:
                    if x is None:
                        continue
                    x = self._canonical(src, x)
                    uses[(src, x)] += 1
                    stack.append((src, x))
        self._uses = uses

    def _consumed(self, nid: str, sample: Sample) -> None:
        if self._uses is None:
            return
        k = (nid, self._canonical(nid, sample))
        left = self._uses.get(k)
        if left is None:
            return
        if left <= 1:
            del self._uses[k]
            self.cache.memory.discard(self.key(*k))
        else:
            self._uses[k] = left - 1

    def _keep_in_memory(self, nid: str, sample: Sample) -> bool:
        return self._uses is None or self._uses.get((nid, sample), 0) > 0

    # -- evaluation -----------------------------------------------------------------------------
    def evaluate(self, nid: str, sample: Sample) -> Image:
        """The result of node ``nid`` at ``sample`` (from the cache when possible)."""
        op = self.ops[nid]
        sample = self._canonical(nid, sample)
        key = self.key(nid, sample) if op.cacheable else None
        if key is not None:
            hit = self.cache.get(key)
            if hit is not None:
                return hit
        node = self.graph.nodes[nid]
        inputs: dict[str, Any] = {p.name: None for p in op.inputs}
        for port, src, samples, single in self.requests(nid, sample):
            images = tuple(self.evaluate(src, s) if s is not None else None for s in samples)
            inputs[port] = images[0] if single else images
        ctx = OpContext(sample=sample, node_id=nid, graph_file=self.graph.file, graph_hash=self._graph_hash,
                        tool_version=__version__, params_json=self._params_json[nid],
                        sources=self.sources(nid, sample), path_nodes=self._path_nodes[nid],
                        warn=lambda msg, _nid=nid: self._warn(_nid, msg),
                        protected_paths=self.protected_paths,
                        input_ranges=self._input_ranges(nid) if op.needs_ranges else {},
                        key=self.key(nid, sample) if op.sink else "")
        self.calls[nid] += 1
        try:
            result = op.compute(node.params, inputs, ctx)
        except InputError as exc:
            raise self._fill(exc, nid) from None
        except MidframeError:
            raise
        except MemoryError as exc:       # a size asked for (or a machine) too big, not a bug: say what to do
            raise self._fill(OpError(f"ran out of memory at {sample}: {exc}", fix=(
                "check the image sizes this node makes or is given (e.g. a resize's width and height); "
                "render with fewer --jobs or a smaller --memory, or on a machine with more memory")),
                nid) from None
        except Exception as exc:
            raise NodeFailure(f"node '{nid}' ({op.name}) failed at {sample}: {type(exc).__name__}: {exc}",
                              nid) from exc
        if not isinstance(result, Image):
            raise NodeFailure(f"node '{nid}' ({op.name}) returned {type(result).__name__}, not an Image", nid)
        for _, src, samples, _ in self.requests(nid, sample):
            for x in samples:
                if x is not None:
                    self._consumed(src, x)
        if key is not None:
            if self._keep_in_memory(nid, sample):
                self.cache.put(key, result, persist=op.disk_cache)
            elif op.disk_cache and self.cache.disk is not None:
                self.cache.disk.put(key, result)
        return result

    def _warn(self, nid: str, message: str) -> None:
        if (nid, message) not in self.warnings:
            self.warnings[(nid, message)] = None
            log.warning("node '%s': %s", nid, message)

    def sinks(self) -> list[str]:
        return sorted(nid for nid, op in self.ops.items() if op.sink)

    def input_samples(self, nid: str, sample: Sample) -> Mapping[str, Sequence[Sample]]:
        return {port: samples for port, _, samples, _ in self.requests(nid, sample)}
