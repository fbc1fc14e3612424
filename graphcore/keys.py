"""Deterministic cache keys.

The key of a node's result at a sample hashes: the operator name and version, the canonical JSON
of its params, the sample, the operator's identity text (``read``: file path, size, mtime), and the
keys of every input at every sample the operator asks for. Nothing machine-specific enters a key
except what ``identity`` chooses to, so farm nodes sharing a disk cache share keys. A param that
cannot be put in canonical JSON is an error, never a silently unstable key.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence

from graphcore.spec import canonical_json

__all__ = ["node_key", "KEY_SCHEME"]

KEY_SCHEME = "midframe-key-1"


def node_key(op_name: str, op_version: int, params_json: str, sample_token: str, identity: str,
             inputs: Sequence[tuple[str, Sequence[str]]]) -> str:
    """SHA-256 hex key of one node result; ``inputs`` is (port, [input keys in asked order])."""
    doc = [KEY_SCHEME, op_name, op_version, params_json, sample_token, identity,
           [[port, list(keys)] for port, keys in inputs]]
    return hashlib.sha256(canonical_json(doc).encode()).hexdigest()
