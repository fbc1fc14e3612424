"""Farm-scale behaviour of a 2048x1080 retime: peak memory against sequence length, and the speed-up
of two Dask workers over one, each measured against a baseline in the same run.

Lines (issue 6):

1. Peak RSS of ``midframe run graphs/retime.json`` (slowdown 2, half-float RGBA plates, serial, the
   default in-memory cache) for 10 and for 100 output frames, in a child process under a bare
   launcher (``RUSAGE_CHILDREN``; see bench/engine.py for why). Ratio 100 / 10: streaming
   evaluation should keep it near 1 (target within 10 %).
2. Wall time of the same retime of 20 output frames on a Dask LocalCluster of 1 worker and of 2
   workers (``--scheduler local:N``, cluster start-up included). Ratio 1 / 2 = speed-up (target
   >= 1.6 on this 2-core machine).

Usage::

    python bench/farm.py              # both lines (about 15-25 minutes on 2 cores)
    python bench/farm.py --small      # 480x270, fewer frames: a check that the script runs
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

from engine import child_peak_rss  # noqa: E402
from inbetween import pan_frames  # noqa: E402

GRAPH = REPO / "graphs" / "retime.json"


def write_plates(folder: Path, n: int, h: int, w: int) -> str:
    from graphcore.image import Image
    from operators.io.exr import write_exr
    from operators.io.transfer import decode

    folder.mkdir(parents=True, exist_ok=True)
    for i, f in enumerate(pan_frames(n, h, w)):
        lin = decode("srgb", f.astype(np.float32))
        img = Image(np.dstack([lin, np.ones(lin.shape[:2], np.float32)]), ("R", "G", "B", "A"))
        write_exr(str(folder / f"p.{1001 + i:04d}.exr"), img, default_pixel_type="half")
    return str(folder / "p.%04d.exr")


def run_cmd(src: str, dst: str, outputs: int, *extra: str) -> list[str]:
    return [sys.executable, "-m", "graphcore", "run", str(GRAPH), "--set", f"src={src}", "--set", f"dst={dst}",
            "--set", "slowdown=2", "--frames", f"1001-{1000 + outputs}", "-q", *extra]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--small", action="store_true", help="480x270 and fewer frames")
    ap.add_argument("--tmp", type=Path, help="folder for the temporary plates")
    args = ap.parse_args(argv)
    h, w = (270, 480) if args.small else (1080, 2048)
    long_n, short_n, speed_n = (30, 10, 8) if args.small else (100, 10, 20)
    print(f"machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}; "
          f"plates {w}x{h} half RGBA")
    with tempfile.TemporaryDirectory(prefix="midframe-farm-", dir=args.tmp) as tmp:
        tmp = Path(tmp)
        src = write_plates(tmp / "src", long_n // 2 + 2, h, w)
        print(f"\n1. peak RSS of a serial retime (slowdown 2), {short_n} vs {long_n} output frames")
        rss = {}
        for n in (short_n, long_n):
            mib, wall, code, tail = child_peak_rss(run_cmd(src, f"{tmp}/m{n}/o.%04d.exr", n))
            if code != 0:
                print(f"   render failed: {tail}")
                return 1
            rss[n] = mib
            print(f"   {n:4d} frames: peak {mib:8.0f} MiB   wall {wall:7.1f} s")
        print(f"   ratio {long_n} / {short_n}: {rss[long_n] / rss[short_n]:.3f}  (target <= 1.10)")

        print(f"\n2. Dask LocalCluster, {speed_n} output frames, wall seconds incl. cluster start-up")
        walls = {}
        for workers in (1, 2):
            t0 = time.perf_counter()
            proc = subprocess.run(run_cmd(src, f"{tmp}/d{workers}/o.%04d.exr", speed_n, "--scheduler",
                                          f"local:{workers}"), capture_output=True, text=True)
            walls[workers] = time.perf_counter() - t0
            if proc.returncode != 0:
                print(f"   render failed: {proc.stderr[-400:]}")
                return 1
            print(f"   {workers} worker{'s' if workers > 1 else ' '}: {walls[workers]:7.1f} s")
        print(f"   speed-up 2 / 1: {walls[1] / walls[2]:.2f}x  (target >= 1.6)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
