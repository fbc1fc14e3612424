"""Any params value, for every registered operator, validates or is refused by name.

For each operator the registry discovers (built-ins and installed plugins), hypothesis builds a
one-node graph (plus a ``read`` feeding its required inputs) whose params hold generated values for
1 to 3 of its fields, sometimes an unknown field too: wrong types, out-of-range and huge numbers,
NaN and infinities, huge strings, template-looking strings, nested lists and objects. Validation
(``load_graph`` on the in-memory document) must either accept the graph or raise ``GraphErrors``
whose every entry names the file, the node, a field under that node and a fix. No other exception.
1000 examples per operator.
"""

from __future__ import annotations

import functools
import math
import typing

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from graphcore.errors import GraphErrors
from graphcore.registry import Registry
from graphcore.validate import load_graph

REGISTRY = Registry.from_entry_points()
OPERATORS = REGISTRY.names()

FUZZ = settings(max_examples=1000, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])

scalars = st.one_of(
    st.none(), st.booleans(),
    st.integers(-5, 5), st.integers(), st.integers(-2**70, 2**70),
    st.floats(), st.sampled_from([math.nan, math.inf, -math.inf, 1e308, -0.0, 5e-324]),
    st.text(max_size=12),
    st.sampled_from(["", " ", "x" * 100_000, "${src}", "${", "$$", "%04d", "####", "%s", "%n", "{0.__class__}",
                     "__import__('os').system('false')", "../../etc/passwd", "/dev/zero", "nan", "inf",
                     "auto", "frame", "view", "half", "zip", "over", "R", "A", "fwd.x"]),
)
junk = st.recursive(scalars, lambda inner: st.lists(inner, max_size=4) | st.dictionaries(
    st.text(max_size=6), inner, max_size=3), max_leaves=6)


def _literal_choices(op_name: str) -> dict[str, list]:
    """Accepted literal values of each field, so generated params are sometimes valid."""
    out = {}
    for name, field in REGISTRY.get(op_name).params.model_fields.items():
        ann = field.annotation
        args = typing.get_args(ann)
        lits = [a for a in ([ann] + list(args)) if typing.get_origin(a) is typing.Literal]
        out[name] = [v for lit in lits for v in typing.get_args(lit)]
    return out


@functools.cache
def _value(op_name: str, field: str):
    choices = _literal_choices(op_name).get(field) or []
    default = REGISTRY.get(op_name).params.model_fields[field].default
    known = [c for c in choices] + ([default] if isinstance(default, (int, float, str, bool)) else [])
    return st.one_of(junk, st.sampled_from(known)) if known else junk


#: Params that make each operator valid on their own; generated values replace some of them.
VALID_BASE = {"read": {"path": "plate.%04d.exr"}, "write": {"path": "out.%04d.exr"}, "resize": {"scale": 0.5}}


@st.composite
def params_for(draw, op_name: str):
    fields = list(REGISTRY.get(op_name).params.model_fields)
    chosen = draw(st.lists(st.sampled_from(fields), min_size=1, max_size=3, unique=True)) if fields else []
    params = dict(VALID_BASE.get(op_name, {}))
    params.update({f: draw(_value(op_name, f)) for f in chosen})
    if draw(st.booleans()) and draw(st.booleans()):
        params[draw(st.sampled_from(["unknown", "pathh", "Path", "__class__", ""]))] = draw(scalars)
    return params


def _graph(op_name: str, params: dict) -> dict:
    op = REGISTRY.get(op_name)
    node = {"op": op_name, "params": params}
    inputs = {p.name: "src" for p in op.inputs}      # every port, optional ones too
    if inputs:
        node["inputs"] = inputs
    return {"schema": "midframe.graph", "version": 2,
            "nodes": {"src": {"op": "read", "params": {"path": "plate.%04d.exr"}}, "n": node}}


def outcome(op_name: str, params: dict) -> str:
    """Validate a one-node graph with ``params``: "valid" or "refused" (every error named)."""
    try:
        loaded = load_graph(_graph(op_name, params), registry=REGISTRY, file="fuzz.json")
    except GraphErrors as exc:
        assert exc.errors
        known = set(params) | set(REGISTRY.get(op_name).params.model_fields)
        for e in exc.errors:
            assert e.file == "fuzz.json" and e.fix, e.describe()
            assert e.node_id in ("n", "src"), e.describe()
            assert e.field and e.field.startswith(f"nodes.{e.node_id}."), e.describe()
            rest = e.field[len("nodes.n.params."):] if e.field.startswith("nodes.n.params.") else None
            if rest is not None:        # a field named under params is one given or declared
                assert any(rest == k or rest.startswith((k + ".", k + "[")) for k in known), e.field
        return "refused"
    node = loaded.graph.nodes["n"]
    assert not list(_floats_not_finite(node.params.model_dump())), node.params   # usable: no NaN/inf
    return "valid"


def _floats_not_finite(value):
    if isinstance(value, float) and not math.isfinite(value):
        yield value
    elif isinstance(value, dict):
        for v in value.values():
            yield from _floats_not_finite(v)
    elif isinstance(value, (list, tuple)):
        for v in value:
            yield from _floats_not_finite(v)


@pytest.mark.slow      # about 6 to 10 s per operator, 100 s in all
@pytest.mark.parametrize("op_name", OPERATORS)
def test_generated_params_validate_or_are_refused_by_node_and_field(op_name):
    @FUZZ
    @given(params=params_for(op_name))
    def check(params):
        event(outcome(op_name, params))

    check()


NASTY = [None, True, False, -1, 0, 1, 2**70, -2**70, math.nan, math.inf, -math.inf, 1e308, "", "x" * 100_000,
         "inf", "-inf", "nan", "1e999", "${src}", [], {}, [None], [math.inf], {"a": {"b": [1]}}, "R"]


@pytest.mark.parametrize("op_name", OPERATORS)
def test_every_field_with_every_nasty_value(op_name):
    """Exhaustively, each field alone set to each of these values. Before this test, ``inf`` passed
    for four float fields (``1e999`` in a graph file parses as infinity) and `midframe check` then
    failed with a traceback; now it is refused by node and field."""
    seen = {"valid": 0, "refused": 0}
    fields = REGISTRY.get(op_name).params.model_fields
    for field in fields:
        for value in NASTY:
            seen[outcome(op_name, {field: value})] += 1
    assert seen["refused"] >= len(fields)       # at least the list [inf] is wrong for every field


def test_infinite_number_in_a_graph_file_is_refused_by_node_and_field(tmp_path):
    import contextlib
    import io

    from graphcore.cli.main import main

    text = ('{"schema": "midframe.graph", "version": 2, "nodes": {'
            '"p": {"op": "read", "params": {"path": "p.%04d.exr"}},'
            '"v": {"op": "flow-estimate", "params": {"prior_strength": 1e999}, "inputs": {"image": "p"}},'
            '"c": {"op": "vector-color", "params": {"max_magnitude": "inf"}, "inputs": {"vectors": "v"}},'
            '"o": {"op": "write", "params": {"path": "o.%04d.exr"}, "inputs": {"image": "c"}}}}')
    (tmp_path / "g.json").write_text(text)
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        rc = main(["check", str(tmp_path / "g.json")])
    msg = err.getvalue()
    assert rc == 2 and "Traceback" not in msg
    assert "node 'v', field 'nodes.v.params.prior_strength': inf is not a finite number" in msg
    assert "node 'c', field 'nodes.c.params.max_magnitude': inf is not a finite number" in msg


def test_every_operator_is_fuzzed():
    """The built-in operators and the example plugin are all in the list above (15 when written)."""
    assert {"read", "write", "retime", "flow-estimate", "warp", "blend", "example-vignette"} <= set(OPERATORS)
    assert len(OPERATORS) >= 15
