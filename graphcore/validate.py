"""Loading and validating graph files: every problem found in one pass, nothing rendered.

``load_graph`` reads a graph file (or an in-memory document), upgrades old schema versions,
checks its structure, resolves template variables, parses each node's params with its operator's
params model, checks links, ports and cycles, and returns a resolved ``Graph`` plus warnings.
Problems are collected as ``GraphError`` objects (file, node id, JSON path, fix) and raised
together as ``GraphErrors``.
"""

from __future__ import annotations

import difflib
import json
import math
import os
import re
from collections.abc import Iterable, Mapping
from typing import Any

import networkx as nx
import pydantic

from graphcore.errors import GraphError, GraphErrors, InputError
from graphcore.registry import PluginError, Registry, default_registry
from graphcore.schema.upgrade import UpgradeError, upgrade
from graphcore.spec import (CURRENT_VERSION, DEFAULTS_LABEL, SCHEMA_LABEL, DefaultsSpec, Graph, GraphSpec,
                            Node, NodeSpec, VarDecl)
from graphcore.templates import parse_sets, resolve_values, substitute

__all__ = ["load_graph", "load_document", "load_defaults", "Loaded"]


class Loaded:
    """Result of ``load_graph``: the graph (None for a template checked with variables unset),
    warnings, the version the file was written at, and the document upgraded to the current version."""

    def __init__(self, graph: Graph | None, warnings: list[GraphError], written_version: int,
                 document: dict[str, Any] | None = None):
        self.graph = graph
        self.warnings = warnings
        self.written_version = written_version
        self.document = document or {}


def _suggest(word: str, options: Iterable[str]) -> str:
    options = sorted(options)
    close = difflib.get_close_matches(word, options, n=1, cutoff=0.6)
    if close:
        return f"did you mean '{close[0]}'?"
    return "choose one of: " + (", ".join(options) if options else "(none)")


def load_document(path: str | os.PathLike[str], *, label: str = SCHEMA_LABEL) -> dict[str, Any]:
    """Read a JSON file and check it is an object with the expected schema label."""
    path = os.fspath(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except FileNotFoundError:
        raise InputError("file not found", file=path, fix="check the path") from None
    except IsADirectoryError:
        raise InputError("is a folder, not a JSON file", file=path, fix="name a .json file") from None
    except OSError as exc:
        raise InputError(f"cannot read: {exc.strerror}", file=path, fix="check permissions") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start})", file=path,
                         fix="save the file as UTF-8 JSON") from None
    try:
        doc = json.loads(text, parse_constant=_no_constant)
    except json.JSONDecodeError as exc:
        raise InputError(f"malformed JSON at line {exc.lineno} column {exc.colno}: {exc.msg}", file=path,
                         field=f"line {exc.lineno}", fix="fix the JSON syntax (a trailing comma or a "
                         "missing quote is the usual cause)") from None
    except ValueError as exc:
        raise InputError(f"malformed JSON: {exc}", file=path, fix="use plain JSON numbers") from None
    except RecursionError:
        raise InputError("JSON nested too deeply", file=path, fix="flatten the document") from None
    _check_label(doc, path, label)
    return doc


def _no_constant(name: str) -> Any:
    raise ValueError(f"{name} is not valid JSON")


def _check_label(doc: Any, path: str | None, label: str) -> None:
    if not isinstance(doc, dict):
        raise InputError(f"top level is a JSON {type(doc).__name__}, not an object", file=path,
                         fix=f'start the file with {{"schema": "{label}", "version": ...}}')
    if doc.get("schema") != label:
        got = doc.get("schema")
        raise InputError(f"schema label is {got!r}, expected {label!r}", file=path, field="schema",
                         fix=f'add "schema": "{label}" at the top level')


def load_defaults(path: str | os.PathLike[str]) -> DefaultsSpec:
    """Read and check a show-level defaults file."""
    path = os.fspath(path)
    doc = load_document(path, label=DEFAULTS_LABEL)
    try:
        return DefaultsSpec.model_validate(doc)
    except pydantic.ValidationError as exc:
        raise GraphErrors([_from_pydantic(e, file=path, prefix="") for e in exc.errors()], file=path) from None


def _loc_path(loc: Iterable[Any], prefix: str) -> str:
    out = prefix
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


def _from_pydantic(err: Mapping[str, Any], *, file: str | None, prefix: str, node_id: str | None = None,
                   allowed: Iterable[str] | None = None, op: str | None = None) -> GraphError:
    loc = tuple(err.get("loc", ()))
    field = _loc_path(loc, prefix)
    kind = err.get("type", "")
    if kind == "extra_forbidden":
        name = str(loc[-1]) if loc else "?"
        options = list(allowed or [])
        fix = _suggest(name, options) if options else "remove it"
        what = "param" if op else "key"
        return GraphError(f"unknown {what} '{name}'" + (f" for operator '{op}'" if op else ""), file=file,
                          node_id=node_id, field=field, fix=fix + (f" (see `midframe ops {op}`)" if op else ""))
    if kind == "missing":
        return GraphError("required value missing", file=file, node_id=node_id, field=field,
                          fix="add it" + (f" (see `midframe ops {op}`)" if op else ""))
    value = err.get("input")
    shown = repr(value)
    if len(shown) > 60:
        shown = shown[:57] + "..."
    msg = str(err.get("msg", "invalid value"))
    return GraphError(f"{msg} (got {shown})", file=file, node_id=node_id, field=field,
                      fix=f"see `midframe ops {op}` for the accepted values" if op else "correct the value")


def load_graph(source: str | os.PathLike[str] | Mapping[str, Any], *, sets: Iterable[str] = (),
               defaults: str | os.PathLike[str] | None = None, registry: Registry | None = None,
               file: str | None = None, allow_unset: bool = False) -> Loaded:
    """Load, upgrade, resolve and validate a graph.

    Parameters
    ----------
    source : path or mapping
        A graph file, or a document already parsed (then ``file`` names it in messages).
    sets : iterable of str
        ``name=value`` overrides from ``--set``.
    defaults : path, optional
        A show-level defaults file (``--defaults``).
    registry : Registry, optional
        Operators to resolve against; the installed ones by default.
    allow_unset : bool
        For ``midframe check`` on a template: variables without a value are warnings, params
        that use them are not checked, and ``.graph`` is None when any is unset.

    Returns
    -------
    Loaded
        ``.graph`` (resolved ``Graph``), ``.warnings`` (list of GraphError), ``.written_version``.

    Raises
    ------
    InputError
        An unreadable file; ``GraphErrors`` with every problem found otherwise.
    """
    registry = registry or default_registry()
    if isinstance(source, Mapping):
        doc = dict(source)
        _check_label(doc, file, SCHEMA_LABEL)
    else:
        file = os.fspath(source)
        doc = load_document(file)

    errors: list[GraphError] = []
    warnings: list[GraphError] = []

    try:
        doc, written = upgrade(doc)
    except UpgradeError as exc:
        raise GraphErrors([GraphError(str(exc), file=file, field=exc.field,
                                      fix=f"write version {CURRENT_VERSION} (see `midframe schema`)")],
                          file=file) from None

    # -- structure: top level first, then each node on its own so one bad node hides nothing --------
    raw_nodes = doc.get("nodes")
    top = dict(doc)
    top["nodes"] = {}
    if "nodes" not in doc:
        errors.append(GraphError("no 'nodes'", file=file, field="nodes",
                                 fix='add "nodes": {"id": {"op": ..., "params": {...}}}'))
    elif not isinstance(raw_nodes, dict):
        errors.append(GraphError(f"'nodes' is a JSON {type(raw_nodes).__name__}, not an object", file=file,
                                 field="nodes", fix="key each node by its id: \"nodes\": {\"plate\": {...}}"))
        raw_nodes = {}
    try:
        spec = GraphSpec.model_validate(top)
    except pydantic.ValidationError as exc:
        allowed = [f.alias or n for n, f in GraphSpec.model_fields.items()]
        for e in exc.errors():
            errors.append(_from_pydantic(e, file=file, prefix="", allowed=allowed))
        vars_ok: dict[str, VarDecl] = {}
        if isinstance(doc.get("vars"), dict):
            for name, decl in doc["vars"].items():
                try:
                    vars_ok[name] = VarDecl.model_validate(decl)
                except pydantic.ValidationError:
                    pass  # already reported above
        spec = GraphSpec.model_construct(schema_label=SCHEMA_LABEL, version=CURRENT_VERSION, doc="",
                                         vars=vars_ok, nodes={})
    node_specs: dict[str, NodeSpec] = {}
    for nid, raw in (raw_nodes or {}).items():
        if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.-]*", nid):
            errors.append(GraphError(f"node id {nid!r} must start with a letter or _ and use letters, "
                                     "digits, _ . -", file=file, node_id=nid, field=f"nodes.{nid}",
                                     fix="rename the node"))
            continue
        try:
            node_specs[nid] = NodeSpec.model_validate(raw)
        except pydantic.ValidationError as exc:
            allowed = list(NodeSpec.model_fields)
            for e in exc.errors():
                errors.append(_from_pydantic(e, file=file, prefix=f"nodes.{nid}", node_id=nid, allowed=allowed))
            if isinstance(raw, dict):  # keep checking the node without its unknown keys
                try:
                    node_specs[nid] = NodeSpec.model_validate({k: v for k, v in raw.items() if k in allowed})
                except pydantic.ValidationError:
                    pass
    if raw_nodes is not None and isinstance(raw_nodes, dict) and not raw_nodes:
        errors.append(GraphError("the graph has no nodes", file=file, field="nodes",
                                 fix="add a read node and a write node"))

    # -- variables --------------------------------------------------------------------------------
    defaults_spec: DefaultsSpec | None = None
    defaults_file = os.fspath(defaults) if defaults is not None else None
    if defaults_file is not None:
        try:
            defaults_spec = load_defaults(defaults_file)
        except GraphErrors as exc:
            errors.extend(exc.errors)
        except InputError as exc:
            errors.append(GraphError(exc.message, file=exc.file, field=exc.field, fix=exc.fix))
    set_values, set_errors = parse_sets(sets)
    errors.extend(set_errors)
    values, var_errors = resolve_values(spec, set_values, defaults_spec, file=file, defaults_file=defaults_file)
    unset = {name for name in spec.vars if name not in values}
    for e in var_errors:
        if allow_unset and e.field in {f"vars.{n}" for n in unset} and "has no value" in e.message:
            warnings.append(GraphError(e.message + "; params using it were not checked", file=e.file,
                                       field=e.field, fix=e.fix))
        else:
            errors.append(e)
    used: set[str] = set()

    # -- nodes: operator, params, links -------------------------------------------------------------
    nodes: dict[str, Node] = {}
    resolved_doc: dict[str, Any] = {}
    for nid, ns in node_specs.items():
        base = f"nodes.{nid}"
        if ns.op not in registry:
            errors.append(GraphError(f"unknown operator '{ns.op}'", file=file, node_id=nid, field=f"{base}.op",
                                     fix=_suggest(ns.op, registry.names()) + " (`midframe ops` lists them)"))
            # still check variables used in its params
            substitute(ns.params, values, spec.vars, path=f"{base}.params", node_id=nid, file=file,
                       errors=errors, used=used)
            continue
        try:
            op = registry.get(ns.op)
        except PluginError as exc:
            errors.append(GraphError(f"operator '{ns.op}' is unavailable: {exc}", file=file, node_id=nid,
                                     field=f"{base}.op", fix="reinstall or fix the plugin package "
                                     f"{exc.source or ''}".rstrip()))
            continue
        params_raw = dict(ns.params)
        if defaults_spec is not None and ns.op in defaults_spec.params:
            show = defaults_spec.params[ns.op]
            for pname, pval in show.items():
                if pname not in op.params.model_fields:
                    errors.append(GraphError(f"unknown param '{pname}' for operator '{ns.op}'", file=defaults_file,
                                             field=f"params.{ns.op}.{pname}",
                                             fix=_suggest(pname, op.params.model_fields)))
                else:
                    params_raw.setdefault(pname, pval)
        params_sub = substitute(params_raw, values, spec.vars, path=f"{base}.params", node_id=nid,
                                file=file, errors=errors, used=used)
        params = None
        pending = {k for k, v in params_sub.items() if _has_placeholder(v)} if unset else set()
        try:
            params = op.params.model_validate(params_sub)
        except pydantic.ValidationError as exc:
            for e in exc.errors():
                loc = tuple(e.get("loc", ()))
                if loc and loc[0] in pending:
                    continue  # uses a variable that is not set (check mode)
                errors.append(_from_pydantic(e, file=file, prefix=f"{base}.params", node_id=nid,
                                             allowed=op.params.model_fields, op=op.name))
        except (ValueError, TypeError) as exc:
            errors.append(GraphError(f"params rejected: {exc}", file=file, node_id=nid, field=f"{base}.params",
                                     fix=f"see `midframe ops {op.name}`"))
        if params is not None:
            for where, value in _nonfinite(params.model_dump(), f"{base}.params"):
                errors.append(GraphError(f"{value} is not a finite number", file=file, node_id=nid, field=where,
                                         fix="write a finite number (a large one such as 1e9 where you mean "
                                             "'no limit')"))
        port_names = [p.name for p in op.inputs]
        for port, src in ns.inputs.items():
            if op.port(port) is None:
                errors.append(GraphError(f"operator '{op.name}' has no input port '{port}'", file=file,
                                         node_id=nid, field=f"{base}.inputs.{port}",
                                         fix=_suggest(port, port_names) if port_names
                                         else f"'{op.name}' takes no inputs; remove \"inputs\""))
            if src not in node_specs and src not in (raw_nodes or {}):
                errors.append(GraphError(f"input '{port}' links to node '{src}', which does not exist", file=file,
                                         node_id=nid, field=f"{base}.inputs.{port}",
                                         fix=_suggest(src, node_specs)))
        for p in op.inputs:
            if not p.optional and p.name not in ns.inputs:
                errors.append(GraphError(f"required input '{p.name}' is not connected", file=file, node_id=nid,
                                         field=f"{base}.inputs.{p.name}",
                                         fix=f'add "inputs": {{"{p.name}": "<node id>"}}'
                                             + (f" ({p.doc})" if p.doc else "")))
        if params is not None and op.check_links is not None:
            connected = frozenset(port for port in ns.inputs if op.port(port) is not None)
            for problem in op.check_links(params, connected):
                errors.append(GraphError(problem.message, file=file, node_id=nid,
                                         field=f"{base}." + ("inputs." if op.port(problem.field or "") else "params.")
                                         + (problem.field or ""), fix=problem.fix))
        if params is not None:
            nodes[nid] = Node(nid, op.name, params, dict(ns.inputs))
            resolved_doc[nid] = {"op": op.name, "params": params.model_dump(mode="json"),
                                 "inputs": dict(ns.inputs)}

    # -- cycles -------------------------------------------------------------------------------------
    g = nx.DiGraph()
    g.add_nodes_from(node_specs)
    for nid, ns in node_specs.items():
        for port, src in ns.inputs.items():
            if src in node_specs:
                g.add_edge(src, nid)
    for cycle in _cycles(g):
        path = " -> ".join(cycle + [cycle[0]])
        errors.append(GraphError(f"cycle: {path}", file=file, node_id=cycle[0],
                                 field=f"nodes.{cycle[0]}.inputs",
                                 fix="a node cannot depend on its own output; break one of these links"))

    # -- warnings -----------------------------------------------------------------------------------
    for name in spec.vars:
        if name not in used:
            warnings.append(GraphError(f"variable '{name}' is declared but never used", file=file,
                                       field=f"vars.{name}", fix="remove it, or use ${" + name + "} in a param"))
    if node_specs and not any(_is_sink(registry, ns.op) for ns in node_specs.values()):
        warnings.append(GraphError("no node writes anything (no sink such as 'write')", file=file,
                                   field="nodes", fix="add a write node"))

    if errors:
        raise GraphErrors(_dedupe(errors), file=file)
    if unset or len(nodes) != len(node_specs):
        return Loaded(None, warnings, written, doc)  # check mode, template unset
    graph = Graph(nodes=nodes, file=file, doc=spec.doc, variables=values,
                  source={"schema": SCHEMA_LABEL, "version": CURRENT_VERSION, "nodes": resolved_doc})
    return Loaded(graph, warnings, written, doc)


def _nonfinite(value: Any, path: str) -> Iterable[tuple[str, float]]:
    """(JSON path, value) of every NaN or infinite float in a validated params dump: a number in a
    file such as 1e999 parses as infinity, and a string such as "inf" coerces to one."""
    if isinstance(value, float):
        if not math.isfinite(value):
            yield path, value
    elif isinstance(value, dict):
        for k, v in value.items():
            yield from _nonfinite(v, f"{path}.{k}")
    elif isinstance(value, (list, tuple)):
        for i, v in enumerate(value):
            yield from _nonfinite(v, f"{path}[{i}]")


def _has_placeholder(value: Any) -> bool:
    if isinstance(value, str):
        return re.search(r"\$\{?[A-Za-z_]", value.replace("$$", "")) is not None
    if isinstance(value, dict):
        return any(_has_placeholder(v) for v in value.values())
    if isinstance(value, list):
        return any(_has_placeholder(v) for v in value)
    return False


def _is_sink(registry: Registry, opname: str) -> bool:
    try:
        return registry.get(opname).sink
    except (KeyError, PluginError):
        return False


def _cycles(g: nx.DiGraph, limit: int = 10) -> list[list[str]]:
    """Up to ``limit`` simple cycles, each rotated to start at its smallest id (stable output)."""
    out: list[list[str]] = []
    for cyc in nx.simple_cycles(g):
        i = cyc.index(min(cyc))
        out.append(cyc[i:] + cyc[:i])
        if len(out) >= limit:
            break
    return sorted(out)


def _dedupe(errors: list[GraphError]) -> list[GraphError]:
    seen = set()
    out = []
    for e in errors:
        k = (e.file, e.node_id, e.field, e.message)
        if k not in seen:
            seen.add(k)
            out.append(e)
    return out


def graph_from_source(source: Mapping[str, Any], registry: Registry | None = None,
                      file: str | None = None) -> Graph:
    """Rebuild a resolved graph from ``Graph.source`` (used by worker processes)."""
    return load_graph(dict(source), registry=registry, file=file).graph
