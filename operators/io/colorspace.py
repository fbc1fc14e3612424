"""Named colour spaces through OpenColorIO, for ``read`` and ``write``.

A show names its colour spaces in an OpenColorIO config (a ``config.ocio`` file, or one of the
configs built into the library, addressed as ``ocio://cg-config-latest`` and the like). ``read``
with ``colorspace`` converts a file's colour from that space to the config's ``scene_linear``
role, the working space every operator assumes; ``write`` with ``colorspace`` converts back.
Which config: the node's ``ocio_config`` param, else the ``OCIO`` environment variable (the
convention OpenColorIO itself and most pipelines follow).

Colour is stored premultiplied; a colour-space conversion is generally not linear, so it is
applied to straight colour (divided by alpha where alpha > 0, multiplied back after), as the
built-in transfer decoding does. Alpha and non-colour channels are never converted.

Without ``colorspace`` nothing here runs: files are read and written with the built-in transfer
functions of `operators.io.transfer` (sRGB, Rec.709, linear).

References
----------
.. [1] OpenColorIO, the Academy Software Foundation's colour management library,
   https://opencolorio.org (configs, roles, processors).
"""

from __future__ import annotations

import functools
import os

import numpy as np

from graphcore.errors import OpError
from graphcore.image import Image

__all__ = ["ENV", "config_source", "config_identity", "to_working", "from_working"]

#: The environment variable OpenColorIO reads its config path from.
ENV = "OCIO"
_COLOR = ("R", "G", "B")


def config_source(param: str | None) -> str:
    """The config the node uses: its ``ocio_config`` param, else ``$OCIO``."""
    src = param or os.environ.get(ENV, "")
    if not src:
        raise OpError("a colorspace is named but no OpenColorIO config is given", field="ocio_config",
                      fix=f"set ocio_config to a config.ocio file (or a built-in config such as "
                          f"'ocio://cg-config-latest'), or set the {ENV} environment variable")
    return src


def config_identity(param: str | None) -> str:
    """What identifies the config's content for caching: the URI, or the file's path, size and
    modification time."""
    src = param or os.environ.get(ENV, "")
    if not src or src.startswith("ocio://"):
        return src
    try:
        st = os.stat(src)
    except OSError:
        return f"{src}|missing"
    return f"{os.path.realpath(src)}|{st.st_size}|{st.st_mtime_ns}"


@functools.lru_cache(maxsize=8)
def _config(src: str, identity: str):
    import PyOpenColorIO as OCIO

    if not src.startswith("ocio://") and not os.path.isfile(src):
        raise OpError("the OpenColorIO config file does not exist", file=src, field="ocio_config",
                      fix="name an existing config.ocio file, a built-in config such as "
                          "'ocio://cg-config-latest', or fix the OCIO environment variable")
    try:
        config = OCIO.Config.CreateFromFile(src)
        config.validate()
    except Exception as exc:      # OpenColorIO raises its own Exception type for every problem
        raise OpError(f"OpenColorIO cannot load the config: {exc}", file=src, field="ocio_config",
                      fix="check the config file (OpenColorIO's ociocheck tool reports what is wrong)") from None
    return config


@functools.lru_cache(maxsize=64)
def _processor(src: str, identity: str, source: str, target: str):
    import PyOpenColorIO as OCIO

    config = _config(src, identity)
    names = list(config.getColorSpaceNames())
    for name, field in ((source, "colorspace"), (target, "colorspace")):
        if name != OCIO.ROLE_SCENE_LINEAR and config.getColorSpace(name) is None:
            shown = ", ".join(names[:12]) + (" ..." if len(names) > 12 else "")
            raise OpError(f"the OpenColorIO config has no colour space {name!r}", file=src, field=field,
                          fix=f"name one of its colour spaces ({shown}), or a role")
    if config.getColorSpace(OCIO.ROLE_SCENE_LINEAR) is None:
        raise OpError("the OpenColorIO config defines no scene_linear role (the working space)",
                      file=src, field="ocio_config", fix="add a scene_linear role to the config")
    try:
        # lossless: OpenColorIO's default optimisation approximates powers (errors ~2e-5 on the
        # sRGB curve, against ~8e-7 lossless), too coarse for plates that are converted and back
        return config.getProcessor(source, target).getOptimizedCPUProcessor(OCIO.OPTIMIZATION_LOSSLESS)
    except Exception as exc:
        raise OpError(f"OpenColorIO cannot convert {source!r} to {target!r}: {exc}", file=src,
                      field="colorspace", fix="check the colour spaces' transforms in the config") from None


def _convert(image: Image, config_param: str | None, source: str, target: str) -> Image:
    idx = [image.index(c) for c in _COLOR if c in image.channels]
    if not idx:
        return image
    src = config_source(config_param)
    cpu = _processor(src, config_identity(config_param), source, target)
    px = image.pixels.copy()
    rgb = np.zeros(px.shape[:2] + (3,), np.float32)
    for k, i in enumerate(idx):
        rgb[:, :, k] = px[:, :, i]
    if len(idx) == 1:          # one colour channel (grey): convert it as R = G = B
        rgb[:, :, 1] = rgb[:, :, 2] = rgb[:, :, 0]
    alpha = px[:, :, image.index("A")] if image.has_alpha else None
    if alpha is not None:
        with np.errstate(divide="ignore", invalid="ignore"):
            rgb = np.where(alpha[:, :, None] > 0, rgb / alpha[:, :, None], 0.0).astype(np.float32)
    rgb = np.ascontiguousarray(rgb, dtype=np.float32)
    cpu.applyRGB(rgb)                                          # in place
    if alpha is not None:
        rgb *= alpha[:, :, None]
    for k, i in enumerate(idx):
        px[:, :, i] = rgb[:, :, k]
    return image.replace(pixels=px)


def to_working(image: Image, colorspace: str, config_param: str | None) -> Image:
    """``image``'s colour converted from ``colorspace`` to the config's scene_linear role."""
    return _convert(image, config_param, colorspace, "scene_linear")


def from_working(image: Image, colorspace: str, config_param: str | None) -> Image:
    """``image``'s colour converted from the config's scene_linear role to ``colorspace``."""
    return _convert(image, config_param, "scene_linear", colorspace)
