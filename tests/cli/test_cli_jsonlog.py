"""``--log-format json`` (issue 6): every line on standard error is one JSON object a farm's log
scraper can read; frames, warnings, errors and the final summary are events with named fields."""

from __future__ import annotations

import json

import numpy as np

from tests.cli.test_cli_retime import sequence
from tests.cli.test_cli_run import cli_proc
from tests.conftest import GRAPHS


def events(stderr: str) -> list[dict]:
    lines = [x for x in stderr.splitlines() if x.strip()]
    out = [json.loads(x) for x in lines]           # every line parses: raises otherwise
    assert all({"time", "level", "event"} <= set(e) for e in out)
    return out


def test_a_render_logs_frames_and_a_summary(tmp_path):
    src = sequence(tmp_path / "src", 3, np.float32)
    proc = cli_proc("--log-format", "json", "run", str(GRAPHS / "retime.json"), "--set", f"src={src}",
                    "--set", f"dst={tmp_path}/o.%04d.exr", "--set", "slowdown=2")
    assert proc.returncode == 0, proc.stderr
    ev = events(proc.stderr)
    frames = [e for e in ev if e["event"] == "frame"]
    assert sorted(e["frame"] for e in frames) == list(range(1001, 1006))
    assert all(e["status"] == "ok" and e["node"] == "out" and e["total"] == 5 for e in frames)
    summary = ev[-1]
    assert summary["event"] == "summary" and summary["exit"] == 0 and summary["frames"] == 5
    assert summary["failed"] == [] and summary["skipped"] == 0


def test_failed_frames_and_input_errors_are_named(tmp_path):
    src = sequence(tmp_path / "src", 4, np.float32)
    damaged = tmp_path / "src" / "sh.1003.exr"
    damaged.write_bytes(damaged.read_bytes()[:300])                  # one truncated frame
    proc = cli_proc("--log-format", "json", "run", str(GRAPHS / "convert.json"), "--set", f"src={src}",
                    "--set", f"dst={tmp_path}/o.%04d.exr", "--frames", "1001-1004")
    assert proc.returncode == 2
    ev = events(proc.stderr)
    summary = ev[-1]
    assert summary["event"] == "summary" and summary["exit"] == 2
    assert [f["frame"] for f in summary["failed"]] == [1003] and "sh.1003.exr" in summary["failed"][0]["message"]
    bad = cli_proc("--log-format", "json", "run", str(GRAPHS / "convert.json"), "--set", f"src={src}")
    assert bad.returncode == 2
    err = events(bad.stderr)[-1]
    assert err["event"] == "error" and err["exit"] == 2 and "dst" in json.dumps(err["problems"])
