"""Result cache: an in-memory LRU bounded in bytes over an optional content-addressed disk tier.

Keys come from ``graphcore.keys``. The disk tier stores each value as two files in a two-level
fan-out folder: ``<key>.npy`` (pixels, loaded with ``allow_pickle=False``) and ``<key>.json``
(channels, metadata, byte count and SHA-256 of the .npy). Both are written to temporary names and
renamed into place, the .json last: a reader that finds the .json finds a complete entry. A read
re-hashes the .npy and discards an entry that does not match (a corrupt entry is a miss, never
an error). No locks are held, so a killed process leaves nothing to clean but stray temp files,
which ``prune`` removes once they are old. Values are never pickled.
"""

from __future__ import annotations

import hashlib
import io
import json
import logging
import os
import tempfile
import time
from collections import OrderedDict
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from graphcore.image import Image

__all__ = ["MemoryCache", "DiskCache", "Cache", "CacheStats"]

log = logging.getLogger("midframe.cache")


@dataclass
class CacheStats:
    hits: int = 0
    misses: int = 0
    stores: int = 0
    evictions: int = 0
    corrupt: int = 0


class MemoryCache:
    """LRU of Images bounded by total pixel bytes."""

    def __init__(self, max_bytes: int = 2 << 30) -> None:
        self.max_bytes = int(max_bytes)
        self._items: OrderedDict[str, Image] = OrderedDict()
        self._bytes = 0
        self.stats = CacheStats()

    @property
    def nbytes(self) -> int:
        return self._bytes

    def __len__(self) -> int:
        return len(self._items)

    def get(self, key: str) -> Image | None:
        img = self._items.get(key)
        if img is None:
            self.stats.misses += 1
            return None
        self._items.move_to_end(key)
        self.stats.hits += 1
        return img

    def put(self, key: str, image: Image) -> None:
        if key in self._items:
            self._items.move_to_end(key)
            return
        if image.nbytes > self.max_bytes:
            return
        self._items[key] = image
        self._bytes += image.nbytes
        self.stats.stores += 1
        while self._bytes > self.max_bytes and self._items:
            _, old = self._items.popitem(last=False)
            self._bytes -= old.nbytes
            self.stats.evictions += 1

    def discard(self, key: str) -> None:
        img = self._items.pop(key, None)
        if img is not None:
            self._bytes -= img.nbytes

    def clear(self) -> None:
        self._items.clear()
        self._bytes = 0


class DiskCache:
    """Content-addressed folder of .npy + .json entries, safe to share between processes and hosts."""

    def __init__(self, root: str | os.PathLike[str], max_bytes: int | None = None) -> None:
        self.root = Path(root)
        self.max_bytes = max_bytes
        self.stats = CacheStats()
        self.root.mkdir(parents=True, exist_ok=True)

    def _paths(self, key: str) -> tuple[Path, Path]:
        if not key.isalnum():
            raise ValueError(f"cache key {key!r} is not alphanumeric")
        folder = self.root / key[:2]
        return folder / f"{key}.npy", folder / f"{key}.json"

    def get(self, key: str) -> Image | None:
        npy, meta_path = self._paths(key)
        try:
            record = json.loads(meta_path.read_text())
            data = npy.read_bytes()
        except (FileNotFoundError, NotADirectoryError):
            self.stats.misses += 1
            return None
        except (OSError, ValueError) as exc:
            return self._corrupt(key, f"unreadable entry ({exc})")
        if len(data) != record.get("nbytes") or hashlib.sha256(data).hexdigest() != record.get("sha256"):
            return self._corrupt(key, "content does not match its checksum")
        try:
            pixels = _npy_view(data)
            image = Image(pixels, tuple(record["channels"]), record.get("meta", {}))
        except (ValueError, KeyError, TypeError) as exc:
            return self._corrupt(key, f"undecodable entry ({exc})")
        self.stats.hits += 1
        try:
            os.utime(meta_path)  # recency for pruning
        except OSError:
            pass
        return image

    def _corrupt(self, key: str, why: str) -> None:
        log.warning("cache entry %s discarded: %s", key[:12], why)
        self.stats.corrupt += 1
        self.stats.misses += 1
        for p in self._paths(key):
            try:
                p.unlink()
            except OSError:
                pass
        return None

    def put(self, key: str, image: Image) -> bool:
        """Store ``image``; returns False (and stores nothing) if its metadata is not JSON."""
        npy, meta_path = self._paths(key)
        if meta_path.exists():
            return True
        try:
            meta_text = json.dumps(dict(image.meta), sort_keys=True, allow_nan=False)
        except (TypeError, ValueError):
            log.debug("cache: metadata of %s is not JSON; not stored on disk", key[:12])
            return False
        npy.parent.mkdir(parents=True, exist_ok=True)
        pixels = np.ascontiguousarray(image.pixels)
        writers: list[_HashingWriter] = []

        def fill(fh) -> None:
            writers.append(_HashingWriter(fh))
            np.lib.format.write_array(writers[0], pixels, allow_pickle=False)

        _write_atomically(npy, fill)
        writer = writers[0]
        record = {"channels": list(image.channels), "meta": json.loads(meta_text), "nbytes": writer.count,
                  "sha256": writer.hash.hexdigest(), "format": "npy"}
        _atomic_write(meta_path, json.dumps(record, sort_keys=True).encode())
        self.stats.stores += 1
        return True

    # -- maintenance ----------------------------------------------------------------------------
    def entries(self) -> list[tuple[Path, Path, int, float]]:
        out = []
        for meta_path in self.root.glob("??/*.json"):
            npy = meta_path.with_suffix(".npy")
            try:
                size = meta_path.stat().st_size + npy.stat().st_size
                out.append((npy, meta_path, size, meta_path.stat().st_mtime))
            except FileNotFoundError:
                continue
        return out

    def size(self) -> int:
        return sum(e[2] for e in self.entries())

    def prune(self, max_bytes: int | None = None, *, temp_age: float = 3600.0) -> tuple[int, int]:
        """Remove least recently used entries until the total is under ``max_bytes``, and temp files
        older than ``temp_age`` seconds. Returns (entries removed, bytes freed)."""
        limit = self.max_bytes if max_bytes is None else max_bytes
        now = time.time()
        for tmp in self.root.glob("??/.tmp-*"):
            try:
                if now - tmp.stat().st_mtime > temp_age:
                    tmp.unlink()
            except OSError:
                pass
        if limit is None:
            return 0, 0
        entries = sorted(self.entries(), key=lambda e: e[3])
        total = sum(e[2] for e in entries)
        removed = freed = 0
        for npy, meta_path, size, _ in entries:
            if total <= limit:
                break
            for p in (meta_path, npy):  # the .json first: the entry disappears as a whole
                try:
                    p.unlink()
                except OSError:
                    pass
            total -= size
            freed += size
            removed += 1
        return removed, freed


class _HashingWriter:
    """A write-only file wrapper that hashes and counts what passes through it."""

    def __init__(self, fh) -> None:
        self.fh = fh
        self.hash = hashlib.sha256()
        self.count = 0

    def write(self, data) -> int:
        view = memoryview(data).cast("B")
        self.hash.update(view)
        self.count += view.nbytes
        return self.fh.write(view)


def _npy_view(data: bytes) -> np.ndarray:
    """The array in .npy bytes, without a copy; object arrays are refused (never unpickled)."""
    buf = io.BytesIO(data)
    version = np.lib.format.read_magic(buf)
    if version == (1, 0):
        shape, fortran, dtype = np.lib.format.read_array_header_1_0(buf)
    elif version == (2, 0):
        shape, fortran, dtype = np.lib.format.read_array_header_2_0(buf)
    else:
        raise ValueError(f".npy version {version} not supported")
    if dtype.hasobject:
        raise ValueError("object arrays are refused")
    count = int(np.prod(shape)) if shape else 1
    arr = np.frombuffer(data, dtype=dtype, count=count, offset=buf.tell())
    return arr.reshape(shape, order="F" if fortran else "C")


def _write_atomically(path: Path, fill) -> None:
    """Call ``fill(file)`` on a temporary file beside ``path``, then rename it into place; on any
    failure the temporary file is removed and ``path`` is untouched."""
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fill(fh)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def _atomic_write(path: Path, data: bytes) -> None:
    _write_atomically(path, lambda fh: fh.write(data))


class Cache:
    """The two tiers together: memory first, then disk (promoting disk hits into memory)."""

    def __init__(self, memory: MemoryCache | None = None, disk: DiskCache | None = None) -> None:
        self.memory = memory if memory is not None else MemoryCache()
        self.disk = disk
        self.disk_write_error: str | None = None   # set once storing on disk failed (e.g. disk full)

    def get(self, key: str) -> Image | None:
        img = self.memory.get(key)
        if img is not None:
            return img
        if self.disk is not None:
            img = self.disk.get(key)
            if img is not None:
                self.memory.put(key, img)
        return img

    def put(self, key: str, image: Image, *, persist: bool = True) -> None:
        """Store in memory and, with ``persist``, on disk. The disk tier only saves work: when
        storing there fails (a full disk, lost permission) the render goes on, the failure is
        logged once as a warning, and this process stores nothing more on disk."""
        self.memory.put(key, image)
        if persist and self.disk is not None and self.disk_write_error is None:
            try:
                self.disk.put(key, image)
            except OSError as e:
                self.disk_write_error = e.strerror or str(e)
                log.warning("cannot store results in the disk cache %s: %s; rendering goes on without "
                            "storing more there (free space or fix its permissions for later runs)",
                            self.disk.root, self.disk_write_error)
