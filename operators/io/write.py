"""The ``write`` operator: a sink that writes its input image to a file per frame (or per view).

Writing is atomic: the image goes to a temporary file in the destination folder whose name keeps
the real extension (``.midframe-tmp-<random>-<name>``), and is renamed over the final path only
when complete (``os.replace``); on any failure the temporary file is removed. So a final path
holds either the previous complete file or the new complete file, never a half-written frame.

The writer refuses to replace a file that this graph reads (``OpContext.protected_paths`` and
``OpContext.sources``): a render never overwrites its own source plates.

EXR files get the header attribute ``midframe.provenance``: the JSON record of
:meth:`graphcore.registry.operator.OpContext.provenance` (tool, graph, node, sample, upstream
nodes and source files), plus the input's ``exr.attributes`` so header attributes round-trip.

Lossy EXR compressions: ``pxr24`` (float channels rounded to 24 bits), ``b44``/``b44a`` (half
channels), ``dwaa``/``dwab``. The others listed are lossless.
"""

from __future__ import annotations

import json
import os
import secrets
from collections.abc import Mapping, Sequence
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry.operator import OpContext, Operator, Port
from operators.io import colorspace, exr, raster, sequence
from operators.io._common import (EXR_EXTENSIONS, axis_number, check_channels, check_colour_rule,
                                  check_path_tokens, check_view_token, extension, fill_view, resolved,
                                  write_failure_fix)

__all__ = ["WRITE", "WriteParams", "atomic_write", "TEMP_PREFIX"]

TEMP_PREFIX = ".midframe-tmp-"

Compression = Literal["source", "none", "rle", "zips", "zip", "piz", "pxr24", "b44", "b44a",
                      "dwaa", "dwab", "htj2k256", "htj2k32", "lj2k", "zstd"]


class WriteParams(BaseModel):
    """Parameters of ``write``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    path: str = Field(description=(
        "Destination: a sequence pattern with one frame token (out.%04d.exr, out.####.exr) or one "
        "file name. Extension picks the format: .exr .png .tif .tiff .jpg .jpeg. Missing folders "
        "are created."))
    pixel_type: Literal["source", "half", "float"] = Field("source", description=(
        "EXR pixel type. 'source' keeps each channel's type from the file it was read from "
        "(where unknown: half for R G B A, float for data layers such as vectors, whose "
        "precision half would cut to 0.5 px at 1000 px); 'half' or 'float' for every channel."))
    compression: Compression = Field("source", description=(
        "EXR compression. 'source' keeps the compression of the file read (zip where unknown). "
        "Lossy: pxr24 (float channels), b44, b44a, dwaa, dwab."))
    transfer: Literal["auto", "srgb", "rec709", "linear"] = Field("auto", description=(
        "Encoding of colour in 8/16-bit files (PNG, TIFF, JPEG); 'auto' = sRGB (IEC 61966-2-1). "
        "Alpha is never encoded. Ignored for EXR, which holds linear light."))
    bit_depth: Literal[8, 16] = Field(8, description=(
        "Bits per sample for PNG and TIFF; JPEG supports 8 only."))
    quality: int = Field(95, ge=1, le=100, description="JPEG quality, 1 (smallest) to 100 (best).")
    channels: tuple[str, ...] | None = Field(None, description=(
        "Channels to write, in this order. Default: every channel for EXR; R G B (A) for "
        "PNG/TIFF/JPEG, where one name writes grey and four names write RGB + alpha."))
    axis: Literal["frame", "view"] = Field("frame", description=(
        "Which sample coordinate numbers the files: 'frame' (time) or 'view' (camera)."))
    view_token: str | None = Field(None, description=(
        "For views of a rig or between stereo eyes written as one sequence per view: the token in "
        "'path' that holds the view number, the other token being the frame, e.g. "
        "'out/view%02d/sh010.%04d.exr' with view_token '%02d' (forms: %d, %0Nd, a run of #). The "
        "render then writes every view of the input at every frame; 'axis' stays 'frame'."))
    colorspace: str | None = Field(None, description=(
        "Colour space to write in, by name in an OpenColorIO config (ocio_config, else the OCIO "
        "environment variable): colour is converted to it from the config's scene_linear role, "
        "and 8/16-bit files then store those values without the built-in curve. Unset: EXR "
        "holds linear light, other formats the built-in 'transfer'."))
    ocio_config: str | None = Field(None, description=(
        "OpenColorIO config for 'colorspace': a config.ocio file or a built-in config such as "
        "'ocio://cg-config-latest'. Default: the OCIO environment variable."))

    @model_validator(mode="after")
    def _one_colour_rule(self) -> "WriteParams":
        check_colour_rule(self.transfer, self.colorspace, self.ocio_config, "the colour space to write")
        return self

    @field_validator("path")
    @classmethod
    def valid_path(cls, v: str) -> str:
        return check_path_tokens(v)

    @model_validator(mode="after")
    def _two_numbers(self) -> "WriteParams":
        check_view_token(self.path, self.view_token, self.axis, what="the views",
                         no_frame="give both, e.g. 'out/view%02d/shot.%04d.exr'")
        return self

    @field_validator("channels")
    @classmethod
    def valid_channels(cls, v: tuple[str, ...] | None) -> tuple[str, ...] | None:
        return check_channels(v)


def atomic_write(target: str, write: Any) -> None:
    """Call ``write(tmp_path)`` for a temporary file beside ``target``, then rename it over ``target``.

    The temporary name keeps ``target``'s extension (libraries pick the format from it). The
    file is flushed to disk before the rename. On any exception the temporary file is removed
    and the exception re-raised; ``target`` is untouched.
    """
    folder = os.path.dirname(os.path.abspath(target))
    tmp = os.path.join(folder, f"{TEMP_PREFIX}{secrets.token_hex(6)}-{os.path.basename(target)}")
    try:
        write(tmp)
        fd = os.open(tmp, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, target)
    except BaseException:
        try:
            os.remove(tmp)
        except FileNotFoundError:
            pass
        raise


def _target(params: WriteParams, number: Any, view: Any = 0) -> str:
    path = params.path
    if params.view_token is not None:
        if view.denominator != 1:
            raise OpError(f"cannot write at fractional view {view}: files are numbered by integer "
                          "views", file=params.path, field="view_token",
                          fix="ask this write node for integer views (a view-path upstream maps them "
                              "to fractional source views)")
        path = fill_view(path, params.view_token, int(view))
    pattern = sequence.parse(path)
    if number.denominator != 1:
        raise OpError(f"cannot write at fractional {params.axis} {number}: written files are "
                      f"numbered by integer {params.axis}s", file=params.path, field="axis",
                      fix="ask this write node for integer samples (a retime or view-path "
                          "upstream maps them to fractional source samples)")
    return pattern.format(int(number))


def _targets(params: WriteParams, frames: Sequence[Any]) -> list[str]:
    """Files written for ``frames``: frame numbers, or ``(frame, view)`` pairs with a view_token."""
    out: list[str] = []
    for item in frames:
        if params.view_token is not None:
            f, v = item
            p = os.path.abspath(sequence.format_path(fill_view(params.path, params.view_token, int(v)), int(f)))
        else:
            p = os.path.abspath(sequence.format_path(params.path, int(item)))
        if p not in out:
            out.append(p)
    return out


def _per_view(params: WriteParams) -> bool:
    return params.view_token is not None


def _complete(params: WriteParams, sample: Any, key: str) -> bool:
    """Whether the file for ``sample`` exists and its provenance header carries content key ``key``
    (only EXR files carry one: other formats are always rendered again)."""
    try:
        target = _target(params, axis_number(params.axis, sample), sample.view)
    except OpError:
        return False
    if not key or extension(target) not in EXR_EXTENSIONS or not os.path.isfile(target):
        return False
    try:
        record = exr.read_provenance(target)
    except OpError:
        return False                      # unreadable or damaged: render it again
    return bool(record) and record.get("key") == key


def _guard(target: str, ctx: OpContext) -> None:
    real = resolved(target)
    protected = {resolved(p) for p in (*ctx.protected_paths, *ctx.sources)}
    same_file = False
    if os.path.exists(real):          # the same file under another name (a hard link)
        for p in ctx.sources:
            try:
                same_file = same_file or os.path.samefile(real, p)
            except OSError:
                pass
    if real in protected or same_file:
        raise OpError("refusing to overwrite a file this graph reads (a source plate)",
                      file=target, field="path",
                      fix="write to another folder or file name than the one read")


def _provenance_json(ctx: OpContext) -> str:
    def plain(o: Any) -> Any:
        if isinstance(o, Mapping):
            return dict(o)
        if isinstance(o, (tuple, set, frozenset)):
            return list(o)
        return str(o)

    return json.dumps(ctx.provenance(), sort_keys=True, default=plain)


def _write_exr(params: WriteParams, image: Image, tmp: str, target: str, ctx: OpContext) -> None:
    if params.pixel_type == "source":
        source_types = dict(image.meta.get("exr.pixel_types") or {})
        types: dict[str, str] = {c: source_types.get(c, "half" if c in ("R", "G", "B", "A") else "float")
                                 for c in image.channels}
    else:
        types = {c: params.pixel_type for c in image.channels}
    compression = params.compression
    if compression == "source":
        compression = str(image.meta.get("exr.compression") or "zip")
        if compression not in exr.available_compressions():
            compression = "zip"
    attributes = {k: v for k, v in dict(image.meta.get("exr.attributes") or {}).items()
                  if k != exr.PROVENANCE_ATTRIBUTE}
    attributes[exr.PROVENANCE_ATTRIBUTE] = _provenance_json(ctx)
    try:
        exr.write_exr(tmp, image, pixel_types=types, compression=compression,
                      attributes=attributes, warn=ctx.warn)
    except OpError as e:
        e.file = target  # name the final path, not the temporary one
        raise


def _compute(params: WriteParams, inputs: Mapping[str, Any], ctx: OpContext) -> Image:
    image = inputs["image"]
    target = _target(params, axis_number(params.axis, ctx.sample), ctx.sample.view)
    _guard(target, ctx)
    is_exr = extension(target) in EXR_EXTENSIONS
    out = image
    if params.channels is not None and is_exr:
        missing = [c for c in params.channels if c not in image.channels]
        if missing:
            raise OpError(f"channels {', '.join(missing)} not in the image (it has "
                          f"{', '.join(image.channels)})", file=target, field="channels",
                          fix="choose channels the image has, or leave 'channels' out")
        out = image.select(params.channels)
    if not is_exr and extension(target) in (".jpg", ".jpeg") and params.bit_depth != 8:
        raise OpError("JPEG files hold 8 bits per sample", file=target, field="bit_depth",
                      fix="set bit_depth to 8, or write PNG or TIFF for 16 bits")

    transfer = "srgb" if params.transfer == "auto" else params.transfer
    if params.colorspace is not None:
        out = colorspace.from_working(out, params.colorspace, params.ocio_config)
        transfer = "linear"          # the values are already in the named space
    try:
        os.makedirs(os.path.dirname(os.path.abspath(target)), exist_ok=True)
        if is_exr:
            atomic_write(target, lambda tmp: _write_exr(params, out, tmp, target, ctx))
        else:
            atomic_write(target, lambda tmp: raster.write_raster(
                tmp, out, bit_depth=params.bit_depth, transfer=transfer,
                quality=params.quality, channels=params.channels))
    except OpError as e:
        if e.file and os.path.basename(e.file).startswith(TEMP_PREFIX):
            e.file = target
        raise
    except OSError as e:
        raise OpError(f"cannot write the file: {e.strerror or e}", file=target, field="path",
                      fix=write_failure_fix(target, code=e.errno or 0)) from None
    return image


WRITE = Operator(
    name="write",
    version=1,
    summary="Write images to an EXR (float/half, any channels) or PNG/TIFF/JPEG sequence, atomically.",
    params=WriteParams,
    compute=_compute,
    inputs=(Port("image", "The image to write (linear, premultiplied)."),),
    doc=__doc__ or "",
    outputs="The input image, unchanged.",
    targets=_targets,
    per_view=_per_view,
    complete=_complete,
    sink=True,
)
