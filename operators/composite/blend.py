"""``blend``: weighted mix of up to four images, and the time cross-dissolve baseline.

Mode ``mix`` computes, per pixel and channel,

    result = sum_i w_i * I_i            (normalize=False)
    result = sum_i w_i * I_i / sum_i w_i  (normalize=True, default)

over the connected inputs ``I_i`` in port order a, b, c, d. Mode ``time-dissolve`` takes only
``a`` and, at a fractional frame f, returns ``(1 - t) * a(floor f) + t * a(floor f + 1)`` with
``t = f - floor f``: the cross-dissolve that vector retimes are measured against (Baker et al.,
IJCV 2011, use it as a frame-interpolation baseline).

Mode ``inbetween`` joins two in-betweens built by `warp` from either neighbour (``a`` from the
previous sample, ``b`` from the next, each with its ``inbetween.vis`` channel) at ``f = n + t``
along ``axis``: weights ``(1 - t) vis_a`` and ``t vis_b``, normalised, so each side counts by its
distance in time and by how well it sees each pixel (Baker et al., IJCV 2011, weigh the two warped
frames by time and occlusion the same way). Where both sides see a pixel poorly (both
visibilities below ``threshold``) the result fades, over that range, to ``fallback``:
``dissolve`` ((1 - t) a + t b) or ``nearest`` (a for t <= 1/2, else b), and the share of such
pixels is reported as a warning (pixels fully transparent on both sides, A = 0, do not count:
there is nothing to see there, as outside a matted foreground).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from fractions import Fraction
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry.operator import OpContext, Operator, Port
from graphcore.sample import Sample

from ._channels import require_same_size

__all__ = ["BLEND", "PORTS", "BlendParams", "blend", "blend_needs"]

PORTS = ("a", "b", "c", "d")


class BlendParams(BaseModel):
    """Params of ``blend``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    mode: Literal["mix", "time-dissolve", "inbetween"] = Field(
        "mix",
        description=("'mix': weighted sum of the connected inputs a, b, c, d at the same sample. "
                     "'time-dissolve': only 'a', read at the two integer frames around a "
                     "fractional frame and mixed by the fractional part (an integer frame passes "
                     "through unchanged). 'inbetween': 'a' and 'b' are the in-between warped from "
                     "the previous and from the next sample (warp nodes, with inbetween.vis), "
                     "weighted by time and visibility; an integer sample passes 'a' through."),
    )
    weights: tuple[float, ...] | None = Field(
        None,
        min_length=1,
        max_length=4,
        description=("One weight per connected input, in port order a, b, c, d (unconnected ports "
                     "are skipped). Default: equal weights. Negative weights are allowed. "
                     "Mode 'mix' only."),
    )
    normalize: bool = Field(
        True,
        description="Divide the weighted sum by the sum of the weights (which must then not be 0).",
    )
    mix: float | None = Field(
        None,
        ge=0.0,
        le=1.0,
        description=("Shorthand for the two-input cross-dissolve a*(1-mix) + b*mix; needs exactly "
                     "'a' and 'b' connected and cannot be combined with 'weights'. Mode 'mix' only."),
    )

    axis: Literal["frame", "view"] = Field(
        "frame",
        description="Mode 'inbetween': the axis whose fractional part t weighs the two sides "
                    "('frame' = time, 'view' = cameras of a rig).",
    )
    threshold: float = Field(
        0.25, gt=0.0, le=1.0,
        description=("Mode 'inbetween': where both sides' visibility is below this, the result "
                     "fades to the fallback (fully at visibility 0 on both sides)."),
    )
    fallback: Literal["dissolve", "nearest"] = Field(
        "dissolve",
        description=("Mode 'inbetween': what poorly seen pixels show: 'dissolve' = (1-t)*a + t*b, "
                     "'nearest' = a for t <= 1/2, else b."),
    )
    frame_fallback: float | None = Field(
        None, gt=0.0, le=1.0,
        description=("Mode 'inbetween': when more than this share of an in-between's pixels fall "
                     "back (both sides' visibility below 'threshold'), the whole frame is made from "
                     "the two real neighbouring frames instead, with no vectors: 'dissolve' = "
                     "(1-t)*previous + t*next, 'nearest' = a hold of the nearer real frame; the "
                     "render log names every such frame. None (default): never, only regions fall "
                     "back. 0.25 is a cautious start for a shot whose vectors break."),
    )
    mismatch: float = Field(
        0.1, gt=0.0,
        description=("Mode 'inbetween' with frame_fallback: a pixel also counts as failing where the "
                     "two warped sides differ by more than this (mean |a - b| over R, G, B, linear "
                     "light): the vectors brought two different pictures there, as across a cut."),
    )

    @model_validator(mode="after")
    def _check(self) -> BlendParams:
        if self.mode == "inbetween" and (self.mix is not None or self.weights is not None):
            raise ValueError("mode 'inbetween' takes its weights from the sample and the inputs' "
                             "inbetween.vis; remove 'mix' and 'weights' or use mode 'mix'")
        if self.mix is not None and self.weights is not None:
            raise ValueError("give either 'mix' (two-input cross-dissolve) or 'weights', not both")
        if self.mode == "time-dissolve" and (self.mix is not None or self.weights is not None):
            raise ValueError("mode 'time-dissolve' takes its weights from the frame; remove 'mix' "
                             "and 'weights' or use mode 'mix'")
        if self.normalize and self.weights is not None and math.fsum(self.weights) == 0.0:
            raise ValueError("the weights sum to 0, which normalize=true cannot divide by; "
                             "change the weights or set normalize to false")
        if self.weights is not None and not all(math.isfinite(w) for w in self.weights):
            raise ValueError("weights must be finite numbers")
        return self


def blend_needs(params: BlendParams, sample: Sample) -> Mapping[str, Sample | Sequence[Sample]] | None:
    """Samples wanted from the inputs.

    ``mix``: None (every connected port at ``sample``). ``time-dissolve``: ``{"a": (s,)}`` at an
    integer frame, ``{"a": (floor f, floor f + 1)}`` at a fractional frame f, same view.
    ``inbetween``: ``{"a": s}`` where ``s`` is integer along ``axis``, else ``{"a": s, "b": s}``.
    """
    if params.mode == "inbetween":
        pos = sample.frame if params.axis == "frame" else sample.view
        if pos.denominator == 1:
            return {"a": sample}
        if params.frame_fallback is None:
            return {"a": sample, "b": sample}
        # a warp at a real sample passes its image through: a at n and b at n + 1 are the real frames
        lo = math.floor(pos)
        at = sample.at_frame if params.axis == "frame" else sample.at_view
        return {"a": (sample, at(lo)), "b": (sample, at(lo + 1))}
    if params.mode != "time-dissolve":
        return None
    frame = sample.frame
    if frame.denominator == 1:
        return {"a": (sample,)}
    lo = math.floor(frame)
    return {"a": (sample.at_frame(lo), sample.at_frame(lo + 1))}


def _aligned(ref: Image, ref_port: str, other: Image, other_port: str) -> np.ndarray:
    """``other``'s pixels in ``ref``'s channel order, after checking size and channel set."""
    require_same_size(ref, ref_port, other, other_port)
    if set(ref.channels) != set(other.channels):
        only_ref = [c for c in ref.channels if c not in other.channels]
        only_other = [c for c in other.channels if c not in ref.channels]
        raise OpError(
            f"input '{other_port}' has channels {', '.join(other.channels)} but '{ref_port}' has "
            f"{', '.join(ref.channels)} (only in '{ref_port}': {', '.join(only_ref) or 'none'}; "
            f"only in '{other_port}': {', '.join(only_other) or 'none'})",
            field=other_port,
            fix=("blend needs the same channels on every input: select or add channels upstream "
                 f"so '{other_port}' and '{ref_port}' match"),
        )
    if other.channels == ref.channels:
        return other.pixels
    return other.pixels[:, :, [other.index(c) for c in ref.channels]]


def _weighted(images: Sequence[tuple[str, Image]], weights: Sequence[float], normalize: bool) -> Image:
    ref_port, ref = images[0]
    acc = np.zeros(ref.pixels.shape, dtype=np.float32)
    for (port, img), w in zip(images, weights):
        acc += np.float32(w) * _aligned(ref, ref_port, img, port)
    if normalize:
        acc /= np.float32(math.fsum(weights))
    return Image(acc, ref.channels, ref.meta)


def _time_dissolve(a: Image | tuple[Image, ...] | None, ctx: OpContext) -> Image:
    frames = a if isinstance(a, tuple) else (a,)
    if not frames or frames[0] is None:
        raise OpError("input 'a' is not connected", field="a", fix="connect the clip to dissolve to 'a'")
    if len(frames) == 1:
        return frames[0]  # integer frame: unchanged, bit for bit
    frame = Fraction(ctx.sample.frame)
    t = float(frame - math.floor(frame))
    lo, hi = frames
    return _weighted([("a", lo), ("a", hi)], [1.0 - t, t], normalize=False)


def _aligned_to(names: tuple[str, ...], img: Image, port: str) -> np.ndarray:
    """``img``'s planes in the order ``names`` (a real frame: the image the warps read)."""
    missing = [c for c in names if c not in img.channels]
    if missing:
        raise OpError(f"the real frame on '{port}' lacks channels {', '.join(missing)}", field=port,
                      fix=f"connect a `warp` node to '{port}' (at a real frame it passes its image through)")
    return img.pixels[:, :, [img.index(c) for c in names]]


def _inbetween(params: BlendParams, a, b, ctx: OpContext) -> Image:
    """Mode ``inbetween`` (see the module docstring)."""
    from operators.inbetween.warp import VIS, split_sample

    real: tuple[Image, Image] | None = None
    if isinstance(a, tuple) and isinstance(b, tuple):      # frame_fallback: (in-between, real frame)
        (a, real_a), (b, real_b) = a, b
        real = (real_a, real_b)
    if a is None:
        raise OpError("input 'a' is not connected", field="a",
                      fix="connect the warp node that builds from the previous sample to 'a'")
    _, frac = split_sample(ctx.sample, params.axis)
    if frac == 0:
        return a  # a real sample: unchanged, bit for bit
    if b is None:
        raise OpError("input 'b' is not connected", field="b",
                      fix="connect the warp node that builds from the next sample to 'b'")
    for img, port in ((a, "a"), (b, "b")):
        if VIS not in img.channels:
            raise OpError(f"input '{port}' has no {VIS} channel (it has {', '.join(img.channels)}), so "
                          "blend cannot tell where it is reliable", field=port,
                          fix=f"connect a `warp` node's output to '{port}' (it adds {VIS})")
    pb = pb_full = _aligned(a, "a", b, "b")
    vi = a.index(VIS)
    keep = [i for i in range(len(a.channels)) if i != vi]
    t = np.float32(frac)
    va = np.clip(a.pixels[:, :, vi], 0.0, 1.0)
    vb = np.clip(pb[:, :, vi], 0.0, 1.0)
    # the colour planes as views where they are adjacent (no copies of the whole image)
    if keep and keep == list(range(keep[0], keep[0] + len(keep))):
        pa, pb = a.pixels[:, :, keep[0]:keep[-1] + 1], pb[:, :, keep[0]:keep[-1] + 1]
    else:
        pa, pb = a.pixels[:, :, keep], pb[:, :, keep]
    wa, wb = (np.float32(1) - t) * va, t * vb
    total = wa + wb
    safe = np.where(total > 0, total, np.float32(1))
    # seen = (wa a + wb b) / total; fall = (1 - t) a + t b, or the nearest side; in place
    seen = np.multiply(wa[:, :, None], pa)
    part = np.multiply(wb[:, :, None], pb)
    seen += part
    seen /= safe[:, :, None]
    if params.fallback == "dissolve":
        fall = np.multiply(np.float32(1) - t, pa)
        fall += np.multiply(t, pb, out=part)
    else:
        fall = part
        np.copyto(fall, pa if frac <= Fraction(1, 2) else pb)
    best = np.maximum(va, vb)
    s = np.clip(best / np.float32(params.threshold), 0.0, 1.0)
    s[total <= 0] = 0.0
    seen *= s[:, :, None]                     # out = s seen + (1 - s) fall
    fall *= (np.float32(1) - s)[:, :, None]
    seen += fall
    out = seen
    poor = best < params.threshold
    if "A" in a.channels:           # nothing to see where both sides are fully transparent
        ia = a.index("A")
        poor &= (a.pixels[:, :, ia] != 0) | (pb_full[:, :, ia] != 0)
    share = float(np.mean(poor))
    meta = dict(a.meta)
    meta["inbetween.fallback_share"] = share
    names = tuple(a.channels[i] for i in keep)
    failing = share
    if real is not None and params.frame_fallback is not None:
        colour = [i for i, c in enumerate(names) if c in ("R", "G", "B")] or list(range(len(names)))
        apart = np.mean(np.abs(pa[:, :, colour] - pb[:, :, colour]), axis=2) > np.float32(params.mismatch)
        failing = float(np.mean(poor | apart))
    if real is not None and params.frame_fallback is not None and failing > params.frame_fallback:
        lo = _aligned_to(names, real[0], "a")
        hi = _aligned_to(names, real[1], "b")
        if params.fallback == "dissolve":
            out = (np.float32(1) - t) * lo + t * hi
        else:
            out = np.array(lo if frac <= Fraction(1, 2) else hi, np.float32)
        meta["inbetween.fallback"] = "frame"
        ctx.warn(f"whole frame at {ctx.sample} fell back to {'a hold' if params.fallback == 'nearest' else 'a dissolve'} "
                 f"of the real frames: {failing * 100:.1f} % of pixels seen poorly from both sides or "
                 f"differing by more than {params.mismatch:g} (frame_fallback {params.frame_fallback:g})")
        return Image(out, names, meta)
    if share > 0:
        ctx.warn(f"{share * 100:.2f} % of pixels at {ctx.sample} fell back to {params.fallback} "
                 f"(both sides' visibility below {params.threshold:g})")
    return Image(out, tuple(a.channels[i] for i in keep), meta)


def link_problems(params: BlendParams, connected: frozenset[str]) -> list[OpError]:
    """Problems that depend on which ports are connected (also run by ``midframe check``)."""
    names = [p for p in PORTS if p in connected]
    if params.mode == "inbetween":
        missing = [p for p in ("a", "b") if p not in connected]
        if missing:
            return [OpError(f"mode 'inbetween' needs 'a' (warped from the previous sample) and 'b' "
                            f"(warped from the next), but '{missing[0]}' is not connected",
                            field=missing[0],
                            fix=f"connect a `warp` node (side {'previous' if missing[0] == 'a' else 'next'}) "
                                f"to '{missing[0]}'")]
        extra = [n for n in names if n not in ("a", "b")]
        if extra:
            return [OpError(f"mode 'inbetween' reads only 'a' and 'b', but {', '.join(extra)} "
                            f"{'is' if len(extra) == 1 else 'are'} connected", field=extra[0],
                            fix="disconnect the extra inputs, or use mode 'mix'")]
        return []
    if params.mode == "time-dissolve":
        extra = names[1:] if names[:1] == ["a"] else [n for n in names if n != "a"]
        if extra:
            return [OpError(
                f"mode 'time-dissolve' reads only 'a', but {', '.join(extra)} "
                f"{'is' if len(extra) == 1 else 'are'} connected",
                field=extra[0],
                fix="disconnect the extra inputs, or use mode 'mix' to blend several images",
            )]
        if "a" not in connected:
            return [OpError("input 'a' is not connected", field="a", fix="connect the clip to dissolve to 'a'")]
        return []
    if "a" not in connected:
        return [OpError("input 'a' is not connected", field="a", fix="connect an image to 'a'")]
    if params.mix is not None and names != ["a", "b"]:
        return [OpError(
            f"'mix' is a two-input cross-dissolve of 'a' and 'b', but the connected inputs "
            f"are {', '.join(names)}",
            field="mix",
            fix="connect exactly 'a' and 'b', or give 'weights' (one per connected input) instead of 'mix'",
        )]
    if params.mix is None and params.weights is not None and len(params.weights) != len(names):
        return [OpError(
            f"{len(params.weights)} weights given for {len(names)} connected inputs "
            f"({', '.join(names)})",
            field="weights",
            fix=f"give exactly {len(names)} weights, one per connected input in port order",
        )]
    return []

def blend(params: BlendParams, inputs: Mapping[str, Image | tuple[Image, ...] | None],
          ctx: OpContext) -> Image:
    """Weighted mix of the connected inputs, or a time cross-dissolve of ``a``.

    Parameters
    ----------
    params : BlendParams
    inputs : mapping
        ``"a"`` (required), ``"b"``, ``"c"``, ``"d"`` (optional): Image, shape (H, W, C), all of
        one size and one channel set (order may differ; the result uses a's order). In mode
        ``time-dissolve``, ``"a"`` is a tuple of one Image (integer frame) or two Images
        (frames floor f and floor f + 1). In mode ``inbetween``, ``"a"`` and ``"b"`` are the
        warped neighbours, each with an ``inbetween.vis`` plane (``"b"`` is None at an integer
        sample, where only ``"a"`` is read).
    ctx : OpContext
        ``ctx.sample.frame`` gives the dissolve fraction in mode ``time-dissolve``; the frame (or
        view, ``axis``) gives ``t`` in mode ``inbetween``, and ``ctx.warn`` receives the share of
        pixels that fell back.

    Returns
    -------
    Image, shape (H, W, C)
        Same channels as ``a``; every channel (colour, alpha, vectors, conf) is mixed with the
        same weights. Premultiplied colour mixes correctly as it is. Metadata from ``a``.
        The sum is accumulated in float32.

    Raises
    ------
    OpError
        ``field='weights'`` when the number of weights differs from the number of connected
        inputs; ``field='mix'`` when ``mix`` is given without exactly 'a' and 'b' connected;
        ``field=<port>`` for a size mismatch (fix: ``resize``) or a different channel set, or
        for b, c or d connected in mode ``time-dissolve``; ``field='a'/'b'`` in mode ``inbetween``
        for an input without ``inbetween.vis`` or a missing 'b'.

    Notes
    -----
    At an integer frame, time-dissolve returns a's image itself: bit for bit unchanged.
    Mixing vector channels averages motion, which is rarely meaningful; blend them only when
    that is what is wanted.
    """
    if params.mode == "inbetween":
        extra = [p for p in ("c", "d") if inputs.get(p) is not None]
        if extra:
            raise link_problems(params, frozenset({"a", "b", *extra}))[0]
        return _inbetween(params, inputs.get("a"), inputs.get("b"), ctx)  # type: ignore[arg-type]
    problems = link_problems(params, frozenset(p for p in PORTS if inputs.get(p) is not None))
    if problems:
        raise problems[0]
    if params.mode == "time-dissolve":
        return _time_dissolve(inputs.get("a"), ctx)

    connected = [(p, inputs[p]) for p in PORTS if inputs.get(p) is not None]
    if params.mix is not None:
        weights: Sequence[float] = (1.0 - params.mix, params.mix)
    elif params.weights is not None:
        weights = params.weights
    else:
        weights = (1.0,) * len(connected)
    return _weighted(connected, weights, params.normalize)  # type: ignore[arg-type]


DOC = """\
Weighted mix of up to four images (ports a, b, c, d), or a time cross-dissolve.

mode 'mix': result = sum(w_i * input_i), divided by sum(w_i) when normalize is true (default).
Weights follow the connected inputs in port order; default equal weights (a plain average).
'mix: m' is shorthand for the two-input cross-dissolve a*(1-m) + b*m.

mode 'time-dissolve': only 'a'. At a fractional frame f the node reads 'a' at floor(f) and
floor(f)+1 (same view) and returns (1-t)*a(floor f) + t*a(floor f + 1), t = f - floor(f).
At an integer frame it returns a's frame unchanged, bit for bit. This is the cross-dissolve
baseline against which vector retimes are judged (Baker et al., IJCV 2011, frame
interpolation). It ghosts moving objects rather than moving them.

mode 'inbetween': 'a' and 'b' are the in-between at a fractional sample f = n + t warped from
the previous (a) and from the next (b) sample by `warp` nodes, each with its inbetween.vis
channel (0..1). Weights (1-t)*vis_a and t*vis_b, normalised (Baker et al., IJCV 2011: the two
warped frames weighted by time and occlusion). Where both visibilities are below 'threshold'
the result fades to 'fallback' (fully so where both are 0): 'dissolve' = (1-t)*a + t*b, or
'nearest' = a for t <= 1/2, else b (both of the warped images). The share of pixels below the
threshold on both sides is reported as a warning per in-between (the render log lists them).
With 'frame_fallback' set, an in-between where more than that share of pixels falls back is
made from the two real neighbouring frames instead, without vectors ('dissolve': (1-t)*previous
+ t*next; 'nearest': a hold of the nearer one), and `midframe run` lists those frames at the end.
The result drops inbetween.vis, so real and in-between frames carry the same channels. At an
integer sample only 'a' is read and passed through unchanged, bit for bit. 't' is the
fractional part of the frame (axis 'frame') or of the view (axis 'view').

Every channel is mixed with the same weights (premultiplied colour mixes correctly as is).
All inputs must have the same resolution (else add a `resize` node) and the same channel set.
Metadata comes from 'a'.
"""

BLEND = Operator(
    name="blend",
    version=1,
    summary="Weighted mix of up to four images, or a cross-dissolve between neighbouring frames",
    params=BlendParams,
    compute=blend,
    inputs=(
        Port("a", "first image (the only one in mode 'time-dissolve'; warped from the previous "
                  "sample in mode 'inbetween')"),
        Port("b", "second image (warped from the next sample in mode 'inbetween')", optional=True),
        Port("c", "third image", optional=True),
        Port("d", "fourth image", optional=True),
    ),
    doc=DOC,
    check_links=link_problems,
    outputs="the channels of 'a', each the weighted mix of the inputs' same channel",
    needs=blend_needs,
)
