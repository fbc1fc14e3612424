"""What the demo's parts share: rendering a graph through the engine, writing files, measuring.

Every render goes through :func:`graphcore.execute.render.render`, as ``midframe run`` would, so
the demo exercises the real engine. Errors are measured on sRGB-encoded values (IEC 61966-2-1,
not clipped) with PSNR at peak 1, the convention of the frame-interpolation protocol of Baker et
al. (IJCV 2011), and as mean absolute error in linear light.
"""

from __future__ import annotations

import json
import math
import sys
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from graphcore.image import Image
from graphcore.leave_one_out import psnr as srgb_psnr  # PSNR on encoded values, peak 1

__all__ = ["say", "write_exr_atomic", "write_json_atomic", "render_graph", "FailedFrames", "vectors_graph",
           "read_rgb", "srgb", "srgb_psnr", "errors", "pool_errors", "flicker", "central"]


def say(message: str) -> None:
    """A progress line on standard error, in the command line's style."""
    print(f"midframe: {message}", file=sys.stderr, flush=True)


def write_exr_atomic(path: Path | str, image: Image, pixel_type: str, attributes: Mapping[str, Any]) -> None:
    """Write ``image`` as a zip-compressed EXR, atomically (a temporary file renamed into place)."""
    from operators.io.exr import write_exr
    from operators.io.write import atomic_write

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write(str(path), lambda tmp: write_exr(tmp, image, pixel_types=pixel_type, compression="zip",
                                                  attributes=dict(attributes)))


def write_json_atomic(path: Path | str, doc: Any) -> None:
    from operators.io.write import atomic_write

    atomic_write(str(path), lambda tmp: Path(tmp).write_text(json.dumps(doc, indent=2) + "\n"))


class FailedFrames(Exception):
    """A demo render had frames that failed; ``exit_code`` is the render's (1 or 2)."""

    def __init__(self, graph: str, exit_code: int) -> None:
        super().__init__(graph)
        self.graph, self.exit_code = graph, exit_code


def render_graph(graph: str, sets: Mapping[str, str], jobs: int, frames: tuple[int, int] | None = None,
                 progress: bool = True, cache: str | None = None) -> None:
    """Render ``graph`` with ``--set`` values ``sets`` (and ``--frames first-last``, ``--cache``)
    through the engine.

    Raises
    ------
    FailedFrames
        Some frames failed; each is reported on standard error first.
    """
    from graphcore.cli.progress import Progress
    from graphcore.execute.render import render
    from graphcore.registry import FrameRange

    def loaded(warnings: list) -> None:
        for w in warnings:
            say(f"warning: {w.describe()}")

    outcome = render(graph, sets=[f"{k}={v}" for k, v in sets.items()], jobs=jobs, on_loaded=loaded,
                     frames=FrameRange(*frames) if frames else None, cache_dir=cache,
                     on_start=(lambda total: Progress(total)) if progress else None)
    for w in outcome.render_warnings:
        say(f"warning: {w}")
    failed = outcome.report.failed
    if failed:
        for r in failed:
            print(f"midframe: error: {graph}: frame {r.frame} node {r.node_id}: {r.message}", file=sys.stderr)
        raise FailedFrames(graph, outcome.report.exit_code)


def vectors_graph(axis: str, max_magnitude: float) -> dict[str, Any]:
    """A graph that pictures vectors for QC: read, ``flow-estimate`` and ``vector-smooth`` (the
    nodes and defaults of ``retime.json`` or ``viewmorph.json``), ``vector-color``, PNG.

    ``axis='frame'``: output frame k pictures the vectors from frame k to k + 1 of ``src``.
    ``axis='view'``: ``src`` numbers a rig's cameras; output frame k pictures the vectors from
    camera k to camera k + 1 (a ``view-path`` with no in-betweens turns cameras into frames).
    """
    nodes: dict[str, Any] = {
        "plate": {"op": "read", "params": {"path": "${src}", "axis": axis}},
        "vectors": {"op": "flow-estimate", "params": {"axis": axis}, "inputs": {"image": "plate"}},
        "smooth": {"op": "vector-smooth", "params": {"axis": axis},
                   "inputs": {"vectors": "vectors", "image": "plate"}},
        "picture": {"op": "vector-color", "params": {"layer": "fwd", "max_magnitude": max_magnitude},
                    "inputs": {"vectors": "smooth"}},
    }
    last = "picture"
    if axis == "view":
        nodes["cams"] = {"op": "view-path", "params": {"mode": "viewmorph", "between": 0, "first_output": 1},
                         "inputs": {"image": "picture"}}
        last = "cams"
    nodes["out"] = {"op": "write", "params": {"path": "${dst}", "channels": ["R", "G", "B"], "transfer": "srgb"},
                    "inputs": {"image": last}}
    return {"schema": "midframe.graph", "version": 2,
            "doc": f"Motion vectors along {axis}s pictured with the Baker et al. (2011) colour coding "
                   f"(vector-color, {max_magnitude:g} px fully saturated), for QC. Written by midframe demo.",
            "vars": {"src": {"type": "path", "doc": "the images the vectors are estimated on"},
                     "dst": {"type": "path", "doc": "PNG pictures"}},
            "nodes": nodes}


# -- measuring --------------------------------------------------------------------------------
def read_rgb(path: str | Path) -> np.ndarray:
    """R, G, B of an EXR file, float64, shape (H, W, 3)."""
    from operators.io.exr import read_exr

    return read_exr(str(path)).select(("R", "G", "B")).pixels.astype(np.float64)


def srgb(rgb: np.ndarray) -> np.ndarray:
    """IEC 61966-2-1 sRGB encoding of linear values (not clipped)."""
    from operators.io.transfer import encode

    return encode("srgb", np.asarray(rgb, dtype=np.float64))


def central(shape: Sequence[int], fraction: float) -> tuple[slice, slice]:
    """The central ``fraction`` of an image's rows and columns."""
    h, w = shape[0], shape[1]
    dy, dx = round(h * (1 - fraction) / 2), round(w * (1 - fraction) / 2)
    return slice(dy, h - dy), slice(dx, w - dx)


def errors(got: np.ndarray, truth: np.ndarray, region: tuple[slice, slice] | None = None) -> dict[str, float]:
    """``psnr_srgb_db``, ``mse_srgb`` and ``mean_abs_linear`` of linear R, G, B against the truth,
    over ``region`` (default: every pixel)."""
    if region is not None:
        got, truth = got[region], truth[region]
    ea, eb = srgb(got), srgb(truth)
    mse = float(np.mean((ea - eb) ** 2))
    return {"psnr_srgb_db": math.inf if mse == 0 else 10.0 * math.log10(1.0 / mse), "mse_srgb": mse,
            "mean_abs_linear": float(np.mean(np.abs(np.asarray(got, np.float64) - truth)))}


def pool_errors(rows: Iterable[Mapping[str, float]]) -> dict[str, float]:
    """Pooled PSNR (from the mean MSE), worst-frame PSNR and mean of ``mean_abs_linear``."""
    rows = list(rows)
    mse = float(np.mean([r["mse_srgb"] for r in rows]))
    return {"pooled_psnr_srgb_db": math.inf if mse == 0 else 10.0 * math.log10(1.0 / mse),
            "min_psnr_srgb_db": min(r["psnr_srgb_db"] for r in rows),
            "mean_abs_linear": float(np.mean([r["mean_abs_linear"] for r in rows]))}


def flicker(frames: Sequence[np.ndarray], fraction: float = 0.6) -> float:
    """Mean over neighbouring frames and channels of ``|log mean(k + 1) - log mean(k)|``, each
    mean over the central ``fraction`` of the frame (our own measure: how much the overall colour
    jumps from one frame to the next)."""
    region = central(frames[0].shape, fraction)
    means = np.array([f[region].reshape(-1, 3).mean(axis=0) for f in frames])
    return float(np.mean(np.abs(np.diff(np.log(np.maximum(means, 1e-12)), axis=0))))
