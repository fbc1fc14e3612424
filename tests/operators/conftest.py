"""Shared helpers for the operator tests: running an operator, small images, raw EXR files.

The test modules import these as ``from tests.operators.conftest import ...``, the way the
rest of the suite imports ``tests.conftest``. Seeded random images come from
``tests.conftest.noise_image``; what is here is only what the operator tests need on top.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import OpenEXR

from graphcore.image import Image
from graphcore.registry.operator import OpContext, Operator
from graphcore.sample import Sample

RGBA = ("R", "G", "B", "A")

# Pixel types an EXR file stores (OpenEXR Technical Introduction: half, float, uint).
_EXR_DTYPES = (np.dtype(np.float16), np.dtype(np.float32), np.dtype(np.uint32))


# -- running an operator ---------------------------------------------------------------------------
def op_context(sample: Sample | None = None, warnings: list[str] | None = None,
               **fields: Any) -> OpContext:
    """An ``OpContext`` for calling an operator's ``compute`` directly.

    Parameters
    ----------
    sample : Sample, optional
        Where to evaluate; frame 1 when omitted.
    warnings : list of str, optional
        Warnings the operator gives are appended here; dropped when omitted.
    **fields
        Any other ``OpContext`` field (``node_id``, ``sources``, ``protected_paths`` ...).
    """
    if warnings is not None:
        fields["warn"] = warnings.append
    return OpContext(sample=Sample(1) if sample is None else sample, **fields)


def run_op(op: Operator, params: Any, inputs: Mapping[str, Any] | None = None, *,
           ctx: OpContext | None = None, sample: Sample | None = None,
           warnings: list[str] | None = None) -> Image:
    """``op.compute(params, inputs, ctx)`` with every port of ``op`` not in ``inputs`` unconnected.

    Parameters
    ----------
    op : Operator
    params : pydantic model instance of ``op.params``
    inputs : mapping port name -> Image (or a tuple of Images where ``op.needs`` asks for several
        samples); ports left out are passed as ``None``, as the evaluator does.
    ctx : OpContext, optional
        Used as given; otherwise ``op_context(sample, warnings)``.
    """
    full: dict[str, Any] = {port.name: None for port in op.inputs}
    full.update(inputs or {})
    return op.compute(params, full, ctx if ctx is not None else op_context(sample, warnings))


def op_runner(op: Operator) -> Callable[..., Image]:
    """``run(inputs, *, ctx=None, sample=None, warnings=None, **params)`` for one operator.

    The keyword arguments other than the context ones build ``op.params``, so a bad value raises
    pydantic's ``ValidationError`` exactly as it would in a graph.
    """

    def run(inputs: Mapping[str, Any] | None = None, *, ctx: OpContext | None = None,
            sample: Sample | None = None, warnings: list[str] | None = None,
            **params: Any) -> Image:
        return run_op(op, op.params(**params), inputs, ctx=ctx, sample=sample, warnings=warnings)

    run.__doc__ = f"Run operator {op.name!r}; see tests.operators.conftest.op_runner."
    return run


# -- small images ----------------------------------------------------------------------------------
def const_image(value, shape: tuple[int, int] = (3, 4), channels: Sequence[str] = RGBA,
                meta: Mapping[str, Any] | None = None) -> Image:
    """Image of shape ``(*shape, len(channels))`` filled with ``value``.

    ``value`` is a number, or one number per channel (broadcast over the pixels).
    """
    px = np.full((*shape, len(channels)), value, np.float32)
    return Image(px, tuple(channels), dict(meta or {}))


def premultiply_rgba(px: np.ndarray) -> Image:
    """Premultiplied RGBA Image from straight RGBA pixels.

    Parameters
    ----------
    px : ndarray, shape (H, W, 4), channels R, G, B, A
        Straight (unassociated) colour and alpha; not modified.

    Returns
    -------
    Image
        R, G, B multiplied by A in float32 (Porter & Duff 1984, premultiplied colour), A as given.
    """
    px = np.array(px, dtype=np.float32)
    px[..., :3] *= px[..., 3:4]
    return Image(px, RGBA)


# -- files -----------------------------------------------------------------------------------------
def write_raw_exr(path, planes: Mapping[str, np.ndarray],
                  header: Mapping[str, Any] | None = None) -> Path:
    """Write a scanline, ZIP-compressed EXR straight through ``OpenEXR.File`` (not our writer).

    Parameters
    ----------
    path : str or Path
    planes : mapping channel name -> ndarray, shape (H, W)
        float16 / float32 / uint32 planes are stored as half / float / uint; any other dtype
        (float64, Python ints from ``np.full``) is stored as float. The arrays are copied, since
        ``OpenEXR.File`` replaces the arrays of the dict it is given.
    header : mapping, optional
        Header attributes added to, or replacing, ``type`` and ``compression``.
    """
    hdr = {"type": OpenEXR.scanlineimage, "compression": OpenEXR.ZIP_COMPRESSION}
    hdr.update(header or {})
    channels = {}
    for name, plane in planes.items():
        plane = np.asarray(plane)
        channels[name] = np.array(plane, dtype=plane.dtype if plane.dtype in _EXR_DTYPES
                                  else np.float32)
    OpenEXR.File(hdr, channels).write(str(path))
    return Path(path)


def read_raw_exr(path) -> tuple[dict[str, np.ndarray], dict[str, Any]]:
    """Channel name -> pixels as stored, and the header, straight from ``OpenEXR.File``.

    Reading through the bindings themselves keeps a check independent of our reader.
    """
    f = OpenEXR.File(str(path), separate_channels=True)
    return {n: c.pixels for n, c in f.channels().items()}, f.header()


def truncated_copy(src, dst, keep: float = 0.5) -> Path:
    """Write the first ``keep`` fraction of the bytes of ``src`` to ``dst`` (may be ``src``).

    A file cut short, as a copy interrupted mid-way leaves it: the bad-input case for readers.
    """
    data = Path(src).read_bytes()
    Path(dst).write_bytes(data[: int(len(data) * keep)])
    return Path(dst)


# -- rigs ------------------------------------------------------------------------------------------
def texture(h: int, w: int, seed: int = 0, channels: int = 3) -> np.ndarray:
    """Seeded multi-scale texture, shape (h, w, channels), float32 in about 0.05..0.95.

    Noise blurred at several scales and summed: corners and blobs at every size, as feature
    detectors and colour fits need (invented data for known-answer tests).
    """
    import cv2

    rng = np.random.default_rng(seed)
    out = np.zeros((h, w, channels), np.float32)
    for sigma, amp in ((1.0, 0.35), (3.0, 0.35), (9.0, 0.3)):
        layer = cv2.GaussianBlur(rng.random((h, w, channels), dtype=np.float32), (0, 0), sigma)
        layer = layer.reshape(h, w, channels)
        layer -= layer.mean()
        out += amp * layer / (layer.std() + 1e-9)
    return np.clip(0.5 + 0.15 * out, 0.05, 0.95).astype(np.float32)


def rig_context(view: int, cameras: int, warnings: list[str] | None = None, *, frame: int = 0,
                frames: tuple[int, int] | None = None) -> OpContext:
    """An ``OpContext`` at camera ``view`` (and ``frame``) of a rig with cameras ``1..cameras``: a
    rig of stills, or of sequences holding ``frames`` (first, last). It carries the input ranges
    an operator declaring ``needs_ranges`` gets from the engine."""
    from graphcore.registry.operator import FrameRange, InputRange

    ranges = {"image": InputRange(None if frames is None else FrameRange(*frames), FrameRange(1, cameras))}
    return op_context(Sample(frame, view), warnings, input_ranges=ranges)


def run_rig_op(op: Operator, params: Any, cameras: Mapping[Any, Image], view: int,
               warnings: list[str] | None = None, *, frame: int = 0,
               frames: tuple[int, int] | None = None, **other_ports: Mapping[Any, Image]) -> Image:
    """Run a rig operator at ``view`` (and ``frame``) the way the engine does: ask ``op.needs``
    which samples it wants and hand it those images.

    ``cameras`` maps a view to its image (a rig of stills), or ``(frame, view)`` to an image (a rig
    of sequences holding ``frames``); ``other_ports`` map further ports the same way.
    """
    n = len({k[1] if isinstance(k, tuple) else k for k in cameras})
    ctx = rig_context(view, n, warnings, frame=frame, frames=frames)
    ranges = dict(ctx.input_ranges)
    for port in other_ports:
        ranges[port] = ranges["image"]
    wanted = op.needs(params, ctx.sample, ranges)
    inputs: dict[str, Any] = {}
    for port, samples in wanted.items():
        source = cameras if port == "image" else other_ports[port]
        pick = (lambda s: source[(int(s.frame), int(s.view))]) if isinstance(next(iter(source)), tuple) \
            else (lambda s: source[int(s.view)])
        inputs[port] = tuple(pick(s) for s in samples)
    return run_op(op, params, inputs, ctx=ctx)
