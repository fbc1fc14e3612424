"""Image pyramid, matching features and edge weights for the vector estimator.

Each level holds what the likelihood and the prior need at that scale: the feature image
the data term compares (brightness and its gradients, Brox et al. 2004's brightness plus
gradient constancy, and a soft census signature after Zabih & Woodfill 1994), and the edge-aware weights of the Markov random field prior on the
horizontal and vertical neighbour pairs.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

# Rec.709 / sRGB luma weights (ITU-R BT.709).
_LUMA = np.array([0.2126, 0.7152, 0.0722], np.float32)


@dataclass(frozen=True)
class Level:
    """One pyramid level of one image.

    Attributes
    ----------
    feat : ndarray, shape (H, W, 3 + K), float32
        Matching features: ``brightness_weight * L``, ``dL/dx``, ``dL/dy`` (L = luma), then the
        K = 4 soft census channels (``soft_census``; K = 0 when its weight is 0).
    wx : ndarray, shape (H, W - 1), float32
        Prior weight of each horizontal neighbour pair ``(y, x) ~ (y, x + 1)``, in (0, 1].
    wy : ndarray, shape (H - 1, W), float32
        Prior weight of each vertical neighbour pair ``(y, x) ~ (y + 1, x)``.
    """

    feat: np.ndarray
    wx: np.ndarray
    wy: np.ndarray

    @property
    def shape(self) -> tuple[int, int]:
        return self.feat.shape[:2]


def sanitize(img: np.ndarray) -> np.ndarray:
    """float32 (H, W, C) version of ``img`` with NaN and infinities set to 0.

    A finite float32 input comes back as a view of itself, not a copy (the estimator never
    writes into its inputs); anything else is a new array.
    """
    a = np.asarray(img, dtype=np.float32)
    if a.ndim == 2:
        a = a[:, :, None]
    with np.errstate(invalid="ignore", over="ignore"):
        if np.isfinite(np.sum(a, dtype=np.float64)):        # a sum is finite iff every value is
            return a
    return np.nan_to_num(a, nan=0.0, posinf=0.0, neginf=0.0)


def luma(img: np.ndarray) -> np.ndarray:
    """Luma plane of an (H, W, C) image: Rec.709 weights for C = 3, the channel mean otherwise."""
    if img.shape[2] == 3:
        return np.ascontiguousarray(cv2.transform(img, _LUMA[None, :]))
    return np.ascontiguousarray(img.mean(axis=2, dtype=np.float32))


def gradients(plane: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Central-difference derivatives ``(d/dx, d/dy)`` of a plane, per pixel, edge repeated."""
    gx = cv2.Sobel(plane, cv2.CV_32F, 1, 0, ksize=1, scale=0.5, borderType=cv2.BORDER_REPLICATE)
    gy = cv2.Sobel(plane, cv2.CV_32F, 0, 1, ksize=1, scale=0.5, borderType=cv2.BORDER_REPLICATE)
    return gx, gy


def edge_weights(guide: np.ndarray, sigma: float, floor: float) -> tuple[np.ndarray, np.ndarray]:
    """Edge-aware prior weights ``w = max(exp(-|dI| / sigma), floor)`` on neighbour pairs.

    ``|dI|`` is the largest absolute difference over the guide's channels between the two
    pixels of a pair, so vectors are coupled weakly across image edges (common practice of
    edge-aware MRF priors, e.g. Sun, Roth & Black 2010).
    """
    planes = [np.ascontiguousarray(guide[:, :, c]) for c in range(guide.shape[2])]
    dx = np.abs(planes[0][:, 1:] - planes[0][:, :-1])
    dy = np.abs(planes[0][1:] - planes[0][:-1])
    for pl in planes[1:]:
        np.maximum(dx, np.abs(pl[:, 1:] - pl[:, :-1]), out=dx)
        np.maximum(dy, np.abs(pl[1:] - pl[:-1]), out=dy)
    wx = np.maximum(np.exp(-dx / sigma), floor).astype(np.float32)
    wy = np.maximum(np.exp(-dy / sigma), floor).astype(np.float32)
    return wx, wy


def level_count(h: int, w: int, levels: int | None, search_range: float, reach: int,
                min_size: int = 12) -> int:
    """How many pyramid levels to build.

    Enough that ``search_range`` shrinks to the brute-force ``reach`` at the coarsest level,
    never a level whose shorter side is under ``min_size`` pixels (one level at least).
    """
    if levels is None:
        levels = 1
        while search_range / 2 ** (levels - 1) > reach:
            levels += 1
    n = 1
    while n < levels and min(h, w) / 2 ** n >= min_size:
        n += 1
    return max(1, n)


def images(img: np.ndarray, n_levels: int) -> list[np.ndarray]:
    """Gaussian pyramid of a sanitised (H, W, C) image, finest first.

    Each coarser level is ``cv2.pyrDown`` of the previous one (Gaussian 5-tap, then every
    other pixel), so level k has about ``1 / 2**k`` of the size.
    """
    out = [img]
    for _ in range(1, n_levels):
        nxt = cv2.pyrDown(out[-1])
        out.append(nxt[:, :, None] if nxt.ndim == 2 else nxt)
    return out


# Neighbours of the soft census signature: the 4 pixels 2 px left, right, above and below.
CENSUS_OFFSETS = ((2, 0), (-2, 0), (0, 2), (0, -2))


def soft_census(plane: np.ndarray, weight: float, scale: float) -> list[np.ndarray]:
    """Soft census signature ``weight * tanh((L(q) - L(p)) / scale)`` for q in ``CENSUS_OFFSETS``.

    A smooth form of the census transform of Zabih & Woodfill (ECCV 1994): each channel says
    whether a neighbour is brighter or darker than the centre, so it ignores brightness offsets
    and gains between the two images and still tells apart patches of weak texture (a
    continuous version so the refinement can linearise it).
    """
    h, w = plane.shape
    pad = cv2.copyMakeBorder(plane, 2, 2, 2, 2, cv2.BORDER_REPLICATE)
    out = []
    for dx, dy in CENSUS_OFFSETS:
        q = pad[2 + dy:2 + dy + h, 2 + dx:2 + dx + w]
        out.append((np.float32(weight) * np.tanh((q - plane) / np.float32(scale))).astype(np.float32))
    return out


def level(cur: np.ndarray, brightness_weight: float, edge_sigma: float, edge_floor: float,
          census: float = 0.0, census_scale: float = 0.03) -> Level:
    """Matching features and prior weights of one pyramid image (H, W, C).

    ``census`` and ``census_scale`` are the weight and softness of ``soft_census`` (0: none).
    """
    lum = luma(cur)
    gx, gy = gradients(lum)
    extra = soft_census(lum, census, census_scale) if census > 0 else []
    feat = cv2.merge([lum * np.float32(brightness_weight), gx, gy] + extra)
    guide = cv2.GaussianBlur(cur, (3, 3), 0.7)
    guide = guide[:, :, None] if guide.ndim == 2 else guide
    wx, wy = edge_weights(guide, edge_sigma, edge_floor)
    return Level(feat, wx, wy)
