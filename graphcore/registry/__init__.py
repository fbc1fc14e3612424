"""Operator registry: discovers operators through the ``midframe.operators`` entry points.

Each entry point is named after the operator and points at a module attribute holding an
``Operator``. Names are known without importing anything; a module is imported the first time
its operator is asked for. A plugin that fails to import (or breaks the contract) is recorded with
where it came from and skipped; asking for it afterwards raises ``PluginError`` carrying that
record, which graph validation turns into an error naming the node.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from importlib.metadata import EntryPoint, entry_points

from graphcore.registry.operator import FrameRange, InputRange, OpContext, Operator, PluginError, Port

__all__ = ["Registry", "Operator", "Port", "OpContext", "FrameRange", "InputRange", "PluginError", "default_registry",
           "ENTRY_POINT_GROUP"]

ENTRY_POINT_GROUP = "midframe.operators"
BUILTIN_DISTRIBUTION = "midframe"
log = logging.getLogger("midframe.registry")


@dataclass(frozen=True)
class Found:
    """One discovered operator: where it came from and, once loaded, the Operator or the error."""

    name: str
    distribution: str
    target: str  # "module:attr"

    @property
    def source(self) -> str:
        return f"{self.distribution} ({self.target})"


class Registry:
    """Operators by name, loaded lazily from entry points (or added directly, for tests)."""

    def __init__(self, found: dict[str, tuple[Found, EntryPoint | None]] | None = None) -> None:
        self._found: dict[str, tuple[Found, EntryPoint | None]] = dict(found or {})
        self._loaded: dict[str, Operator] = {}
        self._broken: dict[str, PluginError] = {}

    # -- discovery ------------------------------------------------------------------------
    @classmethod
    def from_entry_points(cls, extra: list[str] | None = None) -> "Registry":
        """Discover every installed operator. ``extra`` names plugin modules given explicitly
        on the command line (``--plugin module:attr``)."""
        found: dict[str, tuple[Found, EntryPoint | None]] = {}
        for ep in entry_points(group=ENTRY_POINT_GROUP):
            dist = ep.dist.name if ep.dist is not None else "?"
            if ep.name in found:
                prev = found[ep.name][0]
                log.warning("operator %r from %s is shadowed by %s", ep.name, dist, prev.source)
                continue
            found[ep.name] = (Found(ep.name, dist, ep.value), ep)
        reg = cls(found)
        for target in extra or []:
            reg.add_target(target)
        return reg

    def add_target(self, target: str) -> None:
        """Load an operator from ``module:attr`` named explicitly (command-line flag)."""
        ep = EntryPoint(name="?", value=target, group=ENTRY_POINT_GROUP)
        try:
            op = self._check(ep.load(), target)
        except Exception as exc:  # a broken plugin is reported, never fatal by itself
            raise PluginError(f"cannot load plugin {target}: {type(exc).__name__}: {exc}",
                              source=target) from None
        self.add(op.with_source(f"--plugin ({target})"))

    def add(self, op: Operator) -> None:
        self._loaded[op.name] = op
        self._found.setdefault(op.name, (Found(op.name, op.source or "(added)", ""), None))

    def copy(self) -> "Registry":
        """An independent registry with the same operators (add to it without touching this one)."""
        other = Registry(self._found)
        other._loaded = dict(self._loaded)
        other._broken = dict(self._broken)
        return other

    def builtin_only(self) -> "Registry":
        """A registry of just the operators the midframe distribution itself declares."""
        return Registry({n: v for n, v in self._found.items() if v[0].distribution == BUILTIN_DISTRIBUTION})

    # -- lookup ---------------------------------------------------------------------------
    def names(self) -> list[str]:
        return sorted(self._found)

    def found(self, name: str) -> Found | None:
        entry = self._found.get(name)
        return entry[0] if entry else None

    def __contains__(self, name: str) -> bool:
        return name in self._found

    def get(self, name: str) -> Operator:
        """The operator called ``name``; ``KeyError`` if unknown, ``PluginError`` if broken."""
        if name in self._loaded:
            return self._loaded[name]
        if name in self._broken:
            raise self._broken[name]
        if name not in self._found:
            raise KeyError(name)
        info, ep = self._found[name]
        try:
            obj = ep.load() if ep is not None else None
            op = self._check(obj, info.source)
            if op.name != name:
                raise PluginError(f"entry point {name!r} holds operator {op.name!r}")
        except Exception as exc:
            err = exc if isinstance(exc, PluginError) else PluginError(f"{type(exc).__name__}: {exc}")
            err = PluginError(f"plugin {info.source} failed to load: {err}", operator=name,
                              source=info.source)
            log.warning("%s (skipped)", err)
            self._broken[name] = err
            raise err from None
        op = op.with_source(info.source)
        self._loaded[name] = op
        return op

    def load_all(self) -> tuple[dict[str, Operator], dict[str, PluginError]]:
        """Import everything (for ``midframe ops`` and the schema): good ones and broken ones."""
        good, bad = {}, {}
        for name in self.names():
            try:
                good[name] = self.get(name)
            except PluginError as exc:
                bad[name] = exc
        return good, bad

    @staticmethod
    def _check(obj: object, source: str) -> Operator:
        if not isinstance(obj, Operator):
            raise PluginError(f"{source} does not hold an Operator (got {type(obj).__name__})",
                              source=source)
        return obj


_default: Registry | None = None


def default_registry() -> Registry:
    """The process-wide registry of installed operators (discovered once)."""
    global _default
    if _default is None:
        _default = Registry.from_entry_points()
    return _default
