"""Channel and size helpers shared by the composite operators (private).

Colour here means the premultiplied colour planes ``R G B`` and the coverage ``A``; every other
channel (``fwd.x``, ``bwd.y``, ``conf``, ``occ``, any other layer) is *data*: values that are not
light and must not be scaled by a coverage fraction.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np

from graphcore.errors import OpError
from graphcore.image import ALPHA, COLOR, Image

__all__ = ["COLOUR_ORDER", "is_colour", "size_text", "require_same_size", "plane", "data_names",
           "colour_union"]

#: Colour planes in the order a result lists them.
COLOUR_ORDER: tuple[str, ...] = (*COLOR, ALPHA)


def is_colour(name: str) -> bool:
    """True for ``R``, ``G``, ``B`` and ``A``; False for vectors, ``conf``, ``occ`` and others."""
    return name in COLOUR_ORDER


def size_text(image: Image) -> str:
    """``'WxH'``, the way people say resolutions."""
    return f"{image.width}x{image.height}"


def require_same_size(ref: Image, ref_port: str, other: Image, other_port: str) -> None:
    """Raise ``OpError(field=other_port)`` unless ``other`` has ``ref``'s width and height.

    Parameters
    ----------
    ref, other : Image
        The two inputs meeting in one node.
    ref_port, other_port : str
        Their port names, used in the message; the error's ``field`` is ``other_port``.
    """
    if ref.size != other.size:
        raise OpError(
            f"input '{other_port}' is {size_text(other)} but input '{ref_port}' is {size_text(ref)}; "
            "inputs meeting in this node must have the same resolution",
            field=other_port,
            fix=(f"add a `resize` node before '{other_port}' (or before '{ref_port}') so both are "
                 f"{size_text(ref)} (or both {size_text(other)})"),
        )


def plane(image: Image | None, name: str, shape: tuple[int, int], default: float) -> np.ndarray:
    """The (H, W) float32 plane ``name`` of ``image``, or a constant plane if it is missing.

    Parameters
    ----------
    image : Image or None
        None stands for an unconnected input.
    name : str
        Channel name.
    shape : (int, int)
        (H, W) of the constant plane returned when the channel is missing.
    default : float
        Value of the missing plane (0 for colour, 1 for the alpha of an opaque input).
    """
    if image is not None and name in image.channels:
        return image.channel(name)
    return np.full(shape, default, dtype=np.float32)


def colour_union(images: Iterable[Image | None]) -> tuple[str, ...]:
    """The ``R G B`` planes present in any of ``images``, in ``R G B`` order (``A`` excluded)."""
    present = set()
    for img in images:
        if img is not None:
            present.update(img.channels)
    return tuple(c for c in COLOR if c in present)


def data_names(images: Sequence[Image | None]) -> tuple[str, ...]:
    """Non-colour channels of ``images``: the first image's in its order, then new ones of the next."""
    seen: dict[str, None] = {}
    for img in images:
        if img is None:
            continue
        for c in img.channels:
            if not is_colour(c) and c not in seen:
                seen[c] = None
    return tuple(seen)


def matte_values(matte: Image, port: str = "matte") -> np.ndarray:
    """The (H, W) matte plane of ``matte``: its 'A' channel, else its only channel (OpError otherwise)."""
    if ALPHA in matte.channels:
        return matte.channel(ALPHA)
    if len(matte.channels) == 1:
        return matte.pixels[:, :, 0]
    raise OpError(
        f"the {port} input has channels {', '.join(matte.channels)}: no 'A' channel and more than one "
        "channel, so it is unclear which one is the matte",
        field=port,
        fix=f"connect an image with an 'A' channel or with a single channel as '{port}'",
    )
