"""``blend``: weighted mix of up to four images, and the time cross-dissolve baseline.

Mode ``mix`` computes, per pixel and channel,

    result = sum_i w_i * I_i            (normalize=False)
    result = sum_i w_i * I_i / sum_i w_i  (normalize=True, default)

over the connected inputs ``I_i`` in port order a, b, c, d. Mode ``time-dissolve`` takes only
``a`` and, at a fractional frame f, returns ``(1 - t) * a(floor f) + t * a(floor f + 1)`` with
``t = f - floor f``: the cross-dissolve that vector retimes are measured against (Baker et al.,
IJCV 2011, use it as a frame-interpolation baseline).
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

__all__ = ["BLEND", "BlendParams", "blend", "blend_needs", "PORTS"]

PORTS = ("a", "b", "c", "d")


class BlendParams(BaseModel):
    """Params of ``blend``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    mode: Literal["mix", "time-dissolve"] = Field(
        "mix",
        description=("'mix': weighted sum of the connected inputs a, b, c, d at the same sample. "
                     "'time-dissolve': only 'a', read at the two integer frames around a "
                     "fractional frame and mixed by the fractional part (an integer frame passes "
                     "through unchanged)."),
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

    @model_validator(mode="after")
    def _check(self) -> "BlendParams":
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
    """
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



def link_problems(params: BlendParams, connected: frozenset[str]) -> list[OpError]:
    """Problems that depend on which ports are connected (also run by ``midframe check``)."""
    names = [p for p in PORTS if p in connected]
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
        (frames floor f and floor f + 1).
    ctx : OpContext
        ``ctx.sample.frame`` gives the dissolve fraction in mode ``time-dissolve``.

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
        for b, c or d connected in mode ``time-dissolve``.

    Notes
    -----
    At an integer frame, time-dissolve returns a's image itself: bit for bit unchanged.
    Mixing vector channels averages motion, which is rarely meaningful; blend them only when
    that is what is wanted.
    """
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
        Port("a", "first image (the only one in mode 'time-dissolve')"),
        Port("b", "second image", optional=True),
        Port("c", "third image", optional=True),
        Port("d", "fourth image", optional=True),
    ),
    doc=DOC,
    check_links=link_problems,
    outputs="the channels of 'a', each the weighted mix of the inputs' same channel",
    needs=blend_needs,
)
