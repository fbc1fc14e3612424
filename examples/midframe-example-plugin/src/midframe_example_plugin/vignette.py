"""``example-vignette``: darken an image towards its corners.

Per pixel ``(i, j)`` of an H x W image, with pixel centres measured from the image centre and
scaled so that the corner pixels' centres lie at radius 1::

    dx = (j - (W - 1) / 2) / ((W - 1) / 2)      (0 when W == 1)
    dy = (i - (H - 1) / 2) / ((H - 1) / 2)      (0 when H == 1)
    r  = sqrt(dx**2 + dy**2) / sqrt(2)
    factor = 1 - strength * r ** falloff

R, G and B are multiplied by ``factor``; every other channel (A, vectors, ``conf``) passes
through unchanged. Scaling premultiplied colour and keeping alpha is the same as scaling the
unpremultiplied colour, so no unpremultiply is needed.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from graphcore.errors import OpError
from graphcore.image import COLOR, Image
from graphcore.registry.operator import OpContext, Operator, Port

__all__ = ["VIGNETTE", "VignetteParams", "vignette_factor", "compute"]


class VignetteParams(BaseModel):
    """Params of ``example-vignette``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    strength: float = Field(
        0.3, ge=0.0, le=1.0,
        description=("How much the corners darken: 0 leaves the image unchanged, 1 makes the "
                     "corner pixels black. The centre is never changed."),
    )
    falloff: float = Field(
        2.0, gt=0.0, le=16.0,
        description=("Exponent of the radius in the darkening curve: 1 darkens linearly from the "
                     "centre, larger values keep the middle clear and darken only near the corners."),
    )


def vignette_factor(height: int, width: int, strength: float, falloff: float) -> np.ndarray:
    """The multiplier per pixel.

    Parameters
    ----------
    height, width : int
        Image size in pixels.
    strength, falloff : float
        As in ``VignetteParams``.

    Returns
    -------
    ndarray, shape (height, width), float32
        1 at the centre, ``1 - strength`` at the corner pixels.
    """
    def axis(n: int) -> np.ndarray:
        if n == 1:
            return np.zeros(1)
        half = (n - 1) / 2.0
        return (np.arange(n) - half) / half

    dy, dx = axis(height)[:, None], axis(width)[None, :]
    r = np.sqrt(dx * dx + dy * dy) / np.sqrt(2.0)
    return (1.0 - strength * r ** falloff).astype(np.float32)


def compute(params: VignetteParams, inputs: Mapping[str, Image], ctx: OpContext) -> Image:
    """Apply the vignette to port ``image``; see the module docstring for the formula."""
    img = inputs["image"]
    colour = [img.index(c) for c in COLOR if c in img.channels]
    if not colour:
        raise OpError(f"input 'image' has no colour channels (it has {', '.join(img.channels)})",
                      field="inputs.image",
                      fix="connect an image with R, G and B channels to port 'image'")
    factor = vignette_factor(img.height, img.width, params.strength, params.falloff)
    out = np.array(img.pixels, dtype=np.float32, copy=True)
    out[:, :, colour] *= factor[:, :, None]
    return img.replace(pixels=out)


VIGNETTE = Operator(
    name="example-vignette",
    version=1,
    summary="Darken an image towards its corners (example third-party operator).",
    params=VignetteParams,
    compute=compute,
    inputs=(Port("image", doc="Any image with R, G, B; other channels pass through."),),
    doc=__doc__ or "",
    outputs="The input's channels; R, G, B scaled by the vignette factor.",
)
