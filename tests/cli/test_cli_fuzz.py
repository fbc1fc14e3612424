"""No graph file, however broken, makes `midframe check` print a traceback.

Mutated copies of the shipped templates and hypothesis-generated documents each give exit 0 (still
valid) or 2 (a named error), never 1 and never a traceback.
"""

from __future__ import annotations

import contextlib
import copy
import io
import json
import random

import pytest
from hypothesis import HealthCheck, given, settings
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


JUNK = [None, True, 0, -1, 3.5, 1e308, "", "${nope}", "${", "$$", "x" * 300, [], {}, [1, "a"], {"op": "read"},
        "plate", "out", "%04d", "../../etc/passwd", "over", "read", "write", "\u00e9\u2603", 2, 1, 99]


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


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(nodes=json_values, vars_=json_values, version=st.sampled_from([1, 2, 3, "2", None]))
def test_generated_documents_never_traceback(tmp_path, nodes, vars_, version):
    doc = {"schema": "midframe.graph", "version": version, "nodes": nodes, "vars": vars_}
    p = tmp_path / "fuzz.json"
    p.write_text(json.dumps(doc))
    rc, text = _check(p)
    assert rc in (0, 2) and "Traceback" not in text, text
