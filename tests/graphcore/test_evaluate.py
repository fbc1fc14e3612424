"""Evaluation at samples: pull-based requests, cache keys, call counting, frame ranges."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from graphcore.cache import Cache, DiskCache, MemoryCache
from graphcore.errors import OpError
from graphcore.evaluate import Evaluator, NodeFailure
from graphcore.registry import FrameRange
from graphcore.sample import Sample
from graphcore.validate import load_graph
from tests.conftest import graph_doc

DIAMOND = {"src": {"op": "test-const", "params": {"value": 1.0}},
           "left": {"op": "test-scale", "params": {"factor": 2.0}, "inputs": {"image": "src"}},
           "right": {"op": "test-scale", "params": {"factor": 3.0}, "inputs": {"image": "src"}},
           "join": {"op": "test-add", "inputs": {"a": "left", "b": "right"}},
           "out": {"op": "test-collect", "inputs": {"image": "join"}}}


def _ev(registry, nodes, cache=None):
    g = load_graph(graph_doc(nodes), registry=registry, file="t.json").graph
    return Evaluator(g, registry, cache)


def test_diamond_known_answer_and_shared_upstream_computed_once(registry):
    ev = _ev(registry, DIAMOND)
    img = ev.evaluate("out", Sample(5))
    # src at frame 5 = 1 + 5 = 6; left 12, right 18, join 30
    assert np.all(img.pixels == 30.0)
    assert ev.calls == {"src": 1, "left": 1, "right": 1, "join": 1, "out": 1}
    ev.evaluate("join", Sample(5))  # cached
    assert ev.calls["join"] == 1


def test_views_and_fractional_samples_are_distinct_keys(registry):
    ev = _ev(registry, DIAMOND)
    keys = {ev.key("join", s) for s in (Sample(1), Sample(2), Sample(1, 1), Sample(Fraction(3, 2)))}
    assert len(keys) == 4
    assert np.all(ev.evaluate("join", Sample(1, 1)).pixels == 5 * (1 + 1 + 100))


def test_keys_are_deterministic_across_evaluators(registry):
    a, b = _ev(registry, DIAMOND), _ev(registry, DIAMOND)
    assert a.key("out", Sample(3)) == b.key("out", Sample(3))
    changed = dict(DIAMOND, right={"op": "test-scale", "params": {"factor": 4.0}, "inputs": {"image": "src"}})
    c = _ev(registry, changed)
    assert c.key("left", Sample(3)) == a.key("left", Sample(3))   # upstream of the change: same key
    assert c.key("join", Sample(3)) != a.key("join", Sample(3))   # downstream: new key


def test_downstream_param_change_does_not_recompute_upstream(tmp_path, registry):
    """A shared disk cache between two runs: only the changed node and what is below it run."""
    first = _ev(registry, DIAMOND, Cache(MemoryCache(), DiskCache(tmp_path)))
    for f in range(1, 4):
        first.evaluate("out", Sample(f))
    assert first.calls["src"] == 3
    changed = dict(DIAMOND, join={"op": "test-add", "params": {"mode": "diff"}, "inputs": {"a": "left", "b": "right"}})
    second = _ev(registry, changed, Cache(MemoryCache(), DiskCache(tmp_path)))
    for f in range(1, 4):
        img = second.evaluate("out", Sample(f))
        assert np.all(img.pixels == 2 * (1 + f) - 3 * (1 + f))
    assert second.calls["src"] == 0 and second.calls["left"] == 0 and second.calls["right"] == 0
    assert second.calls["join"] == 3


def test_pull_based_requests_at_other_samples(registry):
    nodes = {"src": {"op": "test-const", "params": {"value": 0.0}},
             "d": {"op": "test-next-diff", "params": {"step": 2}, "inputs": {"image": "src"}},
             "out": {"op": "test-collect", "inputs": {"image": "d"}}}
    ev = _ev(registry, nodes)
    assert np.all(ev.evaluate("out", Sample(3)).pixels == 2.0)
    assert ev.input_samples("d", Sample(3)) == {"image": (Sample(3), Sample(5))}
    ev.evaluate("out", Sample(5))  # needs src at 5 (cached) and 7
    assert ev.calls["src"] == 3


def test_frame_ranges_intersect(registry):
    nodes = {"a": {"op": "test-const", "params": {"first": 1, "last": 10}},
             "b": {"op": "test-const", "params": {"first": 5, "last": 20}},
             "s": {"op": "test-add", "inputs": {"a": "a", "b": "b"}},
             "out": {"op": "test-collect", "inputs": {"image": "s"}}}
    ev = _ev(registry, nodes)
    assert ev.frames("out") == FrameRange(5, 10)


def test_compute_of_a_needs_ranges_operator_sees_its_inputs_ranges(registry):
    nodes = {"a": {"op": "test-const", "params": {"first": 3, "last": 7}},
             "r": {"op": "test-ranges", "inputs": {"image": "a"}}}
    img = _ev(registry, nodes).evaluate("r", Sample(4))
    assert img.pixels.ravel().tolist() == [3.0, 7.0]


def test_disjoint_frame_ranges_are_an_input_error(registry):
    nodes = {"a": {"op": "test-const", "params": {"first": 1, "last": 3}},
             "b": {"op": "test-const", "params": {"first": 5, "last": 9}},
             "s": {"op": "test-add", "inputs": {"a": "a", "b": "b"}},
             "out": {"op": "test-collect", "inputs": {"image": "s"}}}
    with pytest.raises(OpError) as info:
        _ev(registry, nodes).frames("out")
    assert info.value.node_id == "s" and info.value.file == "t.json"


def test_operator_errors_carry_the_node(registry):
    nodes = {"src": {"op": "test-const"}, "f": {"op": "test-fail", "inputs": {"image": "src"}},
             "g": {"op": "test-fail", "params": {"kind": "bug"}, "inputs": {"image": "src"}}}
    ev = _ev(registry, nodes)
    with pytest.raises(OpError) as info:
        ev.evaluate("f", Sample(1))
    assert info.value.node_id == "f" and info.value.field == "kind"
    with pytest.raises(NodeFailure) as info2:
        ev.evaluate("g", Sample(1))
    assert info2.value.node_id == "g" and "ZeroDivisionError" in str(info2.value)


def test_results_are_read_only(registry):
    img = _ev(registry, DIAMOND).evaluate("join", Sample(1))
    with pytest.raises(ValueError):
        img.pixels[0, 0, 0] = 1.0


def test_edge_samples_arrive_as_none_beyond_the_range(registry):
    """An operator that opts in (edge_samples) gets None for a neighbour past the last frame."""
    import dataclasses

    from tests import engine_ops

    seen = {}

    def compute(params, inputs, ctx):
        now, later = inputs["image"]
        seen[ctx.sample.frame] = later is None
        return now

    op = dataclasses.replace(engine_ops.NEXT_DIFF, name="test-next-edge", compute=compute, edge_samples=True)
    registry.add(op)
    nodes = {"src": {"op": "test-const", "params": {"first": 1, "last": 3}},
             "d": {"op": "test-next-edge", "inputs": {"image": "src"}}}
    ev = _ev(registry, nodes)
    for f in (1, 2, 3):
        ev.evaluate("d", Sample(f))
    assert seen == {1: False, 2: False, 3: True}
    assert ev.calls["src"] == 3  # frame 4 was never asked for


def test_view_ranges_come_from_view_numbered_reads(tmp_path, registry):
    from operators.io.exr import write_exr
    from tests.conftest import noise_image

    for cam in (1, 2, 3):
        write_exr(str(tmp_path / f"cam.{cam:02d}.exr"), noise_image(4, 4, seed=cam))
    nodes = {"rig": {"op": "read", "params": {"path": str(tmp_path / "cam.%02d.exr"), "axis": "view"}},
             "s": {"op": "test-scale", "inputs": {"image": "rig"}}}
    ev = _ev(registry, nodes)
    assert ev.views("s") == FrameRange(1, 3) and ev.frames("s") is None
    assert ev.in_range("s", Sample(7, 2)) and not ev.in_range("s", Sample(0, 4))


def test_planned_render_drops_results_after_their_last_consumer(registry):
    """With a plan, memory holds what later frames still need, not every finished frame
    (cf. dask's policy of dropping intermediates once their last consumer has run)."""
    from graphcore.execute import SerialExecutor
    from graphcore.execute.plan import Task

    nodes = {"src": {"op": "test-const", "params": {"value": 0.0, "first": 1, "last": 30}},
             "d": {"op": "test-next-diff", "inputs": {"image": "src"}},
             "s": {"op": "test-scale", "inputs": {"image": "d"}},
             "out": {"op": "test-collect", "inputs": {"image": "s"}}}
    ev = _ev(registry, nodes)
    sizes = []
    tasks = [Task("out", f) for f in range(1, 21)]
    ev.plan([(t.node_id, t.sample) for t in tasks])
    for t in tasks:
        ev.evaluate(t.node_id, t.sample)
        sizes.append(len(ev.cache.memory))
    assert max(sizes) <= 2            # src at f+1 waits for the next frame; nothing else stays
    assert ev.calls["src"] == 21      # and yet no frame of src was read twice
    report = SerialExecutor().run(_ev(registry, nodes), tasks)
    assert report.exit_code == 0 and report.calls["src"] == 21
