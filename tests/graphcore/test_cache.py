"""The cache tiers: LRU bounded in bytes; disk entries atomic, verified, never pickled."""

from __future__ import annotations

import io
import json

import numpy as np

from graphcore.cache import Cache, DiskCache, MemoryCache
from graphcore.image import Image


def _img(v: float, n: int = 8) -> Image:
    return Image(np.full((n, n, 2), v, np.float32), ("a.x", "a.y"), {"note": f"v{v}"})


def test_memory_lru_bounded_in_bytes():
    one = _img(0).nbytes
    mem = MemoryCache(max_bytes=3 * one)
    for i in range(5):
        mem.put(f"k{i}", _img(i))
    assert len(mem) == 3 and mem.nbytes == 3 * one
    assert mem.get("k0") is None and mem.get("k1") is None
    assert mem.get("k2") is not None
    mem.put("k5", _img(5))  # k2 was used most recently, so k3 goes
    assert mem.get("k3") is None and mem.get("k2") is not None


def test_disk_round_trip_exact(tmp_path):
    disk = DiskCache(tmp_path)
    img = Image(np.random.default_rng(1).random((5, 7, 3), dtype=np.float32), ("R", "G", "B"), {"x": [1, 2]})
    assert disk.put("ab" * 32, img)
    back = DiskCache(tmp_path).get("ab" * 32)
    assert back.channels == img.channels and dict(back.meta) == {"x": [1, 2]}
    assert back.pixels.tobytes() == img.pixels.tobytes()


def test_disk_corrupt_entry_is_a_miss_and_removed(tmp_path):
    disk = DiskCache(tmp_path)
    key = "cd" * 32
    disk.put(key, _img(1))
    npy = tmp_path / key[:2] / f"{key}.npy"
    data = bytearray(npy.read_bytes())
    data[-1] ^= 0xFF
    npy.write_bytes(bytes(data))
    assert disk.get(key) is None
    assert disk.stats.corrupt == 1 and not npy.exists()


def test_disk_never_unpickles(tmp_path):
    """An entry holding a pickled object array (checksum made to match) is refused, not loaded."""
    import hashlib

    disk = DiskCache(tmp_path)
    key = "ef" * 32
    buf = io.BytesIO()
    np.save(buf, np.array([object()], dtype=object), allow_pickle=True)
    data = buf.getvalue()
    folder = tmp_path / key[:2]
    folder.mkdir()
    (folder / f"{key}.npy").write_bytes(data)
    (folder / f"{key}.json").write_text(json.dumps({"channels": ["Y"], "meta": {}, "nbytes": len(data),
                                                    "sha256": hashlib.sha256(data).hexdigest()}))
    assert disk.get(key) is None and disk.stats.corrupt == 1


def test_disk_put_is_atomic_no_temp_left(tmp_path):
    disk = DiskCache(tmp_path)
    for i in range(3):
        disk.put(f"{i:02d}" * 32, _img(i))
    leftovers = list(tmp_path.glob("*/.tmp-*"))
    assert leftovers == []
    assert len(disk.entries()) == 3


def test_prune_least_recent_first(tmp_path):
    import os
    import time

    disk = DiskCache(tmp_path)
    keys = [f"{i:02d}" * 32 for i in range(4)]
    for i, k in enumerate(keys):
        disk.put(k, _img(i))
        meta = tmp_path / k[:2] / f"{k}.json"
        t = time.time() - 100 + i
        os.utime(meta, (t, t))
    one = disk.entries()[0][2]
    removed, freed = disk.prune(max_bytes=2 * one)
    assert removed == 2 and freed == 2 * one
    assert disk.get(keys[0]) is None and disk.get(keys[3]) is not None


def test_tiers_promote_disk_hits(tmp_path):
    cache = Cache(MemoryCache(), DiskCache(tmp_path))
    cache.put("aa" * 32, _img(2))
    fresh = Cache(MemoryCache(), DiskCache(tmp_path))
    assert fresh.get("aa" * 32) is not None
    assert len(fresh.memory) == 1


def _hammer(root: str, rounds: int) -> int:
    """Put and get the same entries over and over; returns how many gets saw something wrong."""
    from graphcore.cache import DiskCache
    from graphcore.image import Image

    cache = DiskCache(root)
    bad = 0
    for r in range(rounds):
        for k in range(8):
            key = f"{r:03d}{k:02d}" + "ab" * 30       # new keys every round: every put races
            px = np.full((64, 96, 3), r * 8 + k, np.float32)
            cache.put(key, Image(px, ("R", "G", "B")))
            got = cache.get(key)
            if got is None or not np.array_equal(got.pixels, px):
                bad += 1
    return bad + cache.stats.corrupt


def test_two_processes_writing_the_same_entries_at_once(tmp_path):
    # Shared storage on a farm: several processes put the same content-addressed entries at the same
    # moment. Writes are atomic renames, so every read sees a whole entry (never a half-written or
    # corrupt one), and no temporary file is left behind.
    import multiprocessing as mp

    with mp.get_context("spawn").Pool(2) as pool:
        bad = pool.starmap(_hammer, [(str(tmp_path), 40), (str(tmp_path), 40)])
    assert bad == [0, 0]
    assert not list(tmp_path.glob("??/.tmp-*"))
    assert len(list(tmp_path.glob("??/*.json"))) == 8 * 40
