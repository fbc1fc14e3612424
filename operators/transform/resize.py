"""``resize``: change an image's resolution (resample, fit into a box, or cut/extend the canvas).

Resampling uses OpenCV's ``cv2.resize``, whose geometry aligns pixel centres: output pixel x
samples the input at ``(x + 0.5) / sx - 0.5`` with ``sx = new_width / old_width``.

Vector channels (``fwd.x fwd.y bwd.x bwd.y``, also under a parent layer such as
``left.fwd.x``) are displacements in pixels, so they are multiplied by the horizontal (``.x``)
or vertical (``.y``) scale factor ``new / old`` of the resampling.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from typing import Literal

import cv2
import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

from graphcore.errors import OpError
from graphcore.image import ALPHA, COLOR, LIMIT_VARIABLE, Image, max_image_bytes
from graphcore.registry.operator import OpContext, Operator, Port

__all__ = ["RESIZE", "ResizeParams", "resize", "FILTERS", "MAX_SIZE", "vector_axis"]

#: Largest output width or height accepted (guards against a typo allocating terabytes).
MAX_SIZE = 65536

#: Filter name -> OpenCV interpolation flag.
FILTERS: dict[str, int] = {
    "nearest": cv2.INTER_NEAREST_EXACT,  # centre-aligned nearest (plain INTER_NEAREST is offset)
    "bilinear": cv2.INTER_LINEAR,
    "bicubic": cv2.INTER_CUBIC,
    "lanczos": cv2.INTER_LANCZOS4,
    "area": cv2.INTER_AREA,
}

#: Horizontal fraction of the free (or excess) space put left of the picture, and vertical above it.
ANCHORS: dict[str, tuple[float, float]] = {
    "center": (0.5, 0.5), "top-left": (0.0, 0.0), "top": (0.5, 0.0), "top-right": (1.0, 0.0),
    "left": (0.0, 0.5), "right": (1.0, 0.5), "bottom-left": (0.0, 1.0), "bottom": (0.5, 1.0),
    "bottom-right": (1.0, 1.0),
}

_VECTOR = re.compile(r"(?:^|.*\.)(?:fwd|bwd)\.([xy])$")
_COLOUR = (*COLOR, ALPHA)
_CV_MAX_CHANNELS = 4  # INTER_AREA refuses more than 4 channels (opencv/opencv#11138)


def vector_axis(name: str) -> str | None:
    """``'x'`` or ``'y'`` for a vector channel (layer ``fwd``/``bwd``), else None."""
    m = _VECTOR.match(name)
    return m.group(1) if m else None


class ResizeParams(BaseModel):
    """Params of ``resize``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    width: int | None = Field(None, gt=0, le=MAX_SIZE,
                              description="Target width in pixels (with 'height'; not with 'scale').")
    height: int | None = Field(None, gt=0, le=MAX_SIZE,
                               description="Target height in pixels (with 'width'; not with 'scale').")
    scale: float | None = Field(
        None, gt=0.0, allow_inf_nan=False,
        description=("Resize by this factor instead of to width x height: the new size is "
                     "round(width * scale) x round(height * scale), at least 1 pixel. Only with "
                     "fit 'stretch'."),
    )
    fit: Literal["stretch", "fit", "fill", "canvas"] = Field(
        "stretch",
        description=("How the picture meets the width x height box. 'stretch': resample to exactly "
                     "the box (aspect may change). 'fit': keep aspect, resample to the largest size "
                     "inside the box, pad the rest with zeros. 'fill': keep aspect, resample to the "
                     "smallest size covering the box, crop the rest. 'canvas': no resampling; cut "
                     "(crop) or extend with zeros (pad) to the box, each axis on its own."),
    )
    filter: Literal["nearest", "bilinear", "bicubic", "lanczos", "area"] = Field(
        "bilinear",
        description=("Resampling filter for colour (R, G, B, A). 'area' averages the input pixels "
                     "each output pixel covers and is the one for shrinking; 'bicubic' and "
                     "'lanczos' are sharper but ring (overshoot) at edges."),
    )
    data_filter: Literal["nearest", "bilinear", "area"] = Field(
        "bilinear",
        description=("Resampling filter for every channel other than R, G, B, A (vectors, conf, occ, "
                     "other layers). No ringing filters here: overshoot would invent motion or "
                     "confidence. 'nearest' keeps only values that exist in the input."),
    )
    anchor: Literal["center", "top-left", "top", "top-right", "left", "right", "bottom-left",
                    "bottom", "bottom-right"] = Field(
        "center",
        description=("Where the picture sits in the box for fit, fill and canvas: padding or "
                     "cropping happens on the other sides. When the spare pixels are odd in "
                     "number with 'center', the picture sits half a pixel up/left."),
    )

    @model_validator(mode="after")
    def _check(self) -> "ResizeParams":
        has_box = self.width is not None or self.height is not None
        if self.scale is not None:
            if has_box:
                raise ValueError("give either 'scale' or 'width' and 'height', not both")
            if self.fit != "stretch":
                raise ValueError(f"fit '{self.fit}' needs a box: give 'width' and 'height' "
                                 "instead of 'scale'")
        elif self.width is None or self.height is None:
            raise ValueError("give both 'width' and 'height' (the target box), or 'scale'")
        return self


def _target(params: ResizeParams, image: Image) -> tuple[tuple[int, int], tuple[int, int]]:
    """(box, scaled): the output size and the size the picture is resampled to, both (w, h)."""
    w, h = image.size
    if params.scale is not None:
        box = (max(1, math.floor(w * params.scale + 0.5)), max(1, math.floor(h * params.scale + 0.5)))
        if max(box) > MAX_SIZE:
            raise OpError(f"scale {params.scale} makes a {w}x{h} image {box[0]}x{box[1]}, larger "
                          f"than the {MAX_SIZE} pixel limit", field="scale",
                          fix="use a smaller scale")
        return box, box
    box = (int(params.width), int(params.height))  # type: ignore[arg-type]
    if params.fit == "stretch":
        return box, box
    if params.fit == "canvas":
        return box, (w, h)
    pick = min if params.fit == "fit" else max
    s = pick(box[0] / w, box[1] / h)
    scaled = (max(1, math.floor(w * s + 0.5)), max(1, math.floor(h * s + 0.5)))
    return box, scaled


def _cv_resize(planes: np.ndarray, size: tuple[int, int], flag: int) -> np.ndarray:
    """``cv2.resize`` of an (H, W, k) stack to ``size`` (w, h), in groups of at most 4 planes."""
    parts = []
    for start in range(0, planes.shape[2], _CV_MAX_CHANNELS):
        chunk = np.ascontiguousarray(planes[:, :, start:start + _CV_MAX_CHANNELS])
        out = cv2.resize(chunk, size, interpolation=flag)
        parts.append(out.reshape(size[1], size[0], chunk.shape[2]))
    return parts[0] if len(parts) == 1 else np.concatenate(parts, axis=2)


def _resample(image: Image, size: tuple[int, int], params: ResizeParams) -> np.ndarray:
    """Pixels of ``image`` resampled to ``size`` (w, h); vectors rescaled, alpha clipped to 0..1."""
    if size == image.size:
        return image.pixels
    out = np.empty((size[1], size[0], len(image.channels)), dtype=np.float32)
    colour = [i for i, c in enumerate(image.channels) if c in _COLOUR]
    data = [i for i, c in enumerate(image.channels) if c not in _COLOUR]
    for idx, name in ((colour, params.filter), (data, params.data_filter)):
        if idx:
            out[:, :, idx] = _cv_resize(image.pixels[:, :, idx], size, FILTERS[name])
    sx, sy = size[0] / image.width, size[1] / image.height
    for i, c in enumerate(image.channels):
        axis = vector_axis(c)
        if axis is not None:
            out[:, :, i] *= np.float32(sx if axis == "x" else sy)
    if ALPHA in image.channels:
        a = image.index(ALPHA)
        np.clip(out[:, :, a], 0.0, 1.0, out=out[:, :, a])
    return out


def _place(pixels: np.ndarray, box: tuple[int, int], anchor: str) -> np.ndarray:
    """Put (h, w, C) ``pixels`` in a zero (box_h, box_w, C) canvas at ``anchor``; crop the excess."""
    h, w = pixels.shape[:2]
    if (w, h) == box:
        return pixels
    ax, ay = ANCHORS[anchor]
    ox = math.floor((box[0] - w) * ax)  # canvas x of the picture's left column (may be < 0)
    oy = math.floor((box[1] - h) * ay)
    out = np.zeros((box[1], box[0], pixels.shape[2]), dtype=np.float32)
    x0, x1 = max(0, ox), min(box[0], ox + w)
    y0, y1 = max(0, oy), min(box[1], oy + h)
    out[y0:y1, x0:x1] = pixels[y0 - oy:y1 - oy, x0 - ox:x1 - ox]
    return out


def resize(params: ResizeParams, inputs: Mapping[str, Image | None], ctx: OpContext) -> Image:
    """Resize ``image`` to a new resolution.

    Parameters
    ----------
    params : ResizeParams
    inputs : mapping
        ``"image"`` : Image, shape (H, W, C), any channels.
    ctx : OpContext

    Returns
    -------
    Image, shape (H', W', C)
        Same channels and metadata. ``R G B A`` are resampled with ``params.filter``, every
        other channel with ``params.data_filter``. Vector channels (layer ``fwd``/``bwd``,
        ``.x``/``.y``) are multiplied by the resampling's ``new_width / old_width`` (``.x``) or
        ``new_height / old_height`` (``.y``); cropping and padding never change them.
        Padding is zero in every channel (transparent black, no motion, no confidence).
        ``A`` is clipped to 0..1 after resampling; colour is not clipped (linear light can be
        above 1, and 'bicubic'/'lanczos' can ring below 0 next to hard edges).
        Premultiplied colour resamples correctly as it is. A size that does not change passes
        the pixels through unchanged.

    Raises
    ------
    OpError
        ``field='image'`` when unconnected; ``field='scale'`` when the result would exceed
        ``MAX_SIZE`` pixels on a side; ``field='scale'`` or ``'width'`` when the result would need
        more memory than :func:`graphcore.image.max_image_bytes` allows (refused before allocating).

    Notes
    -----
    'area' when enlarging is not an area average (OpenCV falls back to a nearest/bilinear-like
    rule); a warning says so. OpenCV's 'area' accepts at most 4 channels per call, so planes
    are resampled in groups of 4 (opencv/opencv#11138).

    References
    ----------
    .. [1] OpenCV, ``cv::resize`` and ``InterpolationFlags`` (imgproc module documentation).
    """
    image = inputs.get("image")
    if image is None:
        raise OpError("input 'image' is not connected", field="image", fix="connect an image")
    box, scaled = _target(params, image)
    need = (box[0] * box[1] + scaled[0] * scaled[1]) * len(image.channels) * 4
    if need > max_image_bytes():
        field = "scale" if params.scale is not None else "width"
        raise OpError(f"resizing {image.width}x{image.height} to {box[0]}x{box[1]} with "
                      f"{len(image.channels)} channel(s) needs {need / (1 << 30):.1f} GiB, more than the "
                      f"{max_image_bytes() / (1 << 30):.1f} GiB midframe allows for one image", field=field,
                      fix=f"check the size; if it is right, set the environment variable {LIMIT_VARIABLE} to "
                          "a larger size in MiB (and have that much memory per job)")
    enlarging = scaled[0] > image.width or scaled[1] > image.height
    if enlarging and ("area" in {params.filter, params.data_filter}):
        ctx.warn(f"filter 'area' is for shrinking; enlarging {image.width}x{image.height} to "
                 f"{scaled[0]}x{scaled[1]} with it is not an area average: pick 'bilinear', "
                 "'bicubic' or 'lanczos' (or 'bilinear'/'nearest' as data_filter)")
    pixels = _place(_resample(image, scaled, params), box, params.anchor)
    if pixels is image.pixels:
        return image
    return Image(pixels, image.channels, image.meta)


DOC = """\
Change an image's resolution.

Give width and height (the box) with a fit, or a scale factor:
  stretch  resample to exactly width x height (aspect may change); with 'scale' the size is
           round(w*scale) x round(h*scale)
  fit      keep aspect; resample to the largest size inside the box; pad the rest with zeros
  fill     keep aspect; resample to the smallest size covering the box; crop the rest
  canvas   no resampling: cut (crop) or extend with zeros (pad) to the box, about the anchor
anchor places the picture in the box for fit, fill and canvas (default center).

filter (R G B A): nearest, bilinear (default), bicubic, lanczos, area (for shrinking: the mean
of the covered input pixels). data_filter (every other channel: vectors, conf, occ):
nearest, bilinear (default), area; no ringing filters, so no invented motion.

Vectors (fwd.x fwd.y bwd.x bwd.y) are in pixels and are multiplied by new/old width (.x) or
height (.y). A is clipped to 0..1; colour is not clipped (bicubic/lanczos can ring below 0 at
hard edges). Padding is zero in every channel. Resampling is OpenCV's cv2.resize (pixel
centres aligned).
"""

RESIZE = Operator(
    name="resize",
    version=1,
    summary="Resample, fit/fill into a box, or crop/pad the canvas; vectors rescaled in pixels",
    params=ResizeParams,
    compute=resize,
    inputs=(Port("image", "the image to resize (any channels)"),),
    doc=DOC,
    outputs="the same channels at the new size; vector channels scaled to the new pixel grid",
)
