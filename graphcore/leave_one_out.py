"""The leave-one-out interpolation protocol, shared by bench/inbetween.py and the tests.

Baker, S., Scharstein, D., Lewis, J.P., Roth, S., Black, M.J., Szeliski, R., "A Database and
Evaluation Methodology for Optical Flow", IJCV 92(1), 2011 (frame interpolation): drop every other
frame, rebuild each dropped frame from its two neighbours, compare with the real one by PSNR on
sRGB-encoded values (peak 1). Frames here are sRGB-encoded float (H, W, 3) arrays in 0..1.

- ``rebuild_with_retime``: ours, the real pipeline: the kept frames written as linear EXR,
  ``graphs/retime.json`` rendered by the engine at slowdown 2, the in-betweens read back, encoded.
- ``two_way_dis_warp``: the plain baseline: OpenCV DIS (Kroeger et al., ECCV 2016, medium preset)
  both ways, each neighbour sampled at x - F(x)/2 with the vectors taken at the in-between's own
  pixel (no splatting, no occlusion reasoning), averaged.
"""

from __future__ import annotations

import os
from pathlib import Path

import cv2
import numpy as np

__all__ = ["psnr", "two_way_dis_warp", "rebuild_with_retime", "RETIME_TEMPLATE", "FIRST"]

RETIME_TEMPLATE = Path(__file__).resolve().parents[1] / "graphs" / "retime.json"
FIRST = 1001  # film and episodic numbering (common practice)
_LUMA = np.array([0.2126, 0.7152, 0.0722])  # ITU-R BT.709 luma coefficients


def psnr(a: np.ndarray, b: np.ndarray) -> float:
    """PSNR in dB of values in 0..1 (peak 1); inf for identical arrays."""
    mse = float(np.mean((np.asarray(a, np.float64) - np.asarray(b, np.float64)) ** 2))
    return float("inf") if mse == 0 else 10.0 * float(np.log10(1.0 / mse))


def _grey8(x: np.ndarray) -> np.ndarray:
    return np.clip(x[..., :3] @ _LUMA * 255 + 0.5, 0, 255).astype(np.uint8)


def two_way_dis_warp(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The in-between at t = 1/2 of ``a`` and ``b`` (any channels; luma from the first three)."""
    dis = cv2.DISOpticalFlow_create(cv2.DISOPTICAL_FLOW_PRESET_MEDIUM)
    fab = dis.calc(_grey8(a), _grey8(b), None)
    fba = dis.calc(_grey8(b), _grey8(a), None)
    h, w = a.shape[:2]
    xs, ys = np.meshgrid(np.arange(w, dtype=np.float32), np.arange(h, dtype=np.float32))
    wa = cv2.remap(np.asarray(a, np.float32), xs - 0.5 * fab[..., 0], ys - 0.5 * fab[..., 1],
                   cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    wb = cv2.remap(np.asarray(b, np.float32), xs - 0.5 * fba[..., 0], ys - 0.5 * fba[..., 1],
                   cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    return 0.5 * (wa + wb)


def rebuild_with_retime(kept: list[np.ndarray], workdir: str | os.PathLike[str], *,
                        defaults: str | os.PathLike[str] | None = None, pixel_type: str = "float",
                        timings: dict[int, float] | None = None) -> list[np.ndarray]:
    """Rebuild the in-between of each neighbouring pair of ``kept`` through ``graphs/retime.json``.

    Parameters
    ----------
    kept : list of ndarray, shape (H, W, 3), sRGB-encoded in 0..1
    workdir : folder for the source and output EXRs
    defaults : a show defaults file for the render (e.g. another estimator quality or engine)
    pixel_type : how the source plates are stored ('float' or 'half'); the template keeps it
    timings : if given, filled with the render's seconds per output frame number

    Returns
    -------
    list of ndarray
        ``len(kept) - 1`` rebuilt frames, sRGB-encoded, clipped to 0..1.
    """
    from graphcore.errors import MidframeError
    from graphcore.execute.render import render
    from graphcore.image import Image
    from operators.io.exr import read_exr, write_exr
    from operators.io.transfer import decode, encode

    src, dst = Path(workdir) / "src", Path(workdir) / "dst"
    src.mkdir(parents=True, exist_ok=True)
    for i, frame in enumerate(kept):
        lin = decode("srgb", np.asarray(frame, np.float32))
        img = Image(np.dstack([lin, np.ones(lin.shape[:2], np.float32)]), ("R", "G", "B", "A"))
        write_exr(str(src / f"f.{FIRST + i:04d}.exr"), img, default_pixel_type=pixel_type)
    out = render(str(RETIME_TEMPLATE), sets=[f"src={src}/f.%04d.exr", f"dst={dst}/f.%04d.exr", "slowdown=2"],
                 defaults=defaults)
    if out.report.failed:
        raise MidframeError(f"retime render failed: {out.report.failed[0].message}")
    if timings is not None:
        timings.update({r.frame: r.seconds for r in out.report.results})
    rebuilt = []
    for i in range(len(kept) - 1):
        img = read_exr(str(dst / f"f.{FIRST + 2 * i + 1:04d}.exr"))
        rebuilt.append(np.clip(encode("srgb", img.select(("R", "G", "B")).pixels), 0, 1))
    return rebuilt
