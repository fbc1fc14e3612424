"""Numbered file sequences: printf-style patterns, discovery on disk, gap reports.

A pattern holds at most one frame token:

- ``%d`` (no padding) or ``%0Nd`` (zero-padded to N characters), with printf semantics: the
  width counts a minus sign, so ``%04d`` gives ``0012`` for 12 and ``-012`` for -12;
- a run of ``#`` characters, where the number of hashes is the padding width
  (``####`` == ``%04d``, ``#`` == ``%d``). Accepted because it costs one regex.

``%%`` stands for a literal percent sign. A pattern without a frame token names a single still
file: the same file at every frame.

Negative frame numbers are handled: they format as printf would and :func:`discover` finds them.
:func:`discover` accepts only the names the pattern itself would produce (so ``%04d`` ignores
``shot.12.exr`` and ``shot.00012.exr``, but accepts ``shot.12345.exr``).
"""

from __future__ import annotations

import glob
import os
import re
from collections.abc import Iterable
from dataclasses import dataclass

from graphcore.errors import OpError
from graphcore.sample import compact_frames

__all__ = ["SequencePattern", "parse", "format_path", "is_sequence", "discover",
           "compact_ranges", "missing_frames", "contiguous_range"]

_TOKEN = re.compile(r"%%|%(0\d+)?d|#+|%")


@dataclass(frozen=True)
class SequencePattern:
    """A parsed pattern: literal text before and after the frame token, and its padding.

    ``width`` is None for a still file (no token); 0 means no padding.
    """

    prefix: str
    suffix: str
    width: int | None

    @property
    def is_sequence(self) -> bool:
        return self.width is not None

    def format(self, frame: int) -> str:
        if self.width is None:
            return self.prefix
        if isinstance(frame, bool) or int(frame) != frame:
            raise ValueError(f"frame {frame!r} is not an integer")
        number = f"{int(frame):0{self.width}d}" if self.width else str(int(frame))
        return f"{self.prefix}{number}{self.suffix}"


def parse(pattern: str) -> SequencePattern:
    """Split ``pattern`` at its frame token.

    Raises
    ------
    ValueError
        More than one frame token, or a ``%`` form other than ``%d``, ``%0Nd``, ``%%``.
    """
    pieces: list[str] = []
    token: tuple[int, int] | None = None  # (index into pieces, width)
    pos = 0
    for m in _TOKEN.finditer(pattern):
        pieces.append(pattern[pos:m.start()])
        pos = m.end()
        text = m.group(0)
        if text == "%%":
            pieces[-1] += "%"
            continue
        if text == "%":
            raise ValueError(f"path pattern {pattern!r}: a lone '%' is not a frame token; "
                             "use %d, %04d or #### for frame numbers and %% for a literal percent")
        if token is not None:
            raise ValueError(f"path pattern {pattern!r} has more than one frame token")
        width = len(text) if text.startswith("#") else int(m.group(1) or "0")
        if text.startswith("#") and width == 1:
            width = 0
        token = (len(pieces), width)
        pieces.append("")  # placeholder for the number
    pieces.append(pattern[pos:])
    if token is None:
        return SequencePattern("".join(pieces), "", None)
    i, width = token
    return SequencePattern("".join(pieces[:i]), "".join(pieces[i + 1:]), width)


def is_sequence(pattern: str) -> bool:
    """True when ``pattern`` holds a frame token (``%04d``, ``%d``, ``####``)."""
    return parse(pattern).is_sequence


def format_path(pattern: str, frame: int) -> str:
    """The file name for integer ``frame``; a still pattern returns itself (``%%`` unescaped).

    Examples
    --------
    >>> format_path("plate.%04d.exr", 1001)
    'plate.1001.exr'
    >>> format_path("cam_##.png", 7)
    'cam_07.png'
    """
    return parse(pattern).format(frame)


def discover(pattern: str) -> list[int]:
    """Sorted frame numbers whose files exist on disk for a sequence ``pattern``.

    A still pattern returns ``[]``: it has no frame numbers (check :func:`is_sequence`).
    Only regular files count; only names the pattern itself would produce are accepted.
    """
    seq = parse(pattern)
    if not seq.is_sequence:
        return []
    wildcard = glob.escape(seq.prefix) + "*" + glob.escape(seq.suffix)
    rx = re.compile(re.escape(seq.prefix) + r"(-?\d+)" + re.escape(seq.suffix) + r"\Z")
    frames = set()
    for name in glob.iglob(wildcard):
        m = rx.match(name)
        if not m:
            continue
        frame = int(m.group(1))
        if seq.format(frame) == name and os.path.isfile(name):
            frames.add(frame)
    return sorted(frames)


def compact_ranges(frames: Iterable[int]) -> str:
    """Frame numbers as compact text: ``[1003, 1004, 1005, 1010] -> '1003-1005, 1010'``."""
    return compact_frames(frames)


def missing_frames(frames: Iterable[int]) -> list[int]:
    """The integers between the smallest and largest of ``frames`` that are not in it."""
    have = set(int(f) for f in frames)
    if not have:
        return []
    return [f for f in range(min(have), max(have) + 1) if f not in have]


def contiguous_range(pattern: str, *, field: str = "path") -> tuple[int, int]:
    """``(first, last)`` of the files found for ``pattern``; every frame between must exist.

    Raises
    ------
    OpError
        ``file=pattern``, ``field=field``: no file matches, or frames are missing in the middle
        (the message lists them compactly, e.g. ``1003-1005, 1010``).
    """
    found = discover(pattern)
    if not found:
        folder = os.path.dirname(pattern) or "."
        raise OpError(f"no files match the sequence pattern {pattern!r}", file=pattern, field=field,
                      fix=f"check the folder {folder!r} and the frame token "
                          "(%04d = four digits, %d = no padding, #### = four digits)")
    gaps = missing_frames(found)
    if gaps:
        raise OpError(f"frames {compact_ranges(gaps)} are missing from the sequence "
                      f"(found {compact_ranges(found)})", file=pattern, field=field,
                      fix="render or copy the missing frames, or read the parts on either "
                          "side of the gap as separate sequences")
    return found[0], found[-1]
