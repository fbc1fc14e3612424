"""``warp``: the image at a fractional sample from one neighbour and the vectors between them.

At sample ``f = n + t`` along ``axis`` (``n`` an integer, ``0 < t < 1``), side ``previous`` builds
the in-between from the image at ``n``, side ``next`` from the image at ``n + 1``. Two such warps
meet in `blend` (mode ``inbetween``), which weighs them by time and visibility.

Method (the frame-interpolation algorithm of Baker et al., IJCV 2011, one side at a time):

1. **Vectors of this side.** ``previous``: ``fwd`` of the vector image at ``n`` (n -> n+1);
   ``next``: ``bwd`` of the vector image at ``n + 1`` (n+1 -> n). ``tau`` is the fraction of the
   way to travel: ``t`` from ``n``, ``1 - t`` from ``n + 1``.
2. **Confidence and occlusion of each source pixel.** From the vector image's ``fwd.conf`` /
   ``fwd.occ`` (``bwd.conf`` / ``bwd.occ`` for ``next``) when present (``vector-smooth``), else
   by the forward-backward check against the other sample's vectors (Sundaram et al., ECCV
   2010; `operators.vectors.consistency.fb_consistency`).
3. **Trajectory.** With ``motion='quadratic'`` (default) and the vectors to the *outer*
   neighbour present (``bwd`` at ``n``, toward ``n - 1``, for ``previous``; ``fwd`` at ``n + 1``,
   toward ``n + 2``, for ``next``), each pixel follows the parabola through the three samples
   (constant acceleration; quadratic video interpolation, Xu et al., NeurIPS 2019): with ``v``
   this side's vector and ``o`` the outer one, the displacement after ``tau`` of the way is
   ``tau (v - o) / 2 + tau^2 (v + o) / 2``, which is ``tau v`` for constant motion (``o = -v``)
   and exactly ``v`` at ``tau = 1``. Without the outer vectors (the first and last in-between
   of a sequence: those planes are all zero, or their confidence is 0 everywhere), or with
   ``motion='linear'``, the displacement is ``tau v``. The parabola assumes equally spaced
   samples (frames; views of a rig with even spacing).
4. **Forward splat** of the displacements to the in-between time with the importance
   ``exp(sharpness * z)`` (softmax splatting, Niklaus & Liu, CVPR 2020), bilinear weights to
   the four nearest pixels, normalised; see `operators.inbetween._splat`. The importance is
   ``z = conf + DEPTH_WEIGHT * front``, a depth-order proxy that needs neither depth nor the
   other image. ``conf`` decides first: a pixel hidden at the *other* sample (occluded,
   confidence near 0) is being covered by a nearer surface on its way there, so where it lands
   together with a consistent pixel, the consistent one (the occluder, in front) wins. Where two
   consistent surfaces meet (one passes over the other only for a moment), ``front`` (0..1,
   `operators.inbetween._depth.front_ness`) decides by the ``background`` rule: the surface
   moving least like the background is in front. ``DEPTH_WEIGHT`` = 0.5 < 1 keeps it from
   overruling the consistency check. Pixels whose vector leaves the frame cannot be checked and
   get ``conf = 0.5`` here.
5. **Hole filling.** Output pixels nothing lands on show content this neighbour does not have
   (it was hidden in this neighbour). They take the background side's vector along their row and
   column (`operators.vectors.smooth.fill_occluded`, rule ``background``) so the picture there is
   at least plausible; their visibility is 0 so `blend` takes them from the other side.
6. **Backward sampling** of the neighbour at ``x - tau v_t(x)`` with ``filter`` (OpenCV
   ``remap``; by default Lanczos over 8x8 up to 1.5 megapixels and bicubic above, where
   it measured the same on the bench at a fifth of the time), edges repeated. Every channel
   of the image travels with the same vectors: premultiplied colour, alpha and any other layer.

Output: the neighbour's channels, warped, plus ``inbetween.vis`` (0..1): this side's visibility
and confidence at each output pixel, ``clip(coverage / FULL_COVERAGE, 0, 1) * reliability``, where
coverage is the splatted area (0 in holes) and reliability the importance-weighted mean over the
pixels that landed there of ``conf`` for a visible pixel and ``OCCLUDED_RELIABILITY`` (0.5) for
one hidden at the other sample (still the only view of that surface: it must not count as
missing), and 0 where the sampling position lies outside the span of the neighbour's pixel
centres (the filter would repeat edge values there).

Large plates (``vector_resolution``, default ``auto``: over 1.5 megapixels) run steps 2 to 5 on
the vectors reduced by 2 in each direction (`operators.vectors._workres`), a quarter of the
pixels. The splatted field is enlarged again and its motion edges are put back on full-size
pixels by looking up the full-size path of the source pixel each output pixel's content
comes from (holes keep the filled vector); the image itself is always sampled at full size.
Visibility keeps the reduced field's 2-pixel blocks. On the moving-layer known answer at half
resolution this leaves errors along the layer's edges only (mean 0.003 against < 2e-5 at full);
on 2048x1080 leave-one-out (our demo scene and a synthetic pan, two rebuilt frames each) the
PSNR was within 0.03 dB of the full-resolution result (higher on 3 of the 4 frames), in about
25 % less time per in-between.

At an integer sample along ``axis`` the node asks only for the image there and returns it
unchanged, bit for bit, without ``inbetween.vis`` (a real frame is not an in-between).

Bicubic and Lanczos filters overshoot at sharp edges (negative values, alpha outside 0..1 in
premultiplied images), as any such resampling does; bilinear never does, but it blurs: sampling
halfway between pixel centres averages two of them. Measured on the leave-one-out bench
(bench/inbetween.py, quadratic motion): Lanczos against bilinear, carphone +0.36 dB mean PSNR
(but -0.2 dB on its 5th-percentile frame, where the vectors are off and blur hides it), synthetic
pan +3.5 dB, demo scene -0.14 dB.

Resampling happens on the values as given: linear light for plates (compositing practice).
Footage that was scaled and filtered as display-encoded video (such as the carphone test
sequence) scores about 0.3 dB higher in PSNR on encoded values when it is resampled encoded;
that is a property of how such footage was made, not a reason to resample plates encoded.

References
----------
.. [1] Baker, S., Scharstein, D., Lewis, J.P., Roth, S., Black, M.J., Szeliski, R., "A database and
   evaluation methodology for optical flow", IJCV 92(1), 1-31, 2011.
.. [2] Niklaus, S. and Liu, F., "Softmax splatting for video frame interpolation", CVPR 2020.
.. [3] Sundaram, N., Brox, T. and Keutzer, K., "Dense point trajectories by GPU-accelerated large
   displacement optical flow", ECCV 2010.
.. [4] Xu, X., Siyao, L., Sun, W., Yin, Q. and Yang, M.-H., "Quadratic video interpolation",
   NeurIPS 2019 (motion with constant acceleration through three frames).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from fractions import Fraction
from typing import Any, Literal

import cv2
import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry.operator import OpContext, Operator, Port
from graphcore.sample import Sample
from operators.inbetween._depth import front_ness
from operators.inbetween._splat import FULL_COVERAGE, splat_vectors
from operators.vectors import _workres as R
from operators.vectors._workres import Resolution
from operators.vectors.channels import BWD, BWD_CONF, BWD_OCC, FWD, FWD_CONF, FWD_OCC
from operators.vectors.consistency import fb_consistency, target_outside

__all__ = ["WARP", "WarpParams", "warp", "warp_needs", "VIS", "OCCLUDED_RELIABILITY", "along",
           "split_sample", "trajectory"]

#: Channel holding a side's visibility/confidence at each output pixel (0..1).
VIS = "inbetween.vis"
#: Reliability of a source pixel that is hidden at the other sample (see the module docstring).
OCCLUDED_RELIABILITY = 0.5
#: Confidence used for the importance of a pixel whose vector leaves the frame (cannot be checked).
OUTSIDE_Z = 0.5
#: Full-size lookups that put the motion edges back after half-resolution splatting (a second
#: one changed the moving-layer known answer's mean error by under 5 %).
LOOKUPS = 1
#: Weight of the depth-order proxy ``front`` against the confidence in the importance.
DEPTH_WEIGHT = 0.5

_FILTERS = {"bilinear": cv2.INTER_LINEAR, "bicubic": cv2.INTER_CUBIC, "lanczos": cv2.INTER_LANCZOS4}


class WarpParams(BaseModel):
    """Params of ``warp``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    side: Literal["previous", "next"] = Field(
        ..., description="Which neighbour to build from: 'previous' (the image at floor f) or "
                         "'next' (the image at floor f + 1).")
    axis: Literal["frame", "view"] = Field(
        "frame", description="The axis the in-between lies on: 'frame' (time) or 'view' (cameras "
                             "of a rig).")
    filter: Literal["auto", "bilinear", "bicubic", "lanczos"] = Field(
        "auto", description="Resampling filter for the image: 'lanczos' (8x8; sharpest, can ring "
                            "and overshoot at hard edges), 'bicubic' (4x4), 'bilinear' (never "
                            "overshoots, but blurs); 'auto' = 'lanczos' up to 1.5 megapixels and "
                            "'bicubic' above (at 2048x1080 the two differed by under 0.1 dB on the "
                            "leave-one-out bench and bicubic was about 5x faster).")
    motion: Literal["quadratic", "linear"] = Field(
        "quadratic", description="Path of each pixel between the samples: 'quadratic' = constant "
                                 "acceleration through the previous, this and the next sample, "
                                 "using the vectors to the outer neighbours where they exist "
                                 "(linear at the ends of a sequence); 'linear' = a straight line "
                                 "at constant speed. Both assume equally spaced samples.")
    sharpness: float = Field(
        10.0, ge=0.0, le=50.0,
        description="alpha of the splatting importance exp(alpha * confidence): how firmly a "
                    "consistent surface wins over one being covered where both land on a pixel; "
                    "0 averages them.")
    background: Literal["dominant", "slower"] = Field(
        "dominant", description="How the farther surface is recognised, to fill holes from it and to "
                                "put it behind where two surfaces meet: 'dominant' = it moves with "
                                "the frame's dominant motion; 'slower' = it has the smaller vector "
                                "(locked-off camera, parallel stereo).")
    vector_resolution: Resolution = Field(
        "auto", description="Resolution of the vector work (importance, splatting, hole filling): "
                            "'full'; 'half' (a quarter of the pixels; the motion edges are put back "
                            "on full-size pixels by looking up the full-size vectors, and the image "
                            "is always sampled at full size); 'auto' = 'half' on plates over 1.5 "
                            "megapixels (HD, 2K and larger), 'full' below.")


def along(sample: Sample, axis: str) -> Fraction:
    """The coordinate of ``sample`` on ``axis`` ('frame' or 'view')."""
    return sample.frame if axis == "frame" else sample.view


def split_sample(sample: Sample, axis: str) -> tuple[int, Fraction]:
    """``(n, t)`` with ``along(sample, axis) = n + t``, ``n`` an integer, ``0 <= t < 1``."""
    pos = along(sample, axis)
    n = math.floor(pos)
    return n, pos - n


def _at(sample: Sample, axis: str, n: int) -> Sample:
    return sample.at_frame(n) if axis == "frame" else sample.at_view(n)


def warp_needs(params: WarpParams, sample: Sample) -> dict[str, Sample]:
    """Integer sample: the image there only. Fractional ``n + t``: the image at the neighbour
    (``n`` or ``n + 1``) and the vectors at ``n`` and ``n + 1``."""
    n, t = split_sample(sample, params.axis)
    if t == 0:
        return {"image": sample}
    lo, hi = _at(sample, params.axis, n), _at(sample, params.axis, n + 1)
    return {"image": lo if params.side == "previous" else hi, "vectors": (lo, hi)}


def _outer(img: Image, previous: bool) -> np.ndarray | None:
    """The vectors at ``img`` toward the outer neighbour (``bwd`` at n for side previous, ``fwd``
    at n + 1 for side next), or None where there is none: channels missing, all zero (what
    flow-estimate gives at a sequence end) or with confidence 0 everywhere (vector-smooth)."""
    names, conf_name = (BWD, BWD_CONF) if previous else (FWD, FWD_CONF)
    if not all(c in img.channels for c in names):
        return None
    if img.has(conf_name) and not np.any(img.channel(conf_name) > 0):   # NaN counts as 0
        return None
    plane = _plane(img, names)
    return plane if np.any(plane) else None


def trajectory(vec: np.ndarray, outer: np.ndarray | None, tau: float) -> np.ndarray:
    """Vectors ``u`` with ``tau * u`` = each pixel's displacement after ``tau`` of the way.

    Parameters
    ----------
    vec : ndarray, shape (H, W, 2)
        This side's vectors toward the other neighbour, ``v``.
    outer : ndarray, shape (H, W, 2), or None
        The same pixels' vectors toward the outer neighbour, ``o`` (one sample the other way);
        None: linear motion.
    tau : float
        Fraction of the way, 0 < tau <= 1.

    Returns
    -------
    ndarray, shape (H, W, 2), float32
        ``v`` (linear) or ``(v - o) / 2 + tau (v + o) / 2`` (the parabola through the three
        samples, Xu et al., NeurIPS 2019).
    """
    if outer is None:
        return np.asarray(vec, np.float32)
    v = np.asarray(vec, np.float32)
    o = np.asarray(outer, np.float32)
    # (v - o) / 2 + tau (v + o) / 2 = v (1 + tau) / 2 + o (tau - 1) / 2, in one pass
    out = cv2.addWeighted(v, 0.5 * (1.0 + tau), o, 0.5 * (tau - 1.0), 0.0, dtype=cv2.CV_32F)
    return out.reshape(v.shape)


def link_problems(params: WarpParams, connected: frozenset[str]) -> list[OpError]:
    """Both ports must be connected (also run by ``midframe check``)."""
    out = []
    if "image" not in connected:
        out.append(OpError("input 'image' is not connected", field="image",
                           fix="connect the plate to build the in-between from to 'image'"))
    if "vectors" not in connected:
        out.append(OpError("input 'vectors' is not connected: an in-between needs the motion vectors "
                           "between its neighbours", field="vectors",
                           fix="connect a vector-smooth (or flow-estimate) node to 'vectors'"))
    return out


def _plane(img: Image, names: tuple[str, ...]) -> np.ndarray:
    """(H, W, len(names)) float32 copy of ``img``'s channels ``names``, non-finite values as 0."""
    out = np.stack([img.channel(c) for c in names], axis=2)
    with np.errstate(invalid="ignore", over="ignore"):
        finite = np.isfinite(np.sum(out, dtype=np.float64))   # a sum is finite iff every value is
    if not finite:
        out[~np.isfinite(out)] = 0.0
    return out


def _require(img: Image | None, names: tuple[str, ...], where: str) -> Image:
    if img is None:
        raise OpError(f"no vectors {where}: an in-between needs both of its neighbours",
                      field="vectors", fix="render in-betweens only between two existing samples")
    missing = [c for c in names if c not in img.channels]
    if missing:
        raise OpError(f"the vectors {where} lack channel{'s' if len(missing) > 1 else ''} "
                      f"{', '.join(missing)} (they have {', '.join(img.channels)})", field="vectors",
                      fix="connect a vector-smooth or flow-estimate node (channels fwd.x fwd.y bwd.x "
                          "bwd.y) to 'vectors'")
    return img


def _confidence(own: Image, other: Image, vec: np.ndarray, fwd_side: bool) -> tuple[np.ndarray, np.ndarray]:
    """(conf, occ) of this side's source pixels: from the vector image's channels when present,
    else from the forward-backward check against the other sample's opposite vectors."""
    conf_name, occ_name = (FWD_CONF, FWD_OCC) if fwd_side else (BWD_CONF, BWD_OCC)
    if own.has(conf_name):
        conf = np.clip(own.channel(conf_name), np.float32(0.0), np.float32(1.0))   # +-inf to 1, 0
        nan = np.isnan(conf)
        if nan.any():
            conf[nan] = 0.0
        occ = (own.channel(occ_name) > 0.5) if own.has(occ_name) else (conf < 0.5)
        return conf, occ
    back = _plane(other, BWD if fwd_side else FWD)
    conf, occ = fb_consistency(vec, back)
    return conf, occ > 0.5


def _remap(px: np.ndarray, mx: np.ndarray, my: np.ndarray, interp: int, extra: int = 0) -> np.ndarray:
    """OpenCV remap of any number of channels (it takes at most 4 at a time), into an array with
    ``extra`` more channels left for the caller to fill."""
    out = np.empty(mx.shape + (px.shape[2] + extra,), np.float32)
    n = px.shape[2]
    for c in range(0, n, 4):
        e = min(c + 4, n)
        part = cv2.remap(np.ascontiguousarray(px[:, :, c:e]), mx, my, interp,
                         borderMode=cv2.BORDER_REPLICATE)
        out[:, :, c:e] = part.reshape(mx.shape + (-1,))
    return out


def warp(params: WarpParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    """Compute ``warp`` at ``ctx.sample``.

    Parameters
    ----------
    params : WarpParams
    inputs : mapping
        ``"image"``: Image, shape (H, W, C), the neighbour (any channels: premultiplied R G B, A,
        other layers). ``"vectors"``: tuple (at n, at n + 1) of vector Images, shape (H, W, >= 4),
        with ``fwd.x fwd.y bwd.x bwd.y`` and optionally ``fwd.conf bwd.conf fwd.occ bwd.occ``
        (`operators.vectors.channels`); None entries beyond the sequence. At an integer sample
        only ``"image"`` is given.
    ctx : OpContext

    Returns
    -------
    Image, shape (H, W, C + 1)
        The image's channels warped to the in-between, then ``inbetween.vis``. At an integer
        sample: the input image itself (C channels), bit for bit.

    Raises
    ------
    OpError
        ``field='image'``: no image at the neighbour (the sequence ends there); ``field='vectors'``:
        no vectors or missing vector channels, or vectors of another size than the image.
    """
    image = inputs.get("image")
    n, t = split_sample(ctx.sample, params.axis)
    word = params.axis
    if image is None:
        k = n if params.side == "previous" else n + 1
        raise OpError(f"no {word} {k} to build the in-between at {ctx.sample} from: an in-between "
                      f"needs the {word}s on both sides of it", field="image",
                      fix=f"render in-betweens only between two existing {word}s (a sequence of one "
                          f"{word} has none)")
    if t == 0:
        return image  # a real sample: unchanged, bit for bit
    vectors = inputs.get("vectors")
    if not isinstance(vectors, tuple) or len(vectors) != 2:
        raise OpError("input 'vectors' is not connected: an in-between needs the motion vectors "
                      "between its neighbours", field="vectors",
                      fix="connect a vector-smooth (or flow-estimate) node to 'vectors'")
    lo = _require(vectors[0], FWD + BWD, f"at {word} {n}")
    hi = _require(vectors[1], FWD + BWD, f"at {word} {n + 1}")
    for v, k in ((lo, n), (hi, n + 1)):
        if v.size != image.size:
            raise OpError(f"the vectors at {word} {k} are {v.width}x{v.height} but the image is "
                          f"{image.width}x{image.height}", field="vectors",
                          fix="estimate the vectors at the image's resolution, or add a `resize` node")
    previous = params.side == "previous"
    own, other = (lo, hi) if previous else (hi, lo)
    vec = _plane(own, FWD if previous else BWD)
    tau = float(t) if previous else float(1 - t)

    h, w = image.height, image.width
    step = R.work_step(h, w, params.vector_resolution)
    quadratic = params.motion == "quadratic"
    if step > 1:      # the vector work on a quarter of the pixels (operators.vectors._workres)
        own_w = R.shrink_image(own, step)
        # the other side's vectors serve only a consistency check the vector image lacks
        other_w = other if own.has(FWD_CONF if previous else BWD_CONF) else R.shrink_image(other, step)
        vec_w = _plane(own_w, FWD if previous else BWD)
        # the full-size path, for putting the motion edges back after the splat
        path = trajectory(vec, _outer(own, previous) if quadratic else None, tau)
    else:
        own_w, other_w, vec_w = own, other, vec
    conf_w, occ_w = _confidence(own_w, other_w, vec_w, previous)
    outer = _outer(own_w, previous) if quadratic else None
    path_w = trajectory(vec_w, outer, tau)
    # Phase 1: confidence of the source pixels -> importance and reliability.
    front = front_ness(vec_w, ~occ_w, params.background)
    z = np.where(target_outside(vec_w), np.float32(OUTSIDE_Z), conf_w) + np.float32(DEPTH_WEIGHT) * front
    rel = np.where(occ_w, np.float32(OCCLUDED_RELIABILITY), conf_w)
    # Phase 2: each pixel's path, splatted to the in-between time; fill the holes.
    sp = splat_vectors(path_w, tau, z, rel, sharpness=params.sharpness)
    vt, holes, coverage, reliability = sp.vectors, sp.holes, sp.coverage, sp.reliability
    if holes.any() and not holes.all():
        from operators.vectors.smooth import fill_occluded

        vt = fill_occluded(vt, holes.astype(np.float32), rule=params.background)
    gx = np.arange(w, dtype=np.float32)[None, :]
    gy = np.arange(h, dtype=np.float32)[:, None]
    ftau = np.float32(tau)
    if step > 1:
        vt = R.enlarge_vectors(vt, h, w)
        holes = R.enlarge(holes.view(np.uint8), h, w, nearest=True).view(bool)
        coverage, reliability = R.enlarge(coverage, h, w), R.enlarge(reliability, h, w)
        # Put the motion edges back on full-size pixels: each output pixel (not a hole) takes
        # the full-size path of the source pixel the enlarged field says it came from.
        for _ in range(LOOKUPS):
            look = cv2.remap(path, gx - ftau * vt[:, :, 0], gy - ftau * vt[:, :, 1],
                             cv2.INTER_NEAREST, borderMode=cv2.BORDER_REPLICATE)
            vt = np.where(holes[:, :, None], vt, look)
    # Phase 3: sample the neighbour where each output pixel's content was.
    mx = gx - ftau * vt[:, :, 0]
    my = gy - ftau * vt[:, :, 1]
    keep = [i for i, c in enumerate(image.channels) if c != VIS]
    src = np.asarray(image.pixels)
    filt = params.filter
    if filt == "auto":
        filt = "lanczos" if h * w <= R.AUTO_PIXELS else "bicubic"
    warped = _remap(src if len(keep) == src.shape[2] else src[:, :, keep], mx, my, _FILTERS[filt],
                    extra=1)
    vis = np.clip(coverage / np.float32(FULL_COVERAGE), 0.0, 1.0) * reliability
    vis[holes] = 0.0
    vis[(mx < 0) | (mx > w - 1) | (my < 0) | (my > h - 1)] = 0.0   # edge values repeated: unseen

    channels = tuple(image.channels[i] for i in keep) + (VIS,)
    out = warped
    out[:, :, -1] = vis
    meta = dict(image.meta)
    meta["inbetween.side"] = params.side
    meta["inbetween.holes"] = float(holes.mean())
    meta["inbetween.motion"] = "quadratic" if outer is not None else "linear"
    return Image(out, channels, meta)


WARP = Operator(
    name="warp",
    version=3,
    summary="The image at a fractional frame (or view) from one neighbour and the vectors: splat, "
            "fill holes, resample; with this side's visibility",
    params=WarpParams,
    compute=warp,
    inputs=(
        Port("image", "the plate (all channels travel: premultiplied colour, alpha, other layers)"),
        Port("vectors", "vector images (fwd.x fwd.y bwd.x bwd.y, optionally fwd.conf bwd.conf fwd.occ "
                        "bwd.occ) from vector-smooth or flow-estimate, asked for at both neighbours"),
    ),
    doc=__doc__ or "",
    outputs="the image's channels warped to the in-between, plus inbetween.vis (0..1); at an integer "
            "sample the image unchanged",
    needs=warp_needs,
    check_links=link_problems,
    edge_samples=True,
)
