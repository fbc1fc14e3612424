"""Template variables: ``${name}`` placeholders (Python's ``string.Template`` syntax).

Values are layered, lowest first: the default declared in the graph, the show-level defaults file
(``--defaults FILE``), then ``--set name=value`` on the command line. A param that is exactly
``"${name}"`` takes the variable's typed value (an int stays an int); a placeholder inside longer
text is replaced by the value's text. ``$$`` is a literal ``$``.
"""

from __future__ import annotations

import string
from collections.abc import Iterable, Mapping
from typing import Any

from graphcore.errors import GraphError
from graphcore.spec import DefaultsSpec, GraphSpec, VarDecl

__all__ = ["parse_sets", "coerce", "resolve_values", "substitute"]

_TRUE = {"1", "true", "yes", "on"}
_FALSE = {"0", "false", "no", "off"}


def parse_sets(items: Iterable[str]) -> tuple[dict[str, str], list[GraphError]]:
    """Parse ``name=value`` pairs from ``--set``."""
    values: dict[str, str] = {}
    errors: list[GraphError] = []
    for item in items:
        name, sep, value = item.partition("=")
        name = name.strip()
        if not sep or not name:
            errors.append(GraphError(f"--set {item!r} is not name=value", field="--set",
                                     fix="write --set name=value, e.g. --set src=plates/a.%04d.exr"))
            continue
        values[name] = value
    return values, errors


def coerce(name: str, decl: VarDecl, value: Any, origin: str) -> Any:
    """Convert ``value`` to the declared type; ``ValueError`` says why not."""
    t = decl.type
    if t in ("string", "path"):
        if isinstance(value, bool) or not isinstance(value, (str, int, float)):
            raise ValueError(f"expected text, got {value!r}")
        return str(value)
    if t == "bool":
        if isinstance(value, bool):
            return value
        if isinstance(value, str) and value.strip().lower() in _TRUE | _FALSE:
            return value.strip().lower() in _TRUE
        raise ValueError(f"expected true or false, got {value!r}")
    if t == "int":
        if isinstance(value, bool):
            raise ValueError(f"expected an integer, got {value!r}")
        if isinstance(value, int):
            return value
        if isinstance(value, float) and value.is_integer():
            return int(value)
        if isinstance(value, str):
            try:
                return int(value.strip())
            except ValueError:
                pass
        raise ValueError(f"expected an integer, got {value!r}")
    if t == "float":
        if isinstance(value, bool):
            raise ValueError(f"expected a number, got {value!r}")
        if isinstance(value, (int, float)):
            out = float(value)
        else:
            try:
                out = float(str(value).strip())
            except ValueError:
                raise ValueError(f"expected a number, got {value!r}") from None
        if out != out or out in (float("inf"), float("-inf")):
            raise ValueError(f"expected a finite number, got {value!r}")
        return out
    raise ValueError(f"unknown variable type {t!r}")  # pragma: no cover - VarDecl forbids it


def resolve_values(spec: GraphSpec, sets: Mapping[str, str], defaults: DefaultsSpec | None, *,
                   file: str | None, defaults_file: str | None
                   ) -> tuple[dict[str, Any], list[GraphError]]:
    """Layer declared defaults < defaults file < --set; report unknown and unset variables."""
    errors: list[GraphError] = []
    values: dict[str, Any] = {}
    declared = spec.vars
    for name in sets:
        if name not in declared:
            known = ", ".join(sorted(declared)) or "none"
            errors.append(GraphError(f"--set {name}=... names a variable this graph does not declare",
                                     file=file, field=f"vars.{name}",
                                     fix=f"declared variables: {known}; or declare '{name}' under \"vars\""))
    for name, decl in declared.items():
        layers: list[tuple[str, Any, str | None, str]] = []
        if decl.default is not None:
            layers.append(("the graph's default", decl.default, file, f"vars.{name}.default"))
        if defaults is not None and name in defaults.vars:
            layers.append(("the defaults file", defaults.vars[name], defaults_file, f"vars.{name}"))
        if name in sets:
            layers.append(("--set", sets[name], None, f"--set {name}"))
        if not layers:
            errors.append(GraphError(f"variable '{name}' ({decl.type}) has no value", file=file,
                                     field=f"vars.{name}",
                                     fix=f"pass --set {name}=VALUE, or give it a default"
                                         + (f" ({decl.doc})" if decl.doc else "")))
            continue
        origin, raw, where, fld = layers[-1]
        try:
            values[name] = coerce(name, decl, raw, origin)
        except ValueError as exc:
            errors.append(GraphError(f"variable '{name}' from {origin}: {exc}", file=where or file,
                                     field=fld, fix=f"give '{name}' a {decl.type} value"))
    return values, errors


def substitute(obj: Any, values: Mapping[str, Any], declared: Iterable[str], *, path: str,
               node_id: str | None, file: str | None, errors: list[GraphError], used: set[str]) -> Any:
    """Return ``obj`` with ``${name}`` placeholders replaced, recursing into lists and dicts."""
    declared = set(declared)
    if isinstance(obj, dict):
        return {k: substitute(v, values, declared, path=f"{path}.{k}", node_id=node_id, file=file,
                              errors=errors, used=used) for k, v in obj.items()}
    if isinstance(obj, list):
        return [substitute(v, values, declared, path=f"{path}[{i}]", node_id=node_id, file=file,
                           errors=errors, used=used) for i, v in enumerate(obj)]
    if not isinstance(obj, str) or "$" not in obj:
        return obj
    tmpl = string.Template(obj)
    if not tmpl.is_valid():
        errors.append(GraphError(f"malformed placeholder in {obj!r}", file=file, node_id=node_id,
                                 field=path, fix="write ${name} with a declared name, or $$ for a literal $"))
        return obj
    names = tmpl.get_identifiers()
    missing = False
    for name in names:
        used.add(name)
        if name not in declared:
            known = ", ".join(sorted(declared)) or "none declared"
            errors.append(GraphError(f"unknown variable '${{{name}}}'", file=file, node_id=node_id,
                                     field=path, fix=f"declare '{name}' under \"vars\" (known: {known})"))
            missing = True
        elif name not in values:
            missing = True  # already reported as unset
    if missing:
        return obj
    whole = obj.strip()
    if len(names) == 1 and whole in (f"${{{names[0]}}}", f"${names[0]}"):
        return values[names[0]]
    return tmpl.substitute({k: _text(values[k]) for k in names})


def _text(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)
