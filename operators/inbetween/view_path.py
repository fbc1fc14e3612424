"""``view-path``: which (source time, source view) each output frame shows.

In modes ``viewmorph`` and ``keys`` the output is a plain sequence over frames (one view): asked for output frame ``k``, the node asks
its input for the image at the exact sample ``(time(k), view(k))`` and returns it unchanged. A
whole-number view (and time) is a real camera image, passed through bit for bit; a fractional one
is an in-between, built upstream (in the shipped templates by `flow-estimate`, `vector-smooth`,
two `warp` nodes and `blend` mode ``inbetween``, all with ``axis: view``).

Modes (``first_output`` numbers the output, default 1):

- ``viewmorph``: the output walks through the rig's cameras at one source time, with ``between``
  in-between views after each camera but the last:
  ``view(k) = first_view + (k - first_output) / (between + 1)``. ``first_view`` defaults to the
  input's first camera, so camera ``j`` of a rig numbered ``1..N`` lands on output
  ``first_output + (j - 1) * (between + 1)``, and the output runs
  ``first_output .. first_output + (N - first_view) * (between + 1)``.
- ``views``: for rigs or stereo pairs that recorded sequences: at every source frame the output
  has views numbered from ``first_output``, the cameras with ``between`` in-between views after
  each one but the last: output view ``v`` at frame ``f`` shows source view
  ``first_view + (v - first_output) / (between + 1)`` at time ``f``. A ``write`` with a
  ``view_token`` writes one sequence per output view.
- ``keys``: a path through views and time together. Keys ``[output_frame, view, time]``
  (absolute numbers; ``[output_frame, view]`` keys use the source time below), interpolated per
  coordinate ``linear`` or ``smooth`` (monotone cubic Hermite, Fritsch & Carlson 1980 with the
  slopes of Fritsch & Butland 1984: it never overshoots its keys, so equal times hold the
  moment). A sweep round the rig while time stops (all times equal), slows or runs. Output
  frames ``first key .. last key``; beyond the end keys the path stays put.

Source time, where no key gives it: the param ``time``; else the input's first frame when the input
has a frame range (a rig whose cameras each recorded a sequence); else frame 0 (a rig of stills read
with ``axis: view`` has no frame axis: every frame shows the same stills, so any time is that one
moment). A ``time`` outside the input's frames is an error.

Out of range: a view outside the rig's cameras (or a time outside its frames) is an error by
default, reported before anything renders where the engine can tell (keys, ``first_view``, ``time``),
and otherwise at the frame concerned; ``out_of_range: hold`` clamps it to the rig instead.

Stereo screen parallax (optional ``vectors`` port): connect the view vectors (``vector-smooth`` with
``axis: view``) and the node measures, at each output frame, the horizontal parallax between that
view and its neighbour on the path (``step * fwd.x``, with ``step`` the distance in camera spacings
between adjacent output views; the 99th percentile over confident pixels), in percent of the image
width, and warns when it exceeds ``parallax_limit`` (either direction) or
``positive_parallax_limit`` (behind the screen: divergent eyes). Views are taken to be numbered left
to right. Two views ``m`` outputs apart have about ``m`` times that parallax. The default limits,
2 % of width overall and 1 % behind the screen, are values often quoted in stereo production
guidance, given here from memory (common practice, no single source); a production's own stereo
rules, screen size and viewing distance decide. Uncomfortable parallax causes eye strain and
headaches: check stereo output on the target screen before delivery.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from fractions import Fraction
from typing import Any, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry.operator import FrameRange, InputRange, OpContext, Operator, Port
from graphcore.sample import Sample
from operators.inbetween._parallax import measure_parallax
from operators.inbetween._timing import canonical, linear_curve, parse_keys, parse_time, pchip_slopes, smooth_curve

__all__ = ["VIEW_PATH", "ViewPathParams", "path_point", "view_path_needs", "output_range", "view_path"]

Number = Union[int, float, str]


class ViewPathParams(BaseModel):
    """Params of ``view-path``. Numbers are stored as exact text (``'5/2'``), so ``2.5`` and ``'5/2'``
    are the same params (and the same cache key)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    mode: Literal["viewmorph", "keys", "views"] = Field(
        "viewmorph", description="'viewmorph': walk through the rig's cameras at one source time with "
                                 "'between' in-between views after each camera but the last; 'keys': a "
                                 "keyed path through views and time; 'views': at every source frame, "
                                 "the cameras and 'between' in-between views after each but the last, "
                                 "as output views numbered from first_output (stereo or rig sequences, "
                                 "written per view by a write with a view_token).")
    between: int = Field(
        1, ge=0, le=10000,
        description="Modes 'viewmorph' and 'views': in-between views after each camera but the last "
                    "(0 = the cameras only).")
    first_output: int = Field(
        1, description="Mode 'viewmorph': the output frame number that shows the first view; mode "
                       "'views': the number of the first output view.")
    first_view: Number | None = Field(
        None, description="Modes 'viewmorph' and 'views': the view the output starts at (may be "
                          "fractional, e.g. '3/2'). Default: the input's first camera.")
    time: Number | None = Field(
        None, description="Source time shown (mode 'viewmorph', and keys without a time). Default: "
                          "the input's first frame, or 0 when the input has no frame range (a rig of "
                          "stills).")
    keys: tuple[tuple[Number, ...], ...] | None = Field(
        None, min_length=1,
        description="Mode 'keys': [output_frame, view, time] (or [output_frame, view]) triples with "
                    "increasing output frames; views and times may be fractional ('7/2' or 3.5).")
    interpolation: Literal["linear", "smooth"] = Field(
        "linear", description="Mode 'keys': 'linear' between keys, or 'smooth' (monotone cubic per "
                              "coordinate, no overshoot).")
    out_of_range: Literal["error", "hold"] = Field(
        "error", description="A view outside the rig's cameras or a time outside its frames: 'error' "
                             "(reported before rendering where possible), or 'hold' (clamped).")
    parallax_limit: float = Field(
        2.0, gt=0.0, le=100.0,
        description="With 'vectors' connected: warn when the screen parallax between adjacent output "
                    "views exceeds this, in percent of the image width, either direction (2 %: a "
                    "value often quoted, from memory; common practice, no single source).")
    positive_parallax_limit: float = Field(
        1.0, gt=0.0, le=100.0,
        description="With 'vectors' connected: warn when the parallax behind the screen (divergent "
                    "eyes) exceeds this, in percent of the image width (1 %: a value often quoted, "
                    "from memory; common practice, no single source).")

    @field_validator("first_view", "time", mode="before")
    @classmethod
    def _number(cls, v: Any) -> str | None:
        return None if v is None else canonical(parse_time(v))

    @field_validator("keys", mode="before")
    @classmethod
    def _keys(cls, v: Any) -> Any:
        if v is None:
            return None
        out = parse_keys(v, (2, 3), "[output_frame, view, time] or [output_frame, view]")
        if len({len(k) for k in out}) != 1:
            raise ValueError("some keys give a time and some do not; give [output_frame, view, time] "
                             "for every key, or [output_frame, view] for every key")
        return out

    @model_validator(mode="after")
    def _check(self) -> "ViewPathParams":
        if self.mode == "keys" and self.keys is None:
            raise ValueError("mode 'keys' needs 'keys': [[output_frame, view, time], ...]")
        if self.mode != "keys" and self.keys is not None:
            raise ValueError("'keys' belong to mode 'keys'; set mode to 'keys' or remove them")
        if self.mode == "views" and self.time is not None:
            raise ValueError("mode 'views' shows every source frame at its own time; remove 'time'")
        return self


# -- the path ------------------------------------------------------------------------------------
def _step(params: ViewPathParams) -> Fraction:
    return Fraction(1, params.between + 1)


def default_time(params: ViewPathParams, frames: FrameRange | None) -> Fraction:
    """The source time where no key gives one (see the module docstring)."""
    if params.time is not None:
        return Fraction(params.time)
    return Fraction(frames.first) if frames is not None else Fraction(0)


def _rig(views: FrameRange | None) -> FrameRange:
    """The rig's cameras; OpError when the input is not a rig of at least two cameras."""
    if views is None:
        raise OpError("the input has no views: view-path walks through the cameras of a rig",
                      field="image",
                      fix="read the cameras with a `read` node with axis 'view' (files numbered by "
                          "camera), and build the in-betweens with axis 'view'")
    if len(views) < 2:
        raise OpError(f"a rig of one camera (view {views.first}) has no views to move between",
                      field="image", fix="give a rig of two or more cameras (files numbered 1..N)")
    return views


def _key_columns(params: ViewPathParams) -> tuple[list[Fraction], list[Fraction], list[Fraction] | None]:
    keys = params.keys or ()
    xs = [Fraction(k[0]) for k in keys]
    vs = [Fraction(k[1]) for k in keys]
    ts = [Fraction(k[2]) for k in keys] if keys and len(keys[0]) == 3 else None
    return xs, vs, ts


def _curve(params: ViewPathParams, xs: list[Fraction], ys: list[Fraction], x: Fraction) -> Fraction:
    if params.interpolation == "linear" or len(xs) < 2:
        return linear_curve(xs, ys, x) if len(xs) > 1 else ys[0]
    return smooth_curve(xs, ys, x, pchip_slopes(xs, ys))


def path_point(params: ViewPathParams, frame: Fraction | int, *, views: FrameRange | None = None,
               frames: FrameRange | None = None) -> tuple[Fraction, Fraction]:
    """``(view, time)`` output ``frame`` shows, exactly, before ``out_of_range`` handling.

    ``views`` / ``frames`` are the input's cameras and frames (``views`` is needed in mode
    ``viewmorph`` when ``first_view`` is not set; ``frames`` gives the default time).
    """
    k = Fraction(frame)
    if params.mode == "views":
        raise ValueError("mode 'views' maps (frame, view) pairs: use views_point")
    if params.mode == "viewmorph":
        start = Fraction(params.first_view) if params.first_view is not None else Fraction(_rig(views).first)
        return start + (k - params.first_output) * _step(params), default_time(params, frames)
    xs, vs, ts = _key_columns(params)
    view = _curve(params, xs, vs, k)
    time = _curve(params, xs, ts, k) if ts is not None else default_time(params, frames)
    return view, time


def views_point(params: ViewPathParams, frame: Fraction | int, view: Fraction | int, *,
                views: FrameRange | None = None) -> tuple[Fraction, Fraction]:
    """Mode ``views``: ``(source view, source time)`` of output view ``view`` at frame ``frame``:
    ``first_view + (view - first_output) / (between + 1)`` at the same time."""
    start = Fraction(params.first_view) if params.first_view is not None else Fraction(_rig(views).first)
    return start + (Fraction(view) - params.first_output) * _step(params), Fraction(frame)


def path_step(params: ViewPathParams, frame: Fraction | int) -> Fraction:
    """Distance in camera spacings between output ``frame``'s view and its neighbours' (the larger
    of the two sides in mode ``keys``)."""
    if params.mode in ("viewmorph", "views"):
        return _step(params)
    k = Fraction(frame)
    here = path_point(params, k)[0]
    return max(abs(path_point(params, k + 1)[0] - here), abs(here - path_point(params, k - 1)[0]))


def _clamp(params: ViewPathParams, view: Fraction, time: Fraction, views: FrameRange | None,
           frames: FrameRange | None) -> tuple[Fraction, Fraction]:
    if params.out_of_range != "hold":
        return view, time
    if views is not None:
        view = min(max(view, Fraction(views.first)), Fraction(views.last))
    if frames is not None:
        time = min(max(time, Fraction(frames.first)), Fraction(frames.last))
    return view, time


def view_path_needs(params: ViewPathParams, sample: Sample,
                    ranges: Mapping[str, InputRange] | None = None) -> dict[str, Sample]:
    """The input at ``(time(k), view(k))`` for output frame ``k = sample.frame``; with 'vectors'
    connected, also the view vectors at the camera on the left of that view (the last but one
    camera for the last view)."""
    rng = (ranges or {}).get("image")
    views, frames = (rng.views, rng.frames) if rng is not None else (None, None)
    if params.mode != "keys":
        _rig(views)
    point = (views_point(params, sample.frame, sample.view, views=views) if params.mode == "views"
             else path_point(params, sample.frame, views=views, frames=frames))
    view, time = _clamp(params, *point, views, frames)
    out = {"image": Sample(time, view)}
    if ranges is not None and "vectors" in ranges:
        vr = ranges["vectors"].views or views
        left = math.floor(view)
        if vr is not None:
            left = min(max(left, vr.first), vr.last - 1)
        out["vectors"] = Sample(time, left)
    return out


def output_range(params: ViewPathParams, views: FrameRange | None) -> FrameRange:
    """Output frames: mode ``keys``, first key to last key; mode ``viewmorph``, ``first_output`` to
    ``first_output + floor((last camera - first_view) * (between + 1))``."""
    if params.mode == "keys":
        xs = [k[0] for k in params.keys or ()]
        return FrameRange(int(xs[0]), int(xs[-1]))
    rig = _rig(views)     # viewmorph: output frames; views: output views (same numbering rule)
    start = Fraction(params.first_view) if params.first_view is not None else Fraction(rig.first)
    span = (rig.last - start) * (params.between + 1)
    return FrameRange(params.first_output, params.first_output + math.floor(span))


def _check_inside(params: ViewPathParams, views: FrameRange | None, frames: FrameRange | None) -> None:
    """Errors, before rendering, for keys / first_view / time outside the rig (out_of_range 'error')."""
    if params.time is not None and frames is not None and not frames.first <= Fraction(params.time) <= frames.last:
        raise OpError(f"time {params.time} is outside the source frames {frames}", field="time",
                      fix=f"choose a time within {frames}")
    if params.out_of_range == "hold":
        return
    if params.mode in ("viewmorph", "views"):
        if views is not None and params.first_view is not None:
            if not views.first <= Fraction(params.first_view) <= views.last:
                raise OpError(f"first_view {params.first_view} is outside the rig's cameras {views}",
                              field="first_view", fix=f"choose a view within {views}, or leave it out")
        return
    for i, key in enumerate(params.keys or ()):
        if views is not None and not views.first <= Fraction(key[1]) <= views.last:
            raise OpError(f"key {i} shows view {key[1]} at output frame {key[0]}, outside the rig's "
                          f"cameras {views}", field="keys",
                          fix=f"keep views within {views}, or set out_of_range to 'hold'")
        if len(key) == 3 and frames is not None and not frames.first <= Fraction(key[2]) <= frames.last:
            raise OpError(f"key {i} shows source time {key[2]} at output frame {key[0]}, outside the "
                          f"source frames {frames}", field="keys",
                          fix=f"keep times within {frames}, or set out_of_range to 'hold'")


def _frames(params: ViewPathParams, inputs: Mapping[str, Any]) -> FrameRange | None:
    """The output frames. ``inputs['image']`` is the input's ``InputRange`` (frames and views) where
    the engine passes one, else its ``FrameRange`` of frames only: then, in mode ``viewmorph``, the
    number of cameras is unknown here and the output range is None (give ``--frames``)."""
    src = inputs.get("image")
    if isinstance(src, InputRange):
        frames, views, known = src.frames, src.views, True
    else:
        frames, views, known = src, None, False
    _check_inside(params, views, frames)
    if params.mode == "views":
        return frames                  # every source frame, at its own time
    if params.mode == "viewmorph" and not known:
        return None
    return output_range(params, views)


def _views(params: ViewPathParams, inputs: Mapping[str, Any]) -> FrameRange | None:
    """Mode ``views``: the output views; otherwise the output is one sequence of frames, not a rig."""
    if params.mode != "views":
        return None
    src = inputs.get("image")
    if not isinstance(src, InputRange):
        return None
    return output_range(params, src.views)


def _canonical_sample(params: ViewPathParams, sample: Sample) -> Sample:
    """Modes ``viewmorph`` and ``keys`` have one output view: every view of it is the same image."""
    return sample if params.mode == "views" else Sample(sample.frame, 0)


def view_path(params: ViewPathParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    """Compute ``view-path`` at ``ctx.sample``: the input at the path's (time, view), unchanged.

    Parameters
    ----------
    params : ViewPathParams
    inputs : mapping
        ``"image"``: the Image at the path's sample (None when it lies outside the rig).
        ``"vectors"`` (optional): a vector Image along the view axis (``fwd.x``, optionally
        ``fwd.conf``), shape (H, W, >= 1), at the camera left of the path's view; when given, the
        screen parallax between adjacent output views is checked against the limits.
    ctx : OpContext
        ``ctx.warn`` receives parallax warnings.

    Returns
    -------
    Image
        The input image itself (pixels, channels and metadata untouched).

    Raises
    ------
    OpError
        ``field='keys'`` / ``'first_view'``: the view lies outside the rig's cameras.
    """
    image = inputs.get("image")
    if image is None:
        field = "keys" if params.mode == "keys" else "first_view"
        where = "a view or time"
        if params.mode == "views":
            raise OpError(f"output view {ctx.sample.view} at frame {ctx.sample.frame} lies outside the "
                          "rig or its frames", field="first_view",
                          fix="render only the views and frames the rig has (leave --frames out), or "
                              "set out_of_range to 'hold'")
        if params.mode == "keys":
            view = path_point(params, ctx.sample.frame)[0]
            where = f"view {view}" + ("" if params.keys and len(params.keys[0]) == 2 else " (or a time)")
        raise OpError(f"output frame {ctx.sample.frame} shows {where} outside the rig", field=field,
                      fix="render only the output frames the path maps into the rig (leave --frames "
                          "out), or set out_of_range to 'hold'")
    vectors = inputs.get("vectors")
    if vectors is not None:
        if "fwd.x" not in vectors.channels:
            raise OpError(f"the vectors lack fwd.x (they have {', '.join(vectors.channels)})",
                          field="vectors", fix="connect a vector-smooth node with axis 'view' to 'vectors'")
        step = path_step(params, ctx.sample.frame)
        p = measure_parallax(vectors, float(step))
        at = (f"output frame {ctx.sample.frame} view {ctx.sample.view}" if params.mode == "views"
              else f"output frame {ctx.sample.frame}")
        over = []
        if p.overall > params.parallax_limit:
            over.append(f"{p.overall:.2f} % of the image width (limit {params.parallax_limit:g} %)")
        if p.positive > params.positive_parallax_limit:
            over.append(f"{p.positive:.2f} % behind the screen (limit {params.positive_parallax_limit:g} %)")
        if over:
            ctx.warn(f"{at}: screen parallax between adjacent views reaches "
                     f"{' and '.join(over)}; uncomfortable to watch as stereo (eye strain); use more "
                     "in-between views or a narrower pair, and follow the production's stereo rules")
    return image


VIEW_PATH = Operator(
    name="view-path",
    version=1,
    summary="Maps each output frame to an exact (source time, view) of a camera rig: view morphs, "
            "sweeps through views and time; optional stereo parallax check",
    params=ViewPathParams,
    compute=view_path,
    inputs=(
        Port("image", "the rig (views = cameras); fractional views need an in-between upstream "
                      "(warp + blend mode 'inbetween', axis 'view')"),
        Port("vectors", "optional: view vectors (vector-smooth, axis 'view') for the stereo parallax "
                        "check", optional=True),
    ),
    doc=__doc__ or "",
    outputs="the input's image at the path's (time, view), unchanged",
    needs=view_path_needs,
    needs_ranges=True,
    frames=_frames,
    views=_views,
    canonical_sample=_canonical_sample,
    edge_samples=True,
    range_inputs=True,  # the frames hook needs the input's views (the number of cameras) too
)
