"""Samples: the exact (frame, view) coordinates at which every node is evaluated."""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from collections.abc import Iterable
from numbers import Rational

__all__ = ["Sample", "as_fraction", "compact_frames"]


def as_fraction(value: int | str | Fraction | Rational) -> Fraction:
    """Return ``value`` as an exact Fraction; floats are refused (they are not exact)."""
    if isinstance(value, bool):
        raise TypeError("a frame or view cannot be a bool")
    if isinstance(value, float):
        raise TypeError(f"{value!r} is a float; give frames and views as int, Fraction or 'a/b' text")
    return Fraction(value)


@dataclass(frozen=True, order=True)
class Sample:
    """A point on the time axis (``frame``) and the camera-rig axis (``view``).

    Both are exact fractions. Plates exist only at integer samples; only in-between synthesis
    produces fractional ones.
    """

    frame: Fraction
    view: Fraction = Fraction(0)

    def __post_init__(self) -> None:
        object.__setattr__(self, "frame", as_fraction(self.frame))
        object.__setattr__(self, "view", as_fraction(self.view))

    @property
    def is_integer(self) -> bool:
        return self.frame.denominator == 1 and self.view.denominator == 1

    def shifted(self, frames: int | Fraction = 0, views: int | Fraction = 0) -> "Sample":
        return Sample(self.frame + as_fraction(frames), self.view + as_fraction(views))

    def at_frame(self, frame: int | Fraction) -> "Sample":
        return Sample(as_fraction(frame), self.view)

    def at_view(self, view: int | Fraction) -> "Sample":
        return Sample(self.frame, as_fraction(view))

    def token(self) -> str:
        """Canonical text used in cache keys: ``f=<num>/<den>;v=<num>/<den>``."""
        return (f"f={self.frame.numerator}/{self.frame.denominator};"
                f"v={self.view.numerator}/{self.view.denominator}")

    def __str__(self) -> str:
        text = f"frame {self.frame}"
        if self.view:
            text += f" view {self.view}"
        return text


def compact_frames(frames: Iterable[int]) -> str:
    """Frame numbers as compact text: ``[1003, 1004, 1005, 1010] -> '1003-1005, 1010'``."""
    nums = sorted(set(int(f) for f in frames))
    runs: list[str] = []
    i = 0
    while i < len(nums):
        j = i
        while j + 1 < len(nums) and nums[j + 1] == nums[j] + 1:
            j += 1
        runs.append(str(nums[i]) if i == j else f"{nums[i]}-{nums[j]}")
        i = j + 1
    return ", ".join(runs)
