"""The operator contract: a declaration plus a pure compute function.

An operator never touches the cache, the graph or the command line. The evaluator asks it:

- ``needs(params, sample)``: which samples of which input ports it wants (pull-based). The
  default asks every connected port at the same sample.
- ``compute(params, inputs, ctx)``: the result ``Image`` at ``ctx.sample``. ``inputs`` maps each
  port to what ``needs`` asked for: one ``Image`` where ``needs`` gave one ``Sample``, a tuple of
  Images where it gave a tuple of Samples, ``None`` for an unconnected optional port.
- ``identity(params, sample)``: extra cache-key material (``read`` returns the file identity:
  path, size, mtime).
- ``frames(params, input_frames)``: the integer frame range this node has data for, given its
  inputs' ranges (``read`` discovers it on disk). Default: the intersection of connected inputs.
- ``views(params, input_views)``: likewise for the integer views (camera numbers) of a rig.
- ``needs_ranges``: if True, ``needs`` is called as ``needs(params, sample, ranges)`` with
  ``ranges[port] = InputRange(frames, views)`` of each connected input (``retime`` numbers its
  output from the source's first frame without being told it). ``compute`` then finds the same
  mapping in ``ctx.input_ranges`` (``align-views`` needs the rig's cameras in both).
- ``range_inputs``: if True, the ``frames`` and ``views`` hooks receive ``InputRange(frames, views)``
  for each connected port instead of the port's range on that axis alone (``view-path`` turns a
  rig's cameras into output frames).
- ``edge_samples``: if True, an input sample that ``needs`` asks for beyond the input's known
  frame or view range arrives as ``None`` (the last frame has no next one) instead of failing.
- ``sources(params, sample)``: files this node reads at ``sample`` (provenance, overwrite guard).
- ``targets(params, frames)``: files a sink writes for those frames (overwrite guard, resume);
  for a ``per_view`` sink the items are ``(frame, view)`` pairs.
- ``per_view(params)``: True when a sink writes one file per frame *and view* (``write`` with a
  ``view_token``): the planner then makes a task for every view of the sink's view range.
- ``complete(params, sample, key)``: True when a sink's output at ``sample`` already exists at its
  final path and was made with content key ``key`` (``write`` reads the key from the file's
  provenance header); ``midframe run --resume`` skips such tasks.
- ``canonical_sample(params, sample)``: the sample whose result this one equals (``read`` of a
  still: the same at every frame; a frame sequence: the same at every view), so the cache serves it.
- ``check_links(params, connected)``: problems (``OpError`` objects, returned, not raised) that
  depend on which ports are connected, so ``midframe check`` finds them before any render.

Registration checks the declaration at once (``Operator.__post_init__``); a bad declaration is a
``PluginError`` carrying the operator name.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import pydantic

from graphcore.image import Image
from graphcore.sample import Sample

__all__ = ["Port", "Operator", "OpContext", "FrameRange", "InputRange", "PluginError"]


class PluginError(Exception):
    """A plugin or operator declaration that breaks the contract."""

    def __init__(self, message: str, *, operator: str | None = None, source: str | None = None):
        super().__init__(message)
        self.operator = operator
        self.source = source


@dataclass(frozen=True)
class FrameRange:
    """Inclusive integer frame range ``first..last``."""

    first: int
    last: int

    def __post_init__(self) -> None:
        if self.last < self.first:
            raise ValueError(f"empty frame range {self.first}-{self.last}")

    def __contains__(self, frame: object) -> bool:
        try:
            return bool(self.first <= frame <= self.last)  # type: ignore[operator]
        except TypeError:
            return False

    def __iter__(self):
        return iter(range(self.first, self.last + 1))

    def __len__(self) -> int:
        return self.last - self.first + 1

    def intersect(self, other: "FrameRange | None") -> "FrameRange | None":
        if other is None:
            return self
        lo, hi = max(self.first, other.first), min(self.last, other.last)
        return FrameRange(lo, hi) if lo <= hi else None

    def __str__(self) -> str:
        return f"{self.first}-{self.last}"


@dataclass(frozen=True)
class InputRange:
    """The integer frames and views an input has data for (None: unbounded / not known)."""

    frames: FrameRange | None
    views: FrameRange | None


@dataclass(frozen=True)
class Port:
    """An input port: a name, what it expects, whether it may be left unconnected."""

    name: str
    doc: str = ""
    optional: bool = False


@dataclass
class OpContext:
    """What an operator may know about the call beyond its params and inputs.

    Pure operators use only ``sample`` and ``warn``. ``read``/``write`` also use the rest.
    """

    sample: Sample
    node_id: str = ""
    graph_file: str | None = None
    graph_hash: str = ""
    tool_version: str = ""
    params_json: str = "{}"
    sources: tuple[str, ...] = ()           # every file read upstream of this result
    path_nodes: tuple[Mapping[str, Any], ...] = ()  # [{"id","op","params"}] of upstream nodes
    warn: Callable[[str], None] = field(default=lambda msg: None)
    protected_paths: frozenset[str] = frozenset()  # files sinks must never replace (read sources)
    input_ranges: Mapping[str, InputRange] = field(default_factory=dict)  # filled for needs_ranges
    key: str = ""                           # a sink's content key at this sample (for --resume)

    def provenance(self) -> dict[str, Any]:
        """The provenance record a sink writes into its file header."""
        return {
            "tool": "midframe",
            "tool_version": self.tool_version,
            "graph_file": self.graph_file,
            "graph_hash": self.graph_hash,
            "node": self.node_id,
            "frame": str(self.sample.frame),
            "view": str(self.sample.view),
            "nodes": list(self.path_nodes),
            "sources": list(self.sources),
            "key": self.key,
        }


def _default_needs(params: Any, sample: Sample) -> Mapping[str, Sample | Sequence[Sample]] | None:
    return None  # the evaluator asks every connected port at ``sample``


@dataclass(frozen=True)
class Operator:
    """A declared operator.

    Parameters
    ----------
    name : str
        Unique name used as ``op`` in graph files (lower case, digits and ``-``).
    version : int
        Bump when results change for the same params; part of every cache key.
    summary : str
        One line for ``midframe ops``.
    params : type[pydantic.BaseModel]
        Frozen model with ``extra='forbid'``; every field has a default (or is required) and a
        description.
    compute : callable ``(params, inputs, ctx) -> Image``
    inputs : tuple of Port
    doc : str
        Longer help for ``midframe ops NAME``: what the channels are, references.
    outputs : str
        Words on the output channels.
    needs, identity, frames, sources, targets, per_view, check_links : optional callables, see the
        module docstring.
    sink : bool
        True for operators that write files (``write``); the CLI renders every sink.
    cacheable : bool
        False for sinks and other side-effecting operators.
    disk_cache : bool
        False where recomputing is cheaper than storing (``read`` re-reads its file).
    """

    name: str
    version: int
    summary: str
    params: type[pydantic.BaseModel]
    compute: Callable[..., Image]
    inputs: tuple[Port, ...] = ()
    doc: str = ""
    outputs: str = ""
    needs: Callable[[Any, Sample], Mapping[str, Sample | Sequence[Sample]] | None] = _default_needs
    identity: Callable[[Any, Sample], str] | None = None
    frames: Callable[[Any, Mapping[str, FrameRange | None]], FrameRange | None] | None = None
    views: Callable[[Any, Mapping[str, FrameRange | None]], FrameRange | None] | None = None
    sources: Callable[[Any, Sample], Sequence[str]] | None = None
    targets: Callable[[Any, Sequence[Any]], Sequence[str]] | None = None
    per_view: Callable[[Any], bool] | None = None
    complete: Callable[[Any, Sample, str], bool] | None = None
    check_links: Callable[[Any, frozenset[str]], Sequence[Any]] | None = None
    edge_samples: bool = False
    needs_ranges: bool = False
    range_inputs: bool = False
    canonical_sample: Callable[[Any, Sample], Sample] | None = None
    sink: bool = False
    cacheable: bool = True
    disk_cache: bool = True  # False for results cheaper to recompute than to store (``read``)
    source: str = ""  # filled by the registry: distribution and entry point it came from

    def __post_init__(self) -> None:
        import re

        if not re.fullmatch(r"[a-z][a-z0-9]*(-[a-z0-9]+)*", self.name or ""):
            raise PluginError(f"operator name {self.name!r} must be lower-case words joined by '-'",
                              operator=self.name)
        if not isinstance(self.version, int) or self.version < 1:
            raise PluginError(f"operator {self.name}: version must be a positive int", operator=self.name)
        if not (isinstance(self.params, type) and issubclass(self.params, pydantic.BaseModel)):
            raise PluginError(f"operator {self.name}: params must be a pydantic model class",
                              operator=self.name)
        cfg = self.params.model_config
        if cfg.get("extra") != "forbid" or not cfg.get("frozen"):
            raise PluginError(f"operator {self.name}: params model must set "
                              "ConfigDict(extra='forbid', frozen=True)", operator=self.name)
        for fname, finfo in self.params.model_fields.items():
            if not finfo.description:
                raise PluginError(f"operator {self.name}: param {fname!r} has no description",
                                  operator=self.name)
        if not callable(self.compute):
            raise PluginError(f"operator {self.name}: compute is not callable", operator=self.name)
        try:
            sig = inspect.signature(self.compute)
            sig.bind(None, None, None)
        except TypeError:
            raise PluginError(f"operator {self.name}: compute must accept (params, inputs, ctx)",
                              operator=self.name) from None
        names = [p.name for p in self.inputs]
        if len(set(names)) != len(names):
            raise PluginError(f"operator {self.name}: duplicate input port names {names}", operator=self.name)
        if self.sink and self.cacheable:
            object.__setattr__(self, "cacheable", False)

    def port(self, name: str) -> Port | None:
        for p in self.inputs:
            if p.name == name:
                return p
        return None

    def with_source(self, source: str) -> "Operator":
        import dataclasses

        return dataclasses.replace(self, source=source)
