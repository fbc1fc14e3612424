"""PNG, TIFF and JPEG files <-> :class:`~graphcore.image.Image`, through OpenCV.

Conventions (common practice for these formats; none of them is stated by a single standard):

- Integer files (8 or 16 bits per sample) hold transfer-encoded colour (sRGB unless told
  otherwise) and **straight** (unassociated) alpha. The Image holds linear, premultiplied colour.
  Reading: ``code / (2**bits - 1)`` -> decode colour -> multiply colour by alpha.
  Writing: divide colour by alpha (colour is 0 where alpha is 0, so light emitted by fully
  transparent pixels is lost) -> encode -> round to the nearest code, clip to the code range.
- Alpha is linear coverage: it is never transfer-encoded.
- 32-bit float TIFFs are read as they are (``transfer="auto"`` means linear) with straight alpha.
- A grey file becomes ``R = G = B`` (the same plane three times), so every colour operator sees
  the usual RGB channels; grey + alpha becomes ``R G B A``.
- OpenCV's BGR(A) order is swapped to RGB(A) on read and back on write.
- Metadata written: none (OpenCV writes no text chunks); provenance is an EXR feature.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from typing import Any

import cv2
import numpy as np

from graphcore.errors import OpError
from graphcore.image import Image
from operators.io import transfer as tf

__all__ = ["RASTER_EXTENSIONS", "read_raster", "write_raster"]

RASTER_EXTENSIONS = (".png", ".tif", ".tiff", ".jpg", ".jpeg")
_JPEG = (".jpg", ".jpeg")
_CODE_MAX = {8: 255.0, 16: 65535.0}


def _ext(path: str) -> str:
    return os.path.splitext(path)[1].lower()


def _jpeg_complete(path: str) -> bool:
    """A JPEG ends with the end-of-image marker FF D9 (trailing padding of up to 64 bytes allowed)."""
    with open(path, "rb") as fh:
        fh.seek(0, os.SEEK_END)
        size = fh.tell()
        fh.seek(max(0, size - 66))
        tail = fh.read()
    return b"\xff\xd9" in tail


def read_raster(path: str, *, transfer: str = "auto") -> Image:
    """Read a PNG, TIFF or JPEG into linear, premultiplied float32.

    Parameters
    ----------
    path : str
    transfer : {"auto", "srgb", "rec709", "linear"}
        How colour is encoded in the file; ``"auto"`` is sRGB for 8/16-bit files and linear for
        float TIFFs.

    Returns
    -------
    Image
        (H, W, 3) ``R G B`` or (H, W, 4) ``R G B A``; meta ``source.path``, ``raster.bit_depth``
        (8, 16 or 32), ``raster.transfer`` (the transfer actually used).

    Raises
    ------
    OpError
        ``file=path``: missing, unreadable/corrupt/truncated (JPEGs without an end-of-image
        marker count as truncated), or an unsupported sample type.
    """
    if not os.path.isfile(path):
        raise OpError("file not found", file=path,
                      fix="check the path and that the file was rendered or copied there")
    if _ext(path) in _JPEG and not _jpeg_complete(path):
        raise OpError("truncated JPEG file (no end-of-image marker)", file=path,
                      fix="the file was only partly written; export or copy it again")
    try:
        arr = cv2.imread(path, cv2.IMREAD_UNCHANGED)
    except cv2.error as e:        # e.g. a header declaring more pixels than OpenCV decodes (2**30)
        text = str(e).strip()
        reason = ("the header declares more pixels than OpenCV decodes" if "MAX_IMAGE_PIXELS" in text
                  else (text.splitlines() or ["decoder error"])[-1])
        raise OpError(f"OpenCV refused the file: {reason}", file=path,
                      fix="the file is damaged or larger than OpenCV reads (2**30 pixels); export "
                          "or copy it again") from None
    if arr is None:
        raise OpError("OpenCV cannot decode this file (corrupt, truncated or not an image of its "
                      "extension's format)", file=path, fix="check the file; export or copy it again")
    if arr.dtype == np.uint8:
        bits, values = 8, arr.astype(np.float32) / np.float32(255.0)
    elif arr.dtype == np.uint16:
        bits, values = 16, arr.astype(np.float32) / np.float32(65535.0)
    elif arr.dtype in (np.float32, np.float64):
        bits, values = 32, arr.astype(np.float32)
    else:
        raise OpError(f"unsupported sample type {arr.dtype} (midframe reads 8/16-bit integer and "
                      "32-bit float samples)", file=path, fix="convert the file to 16-bit or float")
    if values.ndim == 2:
        values = values[:, :, None]
    nc = values.shape[2]
    if nc == 1:
        color, alpha = np.repeat(values, 3, axis=2), None
    elif nc == 2:
        color, alpha = np.repeat(values[:, :, :1], 3, axis=2), values[:, :, 1]
    elif nc in (3, 4):
        color = values[:, :, 2::-1]  # BGR -> RGB
        alpha = values[:, :, 3] if nc == 4 else None
    else:
        raise OpError(f"{nc} samples per pixel is not supported (1 to 4 are)", file=path,
                      fix="convert the file to grey, RGB or RGBA")
    used = transfer if transfer != "auto" else ("linear" if bits == 32 else "srgb")
    color = tf.decode(used, np.ascontiguousarray(color, dtype=np.float32))
    if alpha is not None:
        color = color * alpha[:, :, None]
        pixels = np.concatenate([color, alpha[:, :, None]], axis=2)
        names: tuple[str, ...] = ("R", "G", "B", "A")
    else:
        pixels, names = color, ("R", "G", "B")
    meta: dict[str, Any] = {"source.path": os.path.abspath(path), "raster.bit_depth": bits,
                            "raster.transfer": used}
    return Image(pixels.astype(np.float32, copy=False), names, meta)


def _default_selection(image: Image, path: str) -> tuple[str, ...]:
    if image.has("R", "G", "B"):
        return ("R", "G", "B", "A") if image.has_alpha else ("R", "G", "B")
    if len(image.channels) == 1:
        return image.channels
    raise OpError(f"no R, G, B channels to write; the image has {', '.join(image.channels)}",
                  file=path, field="channels",
                  fix="set 'channels' to one, three or four channel names")


def write_raster(path: str, image: Image, *, bit_depth: int = 8, transfer: str = "srgb",
                 quality: int = 95, channels: Sequence[str] | None = None) -> None:
    """Write ``image`` as an 8/16-bit PNG or TIFF, or an 8-bit JPEG (not atomically).

    Parameters
    ----------
    path : str
        Destination; its extension picks the format.
    image : Image
        Linear, premultiplied float32.
    bit_depth : {8, 16}
        16 is refused for JPEG.
    transfer : {"srgb", "rec709", "linear"}
        Encoding applied to the colour planes (never to alpha).
    quality : int
        JPEG quality 1..100.
    channels : sequence of str, optional
        Planes to write, taken by position: one -> grey, three -> RGB, four -> RGB + alpha
        (the fourth unpremultiplies the first three). Default: ``R G B`` (+ ``A`` if present),
        or the only channel of a one-channel image.

    Raises
    ------
    OpError
        Unsupported combination (JPEG with 16 bits or alpha, two channels), unknown channel,
        or OpenCV failing to write.
    """
    ext = _ext(path)
    if bit_depth not in _CODE_MAX:
        raise OpError(f"bit depth {bit_depth} is not supported", file=path, field="bit_depth",
                      fix="use 8 or 16")
    if ext in _JPEG and bit_depth != 8:
        raise OpError("JPEG files hold 8 bits per sample", file=path, field="bit_depth",
                      fix="set bit_depth to 8, or write PNG or TIFF for 16 bits")
    names = tuple(channels) if channels else _default_selection(image, path)
    missing = [n for n in names if n not in image.channels]
    if missing:
        raise OpError(f"channels {', '.join(missing)} not in the image "
                      f"(it has {', '.join(image.channels)})", file=path, field="channels",
                      fix="choose channels the image has")
    if len(names) not in (1, 3, 4):
        raise OpError(f"{len(names)} channels cannot be written to {ext}", file=path,
                      field="channels", fix="choose one (grey), three (RGB) or four (RGBA) channels")
    if ext in _JPEG and len(names) == 4:
        raise OpError("JPEG files have no alpha", file=path, field="channels",
                      fix="write PNG or TIFF to keep alpha, or choose three channels")

    px = image.select(names).pixels.astype(np.float32)
    color = px[:, :, :3] if len(names) >= 3 else px[:, :, :1]
    alpha = px[:, :, 3] if len(names) == 4 else None
    if alpha is not None:
        with np.errstate(divide="ignore", invalid="ignore"):
            color = np.where(alpha[:, :, None] > 0, color / alpha[:, :, None], 0.0)
    color = tf.encode(transfer, color.astype(np.float32))
    top = _CODE_MAX[bit_depth]
    planes = color if alpha is None else np.concatenate([color, alpha[:, :, None]], axis=2)
    planes = np.nan_to_num(planes, nan=0.0, posinf=1.0, neginf=0.0)
    codes = np.clip(np.rint(planes.astype(np.float64) * top), 0, top)
    codes = codes.astype(np.uint8 if bit_depth == 8 else np.uint16)
    if codes.shape[2] >= 3:
        order = [2, 1, 0] + ([3] if codes.shape[2] == 4 else [])
        codes = np.ascontiguousarray(codes[:, :, order])
    else:
        codes = np.ascontiguousarray(codes[:, :, 0])
    params: list[int] = []
    if ext in _JPEG:
        params = [cv2.IMWRITE_JPEG_QUALITY, int(quality)]
    try:
        ok = cv2.imwrite(path, codes, params)
    except cv2.error as e:
        raise OpError(f"OpenCV could not write the file: {e}", file=path,
                      fix="check the folder is writable and the extension is .png/.tif/.jpg") from None
    if not ok:
        raise OpError("OpenCV could not write the file", file=path,
                      fix="check the folder is writable and has free space")
