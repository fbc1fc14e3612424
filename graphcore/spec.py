"""The graph model: plain, frozen data. No execution code lives here.

A graph file is JSON::

    {
      "schema": "midframe.graph", "version": 2,
      "doc": "what this template is for",
      "vars": {"src": {"type": "path", "doc": "source plate pattern"},
               "slowdown": {"type": "float", "default": 2.0}},
      "nodes": {
        "plate": {"op": "read",  "params": {"path": "${src}"}},
        "out":   {"op": "write", "params": {"path": "${dst}"}, "inputs": {"image": "plate"}}
      }
    }

``GraphSpec`` is the file as written (variables unresolved). ``Graph`` is the resolved, validated
graph an executor is handed: every node's params parsed into its operator's frozen params model.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

import pydantic
from pydantic import BaseModel, ConfigDict, Field

__all__ = ["SCHEMA_LABEL", "CURRENT_VERSION", "DEFAULTS_LABEL", "VarDecl", "NodeSpec", "GraphSpec",
           "DefaultsSpec", "Node", "Graph", "canonical_json", "VAR_TYPES"]

SCHEMA_LABEL = "midframe.graph"
DEFAULTS_LABEL = "midframe.defaults"
CURRENT_VERSION = 2
VAR_TYPES = ("string", "path", "int", "float", "bool")

_NAME = r"^[A-Za-z_][A-Za-z0-9_]*$"
_NODE_ID = r"^[A-Za-z_][A-Za-z0-9_.-]*$"


class _Frozen(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class VarDecl(_Frozen):
    """A template variable: its type, default (absent = must be set) and what it is for."""

    type: Literal["string", "path", "int", "float", "bool"] = Field(
        "string", description="Value type; --set text is converted to it.")
    default: str | int | float | bool | None = Field(
        None, description="Value used when neither --set nor the defaults file gives one; "
                          "null means the variable must be set.")
    doc: str = Field("", description="What the variable is for.")


class NodeSpec(_Frozen):
    """One node as written: operator name, params, and input links (port -> node id)."""

    op: str = Field(description="Operator name (see `midframe ops`).")
    params: dict[str, Any] = Field(default_factory=dict, description="Operator params.")
    inputs: dict[str, str] = Field(default_factory=dict,
                                   description="Input port name -> id of the node feeding it.")
    doc: str = Field("", description="A note for people reading the graph.")


class GraphSpec(_Frozen):
    """A graph file as written, at the current schema version, variables unresolved."""

    schema_label: Literal["midframe.graph"] = Field(alias="schema", description="Always 'midframe.graph'.")
    version: Literal[2] = Field(description="Schema version of this file.")
    doc: str = Field("", description="What this graph is for.")
    vars: dict[str, VarDecl] = Field(default_factory=dict, description="Template variables.")
    nodes: dict[str, NodeSpec] = Field(description="Nodes by id.")

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class DefaultsSpec(_Frozen):
    """A show-level defaults file, layered beneath every graph rendered with it."""

    schema_label: Literal["midframe.defaults"] = Field(alias="schema",
                                                       description="Always 'midframe.defaults'.")
    version: Literal[1] = Field(description="Schema version of this file.")
    doc: str = Field("", description="What show this is for.")
    vars: dict[str, str | int | float | bool] = Field(
        default_factory=dict, description="Values for template variables (ignored where a graph "
                                          "does not declare them).")
    params: dict[str, dict[str, Any]] = Field(
        default_factory=dict, description="Per operator name: param defaults applied beneath every "
                                          "node's own params.")

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


def canonical_json(value: Any) -> str:
    """Deterministic JSON text: sorted keys, no spaces, floats by repr. Used in keys and hashes."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


@dataclass(frozen=True)
class Node:
    """A resolved node: params parsed into the operator's params model."""

    id: str
    op: str
    params: pydantic.BaseModel
    inputs: Mapping[str, str]

    def params_dict(self) -> dict[str, Any]:
        return self.params.model_dump(mode="json")

    def params_json(self) -> str:
        return canonical_json(self.params_dict())


@dataclass(frozen=True)
class Graph:
    """A validated graph with every variable resolved. Plain data: hand it to an executor."""

    nodes: Mapping[str, Node]
    file: str | None = None
    doc: str = ""
    variables: Mapping[str, Any] = field(default_factory=dict)
    source: Mapping[str, Any] = field(default_factory=dict)  # the resolved document, for workers

    @property
    def hash(self) -> str:
        """SHA-256 of the resolved graph's canonical JSON (ops, params, links)."""
        doc = {nid: {"op": n.op, "params": n.params_dict(), "inputs": dict(sorted(n.inputs.items()))}
               for nid, n in sorted(self.nodes.items())}
        return hashlib.sha256(canonical_json(doc).encode()).hexdigest()

    def upstream(self, node_id: str) -> list[str]:
        """Every node feeding ``node_id`` (transitively), in a stable order, itself included."""
        seen: dict[str, None] = {}
        stack = [node_id]
        while stack:
            nid = stack.pop()
            if nid in seen:
                continue
            seen[nid] = None
            stack.extend(sorted(self.nodes[nid].inputs.values(), reverse=True))
        return list(seen)
