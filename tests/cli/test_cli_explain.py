"""``midframe explain FILE.exr`` (issue 7, item 4): how a frame on disk was made, from its provenance
header: graph file and hash, the nodes and params on its path, tool version, source frames."""

from __future__ import annotations

import json

import numpy as np

from tests.cli.test_cli_retime import sequence
from tests.cli.test_cli_run import cli
from tests.conftest import GRAPHS


def test_explain_an_inbetween(tmp_path):
    src = sequence(tmp_path / "src", 3, np.float32)
    rc, _, err = cli("run", str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set", f"dst={tmp_path}/o.%04d.exr",
                     "--set", "slowdown=2", "-q")
    assert rc == 0, err
    rc, out, err = cli("explain", str(tmp_path / "o.1002.exr"))
    assert rc == 0, err
    assert "graphs/retime.json" in out and "graph hash: " in out and "at frame 1002" in out
    assert 'timing (retime): slowdown="2"' in out and "vectors (flow-estimate): (all defaults)" in out
    assert 'from_next (warp): side="next"' in out
    assert "sh.####.exr  frames 1001-1003" in out              # the in-between's vectors read 1001-1003
    rc, out, _ = cli("explain", str(tmp_path / "o.1002.exr"), "--json")
    record = json.loads(out)
    assert record["frame"] == "1002" and record["node"] == "out" and len(record["key"]) == 64
    assert {n["op"] for n in record["nodes"]} >= {"read", "flow-estimate", "vector-smooth", "warp", "blend",
                                                  "retime", "write"}


def test_explain_refuses_files_midframe_did_not_write(tmp_path):
    src = sequence(tmp_path / "src", 1, np.float32)
    rc, _, err = cli("explain", src.replace("%04d", "1001"))
    assert rc == 2 and "no midframe provenance header" in err and "Traceback" not in err
    rc, _, err = cli("explain", str(tmp_path / "missing.exr"))
    assert rc == 2 and "no such file" in err
    bad = tmp_path / "bad.exr"
    bad.write_bytes(b"not an exr")
    rc, _, err = cli("explain", str(bad))
    assert rc == 2 and "Traceback" not in err
