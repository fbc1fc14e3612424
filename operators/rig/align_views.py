"""``align-views``: each camera of a rig steadied about a point of interest by a 2D transform.

Every camera of a rig sits slightly off its ideal position and aim (pan, tilt, roll, focal
length), so a sweep across the cameras shakes. At view ``v`` the node finds features in camera
``v`` and in the reference camera (param ``reference``; default the middle camera of the rig) at
the same frame, matches them, fits a 2D transform by RANSAC, and warps camera ``v`` with it. The
reference camera passes through unchanged, bit for bit. Put it right after the read of the rig,
before the vectors (and before ``color-match``, which compares cameras pixel for pixel).

What steadies a sweep without removing its parallax. The cameras of a rig see the scene from
different places, so near and far things shift by different amounts between cameras: that
parallax is the point of a sweep, and no 2D transform can (or should) undo it. What a 2D transform
can remove is what belongs to the camera and not to the scene: its roll, its focal length and the
direction it points. So the fit has two steps. (1) The model is fitted by RANSAC to every feature
match; the largest consistent set is one plane of the picture (usually the background), whose
roll, scale and perspective between the two cameras are the cameras' own. (2) The transform is
re-centred on the point of interest (``point``, in the reference camera's pixels; default the
image centre): the shift still left between the reference's features and this camera's mapped
features within ``radius`` of the point (a fraction of the image's shorter side; nearer matches
count more, weight ``(1 - (d / radius)^2)^2``; the shift with the most weight of matches within
``ransac_threshold`` of it, refined to their weighted mean) is added. The content at
the point, at whatever depth, then lands where the reference sees it, and everything nearer or
farther keeps its parallax relative to it.

Measured on the demo scene (five cameras with aim, roll, exposure and white-balance errors,
layers at five depths; tests/cli/test_cli_rig_clean.py): at 320x180 ``rigid`` cut the shake
from 2.23 px to 0.36 px, ``similarity`` only to 1.06 px and ``homography`` to 2.00 px (one plane
locked, the rest sliding): RANSAC's consensus set mixes layers at neighbouring depths and reads
their different parallax as a scale of a few percent (1.5-3 % in a development run at 480x270,
where the perfect rig has none). Hence ``rigid`` by default: rigs
whose cameras share one focal length need no scale, and a wrong scale makes a sweep breathe;
use ``similarity`` when focal lengths differ and ``homography`` for a planar scene or cameras
that only turn.

Where the point of interest goes (``path``):

- ``hold``: to where the reference camera sees it, in every camera: the sweep pivots about the
  point (the look of a rig aimed at one subject).
- ``line`` (default): onto the straight line, through the reference camera's point, that best
  fits (least squares over every camera) where the cameras see the point. A rig whose cameras
  travel along a line and all face the same way moves the point steadily across the frame; that
  travel stays and only the deviations from it (the shake) go. On a rig aimed at the subject the
  fitted line is flat and ``line`` equals ``hold``. Needs every camera at each view (features are
  matched for each camera against the reference); with two cameras the line runs through both,
  so only roll and scale are corrected.

Models (``model``): ``rigid`` (rotation and translation: roll and aim; the rotation of a
similarity fit, its scale set to 1 and the translation refitted on its inliers), ``similarity``
(rotation, uniform scale, translation: also focal length; ``cv2.estimateAffinePartial2D``) or
``homography`` (a plane seen from another place; ``cv2.findHomography``), each with RANSAC
(Fischler, M.A. and Bolles, R.C., "Random sample consensus", Communications of the ACM 24(6),
1981; projective geometry as in Hartley, R. and Zisserman, A., Multiple View Geometry in Computer
Vision, 2nd ed., 2004, ch. 4). Features: ``orb`` (Rublee, E., Rabaud, V., Konolige, K. and
Bradski, G., "ORB: an efficient alternative to SIFT or SURF", ICCV 2011) or ``sift`` (Lowe, D.G.,
"Distinctive image features from scale-invariant keypoints", IJCV 60(2), 2004), found on the
perceptual (sRGB-encoded) luma stretched to 8 bits per camera, matched by brute force with
Lowe's ratio test (``ratio``).

Wide rigs (``pairs``). By default each camera is compared with the reference camera. On a wide
rig the cameras at the ends may share too little with it; ``pairs: chain`` compares each camera
with its neighbour toward the reference instead (the point of interest carried along: each link
is re-centred where the neighbour sees the point) and composes the transforms along the rig.
Each link's error adds to the next, so use it only where direct comparison fails. A failed link
with ``on_failure: identity`` counts as no change: the camera gets its neighbour's transform.

Time. At each frame the cameras are compared at that frame, unless ``fit_frame`` names one frame
to compare them at; a rig whose cameras recorded sequences should give one (the cameras of a rig
do not move against each other during a take, and fitting every frame on its own would add a
little shake over time). The transform found there then applies to every frame.

Every channel is warped with the same transform (colour, alpha, mattes, every layer), with the
chosen ``filter``; pixels that come from outside the camera's frame are 0 in every channel
(transparent; ``border: edge`` repeats the edge instead). Vector layers are resampled but their
values are not rotated: estimate vectors after this node. Non-finite pixels (``read`` replaces
them with 0 unless told to keep them) count as 0 when features are found, and are carried by the
warp like any other value (a NaN spreads to the output pixels that interpolate it).

Report. The output's metadata holds ``align-views.*`` (``matrix``: 3x3, this camera's pixels to
the output's; ``matches``, ``inliers``, ``point_matches``; ``residual_rms`` and
``residual_median``: distance in pixels between the reference's features and this camera's
RANSAC inliers mapped by the fitted model, before the re-centring; ``rotation_deg`` and
``scale`` of the transform; ``point`` and ``point_found``: the point of interest and where this
camera saw it; ``shift``: how far the transform moved it; ``path_step``: the fitted line's step
per camera), and the same record as the EXR header attribute ``midframe.align-views`` of written
files. A camera passed through unaligned reports ``aligned: false``.

Too few matches. When fewer than ``min_inliers`` matches agree with one transform, or fewer than
``min_point_matches`` near the point of interest agree on where it is (a textureless or constant
image, a camera that sees something else, a point of interest on a blank wall), the node stops
with an error naming the node, the camera's file where known, and the fixes; with
``on_failure: identity`` it passes that camera through unaligned instead (and leaves it out of
the ``line`` fit) with a warning naming the view. Cameras of
different sizes, and a ``point`` outside the frame, are errors.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Literal

import cv2
import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from graphcore.errors import OpError
from graphcore.image import COLOR, Image
from graphcore.registry.operator import InputRange, OpContext, Operator, Port
from graphcore.sample import Sample
from operators.rig._common import (FIT_FRAME_DOC, image_link_problems, fit_sample, reference_view, require_same_size,
                                   rig_views, source_file, view_number, with_report)
from operators.vectors._encode import perceptual

__all__ = ["ALIGN_VIEWS", "AlignViewsParams", "ViewFit", "measure_view", "warp_image", "TooFewMatches"]

_FILTERS = {"bilinear": cv2.INTER_LINEAR, "bicubic": cv2.INTER_CUBIC, "lanczos": cv2.INTER_LANCZOS4}
_MAX_POINT_MATCHES = 2000   # matches near the point weighed against each other (memory ~ n^2)
_RNG_SEED = 1981   # OpenCV's RANSAC draws from its thread's generator: seeded, for repeatable results


class AlignViewsParams(BaseModel):
    """Params of ``align-views``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    reference: int | None = Field(
        None, description="The camera (view number) the others are aligned to; it passes through "
                          "unchanged. Default: the middle camera of the rig (the lower middle one "
                          "of an even count).")
    point: tuple[float, float] | None = Field(
        None, description="Point of interest [x, y] in the reference camera's pixels (x right, y "
                          "down, pixel centres at whole numbers, as OpenCV counts). Default: the "
                          "image centre.")
    radius: float = Field(
        0.25, gt=0, le=10, description="Feature matches within this distance of the point of interest, "
                                       "as a fraction of the image's shorter side, decide where the "
                                       "point is in each camera (nearer ones count more).")
    path: Literal["line", "hold"] = Field(
        "line", description="Where the point of interest goes: 'line' keeps it on the straight line "
                            "that best fits where the cameras see it (keeps a rig's travel, removes "
                            "the shake); 'hold' keeps it where the reference camera sees it.")
    model: Literal["rigid", "similarity", "homography"] = Field(
        "rigid", description="'rigid': rotation and shift (roll and aim; cameras with one focal "
                             "length); 'similarity': also a uniform scale (focal length "
                             "differences); 'homography': a full projective transform.")
    features: Literal["orb", "sift"] = Field(
        "orb", description="Feature detector and descriptor: ORB (Rublee et al. 2011) or SIFT "
                           "(Lowe 2004).")
    max_features: int = Field(4000, ge=50, le=100000, description="Most features found per camera.")
    ratio: float = Field(
        0.75, gt=0, lt=1, description="Lowe's ratio test: keep a match when its distance is below "
                                      "this fraction of the second-best match's.")
    ransac_threshold: float = Field(
        3.0, gt=0, le=100, description="RANSAC inlier threshold: largest distance, in pixels, "
                                       "between a feature and its match after the transform.")
    min_inliers: int = Field(
        12, ge=4, le=100000, description="Fewest matches that must agree with the transform for a "
                                         "camera to count as aligned.")
    min_point_matches: int = Field(
        5, ge=1, le=100000, description="Fewest matches near the point of interest that must agree "
                                        "on where it is.")
    pairs: Literal["reference", "chain"] = Field(
        "reference", description="Which cameras are compared: 'reference': each camera with the "
                                 "reference camera; 'chain': each camera with its neighbour toward "
                                 "the reference, the transforms composed along the rig (for wide "
                                 "rigs whose end cameras share little with the reference; errors "
                                 "add up along the chain).")
    fit_frame: int | None = Field(None, description=FIT_FRAME_DOC)
    on_failure: Literal["error", "identity"] = Field(
        "error", description="When a camera has too few matches: 'error' stops with an error; "
                             "'identity' passes it through unaligned with a warning.")
    filter: Literal["bilinear", "bicubic", "lanczos"] = Field(
        "bilinear", description="Resampling filter of the warp (bicubic and lanczos are sharper "
                                "and may ring past the input's range).")
    border: Literal["transparent", "edge"] = Field(
        "transparent", description="Pixels from outside the camera's frame: 'transparent' (0 in "
                                   "every channel) or 'edge' (the nearest edge pixel).")


class TooFewMatches(Exception):
    """Raised by :func:`measure_view` when the transform is not supported by enough matches."""

    def __init__(self, message: str, matches: int, inliers: int, field: str = "min_inliers"):
        super().__init__(message)
        self.matches, self.inliers, self.field = matches, inliers, field


@dataclass(frozen=True)
class ViewFit:
    """A camera's transform onto the reference camera.

    Attributes
    ----------
    matrix : ndarray, shape (3, 3), float64
        Maps this camera's pixel coordinates (x, y, 1) to the reference's.
    matches : int
        Feature matches that passed the ratio test.
    inliers : int
        Matches that agree with ``matrix`` (RANSAC).
    residual_rms, residual_median : float
        Pixel distance between the reference's features and this camera's RANSAC inlier
        features mapped by the fitted model (before the re-centring on the point).
    point_matches : int
        Matches near the point of interest that agree with its shift.
    """

    matrix: np.ndarray
    matches: int
    inliers: int
    residual_rms: float
    residual_median: float
    point_matches: int


def _grey8(image: Image) -> np.ndarray:
    """8-bit grey for the feature detector: the linear luma (ITU-R BT.709 weights), sRGB-encoded,
    stretched per camera."""
    idx = [image.index(c) for c in COLOR if c in image.channels] or [0]
    px = image.pixels
    if len(idx) == 3:
        w = (0.2126, 0.7152, 0.0722)
        luma = px[:, :, idx[0]] * np.float32(w[0])
        luma += px[:, :, idx[1]] * np.float32(w[1])
        luma += px[:, :, idx[2]] * np.float32(w[2])
    else:
        luma = np.mean(px[:, :, idx], axis=2, dtype=np.float32)
    grey = perceptual(luma, ceiling=1.0)
    # stretch the 0.5th..99.5th percentiles (of every 7th pixel) over 0..255: dim or flat plates
    # still give features, and each camera's own exposure no longer matters to the detector
    lo, hi = np.percentile(grey.ravel()[::7], (0.5, 99.5))
    scale = np.float32(255.0 / (hi - lo) if hi > lo else 0.0)
    grey -= np.float32(lo)
    grey *= scale
    grey += np.float32(0.5)
    return np.clip(grey, 0, 255).astype(np.uint8)


def _detector(kind: str, n: int):
    if kind == "orb":
        return cv2.ORB_create(nfeatures=n), cv2.NORM_HAMMING
    return cv2.SIFT_create(nfeatures=n), cv2.NORM_L2


def _features(grey: np.ndarray, kind: str, n: int) -> tuple[np.ndarray, np.ndarray | None]:
    det, _ = _detector(kind, n)
    kps, desc = det.detectAndCompute(grey, None)
    pts = np.array([k.pt for k in kps], np.float64).reshape(-1, 2)
    return pts, desc


def _match(desc_a: np.ndarray | None, desc_b: np.ndarray | None, kind: str, ratio: float) -> np.ndarray:
    """(M, 2) index pairs (a, b) passing the ratio test, each b used once."""
    if desc_a is None or desc_b is None or len(desc_a) < 2 or len(desc_b) < 2:
        return np.zeros((0, 2), np.int64)
    _, norm = _detector(kind, 1)
    pairs = cv2.BFMatcher(norm).knnMatch(desc_a, desc_b, k=2)
    best: dict[int, tuple[float, int]] = {}
    for pair in pairs:
        if len(pair) < 2:
            continue
        m, second = pair
        if m.distance < ratio * second.distance:
            old = best.get(m.trainIdx)
            if old is None or m.distance < old[0]:
                best[m.trainIdx] = (m.distance, m.queryIdx)
    return np.array(sorted((q, t) for t, (_, q) in best.items()), np.int64).reshape(-1, 2)


Features = tuple[np.ndarray, "np.ndarray | None"]


def camera_features(image: Image, params: AlignViewsParams,
                    memo: dict[int, Features] | None = None) -> Features:
    """Keypoint positions (K, 2) and descriptors of ``image`` (``memo``: per call, by object)."""
    if memo is not None and id(image) in memo:
        return memo[id(image)]
    found = _features(_grey8(image), params.features, params.max_features)
    if memo is not None:
        memo[id(image)] = found
    return found


def measure_view(image: Image, reference: Image, params: AlignViewsParams,
                 point: tuple[float, float], memo: dict[int, Features] | None = None) -> ViewFit:
    """Fit the transform taking ``image``'s pixels onto ``reference``'s, re-centred on ``point``.

    Two steps. (1) The model (rigid, similarity or homography) is fitted by RANSAC to every ratio-test
    match: the largest consistent set is the dominant plane of the picture (usually the
    background), whose roll, scale and perspective are those of the camera. (2) The transform is
    re-centred on the point of interest: the shift left between the reference's features and the
    mapped features of this camera near the point (within ``radius``, weighted by
    ``(1 - (d / radius)^2)^2`` of their distance ``d`` to the point; the shift with the most
    weight of matches within ``ransac_threshold`` of it, refined to their weighted mean) is added,
    so the content at the point, at whatever depth, lands where the reference sees it.

    Parameters
    ----------
    image, reference : Image, shape (H, W, C), same size
    params : AlignViewsParams
    point : (float, float)
        Point of interest in ``reference``'s pixels.
    memo : dict, optional
        Features already found, by image object (the reference's are found once per call).

    Raises
    ------
    TooFewMatches
        Fewer than ``params.min_inliers`` matches agree with one transform, or fewer than
        ``params.min_point_matches`` near the point agree with its shift.
    """
    pa, da = camera_features(image, params, memo)
    pb, db = camera_features(reference, params, memo)
    pairs = _match(da, db, params.features, params.ratio)
    src, dst = pa[pairs[:, 0]], pb[pairs[:, 1]]
    n = len(src)
    if n < max(params.min_inliers, 4):
        raise TooFewMatches(f"{n} feature matches", n, 0)
    cv2.setRNGSeed(_RNG_SEED)
    s32, d32 = src.astype(np.float32), dst.astype(np.float32)
    if params.model in ("similarity", "rigid"):
        m, mask = cv2.estimateAffinePartial2D(s32, d32, method=cv2.RANSAC,
                                              ransacReprojThreshold=params.ransac_threshold,
                                              maxIters=4000, confidence=0.999, refineIters=10)
        matrix = None if m is None else np.vstack([m, [0.0, 0.0, 1.0]])
        if matrix is not None and params.model == "rigid":
            matrix = _rigid(matrix, src[mask.ravel().astype(bool)], dst[mask.ravel().astype(bool)])
    else:
        matrix, mask = cv2.findHomography(s32, d32, cv2.RANSAC, params.ransac_threshold,
                                          maxIters=4000, confidence=0.999)
    inl = np.zeros(n, bool) if mask is None else mask.ravel().astype(bool)
    if matrix is None or not np.all(np.isfinite(matrix)) or int(inl.sum()) < params.min_inliers:
        raise TooFewMatches(f"{n} feature matches, of which only {int(inl.sum())} agree with one "
                            f"{params.model}", n, int(inl.sum()))
    mapped = _apply(matrix, src)
    err = np.hypot(*(mapped[inl] - dst[inl]).T)
    # (2) re-centre on the point of interest
    reach = params.radius * min(image.width, image.height)
    dist = np.hypot(dst[:, 0] - point[0], dst[:, 1] - point[1])
    near = dist < reach
    left = dst[near] - mapped[near]
    w = (1.0 - (dist[near] / reach) ** 2) ** 2
    if len(w) > _MAX_POINT_MATCHES:                      # the nearest ones carry the weight anyway
        keep = np.argsort(-w, kind="stable")[:_MAX_POINT_MATCHES]
        left, w = left[keep], w[keep]
    if len(left) == 0:
        raise TooFewMatches(f"no feature matches within {reach:.0f} px of the point of interest "
                            f"({n} elsewhere)", n, int(inl.sum()), "min_point_matches")
    # the shift most of the (nearness-weighted) matches agree on: each match proposes its own,
    # scored by the weight of the matches within ransac_threshold of it (a one-point consensus)
    gap = np.hypot(left[:, None, 0] - left[None, :, 0], left[:, None, 1] - left[None, :, 1])
    support = (gap <= params.ransac_threshold).astype(np.float64) @ w
    close = gap[int(np.argmax(support))] <= params.ransac_threshold
    agree = int(close.sum())
    shift = (w[close, None] * left[close]).sum(axis=0) / max(float(w[close].sum()), 1e-300)
    if agree < params.min_point_matches:
        raise TooFewMatches(f"only {agree} feature matches within {reach:.0f} px of the point of "
                            f"interest agree on where it is ({len(left)} near it)", n, int(inl.sum()),
                            "min_point_matches")
    recentre = np.eye(3)
    recentre[:2, 2] = shift
    return ViewFit(recentre @ matrix.astype(np.float64), n, int(inl.sum()),
                   float(np.sqrt(np.mean(err ** 2))), float(np.median(err)), agree)


def _rigid(similarity: np.ndarray, src: np.ndarray, dst: np.ndarray) -> np.ndarray:
    """The rotation of ``similarity`` at scale 1, with the translation refitted (least squares)
    on the RANSAC inliers ``src -> dst``."""
    a = similarity[:2, :2]
    rot = a / math.sqrt(abs(np.linalg.det(a)))
    out = np.eye(3)
    out[:2, :2] = rot
    out[:2, 2] = np.mean(dst - src @ rot.T, axis=0) if len(src) else similarity[:2, 2]
    return out


def _apply(matrix: np.ndarray, pts: np.ndarray) -> np.ndarray:
    h = np.column_stack([pts, np.ones(len(pts))]) @ matrix.T
    return h[:, :2] / h[:, 2:3]


def warp_image(image: Image, matrix: np.ndarray, filter: str = "bilinear",
               border: str = "transparent") -> np.ndarray:
    """Every channel of ``image`` warped by ``matrix`` (3x3, input pixels to output pixels), at
    the input's size. Returns (H, W, C) float32."""
    h, w = image.height, image.width
    flags = _FILTERS[filter]
    mode = cv2.BORDER_CONSTANT if border == "transparent" else cv2.BORDER_REPLICATE
    affine = np.allclose(matrix[2], [0.0, 0.0, 1.0], atol=1e-12)
    px = image.pixels
    out = np.empty_like(px)
    for i in range(px.shape[2]):   # one plane at a time: equal planes stay equal bit for bit
        plane = np.ascontiguousarray(px[:, :, i])
        if affine:
            out[:, :, i] = cv2.warpAffine(plane, matrix[:2], (w, h), flags=flags, borderMode=mode,
                                          borderValue=0)
        else:
            out[:, :, i] = cv2.warpPerspective(plane, matrix, (w, h), flags=flags, borderMode=mode,
                                               borderValue=0)
    return out


def _point(params: AlignViewsParams, image: Image) -> tuple[float, float]:
    if params.point is None:
        return ((image.width - 1) / 2.0, (image.height - 1) / 2.0)
    x, y = params.point
    if not (0 <= x <= image.width - 1 and 0 <= y <= image.height - 1):
        raise OpError(f"point of interest ({x:g}, {y:g}) lies outside the {image.width}x{image.height} "
                      "frame", field="point",
                      fix=f"give a point with 0 <= x <= {image.width - 1} and 0 <= y <= {image.height - 1}, "
                          "in the reference camera's pixels")
    return (float(x), float(y))


def _needs(params: AlignViewsParams, sample: Sample,
           ranges: Mapping[str, InputRange]) -> dict[str, tuple[Sample, ...]]:
    views = rig_views(ranges)
    ref = reference_view(params.reference, views)
    if sample.view == ref:
        return {"image": (sample,)}
    here = fit_sample(params.fit_frame, sample, ranges)
    if params.path == "hold" and params.pairs == "reference":
        return {"image": (sample, here, here.at_view(ref))}
    return {"image": (sample, here, here.at_view(ref), *(here.at_view(v) for v in views))}


def _failure(params: AlignViewsParams, image: Image, view: int, partner: int, ref: int,
             exc: TooFewMatches) -> OpError:
    needed = getattr(params, exc.field)
    whom = (f"the reference camera {ref}" if partner == ref
            else f"camera {partner} (its neighbour toward the reference camera {ref})")
    return OpError(f"cannot align camera {view} to {whom}: {exc} (at least {needed} needed)",
                   field=exc.field, file=source_file(image),
                   fix="give a 'point' on textured content both cameras see, raise 'radius', try "
                       "features 'sift', lower 'min_inliers', or set on_failure "
                       "'identity' to pass such cameras through unaligned")


@dataclass(frozen=True)
class _Link:
    """Camera ``view``'s transform onto the reference camera, and how it was found."""

    view: int
    partner: int                      # the camera it was compared with
    matrix: np.ndarray                # this camera's pixels -> the reference's
    found: np.ndarray                 # where this camera sees the reference's point of interest
    fit: ViewFit | None               # None: the comparison failed (see ``failure``)
    failure: TooFewMatches | None = None


def _where(matrix: np.ndarray, poi: tuple[float, float]) -> np.ndarray:
    return _apply(np.linalg.inv(matrix), np.array([poi]))[0]


def _links(params: AlignViewsParams, cams: Mapping[int, Image], views, ref: int,
           poi: tuple[float, float], wanted: list[int], memo: dict[int, Features]) -> dict[int, _Link]:
    """Transforms onto the reference for the cameras in ``wanted`` (and, with pairs 'chain', every
    camera between them and the reference). A failed comparison raises the OpError when
    ``on_failure`` is 'error'; otherwise the link is kept with ``fit=None``: identity for
    pairs 'reference', the neighbour's transform for pairs 'chain'."""
    out: dict[int, _Link] = {}

    def compare(v: int, partner: int, point: tuple[float, float]) -> tuple[np.ndarray, ViewFit | None,
                                                                            TooFewMatches | None]:
        require_same_size(cams[v], cams[partner], f"camera {partner}")
        try:
            fit = measure_view(cams[v], cams[partner], params, point, memo)
            return fit.matrix, fit, None
        except TooFewMatches as exc:
            if params.on_failure == "error":
                raise _failure(params, cams[v], v, partner, ref, exc) from None
            return np.eye(3), None, exc

    if params.pairs == "reference":
        for v in wanted:
            m, fit, exc = compare(v, ref, poi)
            out[v] = _Link(v, ref, m, _where(m, poi), fit, exc)
        return out
    for step in (-1, 1):
        far = max((abs(v - ref) for v in wanted if (v - ref) * step > 0), default=0)
        prev_matrix, prev_found, prev = np.eye(3), np.array(poi), ref
        for d in range(1, far + 1):
            v = ref + step * d
            m, fit, exc = compare(v, prev, (float(prev_found[0]), float(prev_found[1])))
            matrix = prev_matrix @ m
            out[v] = _Link(v, prev, matrix, _where(matrix, poi), fit, exc)
            prev_matrix, prev_found, prev = matrix, out[v].found, v
    return out


def _line_step(links: Mapping[int, _Link], ref: int, poi: tuple[float, float]) -> np.ndarray:
    """Per-camera step of the point of interest along the least-squares line through the
    reference camera's point; cameras whose comparison failed are left out."""
    num, den = np.zeros(2), 0.0
    for v, link in links.items():
        if link.fit is None:
            continue
        k = v - ref
        num += k * (link.found - np.array(poi))
        den += k * k
    return num / den if den > 0 else np.zeros(2)


def _compute(params: AlignViewsParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    images = inputs["image"]
    view = view_number(ctx.sample, "align-views")
    if len(images) == 1:
        return images[0]                              # the reference camera: unchanged, bit for bit
    image, fit_image, reference = images[0], images[1], images[2]
    views = rig_views(ctx.input_ranges)
    ref = reference_view(params.reference, views)
    if fit_image is not image:
        require_same_size(image, fit_image, f"the same camera at fit_frame {params.fit_frame}")
    poi = _point(params, reference)
    everyone = params.path == "line" or params.pairs == "chain"
    cams = dict(zip(views, images[3:])) if everyone else {view: fit_image, ref: reference}
    cams[view] = fit_image
    wanted = [v for v in views if v != ref] if params.path == "line" else [view]
    links = _links(params, cams, views, ref, poi, wanted, {})
    link = links[view]
    if link.fit is None and params.pairs == "reference":
        ctx.warn(f"view {view}: not aligned ({link.failure}); passed through unchanged")
        meta = with_report(image.meta, "align-views", {"view": view, "reference": ref, "aligned": False,
                                                       "matches": link.failure.matches,
                                                       "inliers": link.failure.inliers})
        return image.replace(meta=meta)
    if link.fit is None:
        ctx.warn(f"view {view}: not aligned to camera {link.partner} ({link.failure}); given camera "
                 f"{link.partner}'s transform")
    matrix = link.matrix
    step = None
    if params.path == "line":
        step = _line_step(links, ref, poi)
        shift = np.eye(3)
        shift[:2, 2] = step * (view - ref)
        matrix = shift @ matrix
    found = link.found
    moved = _apply(matrix, np.array([found]))[0] - found
    a = matrix[:2, :2]
    report: dict[str, Any] = {
        "view": view, "reference": ref, "aligned": link.fit is not None, "model": params.model,
        "path": params.path, "pairs": params.pairs, "compared_with": link.partner,
        "matrix": [[float(f"{v:.9g}") for v in row] for row in matrix],
        "rotation_deg": round(math.degrees(math.atan2(a[1, 0] - a[0, 1], a[0, 0] + a[1, 1])), 5),
        "scale": round(math.sqrt(abs(np.linalg.det(a))), 6),
        "point": [round(v, 3) for v in poi], "point_found": [round(float(v), 3) for v in found],
        "shift": [round(float(v), 3) for v in moved],
    }
    if link.fit is not None:
        fit = link.fit
        report.update({"matches": fit.matches, "inliers": fit.inliers, "point_matches": fit.point_matches,
                       "residual_rms": round(fit.residual_rms, 4),
                       "residual_median": round(fit.residual_median, 4)})
    if step is not None:
        report["path_step"] = [round(float(v), 4) for v in step]
    if params.fit_frame is not None:
        report["fit_frame"] = params.fit_frame
    out = warp_image(image, matrix, params.filter, params.border)
    return Image(out, image.channels, with_report(image.meta, "align-views", report))


ALIGN_VIEWS = Operator(
    name="align-views",
    version=1,
    summary="Steady each camera of a rig about a point of interest (feature matches, RANSAC)",
    params=AlignViewsParams,
    compute=_compute,
    inputs=(Port("image", "the rig's cameras (views)"),),
    doc=__doc__ or "",
    outputs="the input's channels, every one warped by the camera's transform; the fit in "
            "metadata 'align-views.*'",
    needs=_needs,
    needs_ranges=True,
    check_links=image_link_problems,
)
