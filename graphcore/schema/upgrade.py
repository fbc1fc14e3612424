"""Upgrades of graph documents between schema versions: small, registered dict-to-dict functions.

Each function takes a document at version N and returns it at version N+1; ``upgrade`` chains them.
Old fixture files stay in ``tests/fixtures/graphs`` and must keep loading.

History
-------
1 : nodes as a list of objects, each with an ``id``; template variables under ``variables``.
2 : nodes as an object keyed by id (diffs stay local to a node); variables under ``vars``.
"""

from __future__ import annotations

import copy
from collections.abc import Callable
from typing import Any

from graphcore.spec import CURRENT_VERSION

__all__ = ["UPGRADES", "upgrade", "register_upgrade", "UpgradeError"]

Doc = dict[str, Any]
UPGRADES: dict[int, Callable[[Doc], Doc]] = {}


class UpgradeError(ValueError):
    """A document that an upgrade function cannot read. ``field`` is the JSON path."""

    def __init__(self, message: str, field: str):
        super().__init__(message)
        self.field = field


def register_upgrade(from_version: int) -> Callable[[Callable[[Doc], Doc]], Callable[[Doc], Doc]]:
    def deco(fn: Callable[[Doc], Doc]) -> Callable[[Doc], Doc]:
        if from_version in UPGRADES:
            raise ValueError(f"two upgrades registered from version {from_version}")
        UPGRADES[from_version] = fn
        return fn
    return deco


@register_upgrade(1)
def _v1_to_v2(doc: Doc) -> Doc:
    out = {k: v for k, v in doc.items() if k not in ("nodes", "variables", "version")}
    out["version"] = 2
    if "variables" in doc:
        out["vars"] = doc["variables"]
    nodes = doc.get("nodes", [])
    if not isinstance(nodes, list):
        raise UpgradeError("version 1 graphs list their nodes in an array", "nodes")
    new: dict[str, Any] = {}
    for i, node in enumerate(nodes):
        if not isinstance(node, dict) or not isinstance(node.get("id"), str):
            raise UpgradeError("each version 1 node is an object with a string 'id'", f"nodes[{i}].id")
        if node["id"] in new:
            raise UpgradeError(f"node id {node['id']!r} appears twice", f"nodes[{i}].id")
        new[node["id"]] = {k: v for k, v in node.items() if k != "id"}
    out["nodes"] = new
    return out


def upgrade(doc: Doc) -> tuple[Doc, int]:
    """Bring ``doc`` to the current version. Returns (new document, version it was written at).

    Raises ``UpgradeError`` for a version newer than this tool or one with no upgrade path.
    """
    version = doc.get("version")
    if not isinstance(version, int) or isinstance(version, bool):
        raise UpgradeError(f"'version' must be an integer (current is {CURRENT_VERSION})", "version")
    if version > CURRENT_VERSION:
        raise UpgradeError(f"version {version} is newer than this midframe understands "
                           f"(up to {CURRENT_VERSION}); upgrade midframe", "version")
    if version < 1:
        raise UpgradeError(f"version {version} does not exist; the first is 1", "version")
    original = version
    doc = copy.deepcopy(doc)
    while version < CURRENT_VERSION:
        doc = UPGRADES[version](doc)
        version = doc["version"]
    return doc, original
