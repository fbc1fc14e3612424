"""``vector-color``: motion vectors pictured with the flow colour coding of Baker et al. (2011).

Direction is hue and length is saturation: zero motion is white, a vector of the reference length
(``max_magnitude``) is the fully saturated colour of its direction, longer ones are darkened to
75 %. Rightward is red, downward yellow, leftward cyan-blue, upward violet. The colour wheel is
the one published with the Middlebury optical-flow database: 55 hues in six ramps
(red-yellow 15, yellow-green 6, green-cyan 4, cyan-blue 11, blue-magenta 13, magenta-red 6).
A legend (the wheel itself, with the reference length written beside it) can be drawn in a corner.

The coding gives display colours (sRGB code values); the output holds them decoded to linear light
(IEC 61966-2-1), so writing it to PNG with the default sRGB transfer reproduces the codes exactly.

References
----------
Baker, S., Scharstein, D., Lewis, J.P., Roth, S., Black, M.J., Szeliski, R., "A Database and
Evaluation Methodology for Optical Flow", IJCV 92(1), 2011, doi:10.1007/s11263-010-0390-2.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry import OpContext, Operator, Port

__all__ = ["VECTOR_COLOR", "colorwheel", "flow_to_codes", "legend"]

_RAMPS = (15, 6, 4, 11, 13, 6)  # RY, YG, GC, CB, BM, MR


def colorwheel() -> np.ndarray:
    """The 55-entry wheel, (55, 3) uint8-valued float array of code values 0..255."""
    ry, yg, gc, cb, bm, mr = _RAMPS
    wheel = np.zeros((sum(_RAMPS), 3), np.float64)
    col = 0
    i = np.arange(ry)
    wheel[col:col + ry, 0] = 255
    wheel[col:col + ry, 1] = np.floor(255 * i / ry)
    col += ry
    i = np.arange(yg)
    wheel[col:col + yg, 0] = 255 - np.floor(255 * i / yg)
    wheel[col:col + yg, 1] = 255
    col += yg
    i = np.arange(gc)
    wheel[col:col + gc, 1] = 255
    wheel[col:col + gc, 2] = np.floor(255 * i / gc)
    col += gc
    i = np.arange(cb)
    wheel[col:col + cb, 1] = 255 - np.floor(255 * i / cb)
    wheel[col:col + cb, 2] = 255
    col += cb
    i = np.arange(bm)
    wheel[col:col + bm, 2] = 255
    wheel[col:col + bm, 0] = np.floor(255 * i / bm)
    col += bm
    i = np.arange(mr)
    wheel[col:col + mr, 2] = 255 - np.floor(255 * i / mr)
    wheel[col:col + mr, 0] = 255
    return wheel


def flow_to_codes(u: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Colour-code normalised vectors (length 1 = fully saturated). Returns (H, W, 3) uint8 codes.

    Parameters
    ----------
    u, v : ndarray, shape (H, W)
        Vector components already divided by the reference length; x right, y down.
    """
    wheel = colorwheel()
    n = wheel.shape[0]
    u = np.nan_to_num(np.asarray(u, np.float64))
    v = np.nan_to_num(np.asarray(v, np.float64))
    rad = np.sqrt(u * u + v * v)
    a = np.arctan2(-v, -u) / np.pi
    fk = (a + 1) / 2 * (n - 1)
    k0 = np.floor(fk).astype(np.int64)
    k1 = (k0 + 1) % n
    f = (fk - k0)[..., None]
    col = (1 - f) * wheel[k0] / 255 + f * wheel[k1] / 255
    inside = rad <= 1
    col = np.where(inside[..., None], 1 - rad[..., None] * (1 - col), col * 0.75)
    return np.floor(255 * col).astype(np.uint8)


def legend(size: int) -> np.ndarray:
    """A (size, size, 3) uint8 picture of the wheel: each pixel coloured by its offset from the centre
    (the rim is the reference length), outside the disc black."""
    r = (size - 1) / 2
    y, x = np.mgrid[0:size, 0:size].astype(np.float64)
    u, v = (x - r) / r, (y - r) / r
    codes = flow_to_codes(u, v)
    codes[(u * u + v * v) > 1.0] = 0
    return codes


class VectorColorParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    layer: str = Field("fwd", min_length=1, description="Vector layer to picture: its '<layer>.x' and "
                                                        "'<layer>.y' channels (e.g. 'fwd', 'bwd').")
    max_magnitude: float | None = Field(
        None, gt=0, description="Reference length in pixels (fully saturated colour); default: the "
                                "longest finite vector of this image. Fix it for a whole sequence so "
                                "colours are comparable between frames.")
    show_legend: bool = Field(True, description="Draw the colour wheel and the reference length in the "
                                                "top-left corner.")


def _compute(params: VectorColorParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    import cv2

    from operators.io.transfer import decode

    img: Image = inputs["vectors"]
    cx, cy = f"{params.layer}.x", f"{params.layer}.y"
    if not img.has(cx, cy):
        layers = sorted({c.rsplit(".", 1)[0] for c in img.channels if c.endswith((".x", ".y"))})
        raise OpError(f"no channels {cx} and {cy} (the image has {', '.join(img.channels)})", field="layer",
                      fix=(f"use one of the vector layers: {', '.join(layers)}" if layers else
                           "feed this node vectors, e.g. from `flow-estimate`"))
    u = np.nan_to_num(img.channel(cx).astype(np.float64))
    v = np.nan_to_num(img.channel(cy).astype(np.float64))
    ref = params.max_magnitude
    if ref is None:
        ref = float(np.sqrt(u * u + v * v).max()) if u.size else 0.0
        ref = ref if ref > 0 else 1.0
    codes = flow_to_codes(u / ref, v / ref)
    if params.show_legend:
        size = max(8, min(img.height, img.width) // 5)
        if size + 4 <= min(img.height, img.width):
            pad = 2
            disc = legend(size)
            mask = disc.any(axis=2)
            patch = codes[pad:pad + size, pad:pad + size]
            patch[mask] = disc[mask]
            scale = size / 120
            if scale >= 0.25:
                text = f"{ref:.3g} px"
                org = (pad, min(img.height - 2, pad + size + int(14 * scale) + 2))
                cv2.putText(codes, text, org, cv2.FONT_HERSHEY_SIMPLEX, 0.5 * scale, (0, 0, 0), 3, cv2.LINE_AA)
                cv2.putText(codes, text, org, cv2.FONT_HERSHEY_SIMPLEX, 0.5 * scale, (255, 255, 255), 1,
                            cv2.LINE_AA)
    rgb = decode("srgb", codes.astype(np.float32) / 255.0).astype(np.float32)
    alpha = np.ones(rgb.shape[:2] + (1,), np.float32)
    return Image(np.concatenate([rgb, alpha], axis=2), ("R", "G", "B", "A"),
                 {"vectors.layer": params.layer, "vectors.max_magnitude": ref})


VECTOR_COLOR = Operator(
    name="vector-color",
    version=1,
    summary="Picture vectors with the Baker et al. (2011) flow colour coding, with a legend, for QC",
    params=VectorColorParams,
    compute=_compute,
    inputs=(Port("vectors", "an image with <layer>.x and <layer>.y channels, e.g. from flow-estimate"),),
    doc=__doc__ or "",
    outputs="R G B (linear light; sRGB codes of the colour coding once written to PNG) and A = 1",
)
