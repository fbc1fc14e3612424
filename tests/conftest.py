"""Shared fixtures and data generators for the test suite."""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest

REPO = Path(__file__).resolve().parent.parent
GRAPHS = REPO / "graphs"
FIXTURES = Path(__file__).resolve().parent / "fixtures"

os.environ.setdefault("OPENCV_LOG_LEVEL", "ERROR")


@pytest.fixture
def registry():
    """The installed operators plus the engine-test operators of tests/engine_ops.py."""
    from graphcore.registry import Registry
    from tests import engine_ops

    reg = Registry.from_entry_points()
    for op in engine_ops.ALL:
        reg.add(op.with_source("tests (tests.engine_ops)"))
    engine_ops.COLLECTED.clear()
    return reg


def graph_doc(nodes: dict, vars: dict | None = None, version: int = 2) -> dict:
    doc = {"schema": "midframe.graph", "version": version, "nodes": nodes}
    if vars is not None:
        doc["vars"] = vars
    return doc


def write_json(path: Path, doc) -> Path:
    path.write_text(json.dumps(doc, indent=2))
    return path


def noise_image(h: int, w: int, channels=("R", "G", "B", "A"), seed: int = 0, premultiplied: bool = True):
    """Seeded random image; colour premultiplied by a random alpha when A is present."""
    from graphcore.image import Image

    rng = np.random.default_rng(seed)
    px = rng.random((h, w, len(channels)), dtype=np.float32)
    if premultiplied and "A" in channels:
        a = px[:, :, channels.index("A")]
        for i, c in enumerate(channels):
            if c in ("R", "G", "B"):
                px[:, :, i] *= a
    return Image(px, tuple(channels))
