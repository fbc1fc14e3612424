"""Operator plugins: entry-point discovery, a broken plugin skipped with its source, and the
example third-party package in examples/midframe-example-plugin.

The example package is installed by CI (``pip install -e examples/midframe-example-plugin``); the
discovery tests need it installed, the compute tests import it from its source folder.
"""

from __future__ import annotations

import importlib
import sys
from importlib.metadata import PackageNotFoundError, distribution
from pathlib import Path

import numpy as np
import pydantic
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry import ENTRY_POINT_GROUP, Operator, PluginError, Registry
from graphcore.registry.operator import OpContext
from graphcore.sample import Sample

ROOT = Path(__file__).resolve().parents[1]
BROKEN = Path(__file__).resolve().parent / "fixtures" / "broken_plugin"
EXAMPLE_SRC = ROOT / "examples" / "midframe-example-plugin" / "src"


@pytest.fixture
def with_broken_plugin(monkeypatch):
    """Put the fixture's fake installed distribution on sys.path (importlib.metadata finds it)."""
    monkeypatch.syspath_prepend(str(BROKEN))
    yield
    sys.modules.pop("broken_midframe_plugin", None)


@pytest.fixture
def vignette_module(monkeypatch):
    monkeypatch.syspath_prepend(str(EXAMPLE_SRC))
    return importlib.import_module("midframe_example_plugin.vignette")


def _require_example_installed() -> None:
    try:
        distribution("midframe-example-plugin")
    except PackageNotFoundError:
        pytest.fail("the example plugin is not installed; run "
                    "`pip install -e examples/midframe-example-plugin` (CI does)")


# -- a broken plugin ----------------------------------------------------------------------------
def test_broken_plugin_is_reported_with_its_source_and_skipped(with_broken_plugin):
    reg = Registry.from_entry_points()
    assert "broken-op" in reg.names()  # known by name without importing it
    assert reg.found("broken-op").distribution == "broken-midframe-plugin"

    good, bad = reg.load_all()
    assert set(bad) == {"broken-op"}
    err = bad["broken-op"]
    assert isinstance(err, PluginError)
    assert err.operator == "broken-op"
    assert "broken-midframe-plugin" in err.source and "broken_midframe_plugin:OP" in err.source
    assert "ImportError" in str(err)
    # every other operator still loads
    assert good and all(isinstance(op, Operator) for op in good.values())
    assert "broken-op" not in good


def test_asking_for_a_broken_plugin_again_raises_the_same_record(with_broken_plugin):
    reg = Registry.from_entry_points()
    with pytest.raises(PluginError) as first:
        reg.get("broken-op")
    with pytest.raises(PluginError) as second:
        reg.get("broken-op")
    assert second.value is first.value
    assert "broken-midframe-plugin" in first.value.source


def test_without_the_fixture_on_the_path_there_is_no_broken_operator():
    assert "broken-op" not in Registry.from_entry_points().names()


# -- the example package: discovery ---------------------------------------------------------------
def test_example_plugin_is_discovered_through_its_entry_point(with_broken_plugin):
    _require_example_installed()
    reg = Registry.from_entry_points()
    found = reg.found("example-vignette")
    assert found is not None and found.distribution == "midframe-example-plugin"
    assert found.target == "midframe_example_plugin.vignette:VIGNETTE"
    op = reg.get("example-vignette")  # loads fine next to the broken plugin
    assert op.name == "example-vignette" and "midframe-example-plugin" in op.source
    assert [p.name for p in op.inputs] == ["image"]
    eps = [ep for ep in distribution("midframe-example-plugin").entry_points
           if ep.group == ENTRY_POINT_GROUP]
    assert [ep.name for ep in eps] == ["example-vignette"]


# -- the example package: compute -----------------------------------------------------------------
def _ctx() -> OpContext:
    return OpContext(sample=Sample(1))


def test_vignette_known_answer_on_3x3(vignette_module):
    # by hand: centre r = 0 -> 1; edge midpoints r = 1/sqrt(2) -> 1 - s/2 (falloff 2);
    # corners r = 1 -> 1 - s
    vm = vignette_module
    params = vm.VignetteParams(strength=0.4, falloff=2.0)
    rgba = np.ones((3, 3, 4), np.float32)
    rgba[..., 3] = 0.5
    out = vm.compute(params, {"image": Image(rgba, ("R", "G", "B", "A"))}, _ctx())
    expected = np.array([[0.6, 0.8, 0.6], [0.8, 1.0, 0.8], [0.6, 0.8, 0.6]], np.float32)
    for c in "RGB":
        np.testing.assert_allclose(out.channel(c), expected, rtol=0, atol=1e-6)
    np.testing.assert_array_equal(out.channel("A"), 0.5)  # alpha untouched
    assert out.channels == ("R", "G", "B", "A")


def test_vignette_falloff_and_other_channels(vignette_module):
    vm = vignette_module
    img = Image(np.full((5, 7, 3), 2.0, np.float32), ("R", "fwd.x", "conf"))
    out = vm.compute(vm.VignetteParams(strength=1.0, falloff=1.0), {"image": img}, _ctx())
    assert out.channel("R")[2, 3] == pytest.approx(2.0)
    assert out.channel("R")[0, 0] == pytest.approx(0.0, abs=1e-6)
    # falloff 1: factor 1 - r; pixel (2, 0) sits at dx = -1, dy = 0 -> r = 1/sqrt(2)
    assert out.channel("R")[2, 0] == pytest.approx(2.0 * (1 - 1 / np.sqrt(2)), abs=1e-6)
    np.testing.assert_array_equal(out.channel("fwd.x"), 2.0)  # vectors pass through
    np.testing.assert_array_equal(out.channel("conf"), 2.0)
    assert not img.pixels.flags.writeable and np.all(img.pixels == 2.0)  # input untouched


def test_vignette_strength_zero_is_identity(vignette_module):
    vm = vignette_module
    rng = np.random.default_rng(3)
    img = Image(rng.random((4, 6, 4), dtype=np.float32), ("R", "G", "B", "A"))
    out = vm.compute(vm.VignetteParams(strength=0.0), {"image": img}, _ctx())
    np.testing.assert_array_equal(out.pixels, img.pixels)


def test_vignette_single_pixel_and_single_row(vignette_module):
    vm = vignette_module
    np.testing.assert_array_equal(vm.vignette_factor(1, 1, 0.5, 2.0), [[1.0]])
    row = vm.vignette_factor(1, 3, 0.5, 2.0)[0]  # dy = 0, dx = -1, 0, 1 -> r = 1/sqrt(2)
    np.testing.assert_allclose(row, [0.75, 1.0, 0.75], atol=1e-6)


def test_vignette_params_are_checked(vignette_module):
    vm = vignette_module
    with pytest.raises(pydantic.ValidationError):
        vm.VignetteParams(strength=1.5)
    with pytest.raises(pydantic.ValidationError):
        vm.VignetteParams(radius=2)  # unknown field (extra='forbid')
    with pytest.raises(pydantic.ValidationError):
        vm.VignetteParams().strength = 0.1  # frozen
    assert all(f.description for f in vm.VignetteParams.model_fields.values())


def test_vignette_without_colour_is_an_op_error(vignette_module):
    vm = vignette_module
    img = Image(np.zeros((2, 2, 2), np.float32), ("fwd.x", "fwd.y"))
    with pytest.raises(OpError) as info:
        vm.compute(vm.VignetteParams(), {"image": img}, _ctx())
    assert info.value.field == "inputs.image" and "R, G and B" in info.value.fix


def test_example_plugin_used_in_a_graph_end_to_end(tmp_path):
    """The installed third-party operator renders through `midframe run` like a built-in one."""
    import contextlib
    import io
    import json

    from graphcore.cli.main import main
    from operators.io.exr import read_exr, write_exr

    try:
        distribution("midframe-example-plugin")
    except PackageNotFoundError:
        pytest.fail("examples/midframe-example-plugin is not installed: pip install -e examples/midframe-example-plugin")
    plate = Image(np.ones((9, 9, 4), np.float32), ("R", "G", "B", "A"))
    write_exr(str(tmp_path / "p.0001.exr"), plate, default_pixel_type="float")
    graph = {"schema": "midframe.graph", "version": 2, "nodes": {
        "p": {"op": "read", "params": {"path": str(tmp_path / "p.%04d.exr")}},
        "v": {"op": "example-vignette", "params": {"strength": 0.5}, "inputs": {"image": "p"}},
        "o": {"op": "write", "params": {"path": str(tmp_path / "o.%04d.exr"), "pixel_type": "float"},
              "inputs": {"image": "v"}}}}
    (tmp_path / "g.json").write_text(json.dumps(graph))
    err = io.StringIO()
    with contextlib.redirect_stderr(err):
        assert main(["run", str(tmp_path / "g.json"), "-q"]) == 0, err.getvalue()
    out = read_exr(str(tmp_path / "o.0001.exr"))
    r = out.channel("R")
    assert r[4, 4] == pytest.approx(1.0) and r[0, 0] < r[4, 4]  # darker towards the corners
    assert np.all(out.channel("A") == 1.0)
