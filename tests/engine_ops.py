"""Small operators for engine tests (known answers, call counting). Not shipped.

They follow the same contract as real operators, so the engine is tested through it.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from graphcore.image import Image
from graphcore.registry import FrameRange, Operator, Port
from graphcore.sample import Sample


class ConstParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)
    value: float = Field(1.0, description="Value of every pixel at frame 0; frame f adds f.")
    size: int = Field(4, ge=1, description="Width and height in pixels.")
    first: int = Field(1, description="First frame that exists.")
    last: int = Field(10, description="Last frame that exists.")


def _const(params: ConstParams, inputs, ctx) -> Image:
    v = params.value + float(ctx.sample.frame) + 100 * float(ctx.sample.view)
    return Image(np.full((params.size, params.size, 1), v, np.float32), ("Y",))


CONST = Operator(name="test-const", version=1, summary="constant image; value + frame", params=ConstParams,
                 compute=_const, frames=lambda p, i: FrameRange(p.first, p.last))


class ScaleParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)
    factor: float = Field(2.0, description="Multiplier.")


def _scale(params: ScaleParams, inputs, ctx) -> Image:
    img = inputs["image"]
    return img.replace(pixels=img.pixels * np.float32(params.factor))


SCALE = Operator(name="test-scale", version=1, summary="multiply", params=ScaleParams, compute=_scale,
                 inputs=(Port("image", "input"),))


class AddParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)
    mode: Literal["sum", "diff"] = Field("sum", description="sum: a + b; diff: a - b.")


def _add(params: AddParams, inputs, ctx) -> Image:
    a, b = inputs["a"], inputs["b"]
    if b is None:
        return a
    px = a.pixels + b.pixels if params.mode == "sum" else a.pixels - b.pixels
    return a.replace(pixels=px)


ADD = Operator(name="test-add", version=1, summary="add two images", params=AddParams, compute=_add,
               inputs=(Port("a", "first"), Port("b", "second", optional=True)))


class NextParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)
    step: int = Field(1, description="How many frames ahead to look.")


def _needs_next(params: NextParams, sample: Sample):
    return {"image": (sample, sample.shifted(params.step))}


def _next_diff(params: NextParams, inputs, ctx) -> Image:
    now, later = inputs["image"]
    return now.replace(pixels=later.pixels - now.pixels)


NEXT_DIFF = Operator(name="test-next-diff", version=1, summary="image at f+step minus image at f",
                     params=NextParams, compute=_next_diff, inputs=(Port("image", "input"),), needs=_needs_next)


class CollectParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)
    tag: str = Field("out", description="Label.")


COLLECTED: dict[tuple[str, Fraction], np.ndarray] = {}


def _collect(params: CollectParams, inputs, ctx) -> Image:
    COLLECTED[(params.tag, ctx.sample.frame)] = np.array(inputs["image"].pixels)
    return inputs["image"]


COLLECT = Operator(name="test-collect", version=1, summary="sink that keeps results in memory",
                   params=CollectParams, compute=_collect, inputs=(Port("image", "input"),), sink=True)


class FailParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)
    kind: Literal["input", "bug"] = Field("input", description="Which kind of failure.")


def _fail(params: FailParams, inputs, ctx) -> Image:
    from graphcore.errors import OpError

    if params.kind == "input":
        raise OpError("this input is unusable", field="kind", fix="use another input")
    raise ZeroDivisionError("a bug")


FAIL = Operator(name="test-fail", version=1, summary="always fails", params=FailParams, compute=_fail,
                inputs=(Port("image", "input"),))

class RangesParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


def _ranges(params: RangesParams, inputs, ctx) -> Image:
    """Pixels (first, last) of the input's frame range as ``compute`` sees it in ctx.input_ranges."""
    frames = ctx.input_ranges["image"].frames
    return Image(np.array([[[frames.first, frames.last]]], np.float32), ("first", "last"))


RANGES = Operator(name="test-ranges", version=1, summary="input frame range seen by compute",
                  params=RangesParams, compute=_ranges, inputs=(Port("image", "input"),),
                  needs=lambda p, s, r: {"image": s}, needs_ranges=True)

ALL = (CONST, SCALE, ADD, NEXT_DIFF, COLLECT, FAIL, RANGES)
