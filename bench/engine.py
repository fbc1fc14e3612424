"""Engine benchmarks: what the graph engine costs on top of the work it does.

Run ``python bench/engine.py`` (2048x1080, about 2-3 minutes on a 2-core machine) or
``python bench/engine.py --small`` (480x270, well under a minute). Every number is measured in
this run and compared with a baseline measured in the same run; nothing here asserts a time.
See bench/README.md for what each line of the table means.

Sections
--------
1. convert   ``graphs/convert.json`` through ``graphcore.execute.render.render`` (serial) against
             a loop of plain ``OpenEXR.File`` read + write of the same files.
2. over      ``graphs/over.json`` against a hand-written numpy Porter-Duff over with the same
             ``OpenEXR.File`` I/O; the two outputs are compared pixel for pixel.
3. cache     a graph with an expensive upstream (lanczos resize to twice the size and back) and a
             cheap downstream gain, rendered twice with one ``--cache`` folder and a different
             gain the second time: wall time and operator calls per node of both runs, plus a run
             without a disk cache and the cost of one disk-cache put/get.
4. pool      ``--jobs 2`` against ``--jobs 1`` on 20 frames of the over composite.
5. memory    peak RSS of ``python -m graphcore run graphs/over.json`` in a child process for 10
             and 40 frames, with the default in-memory cache (2048 MB) and with ``--memory 256``.

The plates are synthetic and written by this script into a temporary folder: the demo scene
(:class:`graphcore.demo.scene.Scene`, rendered once) panned by whole pixels per frame, with
seeded grain on the background and seeded noise on the vectors. Each frame is an EXR with
``R G B A`` as half and ``fwd.x fwd.y`` as float, ZIP compression.
"""

from __future__ import annotations

import argparse
import hashlib
import io
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path

import numpy as np
import OpenEXR

REPO = Path(__file__).resolve().parents[1]
GRAPHS = REPO / "graphs"
FIRST = 1  # first frame number of the synthetic plates

# OpenEXR threads for the baseline: the engine reads and writes with num_threads=0 (on the calling
# thread), so the baseline does too; section 1 also times the library default (-1) for contrast.
ENGINE_EXR_THREADS = 0


# -- machine -----------------------------------------------------------------------------------
def machine_lines() -> list[str]:
    cpu = "unknown"
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.lower().startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    try:
        usable = len(os.sched_getaffinity(0))
    except AttributeError:
        usable = os.cpu_count() or 1
    versions = []
    for dist in ("midframe", "numpy", "OpenEXR", "opencv-python-headless", "pydantic", "networkx"):
        try:
            versions.append(f"{dist} {metadata.version(dist)}")
        except metadata.PackageNotFoundError:
            versions.append(f"{dist} (not installed)")
    mem = ""
    try:
        with open("/proc/meminfo") as fh:
            kb = int(fh.readline().split()[1])
        mem = f", RAM {kb / 2**20:.1f} GiB"
    except (OSError, ValueError, IndexError):
        pass
    return [f"machine: nproc {usable} (os.cpu_count {os.cpu_count()}), CPU {cpu}{mem}",
            f"python {platform.python_version()} on {platform.system()} {platform.release()}",
            "libraries: " + ", ".join(versions)]


# -- synthetic plates --------------------------------------------------------------------------
def _write_plate(path: Path, rgba: np.ndarray, fwd_x: np.ndarray, fwd_y: np.ndarray) -> None:
    header = {"compression": OpenEXR.ZIP_COMPRESSION, "type": OpenEXR.scanlineimage}
    channels = {"RGBA": rgba.astype(np.float16), "fwd.x": fwd_x.astype(np.float32),
                "fwd.y": fwd_y.astype(np.float32)}
    OpenEXR.File(header, channels).write(str(path))


def make_plates(folder: Path, width: int, height: int, frames: int, seed: int = 11) -> dict[str, str]:
    """Write ``frames`` frames of a background plate and a foreground element.

    ``plate.%04d.exr``: the demo scene's backdrop panning left by ``pan`` px per frame, opaque,
    with seeded grain (sigma 0.004) on R G B; ``fwd.x = -pan``, ``fwd.y = 0`` plus seeded noise
    (sigma 0.05 px). ``fg.%04d.exr``: the scene's premultiplied foreground moving right by
    ``3 * pan`` px per frame; vectors ``3 * pan`` where A > 0, else 0, plus the same noise.
    The noise of each frame is a window of one seeded noise field at a frame-dependent offset
    (cheaper than drawing fresh noise per frame; neighbouring frames still differ everywhere).
    Returns the two sequence patterns.
    """
    from graphcore.demo.scene import Scene

    folder.mkdir(parents=True, exist_ok=True)
    out = Scene(width, height, seed=seed).render(1)
    fg0, bg0 = out["fg"].pixels, out["bg"].pixels
    pad = 97
    noise = np.random.default_rng(seed).standard_normal((height + pad, width + pad), dtype=np.float32)

    def field(k: int) -> np.ndarray:  # window k of the noise field, (H, W)
        dy, dx = (k * 31) % pad, (k * 53 + 17) % pad
        return noise[dy:dy + height, dx:dx + width]

    pan = max(1, width // 256)
    plate = folder / "plate.%04d.exr"
    fg = folder / "fg.%04d.exr"

    def write_frame(i: int) -> None:
        frame = FIRST + i
        k = 7 * i
        bg = np.roll(bg0, -pan * i, axis=1)
        for c in range(3):
            bg[..., c] += 0.004 * field(k + c)
        bg[..., 3] = 1.0
        _write_plate(Path(str(plate) % frame), bg, -pan + 0.05 * field(k + 3), 0.05 * field(k + 4))
        f = np.roll(fg0, 3 * pan * i, axis=1)
        covered = f[..., 3] > 0
        _write_plate(Path(str(fg) % frame), f, np.where(covered, 3 * pan + 0.05 * field(k + 5), 0),
                     np.where(covered, 0.05 * field(k + 6), 0))

    # OpenEXR releases the GIL while encoding, so two threads write about twice as fast as one
    # (its own num_threads does not speed up writing here).
    with ThreadPoolExecutor(max_workers=2) as pool:
        list(pool.map(write_frame, range(frames)))
    return {"plate": str(plate), "fg": str(fg)}


# -- baselines: OpenEXR.File directly ----------------------------------------------------------
def exr_read(path: str, threads: int = ENGINE_EXR_THREADS) -> dict[str, np.ndarray]:
    f = OpenEXR.File(path, separate_channels=True, num_threads=threads)
    return {name: ch.pixels for name, ch in f.channels().items()}


def exr_write(path: str, planes: dict[str, np.ndarray], threads: int = ENGINE_EXR_THREADS) -> None:
    header = {"compression": OpenEXR.ZIP_COMPRESSION, "type": OpenEXR.scanlineimage}
    # OpenEXR.File replaces the values of the dict it is given: hand it a copy of the dict.
    OpenEXR.File(header, dict(planes), num_threads=threads).write(path)


def baseline_convert(src: str, dst: str, frames: Sequence[int], threads: int = ENGINE_EXR_THREADS
                     ) -> list[float]:
    times = []
    for f in frames:
        t0 = time.perf_counter()
        exr_write(dst % f, exr_read(src % f, threads), threads)
        times.append(time.perf_counter() - t0)
    return times


def numpy_over(fg: dict[str, np.ndarray], bg: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Porter-Duff over on premultiplied colour: ``fg + (1 - fg.A) * bg`` for R G B A, computed
    in float32 and stored as half; fg's vector layer copied through as float."""
    keep = 1.0 - fg["A"].astype(np.float32)
    out = {c: (fg[c].astype(np.float32) + keep * bg[c].astype(np.float32)).astype(np.float16)
           for c in ("R", "G", "B", "A")}
    for c in fg:
        if c not in out:
            out[c] = fg[c]
    return out


def baseline_over(fg: str, bg: str, dst: str, frames: Sequence[int]) -> list[float]:
    times = []
    for f in frames:
        t0 = time.perf_counter()
        exr_write(dst % f, numpy_over(exr_read(fg % f), exr_read(bg % f)))
        times.append(time.perf_counter() - t0)
    return times


def max_difference(a_path: str, b_path: str) -> float:
    """Largest absolute difference over every channel of two EXR files (inf if channels differ)."""
    a, b = exr_read(a_path), exr_read(b_path)
    if set(a) != set(b):
        return float("inf")
    return max(float(np.max(np.abs(a[c].astype(np.float64) - b[c].astype(np.float64)))) for c in a)


# -- the engine, in this process ---------------------------------------------------------------
@dataclass
class EngineRun:
    wall: float
    frame_seconds: list[float]
    calls: dict[str, int]
    first_result: float | None = None  # seconds from the call to the first finished frame


def engine(graph: str | Path, sets: dict[str, object], first: int, last: int, **kwargs) -> EngineRun:
    """``midframe run GRAPH --set ... --frames first-last`` through ``render``; exits on failure."""
    from graphcore.execute.render import render
    from graphcore.registry import FrameRange

    t0 = time.perf_counter()
    first_seen: list[float] = []

    def on_start(total: int) -> Callable:
        def progress(result) -> None:
            if not first_seen:
                first_seen.append(time.perf_counter() - t0)
        return progress

    out = render(str(graph), sets=[f"{k}={v}" for k, v in sets.items()], frames=FrameRange(first, last),
                 on_start=on_start, **kwargs)
    wall = time.perf_counter() - t0
    failed = out.report.failed
    if failed:
        sys.exit(f"bench: engine run of {graph} failed: {failed[0].message}")
    return EngineRun(wall, [r.seconds for r in out.report.results], dict(out.report.calls),
                     first_seen[0] if first_seen else None)


# -- the table ---------------------------------------------------------------------------------
@dataclass
class Table:
    rows: list[tuple[str, str, str, str, str]] = field(default_factory=list)

    def add(self, section: str, what: str, value: str = "", baseline: str = "", ratio: str = "") -> None:
        self.rows.append((section, what, value, baseline, ratio))

    def render(self) -> str:
        head = ("#", "measurement", "value", "baseline", "ratio")
        widths = [max(len(r[i]) for r in [head, *self.rows]) for i in range(5)]
        line = "  ".join("-" * w for w in widths)
        out = ["  ".join(h.ljust(w) for h, w in zip(head, widths)).rstrip(), line]
        last = None
        for r in self.rows:
            if last is not None and r[0] != last:
                out.append("")
            last = r[0]
            cells = [r[0].ljust(widths[0]), r[1].ljust(widths[1]), r[2].rjust(widths[2]),
                     r[3].rjust(widths[3]), r[4].rjust(widths[4])]
            out.append("  ".join(cells).rstrip())
        return "\n".join(out)


def s(seconds: float) -> str:
    return f"{seconds:.3f} s"


def ratio(a: float, b: float) -> str:
    return f"{a / b:.2f}x" if b > 0 else "n/a"


def med(values: Sequence[float]) -> float:
    return statistics.median(values)


def log(msg: str) -> None:
    print(f"bench: {msg}", file=sys.stderr, flush=True)


# -- sections ----------------------------------------------------------------------------------
def halves(first: int, n: int) -> list[list[int]]:
    """Frames first..first+n-1 in two halves: engine and baseline alternate A B A B, so a drift
    in machine speed during the run (shared VMs) hits both about equally."""
    frames = list(range(first, first + n))
    return [frames[: n // 2], frames[n // 2:]] if n > 1 else [frames]


def bench_convert(t: Table, tmp: Path, plates: dict[str, str], n: int) -> None:
    src = plates["plate"]
    out_e, out_b, out_t, out_m = (tmp / "conv_engine", tmp / "conv_base", tmp / "conv_base_threads",
                                  tmp / "conv_nomem")
    for d in (out_e, out_b, out_t, out_m, tmp / "warm"):
        d.mkdir()
    # warm-up (imports, plugin discovery, page cache), not timed
    engine(GRAPHS / "convert.json", {"src": src, "dst": tmp / "warm" / "w.%04d.exr"}, FIRST, FIRST)
    baseline_convert(src, str(tmp / "warm" / "b.%04d.exr"), [FIRST])

    base_wall = eng_wall = threaded_wall = nomem_wall = 0.0
    base: list[float] = []
    runs: list[EngineRun] = []
    for part in halves(FIRST, n):
        t0 = time.perf_counter()
        base += baseline_convert(src, str(out_b / "b.%04d.exr"), part)
        base_wall += time.perf_counter() - t0
        run = engine(GRAPHS / "convert.json", {"src": src, "dst": out_e / "e.%04d.exr"}, part[0], part[-1])
        runs.append(run)
        eng_wall += run.wall
        nomem_wall += engine(GRAPHS / "convert.json", {"src": src, "dst": out_m / "m.%04d.exr"}, part[0],
                             part[-1], memory_bytes=1 << 20).wall
        t0 = time.perf_counter()
        baseline_convert(src, str(out_t / "t.%04d.exr"), part, threads=-1)
        threaded_wall += time.perf_counter() - t0
    frame_s = [x for r in runs for x in r.frame_seconds]
    fixed = sum(r.wall - sum(r.frame_seconds) for r in runs) / len(runs)

    t.add("1", f"convert.json, {n} frames, wall per frame", s(eng_wall / n), s(base_wall / n),
          ratio(eng_wall, base_wall))
    t.add("1", "  median frame (task time vs read+write)", s(med(frame_s)), s(med(base)),
          ratio(med(frame_s), med(base)))
    t.add("1", "  same with --memory 1 (LRU keeps nothing)", s(nomem_wall / n), s(base_wall / n),
          ratio(nomem_wall, base_wall))
    t.add("1", "  fixed cost per render call (wall - sum of tasks)", s(fixed))
    t.add("1", "  baseline with OpenEXR default threads (-1)", s(threaded_wall / n), s(base_wall / n),
          ratio(threaded_wall, base_wall))
    diff = max_difference(src % FIRST, str(out_e / "e.%04d.exr") % FIRST)
    t.add("1", "  engine output vs source, max |diff| (0 = bit-exact)", f"{diff:g}")
    for d in (out_e, out_b, out_t, out_m, tmp / "warm"):
        shutil.rmtree(d)


def bench_over(t: Table, tmp: Path, plates: dict[str, str], n: int) -> None:
    fg, bg = plates["fg"], plates["plate"]
    out_e, out_b, out_m = tmp / "over_engine", tmp / "over_base", tmp / "over_nomem"
    for d in (out_e, out_b, out_m):
        d.mkdir()
    base_wall = 0.0
    base: list[float] = []
    full: list[EngineRun] = []
    nomem: list[EngineRun] = []
    for part in halves(FIRST, n):
        t0 = time.perf_counter()
        base += baseline_over(fg, bg, str(out_b / "b.%04d.exr"), part)
        base_wall += time.perf_counter() - t0
        full.append(engine(GRAPHS / "over.json", {"fg": fg, "bg": bg, "dst": out_e / "e.%04d.exr"},
                           part[0], part[-1]))
        nomem.append(engine(GRAPHS / "over.json", {"fg": fg, "bg": bg, "dst": out_m / "m.%04d.exr"},
                            part[0], part[-1], memory_bytes=1 << 20))
    wall = sum(r.wall for r in full)
    wall_m = sum(r.wall for r in nomem)
    frame_s = [x for r in full for x in r.frame_seconds]
    t.add("2", f"over.json, {n} frames, wall per frame", s(wall / n), s(base_wall / n), ratio(wall, base_wall))
    t.add("2", "  median frame (task time vs numpy over + I/O)", s(med(frame_s)), s(med(base)),
          ratio(med(frame_s), med(base)))
    t.add("2", "  same with --memory 1 (LRU keeps nothing)", s(wall_m / n), s(base_wall / n),
          ratio(wall_m, base_wall))
    diff = max(max_difference(str(out_e / "e.%04d.exr") % f, str(out_b / "b.%04d.exr") % f)
               for f in (FIRST, FIRST + n - 1))
    t.add("2", "  engine vs numpy output, max |diff| (first, last frame)", f"{diff:g}")
    for d in (out_e, out_b, out_m):
        shutil.rmtree(d)


def cache_graph(width: int, height: int) -> dict:
    return {
        "schema": "midframe.graph", "version": 2,
        "doc": "Benchmark: expensive upstream (lanczos up to twice the size and back), cheap downstream gain.",
        "vars": {"src": {"type": "path"}, "dst": {"type": "path"},
                 "gain": {"type": "float", "default": 1.0}},
        "nodes": {
            "plate": {"op": "read", "params": {"path": "${src}"}},
            "up": {"op": "resize", "inputs": {"image": "plate"},
                   "params": {"width": 2 * width, "height": 2 * height, "filter": "lanczos"}},
            "down": {"op": "resize", "inputs": {"image": "up"},
                     "params": {"width": width, "height": height, "filter": "lanczos"}},
            "grade": {"op": "blend", "inputs": {"a": "down"},
                      "params": {"weights": ["${gain}"], "normalize": False}},
            "out": {"op": "write", "inputs": {"image": "grade"}, "params": {"path": "${dst}"}},
        },
    }


def _calls(calls: dict[str, int]) -> str:
    order = ("plate", "up", "down", "grade", "out")
    return " ".join(f"{k}={calls.get(k, 0)}" for k in order)


def bench_cache(t: Table, tmp: Path, plates: dict[str, str], n: int, width: int, height: int) -> None:
    from graphcore.cache import DiskCache
    from graphcore.image import Image

    graph = tmp / "cache_bench.json"
    graph.write_text(json.dumps(cache_graph(width, height), indent=2))
    cache_dir = tmp / "cache"
    src = plates["plate"]
    last = FIRST + n - 1
    nocache = engine(graph, {"src": src, "dst": tmp / "cache_out0" / "o.%04d.exr", "gain": 1.0}, FIRST, last)
    first = engine(graph, {"src": src, "dst": tmp / "cache_out1" / "o.%04d.exr", "gain": 1.0}, FIRST, last,
                   cache_dir=cache_dir)
    second = engine(graph, {"src": src, "dst": tmp / "cache_out2" / "o.%04d.exr", "gain": 0.5}, FIRST, last,
                    cache_dir=cache_dir)
    disk = DiskCache(cache_dir)
    entries = disk.entries()
    size = sum(e[2] for e in entries)

    t.add("3", f"cache graph, {n} frames, no --cache (memory only)", s(nocache.wall))
    t.add("3", "  run 1 with empty --cache (gain 1.0)", s(first.wall), s(nocache.wall),
          ratio(first.wall, nocache.wall))
    t.add("3", "  run 2, same --cache, downstream gain 0.5", s(second.wall), s(first.wall),
          ratio(second.wall, first.wall))
    t.add("3", f"  calls run 1: {_calls(first.calls)}")
    t.add("3", f"  calls run 2: {_calls(second.calls)}")
    t.add("3", f"  disk cache after run 2: {len(entries)} entries", f"{size / 2**20:.0f} MB")

    # one put / get of a 6-channel float32 frame, and how much of it is SHA-256
    px = np.random.default_rng(5).random((height, width, 6), dtype=np.float32)
    img = Image(px, ("R", "G", "B", "A", "fwd.x", "fwd.y"))
    probe = DiskCache(tmp / "cache_probe")
    t0 = time.perf_counter()
    probe.put("f" * 64, img)
    put = time.perf_counter() - t0
    t0 = time.perf_counter()
    got = probe.get("f" * 64)
    get = time.perf_counter() - t0
    if got is None or not np.array_equal(got.pixels, px):
        sys.exit("bench: the disk cache did not return the image it stored")
    buf = io.BytesIO()
    np.save(buf, px)
    data = buf.getvalue()
    t0 = time.perf_counter()
    hashlib.sha256(data).hexdigest()
    sha = time.perf_counter() - t0
    t0 = time.perf_counter()
    (tmp / "raw.npy").write_bytes(data)
    raw = time.perf_counter() - t0
    mb = len(data) / 2**20
    t.add("3", f"  disk-cache put of one {width}x{height}x6 float32 ({mb:.0f} MB)", s(put), s(raw),
          ratio(put, raw))
    t.add("3", "  disk-cache get of it (read + verify)", s(get))
    t.add("3", "  of which SHA-256 (once; put and get each hash)", s(sha))
    for d in ("cache_out0", "cache_out1", "cache_out2", "cache", "cache_probe"):
        shutil.rmtree(tmp / d)
    (tmp / "raw.npy").unlink()


def bench_pool(t: Table, tmp: Path, plates: dict[str, str], n: int) -> None:
    fg, bg = plates["fg"], plates["plate"]
    last = FIRST + n - 1
    sets = {"fg": fg, "bg": bg}
    one = engine(GRAPHS / "over.json", {**sets, "dst": tmp / "pool1" / "o.%04d.exr"}, FIRST, last, jobs=1)
    two = engine(GRAPHS / "over.json", {**sets, "dst": tmp / "pool2" / "o.%04d.exr"}, FIRST, last, jobs=2)
    # start-up: two frames on two workers run one chunk each, side by side; what the wall time has
    # beyond the slower of the two frames is starting the pool and its workers
    tiny = engine(GRAPHS / "over.json", {**sets, "dst": tmp / "pool3" / "o.%04d.exr"}, FIRST, FIRST + 1, jobs=2)
    t.add("4", f"over.json {n} frames: --jobs 2 vs --jobs 1 (wall)", s(two.wall), s(one.wall),
          f"{one.wall / two.wall:.2f}x faster")
    t.add("4", "  median frame inside a worker vs serial", s(med(two.frame_seconds)), s(med(one.frame_seconds)),
          ratio(med(two.frame_seconds), med(one.frame_seconds)))
    busy = sum(two.frame_seconds)
    t.add("4", "  wall - (worker busy time / 2): start-up + idle tail", s(two.wall - busy / 2))
    t.add("4", "  pool start-up (2-frame --jobs 2 wall - slower frame)", s(tiny.wall - max(tiny.frame_seconds)))
    if two.first_result is not None and one.first_result is not None:
        t.add("4", "  time to first reported frame", s(two.first_result), s(one.first_result))
    diff = max_difference(str(tmp / "pool1" / "o.%04d.exr") % last, str(tmp / "pool2" / "o.%04d.exr") % last)
    t.add("4", "  jobs 2 vs jobs 1 output, max |diff| (last frame)", f"{diff:g}")
    for d in ("pool1", "pool2", "pool3"):
        shutil.rmtree(tmp / d)


# Runs the measured command as its only child and prints that child's peak RSS (KiB) and exit
# status. The launcher is needed because Linux folds the parent's resident size at fork/exec into
# the child's ru_maxrss: a render started straight from this (large) process would report this
# process's size. The launcher is a bare interpreter, far smaller than any render.
_LAUNCHER = ("import resource, subprocess, sys\n"
             "code = subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL).returncode\n"
             "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss, code)\n")


def child_peak_rss(cmd: list[str]) -> tuple[float, float, int, str]:
    """Run ``cmd`` under the launcher; (peak RSS MiB of ``cmd``, wall seconds, exit status, stderr tail)."""
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", _LAUNCHER, *cmd], capture_output=True, text=True, cwd=REPO)
    wall = time.perf_counter() - t0
    try:
        kib, code = (int(x) for x in proc.stdout.split())
    except ValueError:
        return 0.0, wall, proc.returncode or 1, (proc.stdout + proc.stderr).strip()[-400:]
    return kib / 1024.0, wall, code, proc.stderr.strip()[-400:]


def bench_memory(t: Table, tmp: Path, plates: dict[str, str], counts: Sequence[int], width: int,
                 height: int) -> None:
    fg, bg = plates["fg"], plates["plate"]
    per_frame = 3 * width * height * 6 * 4 / 2**20  # fg, bg, comp held in the LRU (6 float32 planes each)
    t.add("5", f"LRU bytes per over frame (fg + bg + comp): {per_frame:.0f} MB")
    base_cmd = [sys.executable, "-m", "graphcore", "run", str(GRAPHS / "over.json"), "-q",
                "--set", f"fg={fg}", "--set", f"bg={bg}"]
    floor, _, _, _ = child_peak_rss([sys.executable, "-c", "import numpy, cv2, OpenEXR, pydantic, networkx, "
                                     "graphcore.cli.main, operators.io.read, operators.io.write, "
                                     "operators.composite.porter_duff"])
    t.add("5", "peak RSS of the interpreter + imports alone", f"{floor:.0f} MB")
    for memory in (None, 256):
        ref = None
        for n in counts:
            dst = tmp / f"rss_{memory}_{n}"
            cmd = base_cmd + ["--set", f"dst={dst}/o.%04d.exr", "--frames", f"{FIRST}-{FIRST + n - 1}"]
            if memory is not None:
                cmd += ["--memory", str(memory)]
            rss, wall, code, err = child_peak_rss(cmd)
            if code != 0:
                sys.exit(f"bench: {' '.join(cmd)} exited {code}: {err}")
            label = "--memory 2048 (default)" if memory is None else f"--memory {memory}"
            t.add("5", f"peak RSS, {n} frames, {label}", f"{rss:.0f} MB",
                  f"{ref:.0f} MB" if ref is not None else "", ratio(rss, ref) if ref is not None else "")
            t.add("5", f"  wall of that child ({wall / n:.3f} s/frame)", s(wall))
            ref = rss if ref is None else ref
            shutil.rmtree(dst)


# -- main --------------------------------------------------------------------------------------
def main(argv: Sequence[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--small", action="store_true", help="480x270 instead of 2048x1080 (a quick run)")
    p.add_argument("--only", default="1,2,3,4,5", help="comma-separated sections to run (default all)")
    p.add_argument("--tmp", metavar="DIR", help="parent folder for the temporary plates (default: system temp)")
    p.add_argument("--keep", action="store_true", help="keep the temporary folder")
    args = p.parse_args(argv)
    width, height = (480, 270) if args.small else (2048, 1080)
    only = {x.strip() for x in args.only.split(",") if x.strip()}
    counts = {"convert": 10, "over": 10, "cache": 3, "pool": 20, "rss": (10, 40)}
    frames_needed = max(counts["rss"]) if "5" in only else max(counts["pool"], counts["over"], counts["convert"])

    tmp = Path(tempfile.mkdtemp(prefix="midframe-bench-", dir=args.tmp))
    start = time.perf_counter()
    table = Table()
    try:
        log(f"writing {frames_needed} frames of two {width}x{height} plates into {tmp}")
        t0 = time.perf_counter()
        plates = make_plates(tmp / "plates", width, height, frames_needed)
        gen = time.perf_counter() - t0
        mb = os.path.getsize(plates["plate"] % FIRST) / 2**20
        steps = [("1", "engine overhead: convert", lambda: bench_convert(table, tmp, plates, counts["convert"])),
                 ("2", "over composite", lambda: bench_over(table, tmp, plates, counts["over"])),
                 ("3", "cache effect", lambda: bench_cache(table, tmp, plates, counts["cache"], width, height)),
                 ("4", "local pool", lambda: bench_pool(table, tmp, plates, counts["pool"])),
                 ("5", "peak RSS", lambda: bench_memory(table, tmp, plates, counts["rss"], width, height))]
        for key, name, fn in steps:
            if key in only:
                log(f"section {key}: {name}")
                t0 = time.perf_counter()
                fn()
                log(f"section {key} took {time.perf_counter() - t0:.1f} s")
    finally:
        if args.keep:
            log(f"kept {tmp}")
        else:
            shutil.rmtree(tmp, ignore_errors=True)

    print(f"midframe engine benchmark, {width}x{height}")
    for line in machine_lines():
        print(line)
    print(f"plates: {frames_needed} frames x 2 sequences, R G B A half + fwd.x fwd.y float, ZIP, "
          f"{mb:.1f} MB per plate frame, written in {gen:.1f} s")
    print("ratios are value / baseline, both measured in this run\n")
    print(table.render())
    print(f"\ntotal {time.perf_counter() - start:.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
