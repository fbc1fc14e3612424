"""Helpers shared by the ``read`` and ``write`` operators: path validation and sample numbers."""

from __future__ import annotations

import os
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
