"""The command line end to end on real files: templates, executors, exit codes, bad input."""

from __future__ import annotations

import contextlib
import io
import json
import os
import subprocess
import sys

import numpy as np
import OpenEXR
import pytest

from graphcore.cli.main import main
from tests.conftest import GRAPHS, REPO, noise_image, write_json


def cli(*args: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main(list(args))
    return rc, out.getvalue(), err.getvalue()


def cli_proc(*args: str, cwd=None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "graphcore", *args], capture_output=True, text=True, cwd=cwd,
                          timeout=300)


def raw_channels(path) -> dict[str, np.ndarray]:
    """Pixels exactly as stored, read through OpenEXR itself (not through midframe)."""
    with OpenEXR.File(str(path), separate_channels=True) as f:
        return {name: np.array(ch.pixels) for name, ch in f.channels().items()}


def header(path) -> dict:
    with OpenEXR.File(str(path)) as f:
        return dict(f.header())


def write_plate(path, channels: dict[str, np.ndarray], attrs: dict | None = None, compression=OpenEXR.ZIP_COMPRESSION):
    hdr = {"compression": compression, "type": OpenEXR.scanlineimage}
    hdr.update(attrs or {})
    with OpenEXR.File(hdr, {k: v.copy() for k, v in channels.items()}) as f:
        f.write(str(path))


def plate_channels(h, w, seed, dtype):
    rng = np.random.default_rng(seed)
    a = rng.random((h, w)).astype(dtype)
    chans = {c: (rng.random((h, w)) * 4 - 1).astype(dtype) * a for c in "RGB"}  # HDR, negative too
    chans["A"] = a
    chans["fwd.x"] = (rng.normal(0, 20, (h, w))).astype(np.float32)   # vectors stay float
    chans["fwd.y"] = (rng.normal(0, 20, (h, w))).astype(np.float32)
    chans["diffuse.R"] = rng.random((h, w)).astype(dtype)
    chans["conf"] = rng.random((h, w)).astype(np.float16)
    return chans


@pytest.mark.parametrize("dtype", [np.float16, np.float32], ids=["half", "float"])
def test_convert_round_trips_bit_exact_with_layers_and_attributes(tmp_path, dtype):
    """OpenEXR (Technical Introduction): half/float channels, layer.channel names and header
    attributes survive graphs/convert.json unchanged, checked through OpenEXR's own reader."""
    src = tmp_path / "plates"
    src.mkdir()
    for f in range(1001, 1004):
        write_plate(src / f"sh010.{f:04d}.exr", plate_channels(36, 52, f, dtype),
                    {"owner": "midframe tests", "shot": "sh010", "capDate": "2026:12:01 10:00:00",
                     "exposure": 1.5}, compression=OpenEXR.PIZ_COMPRESSION)
    rc, out, err = cli("run", str(GRAPHS / "convert.json"), "--set", f"src={src}/sh010.%04d.exr",
                       "--set", f"dst={tmp_path}/out/sh010.%04d.exr", "-q")
    assert rc == 0, err
    for f in range(1001, 1004):
        a, b = raw_channels(src / f"sh010.{f:04d}.exr"), raw_channels(tmp_path / "out" / f"sh010.{f:04d}.exr")
        assert sorted(a) == sorted(b)
        for name in a:
            assert a[name].dtype == b[name].dtype, name
            assert a[name].tobytes() == b[name].tobytes(), name
        ha, hb = header(src / f"sh010.{f:04d}.exr"), header(tmp_path / "out" / f"sh010.{f:04d}.exr")
        for key in ("owner", "shot", "capDate", "exposure", "compression", "dataWindow", "displayWindow"):
            assert np.array_equal(np.asarray(ha[key]), np.asarray(hb[key])), key
        prov = json.loads(hb["midframe.provenance"])
        assert prov["node"] == "out" and prov["sources"] == [os.path.realpath(src / f"sh010.{f:04d}.exr")]


def _comp_inputs(tmp_path, n=4, size=(24, 32)):
    from operators.io.exr import write_exr

    for f in range(1, n + 1):
        write_exr(str(tmp_path / f"fg.{f:04d}.exr"), noise_image(*size, seed=f), compression="zip")
        write_exr(str(tmp_path / f"bg.{f:04d}.exr"), noise_image(*size, seed=100 + f, premultiplied=False),
                  compression="zip")


def test_over_serial_and_pool_give_identical_pixels(tmp_path):
    _comp_inputs(tmp_path, n=6)
    sets = ["--set", f"fg={tmp_path}/fg.%04d.exr", "--set", f"bg={tmp_path}/bg.%04d.exr"]
    rc, _, err = cli("run", str(GRAPHS / "over.json"), *sets, "--set", f"dst={tmp_path}/s/c.%04d.exr", "-q")
    assert rc == 0, err
    proc = cli_proc("run", str(GRAPHS / "over.json"), *sets, "--set", f"dst={tmp_path}/p/c.%04d.exr", "--jobs", "2")
    assert proc.returncode == 0, proc.stderr
    for f in range(1, 7):
        a, b = raw_channels(tmp_path / "s" / f"c.{f:04d}.exr"), raw_channels(tmp_path / "p" / f"c.{f:04d}.exr")
        assert all(a[k].tobytes() == b[k].tobytes() for k in a)
    # and the composite is Porter-Duff over (Porter & Duff 1984: Fa = 1, Fb = 1 - aA)
    fg, bg = raw_channels(tmp_path / "fg.0003.exr"), raw_channels(tmp_path / "bg.0003.exr")
    comp = raw_channels(tmp_path / "s" / "c.0003.exr")
    for c in "RGBA":
        want = fg[c].astype(np.float32) + (1 - fg["A"].astype(np.float32)) * bg[c].astype(np.float32)
        np.testing.assert_allclose(comp[c].astype(np.float32), want, rtol=2e-3, atol=2e-3)  # half output


def test_frames_option_and_disk_cache(tmp_path):
    _comp_inputs(tmp_path, n=5)
    rc, _, err = cli("run", str(GRAPHS / "over.json"), "--set", f"fg={tmp_path}/fg.%04d.exr", "--set",
                     f"bg={tmp_path}/bg.%04d.exr", "--set", f"dst={tmp_path}/o/c.%04d.exr", "--frames", "2-3",
                     "--cache", str(tmp_path / "cache"), "-q")
    assert rc == 0, err
    assert sorted(p.name for p in (tmp_path / "o").iterdir()) == ["c.0002.exr", "c.0003.exr"]
    assert list((tmp_path / "cache").glob("*/*.npy"))  # the composite was cached on disk


def test_missing_frames_exit_2_listing_them(tmp_path):
    _comp_inputs(tmp_path, n=6)
    (tmp_path / "fg.0003.exr").unlink()
    (tmp_path / "fg.0004.exr").unlink()
    proc = cli_proc("run", str(GRAPHS / "over.json"), "--set", f"fg={tmp_path}/fg.%04d.exr", "--set",
                    f"bg={tmp_path}/bg.%04d.exr", "--set", f"dst={tmp_path}/o/c.%04d.exr")
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert "3-4" in proc.stderr and "fg.%04d.exr" in proc.stderr and "node 'fg'" in proc.stderr
    assert not (tmp_path / "o").exists() or not list((tmp_path / "o").iterdir())


def test_truncated_plate_fails_that_frame_only_and_leaves_no_partial_file(tmp_path):
    _comp_inputs(tmp_path, n=4)
    p = tmp_path / "fg.0002.exr"
    p.write_bytes(p.read_bytes()[: len(p.read_bytes()) // 2])
    proc = cli_proc("run", str(GRAPHS / "over.json"), "--set", f"fg={tmp_path}/fg.%04d.exr", "--set",
                    f"bg={tmp_path}/bg.%04d.exr", "--set", f"dst={tmp_path}/o/c.%04d.exr")
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr and "fg.0002.exr" in proc.stderr
    assert sorted(x.name for x in (tmp_path / "o").iterdir()) == ["c.0001.exr", "c.0003.exr", "c.0004.exr"]


def test_size_mismatch_suggests_resize(tmp_path):
    from operators.io.exr import write_exr

    _comp_inputs(tmp_path, n=2)
    write_exr(str(tmp_path / "bg.0002.exr"), noise_image(30, 40, seed=3, premultiplied=False))
    rc, _, err = cli("run", str(GRAPHS / "over.json"), "--set", f"fg={tmp_path}/fg.%04d.exr", "--set",
                     f"bg={tmp_path}/bg.%04d.exr", "--set", f"dst={tmp_path}/o/c.%04d.exr", "-q")
    assert rc == 2
    assert "resize" in err and "node 'comp'" in err and "40x30" in err.replace(" ", "").replace("×", "x")


@pytest.mark.parametrize("jobs", ["1", "2"])
def test_nonfinite_pixels_replaced_with_zero_and_warned_once(tmp_path, jobs):
    from operators.io.exr import write_exr

    _comp_inputs(tmp_path, n=3)
    for f in (1, 2):
        img = noise_image(24, 32, seed=f)
        px = np.array(img.pixels)
        px[0, 0, 0], px[1, 1, 1] = np.nan, np.inf
        write_exr(str(tmp_path / f"fg.{f:04d}.exr"), img.replace(pixels=px), default_pixel_type="float")
    proc = cli_proc("run", str(GRAPHS / "over.json"), "--set", f"fg={tmp_path}/fg.%04d.exr", "--set",
                    f"bg={tmp_path}/bg.%04d.exr", "--set", f"dst={tmp_path}/o/c.%04d.exr", "-q", "--jobs", jobs)
    rc, err = proc.returncode, proc.stderr
    assert rc == 0, err
    assert err.count("fg.0001.exr") == 1 and err.count("fg.0002.exr") == 1  # once per file
    comp = raw_channels(tmp_path / "o" / "c.0001.exr")
    assert all(np.isfinite(v.astype(np.float32)).all() for v in comp.values())


def test_write_refuses_to_replace_a_source_plate(tmp_path):
    _comp_inputs(tmp_path, n=2)
    before = (tmp_path / "bg.0001.exr").read_bytes()
    proc = cli_proc("run", str(GRAPHS / "over.json"), "--set", f"fg={tmp_path}/fg.%04d.exr", "--set",
                    f"bg={tmp_path}/bg.%04d.exr", "--set", f"dst={tmp_path}/bg.%04d.exr")
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert "would overwrite source plate" in proc.stderr and "node 'out'" in proc.stderr
    assert (tmp_path / "bg.0001.exr").read_bytes() == before


@pytest.mark.parametrize("args, expect", [
    (["check", "{tmp}/nope.json"], "file not found"),
    (["run", "{graphs}/over.json"], "has no value"),
    (["run", "{graphs}/over.json", "--set", "fgg=1"], "does not declare"),
    (["run", "{tmp}/bad.json"], "malformed JSON"),
    (["run", "{graphs}/over.json", "--frames", "9-1"], "runs backwards"),
    (["ops", "no-such-op"], "no operator called"),
])
def test_bad_input_exits_2_without_traceback(tmp_path, args, expect):
    (tmp_path / "bad.json").write_text('{"schema": "midframe.graph", "version": 2, "nodes": {')
    args = [a.format(tmp=tmp_path, graphs=GRAPHS) for a in args]
    proc = cli_proc(*args)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr and expect in proc.stderr


def test_check_passes_on_every_shipped_graph():
    graphs = sorted(GRAPHS.glob("*.json"))
    assert len(graphs) >= 2
    for g in graphs:
        rc, out, err = cli("check", str(g))
        assert rc == 0, f"{g.name}: {err}"


def test_check_with_variables_checks_files(tmp_path):
    _comp_inputs(tmp_path, n=3)
    rc, out, _ = cli("check", str(GRAPHS / "over.json"), "--set", f"fg={tmp_path}/fg.%04d.exr", "--set",
                     f"bg={tmp_path}/bg.%04d.exr", "--set", f"dst={tmp_path}/o/c.%04d.exr")
    assert rc == 0 and "frames 1-3" in out
    rc, _, err = cli("check", str(GRAPHS / "over.json"), "--set", f"fg={tmp_path}/nothing.%04d.exr", "--set",
                     f"bg={tmp_path}/bg.%04d.exr", "--set", f"dst={tmp_path}/o/c.%04d.exr")
    assert rc == 2 and "nothing.%04d.exr" in err


def test_show_defaults_file_layers_under_the_graph(tmp_path):
    _comp_inputs(tmp_path, n=2)
    show = write_json(tmp_path / "show.json", {"schema": "midframe.defaults", "version": 1,
                                               "params": {"write": {"compression": "piz", "pixel_type": "float"}}})
    rc, _, err = cli("run", str(GRAPHS / "over.json"), "--defaults", str(show), "--set",
                     f"fg={tmp_path}/fg.%04d.exr", "--set", f"bg={tmp_path}/bg.%04d.exr", "--set",
                     f"dst={tmp_path}/o/c.%04d.exr", "-q")
    assert rc == 0, err
    h = header(tmp_path / "o" / "c.0001.exr")
    assert h["compression"] == OpenEXR.PIZ_COMPRESSION
    assert raw_channels(tmp_path / "o" / "c.0001.exr")["R"].dtype == np.float32


def test_ops_lists_sources_and_describes_params():
    rc, out, _ = cli("ops")
    assert rc == 0
    line = next(x for x in out.splitlines() if x.startswith("read "))
    assert "[midframe (operators.io.read:READ)]" in line
    rc, out, _ = cli("ops", "matte-composite")
    assert rc == 0 and "operation" in out and "Porter" in out and "inputs:" in out


def test_graph_draws_dot():
    rc, out, _ = cli("graph", str(GRAPHS / "over.json"))
    assert rc == 0 and out.startswith("digraph") and '"fg" -> "comp" [label="a"]' in out


def test_golden_schema_and_operator_reference():
    """docs/ holds generated files; refresh them with the commands named in the assertion."""
    from graphcore.cli.describe import operators_markdown
    from graphcore.registry import default_registry
    from graphcore.schema.jsonschema import graph_json_schema

    reg = default_registry().builtin_only()
    schema = json.dumps(graph_json_schema(reg), indent=2, sort_keys=True) + "\n"
    assert schema == (REPO / "docs" / "graph.schema.json").read_text(), \
        "docs/graph.schema.json is stale: run `midframe schema --builtin --out docs/graph.schema.json`"
    good, _ = reg.load_all()
    assert operators_markdown(good) == (REPO / "docs" / "operators.md").read_text(), \
        "docs/operators.md is stale: run `midframe ops --markdown --builtin > docs/operators.md`"


def test_schema_validates_shipped_graphs():
    """The generated JSON Schema accepts the shipped templates (checked with a Draft 2020-12 validator
    when the jsonschema package is present; otherwise the structural keys are checked)."""
    schema = json.loads((REPO / "docs" / "graph.schema.json").read_text())
    try:
        import jsonschema
    except ImportError:
        jsonschema = None
    for g in GRAPHS.glob("*.json"):
        doc = json.loads(g.read_text())
        if jsonschema is not None:
            jsonschema.Draft202012Validator(schema).validate(doc)
        assert set(doc) <= set(schema["properties"])
        for node in doc["nodes"].values():
            assert f"node.{node['op']}" in schema["$defs"]
