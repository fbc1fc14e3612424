"""``flow-estimate``: motion vectors between an image and its neighbours along time or the rig.

At sample ``s`` the node asks its image input for ``s - 1``, ``s`` and ``s + 1`` along ``axis`` and
returns ``fwd.x fwd.y`` (``s`` toward ``s + 1``) and ``bwd.x bwd.y`` (``s`` toward ``s - 1``), in
pixels at ``s``'s resolution, x right, y down (see ``operators.vectors.channels``). At the ends
of a sequence the missing direction is zero; ``vector-smooth`` gives it confidence 0.

Matching happens on a perceptual encoding of the linear plate (the sRGB curve of IEC 61966-2-1,
values clipped to 0..1.5), so errors in shadows and highlights weigh alike.

Engines
-------
``midframe`` (default): our own estimator, a Bayesian MAP estimate of the vector field (Konrad and
Dubois, IEEE PAMI 14(9), 1992): a robust likelihood of how well pixels match times a smoothness
prior over neighbouring vectors, solved coarse to fine; see ``operators.vectors.estimate``.
``dis``: OpenCV's dense inverse search (Kroeger et al., ECCV 2016) on the perceptual luma, for fast
previews and as the baseline (presets: draft = FAST, standard = MEDIUM, high = MEDIUM at full
resolution).
"""

from __future__ import annotations

import weakref
from collections import OrderedDict
from collections.abc import Mapping
from typing import Any, Literal

import cv2
import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry import OpContext, Operator, Port
from graphcore.sample import Sample
from operators.vectors.channels import BWD, FWD

__all__ = ["FLOW_ESTIMATE", "FlowParams", "perceptual", "estimate_pair", "neighbour", "match_channels"]

Quality = Literal["draft", "standard", "high"]


class FlowParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    axis: Literal["frame", "view"] = Field(
        "frame", description="Which neighbours: 'frame' (time: a plate) or 'view' (cameras of a rig).")
    engine: Literal["midframe", "dis"] = Field(
        "midframe", description="'midframe': our Bayesian MAP estimator; 'dis': OpenCV dense inverse "
                                "search, fast, for previews and as a baseline.")
    quality: Quality = Field(
        "standard", description="Preset: 'draft' (fast, for previews), 'standard', 'high' (slowest).")
    search_range: float | None = Field(
        None, gt=0, le=4096, description="Largest displacement searched for, in pixels at full "
                                         "resolution; default from the preset and the image size.")
    prior_strength: float | None = Field(
        None, ge=0, description="Weight of the smoothness prior against the match likelihood "
                                "(the MRF weight lambda); higher = smoother vectors. Default from the "
                                "preset. midframe engine only.")
    levels: int | None = Field(
        None, ge=1, le=12, description="Pyramid levels (coarse-to-fine); default: as many as the image "
                                       "size and search range need.")
    prefilter: float = Field(
        0.0, ge=0, le=10, description="Gaussian blur sigma in pixels applied before matching, against "
                                      "film grain and sensor noise; 0 = off.")
    channels: tuple[str, ...] | None = Field(
        None, description="Channels to match on; default R G B when present, else the image's only "
                          "channel.")


def neighbour(sample: Sample, axis: str, step: int) -> Sample:
    """The sample ``step`` away from ``sample`` along ``axis``."""
    return sample.shifted(frames=step) if axis == "frame" else sample.shifted(views=step)


def _needs(params: FlowParams, sample: Sample) -> dict[str, tuple[Sample, Sample, Sample]]:
    return {"image": (neighbour(sample, params.axis, -1), sample, neighbour(sample, params.axis, 1))}


def match_channels(image: Image, wanted: tuple[str, ...] | None) -> tuple[str, ...]:
    if wanted is not None:
        missing = [c for c in wanted if c not in image.channels]
        if missing:
            raise OpError(f"channels {', '.join(missing)} are not in the image "
                          f"(it has {', '.join(image.channels)})", field="channels",
                          fix="name channels the image has, or leave 'channels' out")
        return wanted
    if image.has("R", "G", "B"):
        return ("R", "G", "B")
    if len(image.channels) == 1:
        return image.channels
    raise OpError(f"no R G B channels to match on (the image has {', '.join(image.channels)})",
                  field="channels", fix="set 'channels' to the one to three channels to match on")


def perceptual(image: Image, channels: tuple[str, ...]) -> np.ndarray:
    """(H, W, C) float32 perceptual encoding of linear ``channels``: sRGB curve, clipped 0..1.5,
    non-finite values as 0."""
    from operators.vectors._encode import perceptual as encode

    idx = [image.index(c) for c in channels]
    if idx == list(range(idx[0], idx[0] + len(idx))):     # adjacent: a view, no extra copy
        return encode(image.pixels[:, :, idx[0]:idx[0] + len(idx)], ceiling=1.5)
    return encode(image.select(channels).pixels, ceiling=1.5)


#: Encodings of the last few images matched, so a frame's encoding is made once for the three
#: flow-estimate samples that use it (its own and its two neighbours'), not three times.
_ENCODED: "OrderedDict[tuple[int, tuple[str, ...]], tuple[weakref.ref, np.ndarray]]" = OrderedDict()
_ENCODED_KEEP = 4


def _encoded(image: Image, channels: tuple[str, ...]) -> np.ndarray:
    """``perceptual(image, channels)``, reused while the same pixel array is alive.

    Images are immutable, so the pixel array's identity names its content: the entry holds a weak
    reference to it and is used only while that very array still exists (an id can be reused
    after an array is freed). The encoding is read-only for its users.
    """
    px = image.pixels
    key = (id(px), channels)
    hit = _ENCODED.get(key)
    if hit is not None and hit[0]() is px:
        _ENCODED.move_to_end(key)
        return hit[1]
    enc = perceptual(image, channels)
    enc.flags.writeable = False
    _ENCODED[key] = (weakref.ref(px), enc)
    while len(_ENCODED) > _ENCODED_KEEP:
        _ENCODED.popitem(last=False)
    return enc


def _dis(first: np.ndarray, second: np.ndarray, quality: str, prefilter: float) -> np.ndarray:

    def grey(img: np.ndarray) -> np.ndarray:
        g = img.mean(axis=2) if img.shape[2] != 3 else img @ np.array([0.2126, 0.7152, 0.0722], np.float32)
        if prefilter > 0:
            g = cv2.GaussianBlur(g, (0, 0), prefilter)
        return np.clip(g * 255.0 + 0.5, 0, 255).astype(np.uint8)

    preset = {"draft": cv2.DISOPTICAL_FLOW_PRESET_FAST}.get(quality, cv2.DISOPTICAL_FLOW_PRESET_MEDIUM)
    dis = cv2.DISOpticalFlow_create(preset)
    if quality == "high":
        dis.setFinestScale(0)
    flow = dis.calc(grey(first), grey(second), None)
    return np.nan_to_num(flow.astype(np.float32))


def estimate_pair(first: np.ndarray, second: np.ndarray, params: FlowParams) -> np.ndarray:
    """Vectors at ``first``'s pixels toward ``second``: (H, W, 2) float32."""
    h, w = first.shape[:2]
    if min(h, w) < 2:
        return np.zeros((h, w, 2), np.float32)
    if params.engine == "dis":
        return _dis(first, second, params.quality, params.prefilter)
    from operators.vectors.estimate import estimate_flow

    return estimate_flow(first, second, quality=params.quality, search_range=params.search_range,
                         prior_strength=params.prior_strength, levels=params.levels,
                         prefilter=params.prefilter)


def _compute(params: FlowParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    prev, cur, nxt = inputs["image"]
    channels = match_channels(cur, params.channels)
    here = _encoded(cur, channels)
    planes = [np.zeros((cur.height, cur.width, 2), np.float32)] * 2   # fwd, bwd; zero without a neighbour
    jobs = []
    for slot, other, name in ((0, nxt, "next"), (1, prev, "previous")):
        if other is None:
            continue
        if other.size != cur.size:
            raise OpError(f"the {name} {params.axis} is {other.width}x{other.height} but this one is "
                          f"{cur.width}x{cur.height}", field="image",
                          fix="make every frame or camera the same size, e.g. with a `resize` node")
        match_channels(other, channels)
        jobs.append((slot, _encoded(other, channels)))
    if len(jobs) == 2 and params.engine == "midframe" and cv2.getNumThreads() >= 2:
        # the two directions side by side when this process may use two cores (a serial render;
        # pool and Dask workers pin OpenCV to one thread each and run them one after the other).
        # Each direction's result is the same either way: nothing is shared but read-only inputs.
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(2) as pool:
            done = [pool.submit(estimate_pair, here, other, params) for _, other in jobs]
            for (slot, _), fut in zip(jobs, done):
                planes[slot] = fut.result()
    else:
        for slot, other in jobs:
            planes[slot] = estimate_pair(here, other, params)
    out = cv2.merge([*cv2.split(planes[0]), *cv2.split(planes[1])])   # one interleaving pass
    meta = {"vectors.engine": params.engine, "vectors.quality": params.quality, "vectors.axis": params.axis}
    return Image(out, FWD + BWD, meta)


FLOW_ESTIMATE = Operator(
    name="flow-estimate",
    version=1,
    summary="Motion vectors to the next and previous frame (or camera), both ways, in pixels",
    params=FlowParams,
    compute=_compute,
    inputs=(Port("image", "the plate (or rig of stills) to estimate vectors on"),),
    doc=__doc__ or "",
    outputs="fwd.x fwd.y (toward the next sample), bwd.x bwd.y (toward the previous one), in pixels",
    needs=_needs,
    edge_samples=True,
)
