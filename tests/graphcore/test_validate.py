"""Graph validation: every message names the file, node, JSON path and a fix; all in one pass."""

from __future__ import annotations

import json

import pytest

from graphcore.errors import GraphErrors, InputError
from graphcore.validate import load_graph
from tests.conftest import FIXTURES, graph_doc, write_json


def _errors(registry, doc, **kw) -> list:
    with pytest.raises(GraphErrors) as info:
        load_graph(doc, registry=registry, file="shot.json", **kw)
    return info.value.errors


def _one(errors, **match):
    hits = [e for e in errors if all(getattr(e, k) == v for k, v in match.items())]
    assert hits, f"no error matching {match}; got {[e.describe() for e in errors]}"
    return hits[0]


GOOD = {"src": {"op": "test-const", "params": {"value": 2.0}},
        "half": {"op": "test-scale", "params": {"factor": 0.5}, "inputs": {"image": "src"}},
        "out": {"op": "test-collect", "inputs": {"image": "half"}}}


def test_valid_graph_resolves(registry):
    loaded = load_graph(graph_doc(GOOD), registry=registry, file="shot.json")
    g = loaded.graph
    assert set(g.nodes) == {"src", "half", "out"}
    assert g.nodes["half"].params.factor == 0.5
    assert loaded.warnings == []
    assert len(g.hash) == 64


def test_malformed_json_names_line(tmp_path, registry):
    p = tmp_path / "bad.json"
    p.write_text('{"schema": "midframe.graph",\n "version": 2,\n "nodes": {,}}')
    with pytest.raises(InputError) as info:
        load_graph(p, registry=registry)
    e = info.value
    assert e.file == str(p) and "line 3" in e.message and e.fix


@pytest.mark.parametrize("doc, text", [([1, 2], "JSON list"), ("x", "JSON str"), ({"version": 2}, "schema label")])
def test_wrong_top_level(tmp_path, registry, doc, text):
    p = write_json(tmp_path / "g.json", doc)
    with pytest.raises(InputError) as info:
        load_graph(p, registry=registry)
    assert text in info.value.message and info.value.fix


def test_missing_file(tmp_path, registry):
    with pytest.raises(InputError) as info:
        load_graph(tmp_path / "nope.json", registry=registry)
    assert "not found" in info.value.message and info.value.file.endswith("nope.json")


def test_unknown_keys_and_types_all_reported_at_once(registry):
    doc = graph_doc({
        "src": {"op": "test-const", "params": {"value": "bright", "sise": 3}},
        "half": {"op": "test-scle", "inputs": {"image": "src"}},
        "out": {"op": "test-collect", "inputs": {"image": "hlf"}, "colour": "red"},
    })
    doc["extra_top"] = 1
    errs = _errors(registry, doc)
    e = _one(errs, node_id="src", field="nodes.src.params.value")
    assert "test-const" in e.fix
    e = _one(errs, node_id="src", field="nodes.src.params.sise")
    assert "size" in e.fix  # suggestion
    e = _one(errs, node_id="half", field="nodes.half.op")
    assert "test-scale" in e.fix
    e = _one(errs, node_id="out", field="nodes.out.inputs.image")
    assert "does not exist" in e.message and "half" in e.fix
    _one(errs, node_id="out", field="nodes.out.colour")
    _one(errs, field="extra_top")
    assert all(e.file == "shot.json" for e in errs)
    assert len(errs) >= 6


def test_ports(registry):
    doc = graph_doc({"src": {"op": "test-const"},
                     "sum": {"op": "test-add", "inputs": {"b": "src", "c": "src"}},
                     "out": {"op": "test-collect", "inputs": {"image": "sum"}}})
    errs = _errors(registry, doc)
    e = _one(errs, node_id="sum", field="nodes.sum.inputs.a")
    assert "required input 'a'" in e.message
    e = _one(errs, node_id="sum", field="nodes.sum.inputs.c")
    assert "no input port 'c'" in e.message


def test_source_operator_with_inputs(registry):
    doc = graph_doc({"src": {"op": "test-const", "inputs": {"image": "src2"}}, "src2": {"op": "test-const"},
                     "out": {"op": "test-collect", "inputs": {"image": "src"}}})
    e = _one(_errors(registry, doc), node_id="src", field="nodes.src.inputs.image")
    assert "takes no inputs" in e.fix


def test_cycle_reported_as_path(registry):
    doc = graph_doc({"a": {"op": "test-scale", "inputs": {"image": "c"}},
                     "b": {"op": "test-scale", "inputs": {"image": "a"}},
                     "c": {"op": "test-scale", "inputs": {"image": "b"}},
                     "out": {"op": "test-collect", "inputs": {"image": "c"}}})
    e = _one(_errors(registry, doc), node_id="a")
    assert e.message == "cycle: a -> b -> c -> a"


def test_self_loop(registry):
    doc = graph_doc({"a": {"op": "test-scale", "inputs": {"image": "a"}}})
    e = _one(_errors(registry, doc), node_id="a")
    assert e.message == "cycle: a -> a"


def test_variables_typed_substitution_and_layering(tmp_path, registry):
    doc = graph_doc({"src": {"op": "test-const", "params": {"value": "${gain}", "size": "${size}"}},
                     "out": {"op": "test-collect", "params": {"tag": "shot_${shot}_v${size}"},
                             "inputs": {"image": "src"}}},
                    vars={"gain": {"type": "float", "default": 1.5}, "size": {"type": "int", "default": 8},
                          "shot": {"type": "string"}})
    defaults = write_json(tmp_path / "show.json", {"schema": "midframe.defaults", "version": 1,
                                                   "vars": {"size": 16, "gain": 3.0, "unrelated": "x"},
                                                   "params": {"test-scale": {"factor": 4.0}}})
    g = load_graph(doc, registry=registry, sets=["shot=010", "gain=0.25"], defaults=defaults).graph
    assert g.nodes["src"].params.value == 0.25      # --set beats the defaults file
    assert g.nodes["src"].params.size == 16         # the defaults file beats the graph's default
    assert g.nodes["out"].params.tag == "shot_010_v16"  # text substitution
    g2 = load_graph(doc, registry=registry, sets=["shot=020"]).graph
    assert g2.nodes["src"].params.size == 8 and g2.nodes["src"].params.value == 1.5


def test_defaults_file_params_layered_beneath_nodes(tmp_path, registry):
    defaults = write_json(tmp_path / "show.json", {"schema": "midframe.defaults", "version": 1,
                                                   "params": {"test-scale": {"factor": 4.0}}})
    doc = graph_doc({"src": {"op": "test-const"},
                     "s1": {"op": "test-scale", "inputs": {"image": "src"}},
                     "s2": {"op": "test-scale", "params": {"factor": 3.0}, "inputs": {"image": "s1"}},
                     "out": {"op": "test-collect", "inputs": {"image": "s2"}}})
    g = load_graph(doc, registry=registry, defaults=defaults).graph
    assert g.nodes["s1"].params.factor == 4.0 and g.nodes["s2"].params.factor == 3.0


def test_defaults_file_unknown_param(tmp_path, registry):
    defaults = write_json(tmp_path / "show.json", {"schema": "midframe.defaults", "version": 1,
                                                   "params": {"test-scale": {"factr": 4.0}}})
    doc = graph_doc({"src": {"op": "test-const"}, "s": {"op": "test-scale", "inputs": {"image": "src"}},
                     "out": {"op": "test-collect", "inputs": {"image": "s"}}})
    e = _one(_errors(registry, doc, defaults=defaults), field="params.test-scale.factr")
    assert e.file == str(defaults) and "factor" in e.fix


def test_variable_errors(registry):
    doc = graph_doc({"src": {"op": "test-const", "params": {"value": "${gain}", "size": "${nope}"}},
                     "out": {"op": "test-collect", "inputs": {"image": "src"}}},
                    vars={"gain": {"type": "float"}, "unused": {"type": "int", "default": 1}})
    errs = _errors(registry, doc, sets=["gain=loud", "other=1", "novalue"])
    _one(errs, field="--set gain")                      # ill-typed
    _one(errs, field="vars.other")                      # --set of an undeclared variable
    _one(errs, field="--set")                           # not name=value
    e = _one(errs, node_id="src", field="nodes.src.params.size")
    assert "unknown variable '${nope}'" in e.message


def test_unset_variable_is_error_but_check_mode_warns(registry):
    doc = graph_doc({"src": {"op": "test-const", "params": {"value": "${gain}"}},
                     "out": {"op": "test-collect", "inputs": {"image": "src"}}},
                    vars={"gain": {"type": "float", "doc": "exposure"}, "spare": {"type": "int", "default": 2}})
    e = _one(_errors(registry, doc), field="vars.gain")
    assert "no value" in e.message and "--set gain=" in e.fix
    loaded = load_graph(doc, registry=registry, allow_unset=True)
    assert loaded.graph is None
    fields = sorted(w.field for w in loaded.warnings)
    assert fields == ["vars.gain", "vars.spare"]  # unset, and unused


def test_unused_variable_warning(registry):
    doc = graph_doc(GOOD, vars={"spare": {"type": "int", "default": 2}})
    loaded = load_graph(doc, registry=registry)
    assert [w.field for w in loaded.warnings] == ["vars.spare"]


def test_schema_upgrade_from_version_1_fixture(registry):
    """An old-version file keeps loading (tests/fixtures/graphs/v1_diamond.json)."""
    path = FIXTURES / "graphs" / "v1_diamond.json"
    assert json.loads(path.read_text())["version"] == 1
    loaded = load_graph(path, registry=registry, sets=["gain=2"])
    assert loaded.written_version == 1
    assert set(loaded.graph.nodes) == {"src", "left", "right", "join", "out"}
    assert loaded.graph.nodes["left"].params.factor == 2.0


def test_newer_version_is_refused(registry):
    doc = graph_doc(GOOD, version=99)
    e = _one(_errors(registry, doc), field="version")
    assert "newer" in e.message


def test_duplicate_ids_in_version_1(registry):
    doc = {"schema": "midframe.graph", "version": 1, "nodes": [{"id": "a", "op": "test-const"},
                                                                {"id": "a", "op": "test-const"}]}
    e = _one(_errors(registry, doc), field="nodes[1].id")
    assert "twice" in e.message


def test_broken_plugin_is_a_hard_error_naming_the_node(registry):
    from graphcore.registry import Found
    from importlib.metadata import EntryPoint

    ep = EntryPoint(name="ghost", value="no_such_module_xyz:OP", group="midframe.operators")
    registry._found["ghost"] = (Found("ghost", "ghost-dist", ep.value), ep)
    doc = graph_doc({"g": {"op": "ghost"}, "out": {"op": "test-collect", "inputs": {"image": "g"}}})
    e = _one(_errors(registry, doc), node_id="g", field="nodes.g.op")
    assert "ghost-dist" in e.message and "unavailable" in e.message


def test_link_dependent_problems_found_by_check(registry):
    """Operators' check_links hook: problems that depend on what is connected show before a render."""
    doc = graph_doc({"a": {"op": "test-const"}, "b": {"op": "test-const"},
                     "pm": {"op": "matte-composite", "params": {"operation": "premultiply"},
                            "inputs": {"a": "a", "b": "b"}},
                     "mix": {"op": "blend", "params": {"weights": [1, 2, 3]}, "inputs": {"a": "a", "b": "b"}},
                     "out": {"op": "test-collect", "inputs": {"image": "pm"}},
                     "out2": {"op": "test-collect", "params": {"tag": "x"}, "inputs": {"image": "mix"}}})
    errs = _errors(registry, doc)
    e = _one(errs, node_id="pm", field="nodes.pm.inputs.b")
    assert "premultiply" in e.message and e.fix
    e = _one(errs, node_id="mix", field="nodes.mix.params.weights")
    assert "3 weights given for 2 connected inputs" in e.message
