"""``color-match``: each camera of a rig matched in colour to a reference camera.

Every camera of a rig sees a slightly different exposure and white balance, so a sweep across the
cameras flickers. At view ``v`` the node compares camera ``v`` with the reference camera (param
``reference``; default the middle camera of the rig) at the same frame, fits a colour transform
that takes this camera's colours to the reference's, and applies it. The reference camera passes
through unchanged, bit for bit.

Models (``model``), on linear colour:

- ``gain``: ``R' = g_R R`` and likewise for G and B (exposure and white balance of a linear
  sensor).
- ``gain-offset`` (default): ``R' = g_R R + o_R`` per channel (adds a black-level or flare offset).
- ``matrix``: ``[R' G' B'] = M [R G B]``, a 3x3 matrix (also sensor and filter differences
  between camera bodies).
- ``matrix-offset``: a 3x3 matrix plus an offset per channel.

Premultiplied colour. Colour is premultiplied by alpha (OpenEXR's convention). Gains and matrices
act on premultiplied colour exactly as on straight colour (``M (a c) = a (M c)``), but an offset
must be scaled by the coverage: the node applies ``C' = M C + o A`` to premultiplied ``C``, which
equals premultiplying ``M c + o`` of the straight colour ``c``, so no division by alpha is ever
needed and a pixel with ``A = 0`` stays empty. The fit uses the same model (``A`` is a column of
the design), and images without an ``A`` channel count as opaque. Only ``R G B`` change: ``A``,
mattes, vectors and every other layer pass through untouched.

Fitting on content both cameras see. The two cameras are compared pixel for pixel on a working
grid (both images area-averaged to at most ``fit_size`` pixels on their longer side, which also
forgives small misalignments and averages out noise), so put ``color-match`` after ``align-views``,
which lines the cameras up about the point of interest. Content that still differs (parallax of
near objects, a subject one camera sees and the other does not, a moving light) is rejected by a
robust fit: iteratively reweighted least squares with Huber and then Tukey weights (Holland and
Welsch 1977; Beaton and Tukey 1974), scale from the median absolute residual. An optional
``matte`` input restricts the fit to where the matte is above zero in both cameras (weights are
the product of the two mattes): for example a matte of a grey card or of the static set.
Pixels whose colour is exactly 0 in either camera (the empty border ``align-views`` leaves where a
camera's frame does not reach, also without an alpha channel) take no part.

Wide rigs (``pairs: chain``): each camera is compared with its neighbour toward the reference and
the transforms are composed (``M2 M1`` and ``M2 o1 + o2``), for rigs whose end cameras share too
little with the reference; each link's error adds to the next. The report's ``inliers``,
``residual`` and ``explained`` are then those of the camera's own link (``compared_with``).

Time. At each frame the cameras are compared at that frame, unless ``fit_frame`` names one frame
to compare them at (for a rig whose cameras recorded sequences: a camera's exposure and white
balance hold through a take, and fitting every frame on its own would add a little flicker over
time, or follow something crossing one camera). The transform found there applies to every frame.

Report. The fitted transform is returned in the output's metadata under ``color-match.*``
(``matrix``: 3x3 rows R', G', B' over input R, G, B; ``offset``; ``inliers``: the share of compared
pixels the fit kept; ``residual``: the RMS colour difference left on them, linear units;
``explained``: the share of the reference's colour variance on them that the fit explains;
``reference``, ``view``, ``model``) and the same record as the EXR header attribute
``midframe.color-match`` of written files. A warning names the camera when the fit keeps fewer
than ``min_inliers`` of the compared pixels or explains less than 80 % of their colour variance
(misaligned cameras, or little common content).

Bad input: cameras of different sizes, a constant (textureless) image that cannot determine a
gain and an offset (use model ``gain``, or a matte over textured content), a view that is not a
camera of the rig: each is an error naming the node, the field and the fix. Non-finite pixels
take no part in the fit and stay non-finite (``read`` replaces them with 0 by default).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Literal

import cv2
import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from graphcore.errors import OpError
from graphcore.image import ALPHA, COLOR, Image
from graphcore.registry.operator import InputRange, OpContext, Operator, Port
from graphcore.sample import Sample
from operators.composite._channels import matte_values
from operators.rig._common import (FIT_FRAME_DOC, image_link_problems, fit_sample, reference_view, require_same_size,
                                   rig_views, source_file, view_number, with_report)
from operators.rig._robust import DegenerateFit, robust_fit

__all__ = ["COLOR_MATCH", "ColorMatchParams", "ColorFit", "fit_color", "apply_color"]

#: Below this share of explained colour variance the fit is reported as doubtful.
_MIN_EXPLAINED = 0.8

Model = Literal["gain", "gain-offset", "matrix", "matrix-offset"]


class ColorMatchParams(BaseModel):
    """Params of ``color-match``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    reference: int | None = Field(
        None, description="The camera (view number) every other camera is matched to; it passes "
                          "through unchanged. Default: the middle camera of the rig (the lower "
                          "middle one of an even count).")
    model: Model = Field(
        "gain-offset", description="'gain': a gain per channel; 'gain-offset': a gain and an offset "
                                   "per channel; 'matrix': a 3x3 colour matrix; 'matrix-offset': a "
                                   "3x3 matrix and an offset per channel. Linear colour; offsets are "
                                   "scaled by alpha on premultiplied colour.")
    fit_size: int = Field(
        256, ge=16, le=4096, description="Longer side, in pixels, of the working grid both cameras "
                                         "are area-averaged to before they are compared.")
    pairs: Literal["reference", "chain"] = Field(
        "reference", description="Which cameras are compared: 'reference': each camera with the "
                                 "reference camera; 'chain': each camera with its neighbour toward "
                                 "the reference, the transforms composed along the rig (wide rigs; "
                                 "errors add up along the chain).")
    fit_frame: int | None = Field(None, description=FIT_FRAME_DOC)
    min_inliers: float = Field(
        0.5, ge=0, le=1, description="Warn when the robust fit keeps less than this share of the "
                                     "compared pixels.")


class ColorFit:
    """A fitted colour transform: ``C' = matrix @ C + offset * A`` on premultiplied colour.

    Attributes
    ----------
    matrix : ndarray, shape (3, 3)
        Rows R', G', B' over input R, G, B (diagonal for the gain models).
    offset : ndarray, shape (3,)
    inliers : float
        Share of the compared pixels the robust fit kept.
    residual : float
        RMS over those pixels of the length of the colour difference left (linear units).
    explained : float
        Share of the reference's colour variance on the kept pixels that the fit explains
        (the coefficient of determination, 1 - residual / total sum of squares); near 0 when the
        two cameras show unrelated content.
    samples : int
        Pixels of the working grid compared.
    """

    def __init__(self, matrix: np.ndarray, offset: np.ndarray, inliers: float, residual: float,
                 explained: float, samples: int) -> None:
        self.matrix, self.offset = matrix, offset
        self.inliers, self.residual, self.explained, self.samples = inliers, residual, explained, samples

    def report(self) -> dict[str, Any]:
        return {"matrix": [[round(float(v), 6) for v in row] for row in self.matrix],
                "offset": [round(float(v), 6) for v in self.offset],
                "inliers": round(self.inliers, 4), "residual": float(f"{self.residual:.4g}"),
                "explained": round(self.explained, 4),
                "samples": self.samples}


def _path(params: ColorMatchParams, view: int, ref: int) -> list[int]:
    """The cameras compared in turn, from ``view`` to ``ref``: just the two, or (pairs 'chain')
    every camera between them."""
    if params.pairs == "reference":
        return [view, ref]
    step = 1 if ref > view else -1
    return list(range(view, ref + step, step))


def _needs(params: ColorMatchParams, sample: Sample,
           ranges: Mapping[str, InputRange]) -> dict[str, Any]:
    ref = reference_view(params.reference, rig_views(ranges))
    if sample.view == ref:
        return {"image": (sample,)}
    here = fit_sample(params.fit_frame, sample, ranges)
    path = tuple(here.at_view(v) for v in _path(params, int(sample.view), ref))
    wanted: dict[str, Any] = {"image": (sample, *path)}
    if "matte" in ranges:
        wanted["matte"] = path
    return wanted


def _colour_planes(image: Image, model: str) -> tuple[str, ...]:
    names = tuple(c for c in COLOR if c in image.channels)
    if model.startswith("matrix") and len(names) != 3:
        raise OpError(f"model '{model}' needs R, G and B; the image has {', '.join(image.channels)}",
                      field="model", file=source_file(image),
                      fix="use model 'gain' or 'gain-offset', which match each colour channel alone")
    if not names:
        raise OpError(f"no colour channel (R, G, B) to match; the image has {', '.join(image.channels)}",
                      field="image", file=source_file(image),
                      fix="connect the rig's colour plates, not vectors or mattes")
    return names


def _grid(planes: list[np.ndarray], fit_size: int) -> np.ndarray:
    """(N, C) float64: the (H, W) planes area-averaged to at most ``fit_size`` pixels on the
    longer side, one column per plane, one row per grid pixel."""
    h, w = planes[0].shape[:2]
    f = min(1.0, fit_size / max(h, w))
    size = (max(1, round(w * f)), max(1, round(h * f)))
    cols = []
    for p in planes:
        p = np.asarray(p, dtype=np.float32)
        if f < 1.0:
            p = cv2.resize(p, size, interpolation=cv2.INTER_AREA)
        cols.append(p.reshape(-1))
    return np.column_stack(cols).astype(np.float64)


def _alpha(image: Image) -> np.ndarray:
    if image.has_alpha:
        return image.channel(ALPHA)
    return np.ones((image.height, image.width), np.float32)


def fit_color(image: Image, reference: Image, model: str = "gain-offset", *, fit_size: int = 256,
              weight: np.ndarray | None = None) -> ColorFit:
    """Fit the colour transform taking ``image``'s colours to ``reference``'s.

    Parameters
    ----------
    image, reference : Image, shape (H, W, C)
        Two cameras of one rig at one frame, same size, premultiplied linear colour.
    model : {'gain', 'gain-offset', 'matrix', 'matrix-offset'}
    fit_size : int
        Longer side of the working grid.
    weight : ndarray, shape (H, W), optional
        Prior weight per pixel (a matte); pixels at 0 take no part.

    Returns
    -------
    ColorFit

    Raises
    ------
    OpError
        ``field='image'`` when the compared pixels cannot determine the model (a constant image).
    """
    names = _colour_planes(image, model)
    for n in names:
        if n not in reference.channels:
            raise OpError(f"the reference camera has no {n} channel (it has "
                          f"{', '.join(reference.channels)})", field="image",
                          file=source_file(reference), fix="give every camera the same channels")
    h, w = image.height, image.width
    wplane = np.ones((h, w), np.float32) if weight is None else np.array(weight, np.float32)
    cur_planes = [image.channel(n) for n in names]
    ref_planes = [reference.channel(n) for n in names]
    for planes in (cur_planes, ref_planes):   # no data: the empty border align-views leaves
        empty = planes[0] == 0
        for p in planes[1:]:
            empty &= p == 0
        wplane[empty] = 0.0
    g = _grid([*cur_planes, _alpha(image), *ref_planes, _alpha(reference), wplane], fit_size)
    k = len(names)
    cur, a_cur, ref, a_ref, prior = g[:, :k], g[:, k], g[:, k + 1:2 * k + 1], g[:, 2 * k + 1], g[:, -1]
    finite = np.isfinite(g).all(axis=1)
    prior = np.where(finite & (a_cur > 1e-3) & (a_ref > 1e-3), np.clip(prior, 0.0, None), 0.0)
    cur, a_cur, ref = (np.where(finite[:, None], cur, 0.0), np.where(finite, a_cur, 0.0),
                       np.where(finite[:, None], ref, 0.0))
    offset = model.endswith("offset")
    if model.startswith("matrix"):
        X = np.column_stack([cur, a_cur]) if offset else cur
        designs = [X] * k
    else:
        designs = [np.column_stack([cur[:, c], a_cur]) if offset else cur[:, c:c + 1] for c in range(k)]
    try:
        fit = robust_fit(designs, ref, prior)
    except DegenerateFit as exc:
        raise OpError(f"the two cameras cannot determine a '{model}' colour fit ({exc}); an image "
                      "with too little contrast (constant) cannot tell a gain from an offset",
                      field="image", file=source_file(image),
                      fix="use model 'gain', connect a matte over textured content both cameras "
                          "see, or check that the plates are not blank") from None
    matrix, off = np.zeros((3, 3)), np.zeros(3)
    idx = [COLOR.index(n) for n in names]
    for c, beta in enumerate(fit.betas):
        if model.startswith("matrix"):
            matrix[idx[c], idx] = beta[:k]
        else:
            matrix[idx[c], idx[c]] = beta[0]
        if offset:
            off[idx[c]] = beta[-1]
    for i in range(3):                       # absent channels: identity
        if COLOR[i] not in names:
            matrix[i, i] = 1.0
    used = prior > 0
    inl = fit.inliers
    share = float(inl.sum() / max(int(used.sum()), 1))
    rms = float(np.sqrt(np.mean(fit.residual[inl] ** 2))) if inl.any() else float("nan")
    spread = float(np.sum((ref[inl] - ref[inl].mean(axis=0)) ** 2))
    explained = 1.0 - float(np.sum(fit.residual[inl] ** 2)) / spread if spread > 0 else 0.0
    return ColorFit(matrix, off, share, rms, explained, int(used.sum()))


def apply_color(image: Image, fit: ColorFit) -> np.ndarray:
    """``image``'s pixels with ``C' = matrix @ C + offset * A`` on its R, G, B; other channels as
    they are. Returns a new (H, W, C) float32 array."""
    names = [c for c in COLOR if c in image.channels]
    idx = [COLOR.index(n) for n in names]
    px = np.array(image.pixels, dtype=np.float32)
    src = [image.channel(n) for n in names]
    alpha = _alpha(image) if np.any(fit.offset != 0) else None
    with np.errstate(invalid="ignore", over="ignore"):
        for i, n in zip(idx, names):
            row = fit.matrix[i]
            plane = px[:, :, image.index(n)]
            plane[...] = 0.0
            for j, other in zip(idx, src):    # zero terms skipped: a NaN stays in its channel
                if row[j] != 0:
                    plane += np.float32(row[j]) * other
            if alpha is not None:
                plane += np.float32(fit.offset[i]) * alpha
    return px


def _matte_weight(mattes: tuple[Image, Image], image: Image) -> np.ndarray:
    for m in mattes:
        if m.size != image.size:
            raise OpError(f"a matte is {m.width}x{m.height} but the camera is "
                          f"{image.width}x{image.height}", field="matte", file=source_file(m),
                          fix="give the matte the plates' resolution")
    here, there = (np.clip(np.nan_to_num(matte_values(m)), 0, 1) for m in mattes)
    return here * there


def _compose(first: ColorFit, then: ColorFit) -> ColorFit:
    """``then`` after ``first`` (C' = M C + o A composes as M2 M1 and M2 o1 + o2); the statistics
    are ``first``'s (the link of the camera itself)."""
    return ColorFit(then.matrix @ first.matrix, then.matrix @ first.offset + then.offset,
                    first.inliers, first.residual, first.explained, first.samples)


def _compute(params: ColorMatchParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    images = inputs["image"]
    view = view_number(ctx.sample, "color-match")
    if len(images) == 1:
        return images[0]                              # the reference camera: unchanged, bit for bit
    image, cams = images[0], images[1:]
    ref_view = reference_view(params.reference, rig_views(ctx.input_ranges))
    path = _path(params, view, ref_view)
    if cams[0] is not image:
        require_same_size(image, cams[0], f"the same camera at fit_frame {params.fit_frame}")
    mattes = inputs.get("matte")
    fit = None
    for i in range(len(path) - 1):
        a, b = cams[i], cams[i + 1]
        what = "the reference camera" if path[i + 1] == ref_view else f"camera {path[i + 1]}"
        require_same_size(a, b, what)
        weight = None if mattes is None else _matte_weight((mattes[i], mattes[i + 1]), a)
        link = fit_color(a, b, params.model, fit_size=params.fit_size, weight=weight)
        if link.inliers < params.min_inliers or link.explained < _MIN_EXPLAINED:
            ctx.warn(f"view {path[i]}: the colour fit to view {path[i + 1]} is doubtful (it keeps "
                     f"{link.inliers * 100:.0f} % of the compared pixels and explains "
                     f"{max(link.explained, 0) * 100:.0f} % of their colour variance); check the "
                     "cameras are aligned (align-views first) or connect a matte over content both "
                     "cameras see")
        fit = link if fit is None else _compose(fit, link)
    assert fit is not None
    report = {"view": view, "reference": ref_view, "model": params.model, "pairs": params.pairs,
              "compared_with": path[1], **fit.report()}
    if params.fit_frame is not None:
        report["fit_frame"] = params.fit_frame
    return Image(apply_color(image, fit), image.channels, with_report(image.meta, "color-match", report))


COLOR_MATCH = Operator(
    name="color-match",
    version=1,
    summary="Match each camera of a rig in colour to a reference camera (robust gain/offset or 3x3 fit)",
    params=ColorMatchParams,
    compute=_compute,
    inputs=(Port("image", "the rig's cameras (views), premultiplied linear colour"),
            Port("matte", "optional: where to compare the cameras (its A channel, or its only "
                          "channel; a rig or a still)", optional=True)),
    doc=__doc__ or "",
    outputs="the input's channels; R G B transformed to match the reference camera, every other "
            "channel unchanged; the fit in metadata 'color-match.*'",
    needs=_needs,
    needs_ranges=True,
    check_links=image_link_problems,
)
