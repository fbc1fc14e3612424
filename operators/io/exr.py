"""OpenEXR files <-> :class:`~graphcore.image.Image`, through OpenEXR's own ``OpenEXR.File`` API.

Reading gives an Image whose planes are the file's data window, in float32, channels ordered
``R G B A`` (those present) then every other channel sorted by name (``conf``, ``diffuse.R``,
``fwd.x`` ...). What the file said is kept in ``Image.meta`` so a read -> write round trip keeps it:

``exr.pixel_types``
    channel -> ``"half" | "float" | "uint"``.
``exr.compression``
    compression name (``"zip"``, ``"piz"``, ... see :data:`COMPRESSIONS`).
``exr.attributes``
    extra header attributes, JSON-able (see below).
``exr.dropped_attributes``
    names of header attributes that could not be carried (present only when non-empty).
``exr.data_window`` / ``exr.display_window``
    ``[xmin, ymin, xmax, ymax]`` (inclusive, OpenEXR's convention).
``source.path``
    absolute path of the file read.

Header attributes in ``exr.attributes``: ``string``, ``int`` and ``float`` attributes are plain
JSON values, ``stringvector`` and ``floatvector`` plain lists. Every other carried type is a
tagged object ``{"type": T, "value": V}`` with T one of ``double rational v2i v2f v2d v3i v3f v3d
m33f m33d m44f m44d box2i box2f chromaticities timecode keycode envmap``. Dropped on read
(listed in ``exr.dropped_attributes``): preview images, opaque (unknown-type) and bytes
attributes, tile descriptions, empty vectors. Not carried because the writer sets them itself:
``channels compression dataWindow displayWindow lineOrder type tiles name version chunkCount``.

Precision of attributes as the installed bindings (OpenEXR 3.5.3) behave, measured here: a plain
Python float is written as a 32-bit ``float`` attribute (a ``double`` must be tagged); ints must
fit in 32 bits (the bindings silently wrap larger ones, so :func:`write_exr` refuses them);
``fractions.Fraction`` writes a ``rational`` (``OpenEXR.Rational`` objects are refused by the
bindings).

References
----------
.. [1] OpenEXR, "Technical Introduction" and "OpenEXR File Layout" (openexr.com): pixel types,
   layer.channel naming, data/display windows, header attributes, compression methods.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable, Iterable, Mapping
from fractions import Fraction
from typing import Any

import numpy as np
import OpenEXR

from graphcore.errors import OpError
from graphcore.image import LIMIT_VARIABLE, MAX_IMAGE_BYTES, Image, max_image_bytes
from operators.io._common import write_failure_fix

__all__ = ["COMPRESSIONS", "PIXEL_TYPES", "PROVENANCE_ATTRIBUTE", "MAX_IMAGE_BYTES", "available_compressions",
           "read_exr", "write_exr", "read_provenance", "read_header",
           "attribute_to_meta", "attribute_from_meta", "ordered_channels"]

PROVENANCE_ATTRIBUTE = "midframe.provenance"

# Our names -> OpenEXR enum member names. A name is usable when the installed module has it.
COMPRESSIONS: dict[str, str] = {
    "none": "NO_COMPRESSION",
    "rle": "RLE_COMPRESSION",
    "zips": "ZIPS_COMPRESSION",
    "zip": "ZIP_COMPRESSION",
    "piz": "PIZ_COMPRESSION",
    "pxr24": "PXR24_COMPRESSION",
    "b44": "B44_COMPRESSION",
    "b44a": "B44A_COMPRESSION",
    "dwaa": "DWAA_COMPRESSION",
    "dwab": "DWAB_COMPRESSION",
    "htj2k256": "HTJ2K256_COMPRESSION",
    "htj2k32": "HTJ2K32_COMPRESSION",
    "lj2k": "LJ2K_COMPRESSION",
    "zstd": "ZSTD_COMPRESSION",
}

PIXEL_TYPES: dict[str, Any] = {"half": np.float16, "float": np.float32, "uint": np.uint32}

_STRUCTURAL = frozenset({"channels", "compression", "dataWindow", "displayWindow", "lineOrder",
                         "type", "tiles", "name", "version", "chunkCount", "maxSamplesPerPixel"})
_UINT_MAX = 4294967295.0
_INT32 = (-2**31, 2**31 - 1)



def available_compressions() -> list[str]:
    """The names of :data:`COMPRESSIONS` that the installed OpenEXR module can write."""
    return [n for n, member in COMPRESSIONS.items() if hasattr(OpenEXR.Compression, member)]


def _compression_enum(name: str, path: str) -> Any:
    member = COMPRESSIONS.get(name)
    if member is None or not hasattr(OpenEXR.Compression, member):
        raise OpError(f"compression {name!r} is not available with OpenEXR {OpenEXR.__version__}",
                      file=path, field="compression",
                      fix=f"choose one of: {', '.join(available_compressions())}")
    return getattr(OpenEXR.Compression, member)


def _compression_name(value: Any) -> str:
    by_member = {member: n for n, member in COMPRESSIONS.items()}
    return by_member.get(getattr(value, "name", str(value)), "zip")


def ordered_channels(names: Iterable[str]) -> tuple[str, ...]:
    """``R G B A`` (those present, in that order), then the other names sorted."""
    names = list(names)
    head = [c for c in ("R", "G", "B", "A") if c in names]
    return tuple(head + sorted(n for n in names if n not in head))


# -- header attributes <-> JSON-able meta ----------------------------------------------------------
_VEC_TAGS = {(2, "i"): "v2i", (2, "f4"): "v2f", (2, "f8"): "v2d",
             (3, "i"): "v3i", (3, "f4"): "v3f", (3, "f8"): "v3d"}
_MAT_TAGS = {(3, "f4"): "m33f", (3, "f8"): "m33d", (4, "f4"): "m44f", (4, "f8"): "m44d"}
_TIMECODE_FIELDS = ("hours", "minutes", "seconds", "frame", "dropFrame", "colorFrame",
                    "fieldPhase", "bgf0", "bgf1", "bgf2", "userData")
_KEYCODE_FIELDS = ("filmMfcCode", "filmType", "prefix", "count", "perfOffset", "perfsPerFrame",
                   "perfsPerCount")


class _Unsupported(Exception):
    pass


def _dtype_key(a: np.ndarray) -> str:
    if a.dtype.kind == "i":
        return "i"
    if a.dtype == np.float32:
        return "f4"
    if a.dtype == np.float64:
        return "f8"
    raise _Unsupported(str(a.dtype))


def attribute_to_meta(value: Any) -> Any:
    """One header attribute value as returned by ``OpenEXR.File.header()`` -> JSON-able value.

    Raises ``ValueError`` for attribute types that are not carried (preview, opaque, bytes, ...).
    """
    try:
        return _to_meta(value)
    except _Unsupported as e:
        raise ValueError(f"attribute of type {type(value).__name__} is not carried ({e})") from None


def _to_meta(value: Any) -> Any:
    if isinstance(value, bool):
        return int(value)
    if isinstance(value, (str, int, float)):
        return value
    if isinstance(value, Fraction):
        return {"type": "rational", "value": [value.numerator, value.denominator]}
    if isinstance(value, list):
        if not value:
            raise _Unsupported("empty vector")
        if all(isinstance(v, str) for v in value):
            return list(value)
        if all(isinstance(v, float) for v in value):
            return [float(v) for v in value]
        raise _Unsupported("list of mixed types")
    if isinstance(value, np.ndarray):
        if value.shape == (1,) and value.dtype == np.float64:
            return {"type": "double", "value": float(value[0])}
        if value.ndim == 1 and (value.size, _dtype_key(value)) in _VEC_TAGS:
            return {"type": _VEC_TAGS[(value.size, _dtype_key(value))], "value": value.tolist()}
        if value.ndim == 2 and value.shape[0] == value.shape[1] and \
                (value.shape[0], _dtype_key(value)) in _MAT_TAGS:
            return {"type": _MAT_TAGS[(value.shape[0], _dtype_key(value))], "value": value.tolist()}
        raise _Unsupported(f"array {value.shape} {value.dtype}")
    if isinstance(value, tuple):
        if len(value) == 2 and all(isinstance(v, np.ndarray) and v.shape == (2,) for v in value):
            tag = "box2i" if value[0].dtype.kind == "i" else "box2f"
            return {"type": tag, "value": [value[0].tolist(), value[1].tolist()]}
        if len(value) == 8 and all(isinstance(v, float) for v in value):
            return {"type": "chromaticities", "value": [float(v) for v in value]}
        raise _Unsupported(f"tuple of {len(value)}")
    if isinstance(value, OpenEXR.TimeCode):
        return {"type": "timecode", "value": {f: int(getattr(value, f)) for f in _TIMECODE_FIELDS}}
    if isinstance(value, OpenEXR.KeyCode):
        return {"type": "keycode", "value": {f: int(getattr(value, f)) for f in _KEYCODE_FIELDS}}
    if isinstance(value, OpenEXR.Envmap):
        return {"type": "envmap", "value": int(value)}
    raise _Unsupported(type(value).__name__)


def attribute_from_meta(name: str, value: Any) -> Any:
    """A JSON-able attribute value (as :func:`attribute_to_meta` makes) -> what ``OpenEXR.File`` writes.

    Raises
    ------
    ValueError
        Values the bindings would reject or silently corrupt (ints beyond 32 bits, empty or
        mixed lists, unknown tagged types, nested structures).
    """
    if isinstance(value, bool):
        raise ValueError(f"attribute {name!r}: a bool has no EXR attribute type; use 0/1")
    if isinstance(value, str):
        return value
    if isinstance(value, int):
        if not _INT32[0] <= value <= _INT32[1]:
            raise ValueError(f"attribute {name!r}: {value} does not fit a 32-bit int attribute; "
                             "store it as a string")
        return value
    if isinstance(value, float):
        return value
    if isinstance(value, Fraction):
        return value
    if isinstance(value, (list, tuple)):
        if not value:
            raise ValueError(f"attribute {name!r}: an empty list has no EXR attribute type")
        if all(isinstance(v, str) for v in value):
            return [str(v) for v in value]
        if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value):
            return [float(v) for v in value]  # a Python list of floats -> floatvector
        raise ValueError(f"attribute {name!r}: lists must be all strings or all numbers")
    if isinstance(value, Mapping) and set(value) == {"type", "value"}:
        return _from_tagged(name, str(value["type"]), value["value"])
    raise ValueError(f"attribute {name!r}: value of type {type(value).__name__} has no EXR "
                     "attribute type (use str, int, float, a list, or {'type', 'value'})")


def _from_tagged(name: str, tag: str, v: Any) -> Any:
    if tag == "double":
        return np.array([float(v)], dtype=np.float64)
    if tag == "rational":
        return Fraction(int(v[0]), int(v[1]))
    for (n, key), t in _VEC_TAGS.items():
        if t == tag:
            dt = {"i": np.int32, "f4": np.float32, "f8": np.float64}[key]
            arr = np.asarray(v, dtype=dt)
            if arr.shape != (n,):
                raise ValueError(f"attribute {name!r}: {tag} needs {n} numbers")
            return arr
    for (n, key), t in _MAT_TAGS.items():
        if t == tag:
            arr = np.asarray(v, dtype=np.float32 if key == "f4" else np.float64)
            if arr.shape != (n, n):
                raise ValueError(f"attribute {name!r}: {tag} needs {n}x{n} numbers")
            return np.ascontiguousarray(arr)
    if tag in ("box2i", "box2f"):
        dt = np.int32 if tag == "box2i" else np.float32
        lo, hi = (np.asarray(p, dtype=dt) for p in v)
        return (lo, hi)
    if tag == "chromaticities":
        vals = tuple(float(x) for x in v)
        if len(vals) != 8:
            raise ValueError(f"attribute {name!r}: chromaticities need 8 numbers")
        return vals
    if tag == "timecode":
        tc = OpenEXR.TimeCode()
        for f in _TIMECODE_FIELDS:
            setattr(tc, f, int(v[f]))
        return tc
    if tag == "keycode":
        kc = OpenEXR.KeyCode()
        for f in _KEYCODE_FIELDS:
            setattr(kc, f, int(v[f]))
        return kc
    if tag == "envmap":
        return OpenEXR.Envmap(int(v))
    raise ValueError(f"attribute {name!r}: unknown tagged type {tag!r}")


# -- reading ---------------------------------------------------------------------------------------
def _window(box: Any) -> list[int]:
    lo, hi = box
    return [int(lo[0]), int(lo[1]), int(hi[0]), int(hi[1])]


def _open(path: str, *, header_only: bool, num_threads: int) -> Any:
    if not os.path.isfile(path):
        raise OpError("file not found", file=path,
                      fix="check the path and that the file was rendered or copied there")
    if not OpenEXR.isOpenExrFile(path):
        raise OpError("not an OpenEXR file (it does not start with the EXR magic number)",
                      file=path, fix="check that the file is an EXR image and not damaged")
    try:
        return OpenEXR.File(path, separate_channels=True, header_only=header_only,
                            num_threads=num_threads)
    except (RuntimeError, ValueError, OSError, TypeError) as e:
        raise OpError(f"unreadable OpenEXR file: {e}", file=path,
                      fix="the file is damaged or truncated; render or copy it again") from None


def _check_declared_size(head: Any, n_parts: int, path: str) -> None:
    """Refuse a header whose data windows are empty or larger than
    :data:`graphcore.image.MAX_IMAGE_BYTES` (or ``MIDFRAME_MAX_IMAGE_MB``) as float32, before any
    pixel memory is allocated: the decoder would otherwise fill that much memory before noticing
    that a damaged file does not hold the data."""
    total = 0
    for p in range(n_parts):
        header = head.header(p)
        xmin, ymin, xmax, ymax = _window(header["dataWindow"])
        width, height = xmax - xmin + 1, ymax - ymin + 1
        if width <= 0 or height <= 0:
            raise OpError(f"the header declares an empty image (data window {xmin},{ymin} to "
                          f"{xmax},{ymax})", file=path,
                          fix="the file is damaged or was written empty; render or copy it again")
        channels = len(header.get("channels") or ()) or 1
        total += width * height * channels * 4
    limit = max_image_bytes()
    if total > limit:
        raise OpError(f"the header declares {total / (1 << 30):.1f} GiB of pixels (data window "
                      f"{width} x {height}, {channels} channel(s)), more than the "
                      f"{limit / (1 << 30):.1f} GiB midframe decodes in one image", file=path,
                      fix=f"the header is probably damaged: render or copy the file again; if the "
                          f"image really is that large, set the environment variable "
                          f"{LIMIT_VARIABLE} to a larger size in MiB")


def read_header(path: str, *, num_threads: int = 0) -> dict[str, Any]:
    """The first part's header as the bindings return it (values are OpenEXR/numpy objects)."""
    return dict(_open(path, header_only=True, num_threads=num_threads).header())


def read_exr(path: str, *, num_threads: int = 0) -> Image:
    """Read a scanline or tiled OpenEXR file into an Image.

    Parameters
    ----------
    path : str
        The file.
    num_threads : int
        OpenEXR decoding threads; 0 decodes on the calling thread (the engine runs frames in
        parallel processes, so this is the default).

    Returns
    -------
    Image
        ``pixels`` (H, W, C) float32 over the data window; channels ``R G B A`` first, then the
        rest sorted; ``meta`` as described in the module docstring. ``uint`` channels become
        float32, exact up to 2**24.

    Raises
    ------
    OpError
        ``file=path``: missing, not EXR, truncated or corrupt, deep data, subsampled channels,
        or a multi-part file whose parts differ in data window or repeat channel names; a header
        declaring an empty image or one larger than :func:`graphcore.image.max_image_bytes`
        (refused before any pixel memory is allocated).

    Notes
    -----
    Multi-part files are merged when every part has the same data window and distinct channel
    names; attributes and compression come from the first part.
    """
    head = _open(path, header_only=True, num_threads=num_threads)
    n_parts = len(head.parts)
    _check_declared_size(head, n_parts, path)
    f = _open(path, header_only=False, num_threads=num_threads)
    if len(f.parts) != n_parts or n_parts == 0:
        raise OpError(f"truncated or corrupt OpenEXR file: {n_parts - len(f.parts)} of {n_parts} "
                      "part(s) could not be decoded", file=path,
                      fix="the file is damaged or was only partly written; render or copy it again")
    header = f.header(0)
    storage = header.get("type")
    if storage in (OpenEXR.deepscanline, OpenEXR.deeptile):
        raise OpError("deep OpenEXR data (several samples per pixel) is not supported", file=path,
                      fix="flatten the deep image to a regular EXR before reading it")
    data_window = _window(header["dataWindow"])
    width = data_window[2] - data_window[0] + 1
    height = data_window[3] - data_window[1] + 1

    planes: dict[str, np.ndarray] = {}
    pixel_types: dict[str, str] = {}
    for p in range(n_parts):
        if p and _window(f.header(p)["dataWindow"]) != data_window:
            raise OpError(f"multi-part file: part {p} has a different data window from part 0",
                          file=path, fix="write the parts as separate single-part files")
        for name, ch in f.channels(p).items():
            if name in planes:
                raise OpError(f"multi-part file: channel {name!r} appears in more than one part",
                              file=path, fix="write each part (e.g. each view) to its own file")
            px = ch.pixels
            if px is None or px.shape != (height, width):
                raise OpError(f"channel {name!r} is subsampled or has no pixels "
                              f"(shape {getattr(px, 'shape', None)}, image {height}x{width})",
                              file=path, fix="convert the file to full-resolution channels")
            planes[name] = px
            pixel_types[name] = {np.dtype(np.float16): "half", np.dtype(np.float32): "float",
                                 np.dtype(np.uint32): "uint"}[px.dtype]

    names = ordered_channels(planes)
    pixels = np.empty((height, width, len(names)), dtype=np.float32)
    for i, name in enumerate(names):
        pixels[:, :, i] = planes[name]

    attributes: dict[str, Any] = {}
    dropped: list[str] = []
    for key, value in header.items():
        if key in _STRUCTURAL:
            continue
        try:
            attributes[key] = _to_meta(value)
        except _Unsupported:
            dropped.append(key)
    meta: dict[str, Any] = {
        "exr.pixel_types": {n: pixel_types[n] for n in names},
        "exr.compression": _compression_name(header.get("compression")),
        "exr.attributes": attributes,
        "exr.data_window": data_window,
        "exr.display_window": _window(header["displayWindow"]),
        "source.path": os.path.abspath(path),
    }
    if dropped:
        meta["exr.dropped_attributes"] = sorted(dropped)
    return Image(pixels, names, meta)


def read_provenance(path: str) -> dict[str, Any] | None:
    """The ``midframe.provenance`` record of an EXR written by midframe, or None if absent.

    Raises
    ------
    OpError
        The file is missing or not a readable EXR, or the attribute is not valid JSON.
    """
    header = read_header(path)
    text = header.get(PROVENANCE_ATTRIBUTE)
    if text is None:
        return None
    try:
        record = json.loads(text)
    except (TypeError, ValueError) as e:
        raise OpError(f"header attribute {PROVENANCE_ATTRIBUTE!r} is not valid JSON: {e}",
                      file=path, fix="rewrite the file with midframe") from None
    return record if isinstance(record, dict) else None


# -- writing ---------------------------------------------------------------------------------------
def _convert(plane: np.ndarray, pixel_type: str, name: str,
             warn: Callable[[str], None] | None, path: str) -> np.ndarray:
    plane = np.asarray(plane, dtype=np.float32)
    if pixel_type == "half":
        with np.errstate(over="ignore"):
            out = np.ascontiguousarray(plane, dtype=np.float16)
        overflow = int(np.count_nonzero(np.isinf(out) & np.isfinite(plane)))
        if overflow and warn is not None:
            warn(f"{path}: {overflow} value(s) of channel {name!r} exceed the half-float range "
                 "(65504) and became infinite; write that channel as float")
        return out
    if pixel_type == "float":
        return np.ascontiguousarray(plane, dtype=np.float32)
    if pixel_type == "uint":
        v = np.nan_to_num(plane.astype(np.float64), nan=0.0, posinf=_UINT_MAX, neginf=0.0)
        return np.ascontiguousarray(np.clip(np.rint(v), 0.0, _UINT_MAX), dtype=np.uint32)
    raise OpError(f"unknown pixel type {pixel_type!r} for channel {name!r}", file=path,
                  field="pixel_type", fix="use 'half', 'float' or 'uint'")


def write_exr(path: str, image: Image, *,
              pixel_types: Mapping[str, str] | str | None = None,
              compression: str = "zip",
              attributes: Mapping[str, Any] | None = None,
              default_pixel_type: str = "half",
              warn: Callable[[str], None] | None = None,
              num_threads: int = 0) -> None:
    """Write ``image`` as a single-part scanline OpenEXR file at ``path`` (not atomically).

    Parameters
    ----------
    path : str
        Destination; the caller (the ``write`` operator) handles temporary names and renames.
    image : Image
        (H, W, C) float32 planes, written under their channel names in image order.
    pixel_types : mapping or str, optional
        channel -> ``"half" | "float" | "uint"``, or one type for every channel. Channels not in
        the mapping get ``default_pixel_type``. float32 -> half conversion is exact for values that
        came from half; larger values than 65504 become infinite (reported through ``warn``).
        ``uint`` rounds to the nearest integer and clips to 0..2**32-1 (NaN -> 0).
    compression : str
        One of :func:`available_compressions`.
    attributes : mapping, optional
        Extra header attributes in the JSON-able form of ``exr.attributes`` (module docstring).
    default_pixel_type : str
    warn : callable, optional
        Receives one message per channel that overflowed the half range.
    num_threads : int
        OpenEXR encoding threads (0: the calling thread).

    Notes
    -----
    Data and display windows come from ``image.meta['exr.data_window' / 'exr.display_window']``
    when the data window has the image's size; otherwise both are ``(0, 0)-(W-1, H-1)``.

    Raises
    ------
    OpError
        Unavailable compression, an attribute the bindings cannot write, or a library failure.
    """
    enum = _compression_enum(compression, path)
    header: dict[str, Any] = {}
    for key, value in (attributes or {}).items():
        if key in _STRUCTURAL:
            continue
        try:
            header[key] = attribute_from_meta(key, value)
        except (ValueError, TypeError, KeyError, IndexError) as e:
            raise OpError(f"header attribute cannot be written: {e}", file=path,
                          field="attributes", fix="give the attribute a plain str/int/float value "
                          "or the {'type', 'value'} form") from None
    header["compression"] = enum
    header["type"] = OpenEXR.scanlineimage
    header["lineOrder"] = OpenEXR.INCREASING_Y

    dw = image.meta.get("exr.data_window")
    if dw is not None and len(dw) == 4 and (dw[2] - dw[0] + 1, dw[3] - dw[1] + 1) == image.size:
        disp = image.meta.get("exr.display_window") or dw
        header["dataWindow"] = (np.array(dw[:2], np.int32), np.array(dw[2:], np.int32))
        header["displayWindow"] = (np.array(disp[:2], np.int32), np.array(disp[2:], np.int32))

    if isinstance(pixel_types, str):
        types = {c: pixel_types for c in image.channels}
    else:
        types = {c: (pixel_types or {}).get(c, default_pixel_type) for c in image.channels}
    # A fresh dict of fresh arrays: OpenEXR.File replaces the arrays in it with Channel objects.
    channels = {c: _convert(image.pixels[:, :, i], types[c], c, warn, path)
                for i, c in enumerate(image.channels)}
    try:
        OpenEXR.File(header, channels, num_threads=num_threads).write(path)
    except (RuntimeError, ValueError, TypeError) as e:
        raise OpError(f"OpenEXR could not write the file: {e}", file=path,
                      fix=write_failure_fix(path, message=str(e))) from None

