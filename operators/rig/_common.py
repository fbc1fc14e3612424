"""Helpers shared by the rig clean-up operators (``color-match``, ``align-views``); private.

Both operators compare each camera of a rig with one reference camera at the same frame. The
reference is a view number given by the user, or by default the middle camera of the rig (the
lower middle one of an even count): it is the camera closest to all the others, so the widest
baseline any camera is matched across is half the rig.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry.operator import FrameRange, InputRange
from graphcore.sample import Sample

__all__ = ["image_link_problems", "rig_views", "reference_view", "view_number", "require_same_size", "with_report",
           "source_file", "fit_sample", "FIT_FRAME_DOC"]

#: The description of the ``fit_frame`` param both operators share.
FIT_FRAME_DOC = ("The frame the cameras are compared at. Default: each frame its own. For a rig "
                 "whose cameras recorded sequences, give one frame (still, well lit, nothing "
                 "crossing the cameras) so every frame gets the same transform and no flicker or "
                 "shake is added over time.")


def rig_views(ranges: Mapping[str, InputRange], port: str = "image") -> FrameRange:
    """The cameras of the rig on ``port`` (OpError when the input is not a rig)."""
    rng = ranges.get(port)
    views = rng.views if rng is not None else None
    if views is None:
        raise OpError("the input is not a rig of cameras (it has no views)", field=port,
                      fix="read the cameras with `read` axis 'view' (one still per camera) or a "
                          "`view_token`, or stack separate files with a `rig` node")
    return views


def reference_view(reference: int | None, views: FrameRange) -> int:
    """``reference`` checked against the rig, or the middle camera when it is None."""
    if reference is None:
        return views.first + (len(views) - 1) // 2
    if reference not in views:
        raise OpError(f"reference view {reference} is not a camera of the rig (cameras {views})",
                      field="reference", fix=f"choose a view in {views}, or leave 'reference' out "
                                             "for the middle camera")
    return reference


def view_number(sample: Sample, op_name: str) -> int:
    """The whole camera number of ``sample`` (OpError for a fractional view)."""
    if sample.view.denominator != 1:
        raise OpError(f"{op_name} works on the rig's cameras, not on in-between view {sample.view}",
                      field="image", fix=f"place {op_name} before the vectors and in-betweens, "
                                         "right after the read of the rig")
    return int(sample.view)


def require_same_size(image: Image, other: Image, what: str, port: str = "image") -> None:
    """OpError unless ``other`` (e.g. the reference camera) has ``image``'s size."""
    if image.size != other.size:
        raise OpError(f"this camera is {image.width}x{image.height} but {what} is "
                      f"{other.width}x{other.height}", field=port, file=source_file(image),
                      fix="give every camera of the rig the same resolution (a `resize` node "
                          "after the read)")


def source_file(image: Image) -> str | None:
    """The file ``image`` was read from, when a ``read`` upstream recorded it."""
    path = image.meta.get("source.path")
    return str(path) if path else None


def with_report(meta: Mapping[str, Any], op_name: str, report: Mapping[str, Any]) -> dict[str, Any]:
    """``meta`` plus ``report`` under keys ``<op_name>.<key>``, and the same record as one JSON
    header attribute ``midframe.<op_name>`` so that it reaches written EXR files."""
    out = dict(meta)
    for key, value in report.items():
        out[f"{op_name}.{key}"] = value
    attrs = dict(out.get("exr.attributes") or {})
    attrs[f"midframe.{op_name}"] = json.dumps(report, sort_keys=True)
    out["exr.attributes"] = attrs
    return out


def fit_sample(fit_frame: int | None, sample: Sample, ranges: Mapping[str, InputRange],
               port: str = "image") -> Sample:
    """The sample the fit is made at: ``sample`` itself, or the same view at ``fit_frame``
    (OpError when the input has no such frame)."""
    if fit_frame is None:
        return sample
    rng = ranges.get(port)
    frames = rng.frames if rng is not None else None
    if frames is not None and fit_frame not in frames:
        raise OpError(f"fit_frame {fit_frame} is not a frame of the input (frames {frames})",
                      field="fit_frame", fix=f"give a frame in {frames}, or leave 'fit_frame' out to "
                                             "fit every frame on its own")
    return sample.at_frame(fit_frame)


def image_link_problems(params: Any, connected: frozenset[str]) -> list[OpError]:
    """``check_links`` of the rig operators: the cameras must be connected to 'image'."""
    if "image" not in connected:
        return [OpError("input 'image' is not connected", field="image",
                        fix="connect the rig's cameras (a read with axis 'view', or a rig node)")]
    return []
