"""The ``read`` operator: one image per frame (or per view) from a file sequence or a still.

Formats by extension: ``.exr`` through OpenEXR (linear, premultiplied, every channel and header
attribute kept, see :mod:`operators.io.exr`), ``.png .tif .tiff .jpg .jpeg`` through OpenCV
(decoded to linear and premultiplied, see :mod:`operators.io.raster`).

Which number picks the file: ``axis="frame"`` uses the sample's frame (a plate numbered by time);
``axis="view"`` uses the sample's view (stills of a camera rig numbered by camera). A pattern
without a frame token (``%04d``, ``%d``, ``####``) is one still file used at every sample.
Plates exist only at integer numbers: asking a sequence for a fractional one is an error (only
in-between synthesis makes fractional samples).

A rig whose cameras each recorded a sequence has two numbers per file: ``view_token`` names the
token of ``path`` that holds the camera number, the other one the frame, e.g. path
``rig/cam%02d/plate.%04d.exr`` with ``view_token`` ``%02d``. Then every camera must hold the same
contiguous frames, the cameras found on disk are the views, and ``axis`` stays ``frame``.
"""

from __future__ import annotations

import glob
import os
import re
from collections.abc import Mapping
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from graphcore.errors import OpError
from graphcore.image import COLOR, Image
from graphcore.registry.operator import FrameRange, OpContext, Operator
from graphcore.sample import Sample
from operators.io import colorspace, exr, raster, sequence
from operators.io import transfer as tf
from operators.io._common import (EXR_EXTENSIONS, axis_number, check_channels, check_colour_rule,
                                  check_path_tokens, check_view_token, fill_view, split_view,
                                  extension, resolved)

__all__ = ["READ", "ReadParams", "read_file", "read_finite", "nonfinite_warning"]


class ReadParams(BaseModel):
    """Parameters of ``read``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    path: str = Field(description=(
        "File to read: a sequence pattern with one frame token (plate.%04d.exr, plate.%d.exr, "
        "plate.####.exr; %% is a literal percent) or a single still file used at every sample. "
        "Extension picks the format: .exr .png .tif .tiff .jpg .jpeg."))
    axis: Literal["frame", "view"] = Field("frame", description=(
        "Which sample coordinate the file number is: 'frame' for a plate numbered by time, "
        "'view' for stills of a camera rig numbered by camera."))
    transfer: Literal["auto", "linear", "srgb", "rec709"] = Field("auto", description=(
        "How colour is encoded in the file; it is decoded to linear light. 'auto' = linear for "
        "EXR and float TIFF, sRGB (IEC 61966-2-1) for 8/16-bit files. 'rec709' = ITU-R BT.709 "
        "OETF. Alpha and non-colour channels are never decoded."))
    channels: tuple[str, ...] | None = Field(None, description=(
        "Channel names to keep, in this order (e.g. [\"R\", \"G\", \"B\", \"A\"]); "
        "default keeps every channel (R G B A first, then the rest sorted)."))
    nonfinite: Literal["zero", "error", "keep"] = Field("zero", description=(
        "What to do with NaN or infinite pixel values: 'zero' replaces them with 0 and warns "
        "once per file, 'error' stops with an error naming the file, 'keep' passes them on."))

    colorspace: str | None = Field(None, description=(
        "The file's colour space by name in an OpenColorIO config (ocio_config, else the OCIO "
        "environment variable); colour is converted from it to the config's scene_linear role. "
        "Unset: the built-in 'transfer' decoding. Alpha and non-colour channels are never "
        "converted."))
    ocio_config: str | None = Field(None, description=(
        "OpenColorIO config for 'colorspace': a config.ocio file or a built-in config such as "
        "'ocio://cg-config-latest'. Default: the OCIO environment variable."))
    view_token: str | None = Field(None, description=(
        "For a rig whose cameras each recorded a sequence: the token in 'path' that holds the "
        "camera (view) number, the other token being the frame, e.g. path "
        "'rig/cam%02d/plate.%04d.exr' with view_token '%02d' (forms: %d, %0Nd, a run of #). It "
        "must occur once in 'path'; 'axis' stays 'frame'."))

    @field_validator("path")
    @classmethod
    def valid_path(cls, v: str) -> str:
        return check_path_tokens(v)

    @field_validator("channels")
    @classmethod
    def valid_channels(cls, v: tuple[str, ...] | None) -> tuple[str, ...] | None:
        return check_channels(v)

    @model_validator(mode="after")
    def _one_colour_rule(self) -> "ReadParams":
        check_colour_rule(self.transfer, self.colorspace, self.ocio_config, "the file's colour space")
        return self

    @model_validator(mode="after")
    def _two_numbers(self) -> "ReadParams":
        check_view_token(self.path, self.view_token, self.axis, what="the cameras of a rig",
                         no_frame="for one still per camera use axis 'view' without view_token")
        return self


def _pattern(params: ReadParams, sample: Sample) -> str:
    """The one-token pattern for ``sample``: ``path`` itself, or with the camera filled in."""
    if params.view_token is None:
        return params.path
    if sample.view.denominator != 1:
        raise OpError(f"no file at fractional view {sample.view}: cameras exist only at integer views",
                      file=params.path, field="view_token",
                      fix="feed this read into an in-between (vector) operator with axis 'view' to "
                          "get fractional views")
    return fill_view(params.path, params.view_token, int(sample.view))


def _piece_regex(text: str) -> str:
    seq = sequence.parse(text)
    if not seq.is_sequence:
        return re.escape(seq.prefix)
    return re.escape(seq.prefix) + r"-?\d+" + re.escape(seq.suffix)


def _piece_glob(text: str) -> str:
    seq = sequence.parse(text)
    if not seq.is_sequence:
        return glob.escape(seq.prefix)
    return glob.escape(seq.prefix) + "*" + glob.escape(seq.suffix)


def discover_views(params: ReadParams) -> list[int]:
    """Sorted camera numbers with at least one frame on disk (``view_token`` set); only numbers
    written as the token writes them count (``%02d`` takes ``03``, not ``3``)."""
    token = params.view_token or ""
    before, width, after = split_view(params.path, token)
    rx = re.compile(_piece_regex(before) + r"(-?\d+)" + _piece_regex(after) + r"\Z")
    found: set[int] = set()
    for name in glob.iglob(_piece_glob(before) + "*" + _piece_glob(after)):
        m = rx.match(name)
        if m is None:
            continue
        view = int(m.group(1))
        text = f"{view:0{width}d}" if width else str(view)
        if text == m.group(1) and os.path.isfile(name):
            found.add(view)
    return sorted(found)


def _camera_range(params: ReadParams) -> FrameRange:
    views = discover_views(params)
    if not views:
        raise OpError(f"no files match {params.path!r} for any camera", file=params.path, field="path",
                      fix=f"check the folders and the tokens (camera: {params.view_token!r}, frame: the "
                          "other one)")
    gaps = sequence.missing_frames(views)
    if gaps:
        raise OpError(f"cameras {sequence.compact_ranges(gaps)} are missing from the rig (found "
                      f"{sequence.compact_ranges(views)})", file=params.path, field="path",
                      fix="render or copy the missing cameras, or number the cameras without gaps")
    return FrameRange(views[0], views[-1])


def _file_for(params: ReadParams, sample: Sample) -> str:
    """The file to read at ``sample``; OpError for a fractional number on a sequence."""
    pattern = sequence.parse(_pattern(params, sample))
    if not pattern.is_sequence:
        return pattern.prefix
    number = axis_number(params.axis, sample)
    if number.denominator != 1:
        raise OpError(f"no file at fractional {params.axis} {number}: plates exist only at "
                      f"integer {params.axis}s", file=params.path, field="axis",
                      fix="feed this read into an in-between (vector) operator to get "
                          "fractional samples, or ask for integer ones")
    return pattern.format(int(number))


def _frames(params: ReadParams, input_frames: Mapping[str, FrameRange | None]) -> FrameRange | None:
    if params.view_token is not None:
        cams = _camera_range(params)
        ranges = {}
        for v in cams:
            pat = fill_view(params.path, params.view_token, v)
            ranges[v] = sequence.contiguous_range(pat, field="path")
        first = ranges[cams.first]
        for v, rng in ranges.items():
            if rng != first:
                raise OpError(f"camera {v} holds frames {rng[0]}-{rng[1]} but camera {cams.first} "
                              f"holds {first[0]}-{first[1]}", file=fill_view(params.path, params.view_token, v),
                              field="path", fix="give every camera the same frames (trim the longer "
                                                "sequences or render the missing frames)")
        return FrameRange(*first)
    pattern = sequence.parse(params.path)
    if not pattern.is_sequence:
        if not os.path.isfile(pattern.prefix):
            raise OpError("file not found", file=pattern.prefix, field="path",
                          fix="check the path; a still needs the file itself, a sequence a "
                              "frame token such as %04d")
        return None  # a still has data at every frame
    if params.axis == "view":
        return None  # the files number views, not frames: the view range is a separate concern
    first, last = sequence.contiguous_range(params.path, field="path")
    return FrameRange(first, last)


def _views(params: ReadParams, input_views: Mapping[str, FrameRange | None]) -> FrameRange | None:
    """The camera numbers found on disk when the files number views (``axis='view'``, or a
    ``view_token``)."""
    if params.view_token is not None:
        return _camera_range(params)
    if params.axis != "view" or not sequence.is_sequence(params.path):
        return None
    first, last = sequence.contiguous_range(params.path, field="path")
    return FrameRange(first, last)


def _canonical_sample(params: ReadParams, sample: Sample) -> Sample:
    """A still is the same file at every sample; a sequence depends only on its own axis (on both
    with a ``view_token``)."""
    if params.view_token is not None:
        return sample
    if not sequence.is_sequence(params.path):
        return Sample(0, 0)
    return Sample(sample.frame, 0) if params.axis == "frame" else Sample(0, sample.view)


def _identity(params: ReadParams, sample: Sample) -> str:
    file = _file_identity(params, sample)
    if params.colorspace is None:
        return file
    # the conversion depends on the config's content too ($OCIO or ocio_config)
    return f"{file}|ocio={colorspace.config_identity(params.ocio_config)}"


def _file_identity(params: ReadParams, sample: Sample) -> str:
    try:
        path = resolved(_file_for(params, sample))
    except OpError:
        return (f"{params.path}|{params.axis}={axis_number(params.axis, sample)}|view={sample.view}"
                "|no file (fractional)")
    try:
        st = os.stat(path)
    except OSError:
        return f"{path}|missing"
    return f"{path}|size={st.st_size}|mtime_ns={st.st_mtime_ns}"


def _sources(params: ReadParams, sample: Sample) -> list[str]:
    try:
        return [resolved(_file_for(params, sample))]
    except OpError:
        return []


def _missing_file_error(params: ReadParams, path: str, number: Any, sample: Sample) -> OpError:
    found = sequence.discover(_pattern(params, sample))
    if found:
        fix = (f"{params.axis}s on disk: {sequence.compact_ranges(found)}; ask only for those, "
               "or render/copy the missing file")
    else:
        fix = f"no file matches {params.path!r}; check the folder and the frame token"
    what = f"{params.axis} {number}" if sequence.is_sequence(_pattern(params, sample)) else "still file"
    if params.view_token is not None:
        what += f" of camera {sample.view}"
    return OpError(f"file not found for {what}", file=path, field="path", fix=fix)


def _decode_colour(image: Image, transfer: str) -> Image:
    """Decode R G B of an EXR from ``transfer`` to linear, unpremultiplying around it."""
    idx = [image.index(c) for c in COLOR if c in image.channels]
    if not idx:
        return image
    px = image.pixels.copy()
    color = px[:, :, idx]
    if image.has_alpha:
        a = px[:, :, image.index("A")][:, :, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            straight = np.where(a > 0, color / a, 0.0)
        color = tf.decode(transfer, straight.astype(np.float32)) * a
    else:
        color = tf.decode(transfer, color)
    px[:, :, idx] = color
    return image.replace(pixels=px)


def read_file(path: str, *, transfer: str = "auto") -> Image:
    """Read one file (EXR or raster by extension) as linear, premultiplied float32."""
    if extension(path) in EXR_EXTENSIONS:
        image = exr.read_exr(path)
        if transfer not in ("auto", "linear"):
            image = _decode_colour(image, transfer)
        return image
    return raster.read_raster(path, transfer=transfer)


def _nonfinite(image: Image) -> tuple[Image, int, list[str]]:
    """``image`` with NaN and infinite values replaced by 0, their count, and the channels holding them."""
    bad = ~np.isfinite(image.pixels)
    if not bad.any():
        return image, 0, []
    where = [c for i, c in enumerate(image.channels) if bad[:, :, i].any()]
    return image.replace(pixels=np.where(bad, np.float32(0), image.pixels)), int(bad.sum()), where


def nonfinite_warning(path: str, count: int, channels: list[str]) -> str:
    return f"{path}: {count} NaN/infinite pixel value(s) in channels {', '.join(channels)} replaced by 0"


def read_finite(path: str) -> tuple[Image, str | None]:
    """:func:`read_file` with NaN and infinite values replaced by 0 (``read``'s default), and the
    warning that names the file, the count and the channels (None when every value is finite)."""
    image, count, where = _nonfinite(read_file(path))
    return image, (nonfinite_warning(path, count, where) if count else None)


def _compute(params: ReadParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    path = _file_for(params, ctx.sample)
    if not os.path.isfile(path):
        raise _missing_file_error(params, path, axis_number(params.axis, ctx.sample), ctx.sample)
    if params.colorspace is not None:
        # code values as stored (no built-in curve), then the named space to scene_linear
        image = colorspace.to_working(read_file(path, transfer="linear"), params.colorspace,
                                      params.ocio_config)
    else:
        image = read_file(path, transfer=params.transfer)

    if params.channels is not None:
        missing = [c for c in params.channels if c not in image.channels]
        if missing:
            raise OpError(f"channels {', '.join(missing)} not in the file; it has "
                          f"{', '.join(image.channels)}", file=path, field="channels",
                          fix="choose channels the file has, or leave 'channels' out")
        image = image.select(params.channels)

    if params.nonfinite != "keep":
        cleaned, count, where = _nonfinite(image)
        if count:
            if params.nonfinite == "error":
                raise OpError(f"{count} NaN/infinite pixel value(s) in channels {', '.join(where)}",
                              file=path, field="nonfinite",
                              fix="fix the file, or set nonfinite to 'zero' (replace with 0) "
                                  "or 'keep'")
            ctx.warn(nonfinite_warning(path, count, where))
            image = cleaned

    meta = dict(image.meta)
    meta["source.path"] = os.path.abspath(path)
    meta["source.axis"] = params.axis
    meta["source.frame"] = (int(axis_number(params.axis, ctx.sample))
                            if sequence.is_sequence(_pattern(params, ctx.sample)) else None)
    if params.view_token is not None:
        meta["source.view"] = int(ctx.sample.view)
    return image.replace(meta=meta)


READ = Operator(
    name="read",
    version=1,
    summary="Read an image sequence or still (EXR, PNG, TIFF, JPEG) as linear premultiplied float.",
    params=ReadParams,
    compute=_compute,
    inputs=(),
    doc=__doc__ or "",
    outputs=("Every channel of the file (EXR: R G B A first, then layers such as fwd.x, conf, "
             "sorted; PNG/TIFF/JPEG: R G B [A], grey files as R=G=B), float32, linear light, "
             "premultiplied by A."),
    identity=_identity,
    frames=_frames,
    disk_cache=False,
    canonical_sample=_canonical_sample,
    views=_views,  # re-reading the plate is cheaper than storing a copy of it
    sources=_sources,
)
