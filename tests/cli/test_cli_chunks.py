"""``midframe chunks``: frame chunks for a farm queue (issue 6).

The chunks must cover the requested range exactly once, each chunk's command must render exactly
its frames, and rendering all chunks one after another must give the pixels of one whole render.
"""

from __future__ import annotations

import json
import shlex
import subprocess
import sys

import numpy as np

from tests.cli.test_cli_retime import sequence
from tests.cli.test_cli_run import cli, raw_channels
from tests.conftest import GRAPHS


def chunks_json(*args: str) -> dict:
    rc, out, err = cli("chunks", *args, "--json")
    assert rc == 0, err
    return json.loads(out)


def test_chunks_cover_the_range_exactly_once(tmp_path):
    src = sequence(tmp_path / "src", 6, np.float32)
    doc = chunks_json(str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set", f"dst={tmp_path}/o.%04d.exr",
                      "--set", "slowdown=2.5", "--size", "4")
    assert doc["schema"] == "midframe.chunks" and doc["frames"] == [1001, 1013]   # 5 * 2.5 = 12.5 on
    covered = [f for c in doc["chunks"] for f in range(c["frames"][0], c["frames"][1] + 1)]
    assert covered == list(range(1001, 1014))                # in order, no gap, no overlap
    assert all(c["frames"][1] - c["frames"][0] + 1 <= 4 for c in doc["chunks"])
    assert [c["index"] for c in doc["chunks"]] == list(range(len(doc["chunks"])))
    for c in doc["chunks"]:
        a, b = c["frames"]
        assert c["command"][-2:] == ["--frames", f"{a}-{b}"] and shlex.split(c["command_line"]) == c["command"]
    # worked by hand: output 1001 + k shows source 1001 + k / 2.5, so the first chunk (1001-1004)
    # sits between source frames 1001 and 1003; vector-smooth checks the vectors at 1003 against
    # those at 1004, whose flow-estimate reads 1005: plate frames 1001-1005
    first = doc["chunks"][0]["reads"]["plate"]
    assert first["frames"] == "1001-1005" and first["files"] == 5


def test_convert_chunk_reads_exactly_its_frames(tmp_path):
    src = sequence(tmp_path / "src", 6, np.float32)
    doc = chunks_json(str(GRAPHS / "convert.json"), "--set", f"src={src}", "--set", f"dst={tmp_path}/o.%04d.exr",
                      "--size", "2", "--frames", "1002-1005")
    assert [c["frames"] for c in doc["chunks"]] == [[1002, 1003], [1004, 1005]]
    assert [c["reads"]["plate"]["frames"] for c in doc["chunks"]] == ["1002-1003", "1004-1005"]


def test_running_every_chunk_gives_the_whole_render(tmp_path):
    """The text form: comment lines, then one command per chunk; each run as the farm would (a
    fresh process), sharing one disk cache; pixels identical to a single render of the range."""
    src = sequence(tmp_path / "src", 5, np.float32)
    whole = f"{tmp_path}/whole/o.%04d.exr"
    rc, _, err = cli("run", str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set", f"dst={whole}",
                     "--set", "slowdown=2", "-q")
    assert rc == 0, err
    rc, out, err = cli("chunks", str(GRAPHS / "retime.json"), "--set", f"src={src}",
                       "--set", f"dst={tmp_path}/parts/o.%04d.exr", "--set", "slowdown=2", "--size", "3",
                       "--cache", str(tmp_path / "cache"))
    assert rc == 0, err
    lines = out.strip().splitlines()
    commands = [shlex.split(x) for x in lines if not x.startswith("#")]
    assert len(commands) == 3 and all(x.startswith("# chunk") and "reads plate" in x for x in lines[::2])
    for argv in commands:
        assert argv[:2] == ["midframe", "run"]
        proc = subprocess.run([sys.executable, "-m", "graphcore", *argv[1:], "-q"], capture_output=True, text=True,
                              timeout=300)
        assert proc.returncode == 0, proc.stderr
    for k in range(1001, 1010):
        a = raw_channels(tmp_path / "whole" / f"o.{k}.exr")
        b = raw_channels(tmp_path / "parts" / f"o.{k}.exr")
        assert sorted(a) == sorted(b) and all(a[n].tobytes() == b[n].tobytes() for n in a), k


def test_bad_chunk_requests_are_clear_errors(tmp_path):
    src = sequence(tmp_path / "src", 3, np.float32)
    proc = subprocess.run([sys.executable, "-m", "graphcore", "chunks", str(GRAPHS / "convert.json"),
                           "--set", f"src={src}", "--set", f"dst={tmp_path}/o.%04d.exr", "--size", "0"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2 and "must be 1 or more" in proc.stderr
    rc, _, err = cli("chunks", str(GRAPHS / "convert.json"), "--set", f"src={src}", "--size", "2")
    assert rc == 2 and "dst" in err and "Traceback" not in err
    rc, _, err = cli("chunks", str(GRAPHS / "convert.json"), "--set", f"src={src}", "--set", f"dst={src}",
                     "--size", "2")
    assert rc == 2 and "overwrite" in err
