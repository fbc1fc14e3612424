"""``rig``: separate inputs stacked as the cameras of one rig (views 1, 2, ...).

Port ``view1`` is camera 1, ``view2`` camera 2, and so on up to ``view8``; connect them in order
without gaps. Asked for integer view ``v``, the node asks port ``view<v>`` for the same frame at
view 0 (each input is an ordinary single-view source: a still or a frame sequence) and returns
that image unchanged, bit for bit. Its views are ``1..n`` for ``n`` connected ports; its frames
are those all its inputs share.

This is how two files that are not one numbered sequence become a rig, e.g. a stereo pair
``left`` (view 1) and ``right`` (view 2), so that view vectors and in-between views can be built
between them (``flow-estimate`` / ``warp`` / ``blend`` with ``axis: view``). Views are numbered
left to right, which the stereo parallax check of ``view-path`` relies on.

Only whole views exist here: a fractional view needs an in-between downstream.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from pydantic import BaseModel, ConfigDict

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry.operator import FrameRange, OpContext, Operator, Port
from graphcore.sample import Sample

__all__ = ["RIG", "RigParams", "MAX_VIEWS", "rig_needs"]

#: Ports view1..view8.
MAX_VIEWS = 8
_PORTS = tuple(f"view{i}" for i in range(1, MAX_VIEWS + 1))


class RigParams(BaseModel):
    """``rig`` has no params: the connected ports say everything."""

    model_config = ConfigDict(extra="forbid", frozen=True)


def _count(connected: Any) -> int:
    """Number of cameras: connected ports view1..viewN, in order without gaps (OpError otherwise)."""
    problems = link_problems(RigParams(), frozenset(connected))
    if problems:
        raise problems[0]
    return sum(1 for p in _PORTS if p in connected)


def link_problems(params: RigParams, connected: frozenset[str]) -> list[OpError]:
    """view1 must be connected and the ports used without gaps (also run by ``midframe check``)."""
    used = [i for i, p in enumerate(_PORTS, start=1) if p in connected]
    if not used:
        return [OpError("no camera is connected", field="view1",
                        fix="connect the first camera (the left eye of a stereo pair) to 'view1'")]
    gaps = [f"view{i}" for i in range(1, used[-1]) if i not in used]
    if gaps:
        return [OpError(f"camera port{'s' if len(gaps) > 1 else ''} {', '.join(gaps)} "
                        f"{'are' if len(gaps) > 1 else 'is'} not connected but view{used[-1]} is",
                        field=gaps[0], fix="connect the cameras to view1, view2, ... in order, without gaps")]
    return []


def rig_needs(params: RigParams, sample: Sample) -> dict[str, Sample]:
    """Integer view ``v``: port ``view<v>`` at the same frame, view 0."""
    v = sample.view
    if v.denominator != 1 or not 1 <= v <= MAX_VIEWS:
        raise OpError(f"a rig has cameras only at whole views 1..{MAX_VIEWS}, not at view {v}",
                      field="view1",
                      fix="build fractional views downstream (flow-estimate, warp and blend with axis 'view')")
    return {f"view{int(v)}": sample.at_view(0)}


def _views(params: RigParams, inputs: Mapping[str, FrameRange | None]) -> FrameRange:
    return FrameRange(1, _count(inputs))


def _compute(params: RigParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    image = inputs.get(f"view{int(ctx.sample.view)}")
    if image is None:
        raise OpError(f"no camera is connected for view {ctx.sample.view}", field=f"view{int(ctx.sample.view)}",
                      fix="ask only for the views of the connected cameras")
    return image


RIG = Operator(
    name="rig",
    version=1,
    summary="Stack separate inputs (e.g. a left and a right eye) as the cameras 1..n of one rig",
    params=RigParams,
    compute=_compute,
    inputs=tuple(Port(p, f"camera {i}" + (" (left-most)" if i == 1 else ""), optional=i > 1)
                 for i, p in enumerate(_PORTS, start=1)),
    doc=__doc__ or "",
    outputs="at view v, the image of port view<v>, unchanged",
    needs=rig_needs,
    views=_views,
    check_links=link_problems,
)
