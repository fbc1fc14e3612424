"""No graph file, however broken, makes `midframe check` print a traceback; no params value makes
validation fail other than with errors naming the node and the field.

Mutated copies of the shipped templates and hypothesis-generated documents each give exit 0 (still
valid) or 2 (a named error), never 1 and never a traceback (1000 examples per target); so do
generated show defaults files with --set values, and `midframe explain` on files whose provenance
header holds any JSON. Params of every operator are fuzzed in tests/graphcore/test_params_fuzz.py.
"""

from __future__ import annotations

import contextlib
import copy
import io
import json
import random

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from graphcore.cli.main import main
from tests.conftest import GRAPHS


def _check(path) -> tuple[int, str]:
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        rc = main(["check", str(path)])
    return rc, err.getvalue() + out.getvalue()


def _paths(doc, prefix=()):
    yield prefix
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _paths(v, prefix + (i,))


HUGE = 1.2345e300      # written to the file as 1e999, which JSON parsers read as infinity
JUNK = [None, True, 0, -1, 3.5, 1e308, "", "${nope}", "${", "$$", "x" * 300, [], {}, [1, "a"], {"op": "read"},
        "plate", "out", "%04d", "../../etc/passwd", "over", "read", "write", "\u00e9\u2603", 2, 1, 99,
        HUGE, "inf", "__import__('os').system('false')", "{0.__class__}", "%s%n"]


def _mutate(doc, rng: random.Random):
    doc = copy.deepcopy(doc)
    paths = [p for p in _paths(doc) if p]
    path = rng.choice(paths)
    parent = doc
    for k in path[:-1]:
        parent = parent[k]
    key = path[-1]
    action = rng.choice(["replace", "delete", "rename", "add", "link", "cycle"])
    if action == "replace":
        parent[key] = copy.deepcopy(rng.choice(JUNK))
    elif action == "delete":
        del parent[key]
    elif action == "rename" and isinstance(parent, dict):
        parent[str(key) + rng.choice(["x", "_", "-", "0"])] = parent.pop(key)
    elif action == "add" and isinstance(parent, dict):
        parent[rng.choice(["extra", "op", "inputs", "params", "id", "doc"])] = copy.deepcopy(rng.choice(JUNK))
    elif action == "link" and isinstance(doc.get("nodes"), dict):
        ids = list(doc["nodes"]) + ["ghost"]
        node = doc["nodes"].get(rng.choice(list(doc["nodes"]) or ["out"]))
        if isinstance(node, dict):
            node.setdefault("inputs", {})
            if isinstance(node["inputs"], dict):
                node["inputs"][rng.choice(["image", "a", "b", "matte", "zz"])] = rng.choice(ids)
    elif action == "cycle" and isinstance(doc.get("nodes"), dict) and "fg" in doc["nodes"]:
        if isinstance(doc["nodes"]["fg"], dict):
            doc["nodes"]["fg"]["inputs"] = {"image": "out"}
    return doc


def _mutate_param(doc, rng: random.Random):
    """Set one param of one node (a field its operator declares, or any name) to a junk value."""
    from graphcore.registry import PluginError, default_registry

    doc = copy.deepcopy(doc)
    nodes = doc.get("nodes")
    if not isinstance(nodes, dict) or not nodes:
        return doc
    node = nodes[rng.choice(sorted(nodes))]
    if not isinstance(node, dict):
        return doc
    try:
        fields = sorted(default_registry().get(node.get("op")).params.model_fields) or ["x"]
    except (KeyError, TypeError, PluginError):     # an unknown or mutated op name: any name will do
        fields = ["path", "x"]
    params = node.setdefault("params", {})
    if isinstance(params, dict):
        params[rng.choice(fields)] = copy.deepcopy(rng.choice(PARAM_JUNK))
    return doc


PARAM_JUNK = [HUGE, -HUGE, "inf", None, -1, 0, "", [], {}, "x" * 300, "${nope}", [HUGE], True]


@pytest.mark.parametrize("template", ["over.json", "convert.json"])
def test_200_mutated_copies_exit_cleanly(tmp_path, template):
    base = json.loads((GRAPHS / template).read_text())
    rng = random.Random(20261201)
    codes = {0: 0, 2: 0}
    for i in range(100):  # 100 per template, 200 in all
        doc = base
        for _ in range(rng.randint(1, 3)):
            doc = _mutate(doc, rng)
        p = tmp_path / f"m{i}.json"
        text = json.dumps(doc)
        if rng.random() < 0.1:  # some truncated files too
            text = text[: rng.randint(0, len(text))]
        p.write_text(text)
        rc, text_out = _check(p)
        assert rc in (0, 2), f"mutation {i} gave exit {rc}: {text_out}"
        assert "Traceback" not in text_out
        if rc == 2:
            assert str(p) in text_out  # the file is named
        codes[rc] += 1
    assert codes[2] > 50  # most mutations break the graph, and each is reported


json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-5, 5) | st.floats(allow_nan=False) | st.text(max_size=8)
    | st.sampled_from(["read", "write", "over", "${src}", "midframe.graph", "image", "a", "b"]),
    lambda children: st.lists(children, max_size=3) | st.dictionaries(
        st.sampled_from(["op", "params", "inputs", "path", "nodes", "vars", "type", "default", "x", "a"]),
        children, max_size=4),
    max_leaves=20)


FUZZ = settings(max_examples=1000, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


@FUZZ
@given(nodes=json_values, vars_=json_values, version=st.sampled_from([1, 2, 3, "2", None]))
def test_generated_documents_never_traceback(tmp_path, nodes, vars_, version):
    doc = {"schema": "midframe.graph", "version": version, "nodes": nodes, "vars": vars_}
    p = tmp_path / "fuzz.json"
    p.write_text(json.dumps(doc))
    rc, text = _check(p)
    assert rc in (0, 2) and "Traceback" not in text, text
    event(f"exit {rc}")


TEMPLATES = sorted(p.name for p in GRAPHS.glob("*.json"))


@FUZZ
@given(template=st.sampled_from(TEMPLATES), rng=st.randoms(use_true_random=False), steps=st.integers(1, 4),
       cut=st.one_of(st.none(), st.floats(0, 1)), sets=st.lists(st.sampled_from(
           ["src=p.%04d.exr", "dst=o.%04d.exr", "slowdown=nan", "slowdown=1e999", "slowdown=-2", "between=x",
            "fg=${bg}", "dst=$$", "nope=1", "=", "src"]), max_size=3))
def test_mutated_templates_never_traceback(tmp_path, template, rng, steps, cut, sets):
    """Every shipped template, mutated 1 to 4 times (replace, delete, rename, add, relink, cycle),
    sometimes truncated, checked with and without variables set."""
    doc = json.loads((GRAPHS / template).read_text())
    for _ in range(steps):
        doc = _mutate_param(doc, rng) if rng.random() < 0.5 else _mutate(doc, rng)
    text = json.dumps(doc).replace(repr(HUGE), "1e999")
    if cut is not None:
        text = text[: int(cut * len(text))]
    p = tmp_path / "m.json"
    p.write_text(text)
    # every declared variable set (so checking goes on to the operators and the files), then the junk
    values = {"path": "p.%04d.exr", "string": "x", "int": "2", "float": "2", "bool": "true"}
    declared = doc.get("vars") if isinstance(doc.get("vars"), dict) else {}
    given_sets = [f"{name}={values.get(str(decl.get('type')), 'x') if name != 'dst' else 'o.%04d.exr'}"
                  for name, decl in declared.items() if isinstance(decl, dict)] + sets
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        rc = main(["check", str(p), *[a for s in given_sets for a in ("--set", s)]])
    output = err.getvalue() + out.getvalue()
    assert rc in (0, 2), f"exit {rc}: {output}"
    assert "Traceback" not in output
    if rc == 2:
        # the graph file, the missing plate or the argument is named
        assert str(p) in output or "p.%04d.exr" in output or "--set" in output, output
    event(f"exit {rc}")


# -- show defaults files and --set values ------------------------------------------------------------
@FUZZ
@given(vars_=json_values, params=st.one_of(json_values, st.dictionaries(
           st.sampled_from(["read", "write", "retime", "nope"]), st.dictionaries(
               st.sampled_from(["path", "nonfinite", "compression", "slowdown", "zz"]), json_values, max_size=2),
           max_size=2)),
       version=st.sampled_from([1, 2, "1", None]),
       sets=st.lists(st.text(max_size=12) | st.sampled_from(["slowdown=nan", "src=${dst}", "dst==", "=1"]),
                     max_size=3))
def test_generated_defaults_files_and_sets_never_traceback(tmp_path, vars_, params, version, sets):
    """A show defaults file and --set values layered under graphs/retime.json: exit 0 or 2."""
    show = tmp_path / "show.json"
    show.write_text(json.dumps({"schema": "midframe.defaults", "version": version, "vars": vars_,
                                "params": params}))
    args = ["check", str(GRAPHS / "retime.json"), "--defaults", str(show)]
    args += [f"--set={item}" for item in sets]      # the = form passes any text, even '-x'
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        rc = main(args)
    text = err.getvalue() + out.getvalue()
    assert rc in (0, 2) and "Traceback" not in text, text
    event(f"exit {rc}")


# -- provenance headers (midframe explain) ------------------------------------------------------------
record_values = st.recursive(
    st.none() | st.booleans() | st.integers(-3, 3) | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=8) | st.sampled_from(["read", "write", "p.1001.exr", "/a/b.0001.exr", "0", "1"]),
    lambda children: st.lists(children, max_size=3) | st.dictionaries(
        st.sampled_from(["op", "id", "params", "path", "nodes", "sources", "frame", "view", "key", "tool"]),
        children, max_size=4),
    max_leaves=16)


@FUZZ
@given(record=st.one_of(record_values, st.dictionaries(st.sampled_from(
    ["nodes", "sources", "frame", "view", "key", "tool", "tool_version", "graph_file", "graph_hash", "node"]),
    record_values, max_size=6)), raw=st.booleans())
def test_generated_provenance_headers_never_traceback(tmp_path, record, raw):
    """`midframe explain` on a file whose provenance header holds any JSON: exit 0 or 2. Before this
    test a list of plain values under 'nodes' or a number under 'sources' gave a traceback."""
    import numpy as np

    from graphcore.image import Image
    from operators.io.exr import PROVENANCE_ATTRIBUTE, write_exr

    path = tmp_path / "p.exr"
    write_exr(str(path), Image(np.zeros((2, 2, 3), np.float32), ("R", "G", "B")),
              attributes={PROVENANCE_ATTRIBUTE: json.dumps(record)})
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        rc = main(["explain", str(path)] + (["--json"] if raw else []))
    text = err.getvalue() + out.getvalue()
    assert rc in (0, 2) and "Traceback" not in text, text
    if rc == 2:
        assert str(path) in text
    event(f"exit {rc}")
