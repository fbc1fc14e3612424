"""``matte-composite``: Porter-Duff compositing of premultiplied images, with an optional matte.

Every two-input operation computes, per pixel and for colour and alpha alike,

    result = Fa * A + Fb * B

where ``A`` and ``B`` are the premultiplied colours (or the alphas ``aA``, ``aB``) of inputs
``a`` and ``b``, and the area fractions ``Fa``, ``Fb`` come from the table of Porter and Duff
(1984):

=========  ==========  ==========
operation  Fa          Fb
=========  ==========  ==========
over       1           1 - aA
in         aB          0
out        1 - aB      0
atop       aB          1 - aA
xor        1 - aB      1 - aA
plus       1           1
=========  ==========  ==========

``premultiply`` and ``unpremultiply`` take ``a`` alone and convert between straight and
premultiplied colour.

References
----------
.. [1] Porter, T. and Duff, T., "Compositing Digital Images", Computer Graphics (SIGGRAPH '84)
   18(3), 253-259, 1984. doi:10.1145/800031.808606
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from graphcore.errors import OpError
from graphcore.image import ALPHA, Image
from graphcore.registry.operator import OpContext, Operator, Port

from ._channels import colour_union, data_names, matte_values, plane, require_same_size

__all__ = ["MATTE_COMPOSITE", "MatteCompositeParams", "matte_composite", "FRACTIONS",
           "UNPREMULTIPLY_EPSILON"]

#: Alpha at or below which ``unpremultiply`` leaves colour unchanged instead of dividing.
UNPREMULTIPLY_EPSILON = 1e-6

Fractions = Callable[[np.ndarray, np.ndarray], tuple[np.ndarray | float, np.ndarray | float]]

#: Porter & Duff (1984), table of area fractions: operation -> (aA, aB) -> (Fa, Fb).
FRACTIONS: dict[str, Fractions] = {
    "over": lambda aA, aB: (1.0, 1.0 - aA),
    "in": lambda aA, aB: (aB, 0.0),
    "out": lambda aA, aB: (1.0 - aB, 0.0),
    "atop": lambda aA, aB: (aB, 1.0 - aA),
    "xor": lambda aA, aB: (1.0 - aB, 1.0 - aA),
    "plus": lambda aA, aB: (1.0, 1.0),
}

ONE_INPUT = ("premultiply", "unpremultiply")


class MatteCompositeParams(BaseModel):
    """Params of ``matte-composite``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    operation: Literal["over", "in", "out", "atop", "xor", "plus", "premultiply", "unpremultiply"] = Field(
        "over",
        description=("Porter-Duff operation of 'a' with 'b' (over, in, out, atop, xor, plus), or a "
                     "one-input conversion of 'a' (premultiply: straight colour times alpha; "
                     "unpremultiply: premultiplied colour divided by alpha). The one-input "
                     "conversions refuse a connected 'b'."),
    )
    a_premultiplied: bool = Field(
        False,
        description=("Only when 'matte' is connected and the operation is a Porter-Duff one: true if "
                     "the colour of 'a' is already premultiplied by that matte; false (default) to "
                     "multiply a's R, G, B by the matte first, as for a plate with a separate "
                     "roto or key matte."),
    )
    clamp_alpha: bool = Field(
        True,
        description=("Two-input operations only: clip the result's A to 0..1. With input alphas "
                     "in 0..1 only 'plus' can go above 1. Colour is never clipped (linear light "
                     "may exceed 1)."),
    )


def _matte_plane(matte: Image, ctx: OpContext) -> np.ndarray:
    """The (H, W) matte values from ``matte``: its 'A', else its only channel; clipped to 0..1."""
    values = matte_values(matte)
    lo, hi = float(np.min(values)), float(np.max(values))
    if lo < 0.0 or hi > 1.0:
        ctx.warn(f"matte values span {lo:.6g}..{hi:.6g}, outside 0..1; clipped to 0..1")
        values = np.clip(values, 0.0, 1.0)
    return values.astype(np.float32, copy=False)


def _layout(colour: tuple[str, ...], data: tuple[str, ...]) -> tuple[str, ...]:
    return (*colour, ALPHA, *data)


def _one_input(params: MatteCompositeParams, a: Image, matte: np.ndarray | None,
               ctx: OpContext) -> Image:
    shape = (a.height, a.width)
    if matte is not None:
        alpha = matte
    else:
        if ALPHA not in a.channels:
            ctx.warn(f"{params.operation}: input 'a' has no A channel and no matte is connected; "
                     "alpha is taken as 1 and the colour passes unchanged")
        alpha = plane(a, ALPHA, shape, 1.0)
    colour = colour_union([a])
    data = data_names([a])
    out = np.empty((*shape, len(colour) + 1 + len(data)), dtype=np.float32)
    for i, c in enumerate(colour):
        values = a.channel(c)
        if params.operation == "premultiply":
            out[:, :, i] = values * alpha
        else:
            safe = alpha > UNPREMULTIPLY_EPSILON
            out[:, :, i] = np.where(safe, values / np.where(safe, alpha, 1.0), values)
    out[:, :, len(colour)] = alpha
    for j, c in enumerate(data):
        out[:, :, len(colour) + 1 + j] = a.channel(c)
    return Image(out, _layout(colour, data), a.meta)


def matte_composite(params: MatteCompositeParams, inputs: Mapping[str, Image | None],
                    ctx: OpContext) -> Image:
    """Composite ``a`` with ``b`` by a Porter-Duff operation, or (un)premultiply ``a``.

    Parameters
    ----------
    params : MatteCompositeParams
    inputs : mapping
        ``"a"`` : Image, shape (H, W, Ca), premultiplied colour (unless ``operation`` is
        ``premultiply``, which takes straight colour).
        ``"b"`` : Image (H, W, Cb) or None. None is transparent black (the paper's *clear*).
        ``"matte"`` : Image (H, W, Cm) or None. Its ``A`` channel, else its only channel, is used
        as a's alpha in place of a's own ``A``; values outside 0..1 are clipped with a warning.
    ctx : OpContext

    Returns
    -------
    Image, shape (H, W, C)
        Channels: the ``R G B`` planes present in either input (in that order), then ``A``
        (always present), then the non-colour channels of ``a`` in a's order, then those only
        ``b`` has. A colour channel missing on one side counts as 0 on that side; an input
        without ``A`` is opaque (alpha 1). Non-colour channels (vectors, ``conf``, ``occ``...)
        are not composited: each is copied unchanged from ``a`` where ``a`` has it, else from
        ``b``. Metadata is a's.

    Raises
    ------
    OpError
        ``field='b'`` or ``'matte'`` when its size differs from a's (fix: a ``resize`` node);
        ``field='b'`` when ``b`` is connected to ``premultiply``/``unpremultiply``;
        ``field='matte'`` when the matte has several channels and none is ``A``.

    Notes
    -----
    ``unpremultiply`` divides colour by alpha where alpha > ``UNPREMULTIPLY_EPSILON`` (1e-6) and
    leaves colour *unchanged* where alpha is at or below it (so light with zero coverage, e.g.
    an additive glow, is kept rather than lost). The result's ``A`` is the alpha used.

    References
    ----------
    .. [1] Porter, T. and Duff, T., "Compositing Digital Images", SIGGRAPH 1984.
    """
    a, b, matte_img = inputs.get("a"), inputs.get("b"), inputs.get("matte")
    if a is None:
        raise OpError("input 'a' is not connected", field="a", fix="connect an image to 'a'")
    matte = None
    if matte_img is not None:
        require_same_size(a, "a", matte_img, "matte")
        matte = _matte_plane(matte_img, ctx)

    if params.operation in ONE_INPUT:
        problems = link_problems(params, frozenset({"a"} | ({"b"} if b is not None else set())))
        if problems:
            raise problems[0]
        return _one_input(params, a, matte, ctx)

    if b is not None:
        require_same_size(a, "a", b, "b")
    shape = (a.height, a.width)
    alpha_a = matte if matte is not None else plane(a, ALPHA, shape, 1.0)
    alpha_b = plane(b, ALPHA, shape, 1.0) if b is not None else np.zeros(shape, np.float32)
    scale_a = matte if (matte is not None and not params.a_premultiplied) else None
    fa, fb = FRACTIONS[params.operation](alpha_a, alpha_b)

    colour = colour_union([a, b])
    data = data_names([a, b])
    out = np.empty((*shape, len(colour) + 1 + len(data)), dtype=np.float32)
    for i, c in enumerate(colour):
        ca = plane(a, c, shape, 0.0)
        if scale_a is not None:
            ca = ca * scale_a
        cb = plane(b, c, shape, 0.0)
        out[:, :, i] = fa * ca + fb * cb
    alpha = fa * alpha_a + fb * alpha_b
    out[:, :, len(colour)] = np.clip(alpha, 0.0, 1.0) if params.clamp_alpha else alpha
    for j, c in enumerate(data):
        out[:, :, len(colour) + 1 + j] = a.channel(c) if c in a.channels else b.channel(c)  # type: ignore[union-attr]
    return Image(out, _layout(colour, data), a.meta)


DOC = """\
Porter-Duff compositing of premultiplied images (Porter and Duff, "Compositing Digital Images",
SIGGRAPH 1984), plus premultiply / unpremultiply.

Two-input operations (over, in, out, atop, xor, plus) compute result = Fa*a + Fb*b on the
premultiplied colour and on alpha, with the paper's area fractions:
  over Fa=1, Fb=1-aA;  in Fa=aB, Fb=0;  out Fa=1-aB, Fb=0;  atop Fa=aB, Fb=1-aA;
  xor Fa=1-aB, Fb=1-aA;  plus Fa=1, Fb=1.
An unconnected 'b' is transparent black. An input without an A channel is opaque (alpha 1).
A colour channel (R, G, B) missing on one side counts as 0 there.

'matte' (optional) replaces a's alpha: its A channel, or its only channel. Values outside 0..1
are clipped, with a warning. Unless a_premultiplied is true, a's R, G, B are multiplied by the
matte first (a plate with a separate roto or key matte).

premultiply multiplies a's R, G, B by alpha (the matte, or a's A); unpremultiply divides by it
where alpha > 1e-6 and leaves colour unchanged elsewhere. Both refuse a connected 'b'.

Non-colour channels (fwd.x/y, bwd.x/y, conf, occ, other layers) are never scaled: each is
copied unchanged from 'a' where a has it, else from 'b'.

Inputs must share one resolution; otherwise add a `resize` node. Metadata comes from 'a'.
"""


def link_problems(params: MatteCompositeParams, connected: frozenset[str]) -> list[OpError]:
    """Problems that depend on which ports are connected (also run by ``midframe check``)."""
    if params.operation in ONE_INPUT and "b" in connected:
        return [OpError(
            f"operation '{params.operation}' takes only 'a' (and optionally 'matte'), "
            "but 'b' is connected",
            field="b",
            fix=f"disconnect 'b', or choose a two-input operation instead of '{params.operation}'",
        )]
    return []

MATTE_COMPOSITE = Operator(
    name="matte-composite",
    version=1,
    summary="Porter-Duff over/in/out/atop/xor/plus of premultiplied images, optional separate matte",
    params=MatteCompositeParams,
    compute=matte_composite,
    inputs=(
        Port("a", "foreground / first operand, premultiplied colour (straight for premultiply)"),
        Port("b", "background / second operand, premultiplied; unconnected = transparent black",
             optional=True),
        Port("matte", "separate matte used as a's alpha: its A channel, else its only channel",
             optional=True),
    ),
    doc=DOC,
    check_links=link_problems,
    outputs=("R G B present in either input, then A (always), then the non-colour channels of a, "
             "then those only b has (copied, not composited)"),
)
