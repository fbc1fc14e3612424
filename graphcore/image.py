"""The image model: float32 pixels, named channels, metadata.

Channel names follow OpenEXR's layer convention ``layer.channel``: ``R G B A`` for colour,
``fwd.x fwd.y`` / ``bwd.x bwd.y`` for vectors (pixels, x right, y down), ``conf``, ``occ``.
Colour is linear light, premultiplied by alpha (OpenEXR's convention).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np

__all__ = ["Image", "COLOR", "ALPHA", "MAX_IMAGE_BYTES", "LIMIT_VARIABLE", "max_image_bytes"]

#: Largest image midframe makes or reads, in bytes of float32 planes (width x height x channels x 4):
#: 4 GiB, e.g. 16384 x 16384 RGBA or 8K with 30 layers. A damaged file header or a mistaken size can
#: ask for any amount; larger requests are refused before anything is allocated. The environment
#: variable ``MIDFRAME_MAX_IMAGE_MB`` sets another limit (in MiB) where images really are that large.
MAX_IMAGE_BYTES = 4 << 30
LIMIT_VARIABLE = "MIDFRAME_MAX_IMAGE_MB"


def max_image_bytes() -> int:
    """:data:`MAX_IMAGE_BYTES`, or ``MIDFRAME_MAX_IMAGE_MB`` MiB when that variable holds a number."""
    import os

    text = os.environ.get(LIMIT_VARIABLE, "").strip()
    try:
        return int(float(text) * (1 << 20)) if text else MAX_IMAGE_BYTES
    except ValueError:
        return MAX_IMAGE_BYTES

COLOR = ("R", "G", "B")
ALPHA = "A"


@dataclass(frozen=True, eq=False)
class Image:
    """An image: ``pixels`` of shape (H, W, C), float32, with ``channels`` naming the C planes.

    Parameters
    ----------
    pixels : ndarray, shape (H, W, C), float32
        Pixel values. Made read-only on construction so cached values cannot be mutated.
    channels : tuple of str
        One unique name per plane, in order.
    meta : mapping
        Metadata (header attributes, provenance). Keys are strings; values are JSON-able.
        Conventions: ``exr.pixel_types`` maps channel -> ``"half" | "float" | "uint"`` as read
        from an EXR file; ``exr.compression`` the file's compression name; ``exr.attributes``
        a dict of extra header attributes; ``source.path`` / ``source.frame`` the file read.
    """

    pixels: np.ndarray
    channels: tuple[str, ...]
    meta: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        px = np.asarray(self.pixels)
        if px.ndim == 2:
            px = px[:, :, None]
        if px.ndim != 3:
            raise ValueError(f"Image pixels must be (H, W, C); got shape {px.shape}")
        if px.dtype != np.float32:
            px = px.astype(np.float32)
        chans = tuple(self.channels)
        if len(chans) != px.shape[2]:
            raise ValueError(f"{len(chans)} channel names for {px.shape[2]} planes: {chans}")
        if len(set(chans)) != len(chans):
            raise ValueError(f"duplicate channel names: {chans}")
        if px.flags.writeable:
            px = px.view()  # a read-only view; the caller's array keeps its own flags
            px.flags.writeable = False
        object.__setattr__(self, "pixels", px)
        object.__setattr__(self, "channels", chans)
        object.__setattr__(self, "meta", MappingProxyType(dict(self.meta)))

    # -- shape ----------------------------------------------------------------------------
    @property
    def height(self) -> int:
        return int(self.pixels.shape[0])

    @property
    def width(self) -> int:
        return int(self.pixels.shape[1])

    @property
    def size(self) -> tuple[int, int]:
        """(width, height), the order people say resolutions in."""
        return (self.width, self.height)

    @property
    def nbytes(self) -> int:
        return int(self.pixels.nbytes)

    # -- channels -------------------------------------------------------------------------
    def has(self, *names: str) -> bool:
        return all(n in self.channels for n in names)

    @property
    def has_alpha(self) -> bool:
        return ALPHA in self.channels

    def index(self, name: str) -> int:
        try:
            return self.channels.index(name)
        except ValueError:
            raise KeyError(f"no channel {name!r}; channels are {', '.join(self.channels)}") from None

    def channel(self, name: str) -> np.ndarray:
        """The (H, W) plane called ``name`` (read-only view)."""
        return self.pixels[:, :, self.index(name)]

    def select(self, names: Sequence[str]) -> "Image":
        idx = [self.index(n) for n in names]
        return Image(np.ascontiguousarray(self.pixels[:, :, idx]), tuple(names), self.meta)

    def color_names(self) -> tuple[str, ...]:
        """The channels treated as colour: every channel except vectors/conf/occ layers."""
        return tuple(c for c in self.channels if c in COLOR)

    # -- construction ---------------------------------------------------------------------
    def replace(self, *, pixels: np.ndarray | None = None, channels: Sequence[str] | None = None,
                meta: Mapping[str, Any] | None = None) -> "Image":
        return Image(self.pixels if pixels is None else pixels,
                     tuple(self.channels if channels is None else channels),
                     dict(self.meta if meta is None else meta))

    @classmethod
    def from_planes(cls, planes: Mapping[str, np.ndarray], meta: Mapping[str, Any] | None = None) -> "Image":
        names = tuple(planes)
        stack = np.stack([np.asarray(planes[n], dtype=np.float32) for n in names], axis=-1)
        return cls(stack, names, dict(meta or {}))

    def __repr__(self) -> str:
        return f"Image({self.width}x{self.height}, channels={','.join(self.channels)})"
