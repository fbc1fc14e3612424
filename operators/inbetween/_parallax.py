"""Screen parallax between neighbouring synthesised views, measured from view vectors (private).

Views are numbered left to right, so ``fwd.x`` of a vector image at view ``n`` (where the content
of view ``n`` lies in view ``n + 1``, pixels, x right) is the horizontal parallax between the two
views: positive where the right-hand view sees the point further right (behind the screen plane,
positive parallax), negative in front of it. Between two views ``step`` apart (a fraction of the
camera spacing) the parallax is ``step * fwd.x``, to first order (the in-betweens travel along the
vectors linearly in the view).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from graphcore.image import Image
from operators.vectors.channels import FWD_CONF

__all__ = ["Parallax", "measure_parallax", "PERCENTILE", "MIN_CONFIDENCE"]

#: The share of pixels allowed beyond the reported parallax, in percent (the 99th percentile, so
#: a few stray vectors do not raise a warning on their own).
PERCENTILE = 99.0
#: Pixels whose forward confidence is below this are left out (occluded or doubtful vectors).
MIN_CONFIDENCE = 0.5


@dataclass(frozen=True)
class Parallax:
    """Parallax between two views, in percent of the image width.

    ``positive``: the largest behind-the-screen parallax (0 if none); ``negative``: the largest
    in-front parallax as a positive number (0 if none); ``overall`` = max of the two.
    """

    positive: float
    negative: float

    @property
    def overall(self) -> float:
        return max(self.positive, self.negative)


def measure_parallax(vectors: Image, step: float) -> Parallax:
    """Parallax between two views ``step`` camera spacings apart, from the vectors at the left one.

    Parameters
    ----------
    vectors : Image, shape (H, W, >= 2)
        A vector image along the view axis with ``fwd.x`` (pixels toward the next view, x right)
        and optionally ``fwd.conf`` (0..1); pixels with confidence below `MIN_CONFIDENCE` are
        left out (all pixels count when fewer than 1 % remain).
    step : float
        Distance between the two views in camera spacings (``1 / (between + 1)`` between adjacent
        output views of a view morph).

    Returns
    -------
    Parallax
        The `PERCENTILE`-th percentile of ``step * fwd.x`` (positive side) and of
        ``-step * fwd.x`` (negative side), clipped at 0, in percent of ``W``.
    """
    dx = np.nan_to_num(vectors.channel("fwd.x").astype(np.float64), nan=0.0, posinf=0.0, neginf=0.0)
    if vectors.has(FWD_CONF):
        keep = vectors.channel(FWD_CONF) >= MIN_CONFIDENCE
        if keep.mean() >= 0.01:
            dx = dx[keep]
    dx = np.ravel(dx) * float(step)
    scale = 100.0 / vectors.width
    pos = max(float(np.percentile(dx, PERCENTILE)), 0.0) * scale
    neg = max(float(np.percentile(-dx, PERCENTILE)), 0.0) * scale
    return Parallax(pos, neg)
