"""Motion-vector accuracy and speed: midframe's estimator against OpenCV DIS and scikit-image TV-L1.

Accuracy (mean endpoint error, bad-1, bad-3: the share of pixels whose endpoint error exceeds 1 or
3 px; Baker et al., IJCV 2011, define the endpoint error) on:

- Middlebury 2014 'Motorcycle', quarter size, from scikit-image (Scharstein et al., GCPR 2014):
  vectors left -> right are x = -disparity, y = 0 wherever the disparity is finite (occluded pixels
  included, so occlusion filling counts);
- synthetic known motions: smooth seeded texture moved by a subpixel translation, a rotation and a
  zoom (exact vectors by construction);
- the demo scene (graphcore.demo.scene), whose layers move by known formulas.

Speed: seconds per two-way estimate (both directions, as `flow-estimate` computes) at the shipped
size and at 2048x1080, each reported as a ratio to two-way DIS MEDIUM measured in the same run.
Nothing here is asserted; it prints a table.

Usage::

    python bench/vectors.py            # the full table (a few minutes)
    python bench/vectors.py --quick    # Motorcycle and synthetic only, no 2K, no TV-L1
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import time
from collections.abc import Callable

import cv2
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

Flow = Callable[[np.ndarray, np.ndarray], np.ndarray]  # (H,W,C) 0..1 perceptual -> (H,W,2)


# -- methods -----------------------------------------------------------------------------------------
def _grey8(img: np.ndarray) -> np.ndarray:
    g = img @ np.array([0.2126, 0.7152, 0.0722], np.float32) if img.shape[2] == 3 else img[:, :, 0]
    return np.clip(g * 255 + 0.5, 0, 255).astype(np.uint8)


def dis_medium(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return cv2.DISOpticalFlow_create(cv2.DISOPTICAL_FLOW_PRESET_MEDIUM).calc(_grey8(a), _grey8(b), None)


def tvl1(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    from skimage.registration import optical_flow_tvl1

    ga = a @ np.array([0.2126, 0.7152, 0.0722], np.float32) if a.shape[2] == 3 else a[:, :, 0]
    gb = b @ np.array([0.2126, 0.7152, 0.0722], np.float32) if b.shape[2] == 3 else b[:, :, 0]
    v, u = optical_flow_tvl1(ga, gb)  # scikit-image returns (row, col) components
    return np.dstack([u, v]).astype(np.float32)


def ours(quality: str) -> Flow:
    def run(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        from operators.vectors.estimate import estimate_flow

        return estimate_flow(a, b, quality=quality)
    return run


# -- data --------------------------------------------------------------------------------------------
def motorcycle():
    from skimage.data import stereo_motorcycle

    left, right, disp = stereo_motorcycle()
    valid = np.isfinite(disp)
    gt = np.zeros(disp.shape + (2,), np.float32)
    gt[..., 0] = np.where(valid, -disp, 0)
    return left.astype(np.float32) / 255, right.astype(np.float32) / 255, gt, valid


def texture(h: int, w: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    base = np.zeros((h, w, 3), np.float32)
    for sigma, amp in ((1.0, 0.25), (3.0, 0.35), (9.0, 0.4)):
        n = cv2.GaussianBlur(rng.random((h, w, 3), dtype=np.float32), (0, 0), sigma)
        n = (n - n.min()) / (n.max() - n.min())
        base += amp * n
    return np.clip(base, 0, 1)


def synthetic(kind: str, h: int = 384, w: int = 512, seed: int = 3):
    """first, second, true vectors at first's pixels: second(x + v(x)) = first(x)."""
    first = texture(h, w, seed)
    cx, cy = w / 2, h / 2
    if kind == "translation":
        M = np.array([[1, 0, 2.37], [0, 1, -1.61]], np.float64)
    elif kind == "rotation":
        M = cv2.getRotationMatrix2D((cx, cy), 3.0, 1.0)
    else:  # zoom
        M = cv2.getRotationMatrix2D((cx, cy), 0.0, 1.04)
    second = cv2.warpAffine(first, M, (w, h), flags=cv2.INTER_CUBIC, borderMode=cv2.BORDER_REFLECT)
    ys, xs = np.mgrid[0:h, 0:w].astype(np.float64)
    tx = M[0, 0] * xs + M[0, 1] * ys + M[0, 2]
    ty = M[1, 0] * xs + M[1, 1] * ys + M[1, 2]
    gt = np.dstack([tx - xs, ty - ys]).astype(np.float32)
    valid = (tx >= 2) & (tx <= w - 3) & (ty >= 2) & (ty <= h - 3)
    return first, second, gt, valid


def demo_scene(h: int = 270, w: int = 480):
    from graphcore.demo.scene import Scene
    from operators.io.transfer import encode

    scene = Scene(w, h, motion=2.0)
    a, b = scene.render(10)["comp"], scene.render(11)["comp"]
    vec = scene.vectors(10, 11)
    gt = np.dstack([vec.channel("fwd.x"), vec.channel("fwd.y")]).astype(np.float32)
    valid = vec.channel("occ") < 0.5
    enc = lambda img: np.clip(encode("srgb", np.clip(img.select(("R", "G", "B")).pixels, 0, 1)), 0, 1)  # noqa: E731
    return enc(a).astype(np.float32), enc(b).astype(np.float32), gt, valid


# -- measuring ---------------------------------------------------------------------------------------
def errors(flow: np.ndarray, gt: np.ndarray, valid: np.ndarray) -> tuple[float, float, float]:
    ep = np.sqrt(((flow - gt) ** 2).sum(-1))[valid]
    return float(ep.mean()), float((ep > 1).mean() * 100), float((ep > 3).mean() * 100)


def timed(fn: Flow, a: np.ndarray, b: np.ndarray, repeat: int = 1) -> tuple[np.ndarray, float]:
    best = np.inf
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn(a, b)
        fn(b, a)  # two-way, as flow-estimate computes
        best = min(best, time.perf_counter() - t0)
    return out, best


def machine() -> str:
    model = "?"
    try:
        for line in open("/proc/cpuinfo"):
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    import skimage

    return (f"{os.cpu_count()} cores, {model}; Python {platform.python_version()}, numpy {np.__version__}, "
            f"OpenCV {cv2.__version__}, scikit-image {skimage.__version__}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="skip 2K timing, TV-L1 and the demo scene")
    args = ap.parse_args(argv)

    methods: dict[str, Flow] = {"DIS medium": dis_medium}
    for q in ("draft", "standard", "high"):
        methods[f"midframe {q}"] = ours(q)
    if not args.quick:
        methods["TV-L1 (scikit-image)"] = tvl1

    datasets = {"Motorcycle (Middlebury 2014, 1/4)": motorcycle()}
    for kind in ("translation", "rotation", "zoom"):
        datasets[f"synthetic {kind}"] = synthetic(kind)
    if not args.quick:
        datasets["demo scene (paper fair)"] = demo_scene()

    print(f"machine: {machine()}")
    print("accuracy: mean endpoint error px / bad-1 % / bad-3 %; time: seconds for both directions "
          "(ratio to DIS medium in the same run)")
    for dname, (a, b, gt, valid) in datasets.items():
        print(f"\n{dname}  {a.shape[1]}x{a.shape[0]}")
        base = None
        for mname, fn in methods.items():
            flow, secs = timed(fn, a, b)
            epe, b1, b3 = errors(flow, gt, valid)
            base = secs if mname == "DIS medium" else base
            print(f"  {mname:<22} EPE {epe:6.2f}  bad-1 {b1:5.1f}  bad-3 {b3:5.1f}   {secs:7.2f} s  "
                  f"({secs / base:5.1f}x)")
    if not args.quick:
        from skimage.data import stereo_motorcycle

        left, right, _ = stereo_motorcycle()
        a = cv2.resize(left, (2048, 1080), interpolation=cv2.INTER_CUBIC).astype(np.float32) / 255
        b = cv2.resize(right, (2048, 1080), interpolation=cv2.INTER_CUBIC).astype(np.float32) / 255
        print("\n2048x1080 (Motorcycle resized), time for both directions")
        _, base = timed(dis_medium, a, b, repeat=2)
        print(f"  {'DIS medium':<22} {base:7.2f} s  (1.0x)")
        for mname, fn in methods.items():
            if mname.startswith("midframe"):
                _, secs = timed(fn, a, b)
                print(f"  {mname:<22} {secs:7.2f} s  ({secs / base:5.1f}x)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
