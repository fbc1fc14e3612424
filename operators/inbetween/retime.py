"""``retime``: which source time each output frame shows.

The node is pull-based: asked for output frame ``k``, it asks its input for the source time
``s(k)``, an exact fraction, and returns that image unchanged. A whole-frame ``s(k)`` is a real
frame, passed through bit for bit; a fractional one is an in-between, built upstream (in the
shipped template by two `warp` nodes and `blend` mode ``inbetween``).

Modes (``first`` is the source's first frame number; output frames are numbered from it too):

- ``slowdown``: ``s(k) = first + (k - first) / slowdown``. ``slowdown`` 2 plays at half speed
  (every source frame, then an in-between); below 1 it speeds up (0.5 shows every other frame).
  Source frames ``first..last`` become output frames ``first..first + floor((last - first) *
  slowdown)``.
- ``rate``: frame-rate conversion at constant speed. Output frame ``k`` is displayed at time
  ``(k - first) / to_rate`` seconds after the first, and shows the source at that time:
  ``s(k) = first + (k - first) * from_rate / to_rate``. Rates are exact rationals:
  ``'24000/1001'``, ``25``, and the decimal labels ``23.976`` (23.98), ``29.97``, ``59.94`` stand
  for 24000/1001, 30000/1001, 60000/1001 (SMPTE ST 12-1 counts these rates that way; the labels
  are common practice). Output frames ``first..first + floor((last - first) * to / from)``.
- ``curve``: keys ``[output_frame, source_time]`` (absolute frame numbers), interpolated
  ``linear`` or ``smooth`` (monotone cubic Hermite, Fritsch & Carlson 1980 with the slopes of
  Fritsch & Butland 1984: it never overshoots its keys, so two keys with the same source time
  hold that frame). Output frames ``first key..last key``; beyond the end keys the curve stays
  flat.

Out of range: a source time outside the source frames is an error by default, reported before
anything renders (``midframe check`` with the variables set, or the start of ``midframe run``),
naming the key; ``out_of_range: hold`` clamps it to ``first..last`` instead (a freeze on the end
frame).

``first`` and ``last`` default to the input's own frame range (the engine passes it to ``needs``);
set them only to pin the mapping's origin or the hold range, and they are checked against the
input's frames.

Speed-ups skip source frames; without motion blur that can strobe on fast motion. ``shutter``
(degrees; 180 is common practice) synthesises blur along the vectors: each output frame that
advances more than one source frame averages ``shutter_samples`` in-betweens spread across the
shutter interval. It is off by default (it changes every output frame of a speed-up, whole source
times included). Check fast speed-ups on a screen before delivery (and see ITU-R BT.1702 on
flashing images where the picture has bright, fast changes).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from fractions import Fraction
from typing import Any, Literal, Union

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry.operator import InputRange, FrameRange, OpContext, Operator, Port
from graphcore.sample import Sample
from operators.inbetween._timing import (canonical, parse_keys, linear_curve, parse_positive, parse_rate, pchip_slopes, smooth_curve)

__all__ = ["RETIME", "RetimeParams", "source_time", "retime_needs", "output_range", "shutter_times"]

Number = Union[int, float, str]


class RetimeParams(BaseModel):
    """Params of ``retime``. Numbers are stored as exact text (``'5/2'``), so ``2.5`` and ``'5/2'``
    are the same params (and the same cache key)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    mode: Literal["slowdown", "rate", "curve"] = Field(
        "slowdown", description="'slowdown': constant speed change; 'rate': frame-rate conversion; "
                                "'curve': keyed output-frame -> source-time curve.")
    slowdown: Number = Field(
        1, description="Mode 'slowdown': output frame k shows source time first + (k - first) / "
                       "slowdown; > 1 slows down, < 1 speeds up. A number or exact text such as '5/2'.")
    from_rate: Number | None = Field(
        None, description="Mode 'rate': the source's frame rate, e.g. 24, '24000/1001' or 23.976 "
                          "(= 24000/1001; likewise 29.97, 59.94).")
    to_rate: Number | None = Field(
        None, description="Mode 'rate': the output's frame rate, same forms as from_rate.")
    keys: tuple[tuple[int, Number], ...] | None = Field(
        None, min_length=1,
        description="Mode 'curve': [output_frame, source_time] pairs with increasing output frames; "
                    "source times may be fractional ('1003/2' or 501.5). Equal source times hold.")
    interpolation: Literal["linear", "smooth"] = Field(
        "linear", description="Mode 'curve': 'linear' between keys, or 'smooth' (monotone cubic, "
                              "no overshoot).")
    shutter: int = Field(
        0, ge=0, le=360,
        description="Shutter angle in degrees for motion blur synthesised on speed-ups (0 = off; 180 is "
                    "common practice). Where an output frame advances more than one source frame, it "
                    "averages 'shutter_samples' in-betweens spread over shutter/360 x (advance - 1) "
                    "source frames centred on its source time (the plate's own blur covers the rest). "
                    "Slow-downs are never blurred.")
    shutter_samples: int = Field(
        8, ge=2, le=64, description="How many in-betweens are averaged per blurred output frame.")
    out_of_range: Literal["error", "hold"] = Field(
        "error", description="A source time outside the source frames: 'error' (reported before "
                             "rendering), or 'hold' (clamped to first..last).")
    first: int | None = Field(
        None, description="The source's first frame number (output frames are numbered from it). "
                          "Default: the input's first frame; if given, it is checked against it.")
    last: int | None = Field(
        None, description="The source's last frame number (the end of a hold). Default: the input's "
                          "last frame; if given, it is checked against it.")

    @field_validator("slowdown", mode="before")
    @classmethod
    def _slowdown(cls, v: Any) -> str:
        return canonical(parse_positive(v, "slowdown"))

    @field_validator("from_rate", "to_rate", mode="before")
    @classmethod
    def _rate(cls, v: Any) -> str | None:
        return None if v is None else canonical(parse_rate(v))

    @field_validator("keys", mode="before")
    @classmethod
    def _keys(cls, v: Any) -> Any:
        return None if v is None else parse_keys(v, (2,), "[output_frame, source_time]")

    @model_validator(mode="after")
    def _check(self) -> "RetimeParams":
        if self.mode == "rate" and (self.from_rate is None or self.to_rate is None):
            raise ValueError("mode 'rate' needs both 'from_rate' and 'to_rate' (e.g. 24 and 25)")
        if self.mode == "curve" and self.keys is None:
            raise ValueError("mode 'curve' needs 'keys': [[output_frame, source_time], ...]")
        if self.first is not None and self.last is not None and self.last < self.first:
            raise ValueError(f"'last' ({self.last}) is before 'first' ({self.first})")
        return self


def _factor(params: RetimeParams) -> Fraction:
    """Source frames per output frame (modes slowdown and rate)."""
    if params.mode == "slowdown":
        return 1 / Fraction(params.slowdown)
    return Fraction(params.from_rate) / Fraction(params.to_rate)  # type: ignore[arg-type]


def _keys(params: RetimeParams) -> tuple[list[Fraction], list[Fraction]]:
    keys = params.keys or ()
    return [Fraction(f) for f, _ in keys], [Fraction(s) for _, s in keys]


def source_time(params: RetimeParams, frame: Fraction | int, first: int | None = None) -> Fraction:
    """The exact source time output ``frame`` shows (before ``out_of_range`` handling); ``first``
    is the source's first frame (default: ``params.first``)."""
    k = Fraction(frame)
    if params.mode in ("slowdown", "rate"):
        origin = params.first if first is None else first
        if origin is None:
            raise OpError("cannot tell the source's first frame: the input has no known frame range",
                          field="first", fix="set 'first' to the source's first frame number")
        f0 = Fraction(origin)
        return f0 + (k - f0) * _factor(params)
    xs, ys = _keys(params)
    if params.interpolation == "linear":
        return linear_curve(xs, ys, k)
    return smooth_curve(xs, ys, k, pchip_slopes(xs, ys))


def _source_range(params: RetimeParams, known: FrameRange | None) -> tuple[int | None, int | None]:
    """(first, last) of the source: the params where given, else the input's range."""
    first = params.first if params.first is not None else (known.first if known else None)
    last = params.last if params.last is not None else (known.last if known else None)
    return first, last


def _clamped(params: RetimeParams, s: Fraction, first: int | None, last: int | None) -> Fraction:
    if params.out_of_range == "hold":
        if first is None or last is None:
            raise OpError("out_of_range 'hold' needs the source's frame range, and the input has none",
                          field="out_of_range", fix="set 'first' and 'last', or use out_of_range 'error'")
        return min(max(s, Fraction(first)), Fraction(last))
    return s


def shutter_times(params: RetimeParams, frame: Fraction | int, first: int | None,
                  last: int | None) -> tuple[Fraction, ...]:
    """The source times an output frame averages: its own source time, or with a shutter on a
    speed-up, ``shutter_samples`` times at the midpoints of equal slices of an interval of
    ``shutter/360 * (advance - 1)`` source frames centred on it (``advance`` = how far the source
    time moves per output frame here), clamped to the source range."""
    s0 = _clamped(params, source_time(params, frame, first), first, last)
    if params.shutter == 0:
        return (s0,)
    advance = abs(source_time(params, Fraction(frame) + 1, first) - source_time(params, frame, first))
    if advance <= 1:
        return (s0,)
    span = Fraction(params.shutter, 360) * (advance - 1)
    n = params.shutter_samples
    times = [s0 - span / 2 + span * (2 * i + 1) / (2 * n) for i in range(n)]
    if first is not None:
        times = [max(t, Fraction(first)) for t in times]
    if last is not None:
        times = [min(t, Fraction(last)) for t in times]
    return tuple(times)


def retime_needs(params: RetimeParams, sample: Sample,
                 ranges: Mapping[str, InputRange] | None = None) -> dict[str, Sample | tuple[Sample, ...]]:
    """The input at the source time of ``sample.frame``, same view (several times across the shutter
    when blur is on for a speed-up); ``ranges`` (from the engine) gives the input's frame range, used
    where ``first``/``last`` are not set."""
    known = ranges["image"].frames if ranges and "image" in ranges else None
    first, last = _source_range(params, known)
    times = shutter_times(params, sample.frame, first, last)
    if len(times) == 1:
        return {"image": sample.at_frame(times[0])}
    return {"image": tuple(sample.at_frame(t) for t in times)}


def output_range(params: RetimeParams, source: FrameRange) -> FrameRange:
    """Output frames for source frames ``source`` (see the module docstring)."""
    if params.mode == "curve":
        frames = [f for f, _ in params.keys or ()]
        return FrameRange(frames[0], frames[-1])
    span = (source.last - source.first) / _factor(params)
    return FrameRange(source.first, source.first + math.floor(span))


def _frames(params: RetimeParams, inputs: Mapping[str, FrameRange | None]) -> FrameRange | None:
    src = inputs.get("image")
    if src is None:
        if params.mode == "curve":
            return output_range(params, FrameRange(0, 0))
        return None
    for name, value, real in (("first", params.first, src.first), ("last", params.last, src.last)):
        if value is not None and value != real:
            raise OpError(f"'{name}' is {value} but the source's frames are {src}", field=name,
                          fix=f"set {name} to {real}, or leave it out to use the source's own")
    if params.mode == "curve" and params.out_of_range == "error":
        for i, (frame, when) in enumerate(params.keys or ()):
            if not src.first <= Fraction(when) <= src.last:
                raise OpError(f"key {i} shows source time {when} at output frame {frame}, outside the "
                              f"source frames {src}", field="keys",
                              fix=f"keep source times within {src}, or set out_of_range to 'hold'")
    return output_range(params, src)


def retime(params: RetimeParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    """Compute ``retime`` at ``ctx.sample``: the input at the source time, unchanged.

    Parameters
    ----------
    params : RetimeParams
    inputs : mapping
        ``"image"``: the Image at the source time (None when that lies outside the input's frames).
    ctx : OpContext

    Returns
    -------
    Image
        The input image itself (pixels, channels and metadata untouched).

    Raises
    ------
    OpError
        ``field='keys'`` (curve) or ``field='first'``: the source time lies outside the source frames.
    """
    image = inputs.get("image")
    if isinstance(image, tuple):  # shutter blur: the mean of the in-betweens across the shutter
        if any(img is None for img in image):
            image = None
        else:
            acc = np.zeros(image[0].pixels.shape, np.float64)
            for img in image:
                if img.channels != image[0].channels or img.size != image[0].size:
                    raise OpError("the in-betweens across the shutter differ in channels or size",
                                  field="shutter", fix="feed retime an input with the same layout at every time")
                acc += img.pixels
            return image[0].replace(pixels=(acc / len(image)).astype(np.float32))
    if image is None:
        field = "keys" if params.mode == "curve" else "first"
        raise OpError(f"output frame {ctx.sample.frame} shows a source time outside the source "
                      "frames", field=field,
                      fix="render only the output frames the retime maps into the source (leave "
                          "--frames out), or set out_of_range to 'hold'")
    return image


RETIME = Operator(
    name="retime",
    version=2,
    summary="Maps each output frame to an exact source time: slow-down/speed-up, frame-rate "
            "conversion, keyed time curve",
    params=RetimeParams,
    compute=retime,
    inputs=(Port("image", "the clip to retime; fractional source times need an in-between upstream "
                          "(warp + blend mode 'inbetween')"),),
    doc=__doc__ or "",
    outputs="the input's image at the source time, unchanged",
    needs=retime_needs,
    needs_ranges=True,
    frames=_frames,
    edge_samples=True,
)
