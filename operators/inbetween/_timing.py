"""Exact time arithmetic for ``retime`` (private): rates as rationals, time curves.

Everything is ``fractions.Fraction``: an output frame maps to an exact source time, so a source
time that is a whole frame is exactly an integer and passes through untouched.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from fractions import Fraction

__all__ = ["parse_positive", "parse_time", "parse_rate", "NTSC_RATES", "linear_curve", "smooth_curve",
           "pchip_slopes", "canonical"]

#: Decimal labels of the NTSC-family rates and the exact rationals they stand for (SMPTE ST 12-1
#: counts these rates as 24000/1001, 30000/1001, 60000/1001; the decimal labels are common
#: practice, the 47.952 and 119.88 rows from memory of the same family).
NTSC_RATES: dict[str, Fraction] = {
    "23.976": Fraction(24000, 1001), "23.98": Fraction(24000, 1001),
    "29.97": Fraction(30000, 1001),
    "47.952": Fraction(48000, 1001), "47.95": Fraction(48000, 1001),
    "59.94": Fraction(60000, 1001),
    "119.88": Fraction(120000, 1001),
}


def _text(value: object) -> str:
    if isinstance(value, bool):
        raise ValueError(f"{value!r} is not a number")
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"{value!r} is not a finite number")
        return repr(value)  # the shortest text of the float: the decimal the user typed
    if isinstance(value, (int, str, Fraction)):
        return str(value).strip()
    raise ValueError(f"{value!r} is not a number")


def parse_time(value: object) -> Fraction:
    """An exact number from an int, a float (read as the decimal it prints as: 2.4 is 12/5) or
    text such as ``'5/2'`` or ``'2.5'``."""
    text = _text(value)
    try:
        return Fraction(text)
    except (ValueError, ZeroDivisionError):
        raise ValueError(f"{text!r} is not a number; write an integer, a decimal such as 2.5 or a "
                         "fraction such as 5/2") from None


def parse_positive(value: object, what: str) -> Fraction:
    """`parse_time`, refusing values <= 0."""
    q = parse_time(value)
    if q <= 0:
        raise ValueError(f"{what} must be greater than 0, got {_text(value)}")
    return q


def parse_rate(value: object) -> Fraction:
    """A frame rate as an exact rational: ``'24000/1001'``, ``25``, ``'23.976'`` (-> 24000/1001,
    likewise 29.97 and 59.94, see `NTSC_RATES`)."""
    text = _text(value)
    if text in NTSC_RATES:
        return NTSC_RATES[text]
    return parse_positive(text, "a frame rate")


def canonical(q: Fraction) -> str:
    """``'5/2'`` or ``'3'``: the text a Fraction is stored as in params."""
    return str(q)


# -- time curves ---------------------------------------------------------------------------------
def _segment(xs: Sequence[Fraction], x: Fraction) -> int:
    """Index i with xs[i] <= x <= xs[i + 1] (x inside the keys)."""
    lo, hi = 0, len(xs) - 2
    while lo < hi:
        mid = (lo + hi + 1) // 2
        if xs[mid] <= x:
            lo = mid
        else:
            hi = mid - 1
    return lo


def linear_curve(xs: Sequence[Fraction], ys: Sequence[Fraction], x: Fraction) -> Fraction:
    """Piecewise-linear interpolation through the keys; held flat beyond the end keys."""
    if x <= xs[0]:
        return ys[0]
    if x >= xs[-1]:
        return ys[-1]
    i = _segment(xs, x)
    return ys[i] + (ys[i + 1] - ys[i]) * (x - xs[i]) / (xs[i + 1] - xs[i])


def _sign(q: Fraction) -> int:
    return (q > 0) - (q < 0)


def pchip_slopes(xs: Sequence[Fraction], ys: Sequence[Fraction]) -> list[Fraction]:
    """Slopes at the keys of the monotone piecewise cubic Hermite interpolant (PCHIP), exactly.

    Interior keys: 0 where the neighbouring secant slopes differ in sign or either is 0 (a hold
    stays flat), else their weighted harmonic mean ``(w1 + w2) / (w1 / d0 + w2 / d1)`` with
    ``w1 = 2 h1 + h0``, ``w2 = h1 + 2 h0`` (Fritsch & Butland 1984). End keys: the one-sided
    three-point estimate, set to 0 if its sign differs from the end secant's and limited to 3x
    that secant where the secants change sign. These satisfy Fritsch & Carlson's (1980) sufficient
    conditions for a monotone interpolant, so the curve never overshoots its keys. The same
    formulas as SciPy's ``PchipInterpolator``, in exact rationals.
    """
    n = len(xs)
    if n < 2:
        return [Fraction(0)] * n
    h = [xs[i + 1] - xs[i] for i in range(n - 1)]
    d = [(ys[i + 1] - ys[i]) / h[i] for i in range(n - 1)]
    if n == 2:
        return [d[0], d[0]]
    m = [Fraction(0)] * n
    for k in range(1, n - 1):
        if _sign(d[k - 1]) * _sign(d[k]) > 0:
            w1, w2 = 2 * h[k] + h[k - 1], h[k] + 2 * h[k - 1]
            m[k] = (w1 + w2) / (w1 / d[k - 1] + w2 / d[k])

    def end(h0: Fraction, h1: Fraction, d0: Fraction, d1: Fraction) -> Fraction:
        s = ((2 * h0 + h1) * d0 - h0 * d1) / (h0 + h1)
        if _sign(s) != _sign(d0):
            return Fraction(0)
        if _sign(d0) != _sign(d1) and abs(s) > 3 * abs(d0):
            return 3 * d0
        return s

    m[0] = end(h[0], h[1], d[0], d[1])
    m[-1] = end(h[-1], h[-2], d[-1], d[-2])
    return m


def smooth_curve(xs: Sequence[Fraction], ys: Sequence[Fraction], x: Fraction,
                 slopes: Sequence[Fraction] | None = None) -> Fraction:
    """Monotone cubic Hermite interpolation (`pchip_slopes`) through the keys, exactly; held flat
    beyond the end keys."""
    if x <= xs[0]:
        return ys[0]
    if x >= xs[-1]:
        return ys[-1]
    m = list(slopes) if slopes is not None else pchip_slopes(xs, ys)
    i = _segment(xs, x)
    hh = xs[i + 1] - xs[i]
    s = (x - xs[i]) / hh
    s2, s3 = s * s, s * s * s
    h00, h10 = 2 * s3 - 3 * s2 + 1, s3 - 2 * s2 + s
    h01, h11 = -2 * s3 + 3 * s2, s3 - s2
    return h00 * ys[i] + h10 * hh * m[i] + h01 * ys[i + 1] + h11 * hh * m[i + 1]


def parse_keys(value: object, lengths: tuple[int, ...], shape: str) -> tuple[tuple, ...]:
    """Keys of a keyed curve: each a list whose first item is a whole output frame and whose other
    items are exact times (``canonical`` text), in increasing output frames. ``lengths``: allowed key
    lengths; ``shape``: how a key is written, for messages (e.g. '[output_frame, source_time]')."""
    if not isinstance(value, (list, tuple)):
        raise ValueError(f"keys must be a list of {shape} keys")
    out = []
    for i, key in enumerate(value):
        if not isinstance(key, (list, tuple)) or len(key) not in lengths:
            raise ValueError(f"key {i} is {key!r}; write each key as {shape}")
        frame = key[0]
        if isinstance(frame, float) and frame.is_integer():
            frame = int(frame)
        if isinstance(frame, bool) or not isinstance(frame, int):
            raise ValueError(f"key {i}: output frame {frame!r} must be a whole number")
        out.append((frame, *(canonical(parse_time(x)) for x in key[1:])))
    for i in range(1, len(out)):
        if out[i][0] <= out[i - 1][0]:
            raise ValueError(f"key {i}: output frame {out[i][0]} does not come after {out[i - 1][0]}; "
                             "list keys by increasing output frame, one per frame")
    return tuple(out)
