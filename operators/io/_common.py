"""Helpers shared by the ``read`` and ``write`` operators: path validation and sample numbers."""

from __future__ import annotations

import errno
import os
import re
from fractions import Fraction

from graphcore.sample import Sample
from operators.io import sequence
from operators.io.raster import RASTER_EXTENSIONS

EXR_EXTENSIONS = (".exr",)
KNOWN_EXTENSIONS = EXR_EXTENSIONS + RASTER_EXTENSIONS


def extension(path: str) -> str:
    return os.path.splitext(path)[1].lower()


def check_pattern(path: str) -> str:
    """Validate a path pattern for a params model (raises ValueError, which pydantic reports)."""
    if not path or not path.strip():
        raise ValueError("path is empty")
    sequence.parse(path)
    ext = extension(path)
    if ext not in KNOWN_EXTENSIONS:
        raise ValueError(f"unknown file extension {ext or '(none)'!r}; "
                         f"use one of {', '.join(KNOWN_EXTENSIONS)}")
    return path


def check_channels(channels: tuple[str, ...] | None) -> tuple[str, ...] | None:
    if channels is None:
        return None
    if not channels:
        raise ValueError("channels is empty; leave it out to keep every channel")
    if len(set(channels)) != len(channels):
        raise ValueError(f"channels lists a name twice: {list(channels)}")
    return channels


def axis_number(axis: str, sample: Sample) -> Fraction:
    """The file number a sample asks for: its frame, or its view for view-numbered stills."""
    return sample.view if axis == "view" else sample.frame


def resolved(path: str) -> str:
    """Absolute path with symbolic links resolved (how files are compared for overwrite guards)."""
    return os.path.realpath(os.path.abspath(path))


_VIEW_TOKEN = re.compile(r"%(0\d+)?d|#+")


def split_view(path: str, token: str) -> tuple[str, int, str]:
    """``(text before, padding width, text after)`` of the one occurrence of ``token`` in ``path``
    (ValueError if the token is malformed, absent or there twice)."""
    form = _VIEW_TOKEN.fullmatch(token)
    if form is None:
        raise ValueError(f"view_token {token!r} is not a number token; use %d, %02d or ##")
    hits = [m for m in re.finditer(r"%%|%(0\d+)?d|#+", path) if m.group(0) == token]
    if not hits:
        raise ValueError(f"view_token {token!r} does not occur in path {path!r}")
    if len(hits) > 1:
        raise ValueError(f"view_token {token!r} occurs {len(hits)} times in path {path!r}; write the "
                         "camera and frame tokens differently (#### and %04d are the same padding)")
    width = len(token) if token.startswith("#") else int(form.group(1) or "0")
    if token == "#":
        width = 0
    m = hits[0]
    return path[:m.start()], width, path[m.end():]


def fill_view(path: str, token: str, view: int) -> str:
    """``path`` with the camera number ``view`` in place of ``token`` (the frame token stays).

    >>> fill_view("rig/cam%02d/plate.%04d.exr", "%02d", 3)
    'rig/cam03/plate.%04d.exr'
    """
    before, width, after = split_view(path, token)
    number = f"{int(view):0{width}d}" if width else str(int(view))
    return f"{before}{number}{after}"


def check_path_tokens(path: str) -> str:
    """``check_pattern``, but a path with two number tokens passes: a frame and a view token, checked
    with the node's view_token by ``check_view_token``."""
    try:
        return check_pattern(path)
    except ValueError as exc:
        if "more than one frame token" in str(exc):
            return path
        raise


def check_view_token(path: str, view_token: str | None, axis: str, *, what: str, no_frame: str) -> None:
    """The rules of a path numbered by frame and view (``read`` and ``write``): without a
    view_token one number token at most; with one, that token once, the other a frame token, and
    axis 'frame'. ``what`` names what the second number counts, ``no_frame`` the fix when the path
    has no frame token besides the view token. Raises ValueError (pydantic reports it)."""
    if view_token is None:
        try:
            check_pattern(path)
        except ValueError as exc:
            raise ValueError(f"{exc}; if one of them numbers {what}, name it in view_token "
                             "(e.g. '%02d')") from None
        return
    if axis != "frame":
        raise ValueError("with view_token the path's other token numbers frames: set axis to "
                         "'frame' (the view comes from view_token)")
    one = fill_view(path, view_token, 1)
    check_pattern(one)
    if not sequence.is_sequence(one):
        raise ValueError(f"path {path!r} has no frame token besides the view_token {view_token!r}; "
                         f"{no_frame}")


def check_colour_rule(transfer: str, colorspace: str | None, ocio_config: str | None, what: str) -> None:
    """``transfer`` and ``colorspace`` both say how colour is encoded: only one may be set, and an
    OpenColorIO config needs a colour space. Raises ValueError (pydantic reports it)."""
    if colorspace is not None and transfer != "auto":
        raise ValueError(f"transfer {transfer!r} and colorspace {colorspace!r} both say how colour is "
                         "encoded; set one of them (colorspace for a named OpenColorIO space, transfer "
                         "for the built-in curves)")
    if ocio_config is not None and colorspace is None:
        raise ValueError(f"ocio_config is set but no colorspace is named; name {what} in 'colorspace' "
                         "or remove ocio_config")


#: File-system errors a write can meet: (errno names, what to do). ``{folder}`` is filled in.
_WRITE_FAILURES = (
    (("ENOSPC", "EDQUOT", "EFBIG"), ("free space on the disk holding {folder} (or raise the quota or "
                                     "file-size limit), then render again: `midframe run --resume` "
                                     "keeps the frames already finished")),
    (("EROFS", "EACCES", "EPERM"), "make {folder} writable, or write somewhere else"),
    (("EIO",), "check the disk or network share holding {folder}, then render again"),
    (("ENOENT",), "create the folder {folder} first, or write somewhere else"),
    (("EEXIST", "ENOTDIR"), ("a file stands where a folder of {folder} should be: move it, or write "
                             "somewhere else")),
)


def write_failure_fix(path: str, *, code: int | None = None, message: str = "") -> str:
    """What to do about a failed write of ``path``: by the error number ``code`` when known, else by
    the system's description of it in ``message`` (the OpenEXR library reports file-system errors
    only as text ending in e.g. "No space left on device")."""
    folder = os.path.dirname(os.path.abspath(path))
    for names, fix in _WRITE_FAILURES:
        for name in names:
            number = getattr(errno, name, None)
            if number is None:
                continue
            if code == number or (code is None and os.strerror(number).lower() in message.lower()):
                return fix.format(folder=folder)
    if code is not None:
        return f"check that {folder} is writable and has free space"
    return "check the header attributes and channel names"
