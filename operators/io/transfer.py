"""Transfer functions between linear light and encoded signal values, as pure numpy.

Three names are known: ``"srgb"`` (IEC 61966-2-1), ``"rec709"`` (ITU-R BT.709 OETF and its
inverse) and ``"linear"`` (identity). ``encode`` goes linear -> signal, ``decode`` signal -> linear.

Out-of-range values are handled **sign-symmetrically, without clipping**: for ``x < 0`` the result
is ``-f(-x)``, and above 1 the power segment simply continues. So ``decode(encode(x)) == x``
(to float rounding) for every finite ``x``, negative and over-range values survive a trip through
an encoded space, and NaN stays NaN. Clipping to the 0..1 code range belongs to the integer file
writer (``operators.io.raster``), not here.

References
----------
.. [1] IEC 61966-2-1:1999, "Multimedia systems and equipment - Colour measurement and
   management - Part 2-1: Default RGB colour space - sRGB", section 5.2 (transfer function).
.. [2] ITU-R Recommendation BT.709-6 (2015), "Parameter values for the HDTV standards for
   production and international programme exchange", item 1.2 (opto-electronic transfer).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

__all__ = ["TRANSFERS", "encode", "decode", "SRGB_DECODE_BREAK", "SRGB_ENCODE_BREAK",
           "REC709_LINEAR_BREAK", "REC709_SIGNAL_BREAK"]

# IEC 61966-2-1 constants.
SRGB_ENCODE_BREAK = 0.0031308      # linear value below which the curve is the 12.92 line
SRGB_DECODE_BREAK = 0.04045        # signal value below which the inverse is the 1/12.92 line
_SRGB_SLOPE = 12.92
_SRGB_A = 0.055
_SRGB_GAMMA = 2.4

# ITU-R BT.709 constants (the Recommendation's rounded values).
REC709_LINEAR_BREAK = 0.018        # L below which V = 4.5 L
REC709_SIGNAL_BREAK = 4.5 * 0.018  # 0.081: V below which the inverse is V / 4.5
_REC709_SLOPE = 4.5
_REC709_ALPHA = 1.099
_REC709_BETA = 0.099
_REC709_EXP = 0.45


def _symmetric(f: Callable[[np.ndarray], np.ndarray]) -> Callable[[np.ndarray], np.ndarray]:
    """Wrap a curve defined for x >= 0 so that f(-x) = -f(x)."""

    def g(x: np.ndarray) -> np.ndarray:
        a = np.abs(x)
        return np.copysign(f(a), x)

    g.__doc__ = f.__doc__
    return g


@_symmetric
def _srgb_encode(x: np.ndarray) -> np.ndarray:
    # np.maximum keeps the power away from 0 where np.where would evaluate both branches anyway.
    high = (1.0 + _SRGB_A) * np.power(np.maximum(x, SRGB_ENCODE_BREAK), 1.0 / _SRGB_GAMMA) - _SRGB_A
    return np.where(x <= SRGB_ENCODE_BREAK, _SRGB_SLOPE * x, high)


@_symmetric
def _srgb_decode(v: np.ndarray) -> np.ndarray:
    high = np.power((np.maximum(v, SRGB_DECODE_BREAK) + _SRGB_A) / (1.0 + _SRGB_A), _SRGB_GAMMA)
    return np.where(v <= SRGB_DECODE_BREAK, v / _SRGB_SLOPE, high)


@_symmetric
def _rec709_encode(x: np.ndarray) -> np.ndarray:
    high = _REC709_ALPHA * np.power(np.maximum(x, REC709_LINEAR_BREAK), _REC709_EXP) - _REC709_BETA
    return np.where(x < REC709_LINEAR_BREAK, _REC709_SLOPE * x, high)


@_symmetric
def _rec709_decode(v: np.ndarray) -> np.ndarray:
    high = np.power((np.maximum(v, REC709_SIGNAL_BREAK) + _REC709_BETA) / _REC709_ALPHA,
                    1.0 / _REC709_EXP)
    return np.where(v < REC709_SIGNAL_BREAK, v / _REC709_SLOPE, high)


def _identity(x: np.ndarray) -> np.ndarray:
    return x.copy()


TRANSFERS: dict[str, tuple[Callable[[np.ndarray], np.ndarray], Callable[[np.ndarray], np.ndarray]]] = {
    "srgb": (_srgb_encode, _srgb_decode),
    "rec709": (_rec709_encode, _rec709_decode),
    "linear": (_identity, _identity),
}


def _lookup(name: str) -> tuple[Callable[[np.ndarray], np.ndarray], Callable[[np.ndarray], np.ndarray]]:
    try:
        return TRANSFERS[name]
    except KeyError:
        raise ValueError(f"unknown transfer function {name!r}; known: "
                         f"{', '.join(sorted(TRANSFERS))}") from None


def _as_float(x: np.ndarray | float) -> tuple[np.ndarray, np.dtype]:
    arr = np.asarray(x)
    out_dtype = arr.dtype if arr.dtype in (np.float32, np.float64) else np.dtype(np.float64)
    # Work in float64 so the branches meet the standards' constants to full precision.
    return arr.astype(np.float64), out_dtype


def encode(name: str, x: np.ndarray | float) -> np.ndarray:
    """Linear light -> encoded signal.

    Parameters
    ----------
    name : {"srgb", "rec709", "linear"}
        Transfer function: IEC 61966-2-1 sRGB [1]_, ITU-R BT.709 OETF [2]_, or identity.
    x : array_like, any shape
        Linear values; 0..1 is the nominal range, values outside it are mapped
        sign-symmetrically and without clipping (see the module docstring).

    Returns
    -------
    ndarray, same shape as ``x``
        float32 if ``x`` was float32, else float64.

    Notes
    -----
    sRGB: ``12.92 x`` for ``x <= 0.0031308``, else ``1.055 x**(1/2.4) - 0.055``.
    Rec.709: ``4.5 L`` for ``L < 0.018``, else ``1.099 L**0.45 - 0.099``. With the
    Recommendation's rounded constants the two Rec.709 segments do not quite meet: at
    ``L = 0.018`` they give 0.081 and 0.08125 (a step of 2.5e-4).

    Examples
    --------
    >>> float(encode("srgb", 0.0031308))
    0.040449936
    """
    f, _ = _lookup(name)
    arr, dtype = _as_float(x)
    return f(arr).astype(dtype, copy=False)


def decode(name: str, x: np.ndarray | float) -> np.ndarray:
    """Encoded signal -> linear light; the inverse of :func:`encode`.

    Parameters
    ----------
    name : {"srgb", "rec709", "linear"}
    x : array_like, any shape
        Signal values (0..1 nominal); outside that range mapped sign-symmetrically.

    Returns
    -------
    ndarray, same shape as ``x``
        float32 if ``x`` was float32, else float64.

    Notes
    -----
    sRGB: ``v / 12.92`` for ``v <= 0.04045``, else ``((v + 0.055) / 1.055)**2.4`` [1]_.
    Rec.709 inverse (BT.709 defines only the OETF; this is its algebraic inverse):
    ``V / 4.5`` for ``V < 0.081``, else ``((V + 0.099) / 1.099)**(1/0.45)``. Because of the
    step at the Rec.709 breakpoint, signal values in 0.081..0.08125 are not produced by
    ``encode``; ``encode(decode(V))`` differs from ``V`` there by up to 2.5e-4.
    """
    _, g = _lookup(name)
    arr, dtype = _as_float(x)
    return g(arr).astype(dtype, copy=False)
