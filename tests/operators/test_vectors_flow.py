"""flow-estimate as an operator in a graph: neighbours pulled along time or the rig, channel layout,
sequence ends, bad input. The estimator's accuracy is tested in test_vectors_estimate.py."""

from __future__ import annotations

import numpy as np
import pytest

from graphcore.errors import OpError
from graphcore.evaluate import Evaluator
from graphcore.image import Image
from graphcore.sample import Sample
from graphcore.validate import load_graph
from operators.io.exr import write_exr
from operators.vectors.flow import FLOW_ESTIMATE, FlowParams


def _texture(h, w, seed):
    import cv2

    rng = np.random.default_rng(seed)
    t = cv2.GaussianBlur(rng.random((h * 2, w * 2)).astype(np.float32), (0, 0), 2.0)
    return (t - t.min()) / (t.max() - t.min()) * 0.8 + 0.05


def _moving_sequence(folder, n=3, shift=(3, 1), size=(64, 96), pattern="plate.%04d.exr"):
    """Frame k shows the same texture moved by k * shift (x right, y down): known vectors."""
    h, w = size
    tex = _texture(h, w, 0)
    for k in range(n):
        x0, y0 = 20 - k * shift[0], 20 - k * shift[1]
        grey = tex[y0:y0 + h, x0:x0 + w]
        img = Image(np.dstack([grey, grey * 0.8, grey * 0.6, np.ones_like(grey)]), ("R", "G", "B", "A"))
        write_exr(str(folder / (pattern % (k + 1))), img, default_pixel_type="float")
    return str(folder / pattern)


def _graph(path, **params):
    doc = {"schema": "midframe.graph", "version": 2,
           "nodes": {"plate": {"op": "read", "params": {"path": path}},
                     "vec": {"op": "flow-estimate", "params": params, "inputs": {"image": "plate"}}}}
    return Evaluator(load_graph(doc).graph)


@pytest.mark.parametrize("engine", ["dis", "midframe"])
def test_known_translation_both_ways_and_sequence_ends(tmp_path, engine):
    ev = _graph(_moving_sequence(tmp_path), engine=engine, quality="standard")
    mid = ev.evaluate("vec", Sample(2))
    assert mid.channels == ("fwd.x", "fwd.y", "bwd.x", "bwd.y")
    core = (slice(12, -12), slice(12, -12))
    for name, want in (("fwd.x", 3), ("fwd.y", 1), ("bwd.x", -3), ("bwd.y", -1)):
        assert abs(float(np.median(mid.channel(name)[core])) - want) < 0.25, name
    first, last = ev.evaluate("vec", Sample(1)), ev.evaluate("vec", Sample(3))
    assert np.all(first.channel("bwd.x") == 0) and np.all(last.channel("fwd.x") == 0)  # no neighbour there
    assert abs(float(np.median(first.channel("fwd.x")[core])) - 3) < 0.25
    assert ev.calls["plate"] == 3  # each frame read once although three nodes asked for neighbours


def test_view_axis_pulls_neighbouring_cameras(tmp_path):
    path = _moving_sequence(tmp_path, pattern="cam.%02d.exr")
    doc = {"schema": "midframe.graph", "version": 2,
           "nodes": {"rig": {"op": "read", "params": {"path": path, "axis": "view"}},
                     "vec": {"op": "flow-estimate", "params": {"axis": "view", "engine": "dis"},
                             "inputs": {"image": "rig"}}}}
    ev = Evaluator(load_graph(doc).graph)
    out = ev.evaluate("vec", Sample(1001, 2))   # any frame: the rig's stills hold still in time
    assert abs(float(np.median(out.channel("fwd.x")[12:-12, 12:-12])) - 3) < 0.25
    assert ev.input_samples("vec", Sample(1001, 2))["image"] == (Sample(1001, 1), Sample(1001, 2),
                                                                 Sample(1001, 3))


def test_single_channel_is_matched():
    rng = np.random.default_rng(1)
    a = Image(rng.random((32, 32, 1), dtype=np.float32), ("Y",))
    out = FLOW_ESTIMATE.compute(FlowParams(engine="dis"), {"image": (None, a, a)}, None)
    assert np.abs(out.pixels).max() < 0.5  # identical frames: (almost) no motion


def test_bad_inputs():
    rng = np.random.default_rng(2)
    a = Image(rng.random((32, 32, 3), dtype=np.float32), ("R", "G", "B"))
    b = Image(rng.random((30, 32, 3), dtype=np.float32), ("R", "G", "B"))
    with pytest.raises(OpError) as info:
        FLOW_ESTIMATE.compute(FlowParams(engine="dis"), {"image": (None, a, b)}, None)
    assert "resize" in info.value.fix and "32x30" in info.value.message
    layered = Image(rng.random((8, 8, 2), dtype=np.float32), ("depth.Z", "conf"))
    with pytest.raises(OpError) as info:
        FLOW_ESTIMATE.compute(FlowParams(engine="dis"), {"image": (None, layered, layered)}, None)
    assert info.value.field == "channels"
    nan = Image(np.full((16, 16, 3), np.nan, np.float32), ("R", "G", "B"))
    out = FLOW_ESTIMATE.compute(FlowParams(engine="dis"), {"image": (nan, nan, nan)}, None)
    assert np.isfinite(out.pixels).all()
