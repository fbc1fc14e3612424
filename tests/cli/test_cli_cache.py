"""``midframe cache stats|prune`` and ``run --cache-limit`` (issue 6): the shared disk cache's size
is visible and bounded; damaged entries are found and removed; nothing else in the folder is touched."""

from __future__ import annotations

import os
import time

import numpy as np

from tests.cli.test_cli_retime import sequence
from tests.cli.test_cli_run import cli
from tests.conftest import GRAPHS


def render(tmp_path, cache, *extra):
    src = sequence(tmp_path / "src", 4, np.float32)
    return cli("run", str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set", f"dst={tmp_path}/o.%04d.exr",
               "--set", "slowdown=2", "--cache", str(cache), "-q", *extra)


def entries(cache) -> list:
    return sorted(cache.glob("??/*.json"))


def test_stats_prune_and_verify(tmp_path):
    cache = tmp_path / "cache"
    assert render(tmp_path, cache)[0] == 0
    n = len(entries(cache))
    total = sum(p.stat().st_size + p.with_suffix(".npy").stat().st_size for p in entries(cache))
    rc, out, _ = cli("cache", "stats", str(cache))
    assert rc == 0 and f"{n} entries" in out and n > 5
    # damage one entry's data: --verify finds it and removes it
    victim = entries(cache)[0].with_suffix(".npy")
    data = victim.read_bytes()
    victim.write_bytes(data[:-8] + bytes(b ^ 0xFF for b in data[-8:]))     # flipped: surely different
    rc, out, _ = cli("cache", "stats", str(cache), "--verify")
    assert rc == 0 and "1 damaged entries removed" in out and len(entries(cache)) == n - 1
    # prune to half: least recently used go first, the total ends under the limit
    old = entries(cache)[0]
    os.utime(old, (time.time() - 10_000, time.time() - 10_000))
    rc, out, _ = cli("cache", "prune", str(cache), "--max-size", str(total // 2))
    assert rc == 0 and "removed" in out and not old.exists()
    left = sum(p.stat().st_size + p.with_suffix(".npy").stat().st_size for p in entries(cache))
    assert 0 < left <= total // 2


def test_run_with_a_cache_limit_prunes_after_the_render(tmp_path):
    cache = tmp_path / "cache"
    rc, _, err = render(tmp_path, cache, "--cache-limit", "1K")
    assert rc == 0, err
    assert sum(p.stat().st_size + p.with_suffix(".npy").stat().st_size for p in entries(cache)) <= 1024


def test_cache_command_errors(tmp_path):
    rc, _, err = cli("cache", "stats", str(tmp_path / "nope"))
    assert rc == 2 and "no such cache folder" in err
