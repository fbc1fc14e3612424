"""Damaged image files never crash, hang or exhaust memory: the ``read`` operator either returns a
well-formed image or raises an ``OpError`` naming the file and a fix.

Valid small files are written with OpenEXR's own bindings (and OpenCV for PNG/TIFF), then damaged:
random byte flips (hypothesis), truncation at every offset, header fields set to arbitrary values
(data and display windows, channel list, compression, tile size), odd and missing channels, empty
files. Each fuzz target runs at least 1000 examples. A watchdog (``faulthandler``) ends the run with
a stack dump if one read takes longer than a minute, so a hang fails instead of stalling the suite.

Header layout (where the fields sit in the bytes) from OpenEXR, "OpenEXR File Layout"
(openexr.com): magic number and version, then attributes as name, type name, size, value.
"""

from __future__ import annotations

import faulthandler
import resource
import struct
from pathlib import Path

import cv2
import numpy as np
import OpenEXR
import pytest
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st

from graphcore.errors import OpError
from graphcore.image import Image
from operators.io.exr import MAX_IMAGE_BYTES, read_exr
from operators.io.read import READ, ReadParams
from tests.operators.conftest import op_context

FUZZ = settings(max_examples=1000, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
WATCHDOG_S = 60


def _exr(path: Path, channels: dict[str, np.ndarray], *, compression=OpenEXR.ZIP_COMPRESSION,
         tiled: bool = False) -> bytes:
    hdr = {"compression": compression, "type": OpenEXR.tiledimage if tiled else OpenEXR.scanlineimage}
    if tiled:
        td = OpenEXR.TileDescription()
        td.xSize, td.ySize = 4, 4
        hdr["tiles"] = td
    with OpenEXR.File(hdr, {k: v.copy() for k, v in channels.items()}) as f:
        f.write(str(path))
    return path.read_bytes()


def _planes(h: int, w: int, names, dtype, seed: int = 1) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    return {n: rng.random((h, w)).astype(dtype) for n in names}


@pytest.fixture(scope="module")
def bases(tmp_path_factory) -> dict[str, bytes]:
    """Small valid files of each storage kind (scanline and tiled; half, float and uint; four
    compressions; two parts), as bytes."""
    d = tmp_path_factory.mktemp("bases")
    rgba = ("R", "G", "B", "A")
    out = {
        "zip-half": _exr(d / "a.exr", _planes(8, 6, rgba, np.float16)),
        "none-float-layers": _exr(d / "b.exr", _planes(5, 7, ("R", "G", "B", "fwd.x", "fwd.y", "conf"),
                                                       np.float32), compression=OpenEXR.NO_COMPRESSION),
        "piz-tiled": _exr(d / "c.exr", _planes(9, 10, rgba, np.float16), compression=OpenEXR.PIZ_COMPRESSION,
                          tiled=True),
        "rle-uint": _exr(d / "d.exr", {"R": np.arange(24, dtype=np.uint32).reshape(4, 6),
                                       "id": np.arange(24, dtype=np.uint32).reshape(4, 6)},
                         compression=OpenEXR.RLE_COMPRESSION),
    }
    h = {"compression": OpenEXR.ZIP_COMPRESSION, "type": OpenEXR.scanlineimage}
    parts = [OpenEXR.Part(dict(h), _planes(4, 5, ("R", "G", "B"), np.float16), name="left"),
             OpenEXR.Part(dict(h), _planes(4, 5, ("fwd.x", "fwd.y"), np.float32, seed=2), name="right")]
    with OpenEXR.File(parts) as f:
        f.write(str(d / "e.exr"))
    out["multipart"] = (d / "e.exr").read_bytes()
    for name, bgr in (("png8", np.uint8), ("png16", np.uint16), ("tif8", np.uint8), ("tif16", np.uint16)):
        ext = ".png" if name.startswith("png") else ".tif"
        img = (np.random.default_rng(2).random((7, 5, 4)) * np.iinfo(bgr).max).astype(bgr)
        assert cv2.imwrite(str(d / f"r{ext}"), img)
        out[name] = (d / f"r{ext}").read_bytes()
    return out


EXR_BASES = ("zip-half", "none-float-layers", "piz-tiled", "rle-uint", "multipart")
RASTER_BASES = ("png8", "png16", "tif8", "tif16")


def _suffix(kind: str) -> str:
    return ".png" if kind.startswith("png") else ".tif" if kind.startswith("tif") else ".exr"


def read_or_refuse(path: Path) -> str:
    """Read ``path`` through the read operator: "image" for a well-formed image, "error" for an
    OpError that names the file and a fix; anything else (another exception) fails the test."""
    faulthandler.dump_traceback_later(WATCHDOG_S, exit=True)
    try:
        img = READ.compute(ReadParams(path=str(path)), {}, op_context())
    except OpError as e:
        assert e.file == str(path), (e.file, str(e))
        assert e.fix and e.message
        return "error"
    finally:
        faulthandler.cancel_dump_traceback_later()
    px = img.pixels
    assert px.dtype == np.float32 and px.ndim == 3 and px.shape[2] == len(img.channels) >= 1
    assert px.shape[0] >= 1 and px.shape[1] >= 1
    assert np.isfinite(px).all()            # read's default replaces NaN/Inf by 0 (with a warning)
    return "image"


# -- byte flips ------------------------------------------------------------------------------------
flips = st.lists(st.tuples(st.integers(0, 1 << 20), st.integers(1, 255)), min_size=1, max_size=6)


def _flipped(data: bytes, changes) -> bytes:
    out = bytearray(data)
    for pos, xor in changes:
        out[pos % len(out)] ^= xor
    return bytes(out)


@FUZZ
@given(kind=st.sampled_from(EXR_BASES), changes=flips)
def test_exr_with_flipped_bytes_reads_or_is_refused(tmp_path, bases, kind, changes):
    path = tmp_path / "f.exr"
    path.write_bytes(_flipped(bases[kind], changes))
    event(read_or_refuse(path))


@FUZZ
@given(kind=st.sampled_from(RASTER_BASES), changes=flips)
def test_png_and_tiff_with_flipped_bytes_read_or_are_refused(tmp_path, bases, kind, changes):
    path = tmp_path / f"f{_suffix(kind)}"
    path.write_bytes(_flipped(bases[kind], changes))
    event(read_or_refuse(path))


# -- truncation at every offset --------------------------------------------------------------------
@pytest.mark.parametrize("kind", EXR_BASES + RASTER_BASES)
def test_truncated_at_every_offset_is_refused(tmp_path, bases, kind):
    """Every proper prefix of a valid file, from empty to one byte short (several hundred files per
    kind, 1000s in all), is refused with the file named; none reads as an image."""
    data = bases[kind]
    path = tmp_path / f"t{_suffix(kind)}"
    images = []
    for n in range(len(data)):
        path.write_bytes(data[:n])
        if read_or_refuse(path) == "image":
            images.append(n)
    # PNG: the last 12 bytes are the IEND chunk, which holds no pixels, so OpenCV (libpng) decodes a
    # file cut inside it; every other cut must be refused.
    allowed = set(range(len(data) - 12, len(data))) if kind.startswith("png") else set()
    assert set(images) <= allowed, f"{kind}: truncated copies read as images at lengths {images}"
    assert len(data) > 100


# -- header fields set to arbitrary values ---------------------------------------------------------
def _attribute(data: bytes, name: str, type_name: str) -> tuple[int, int]:
    """(offset, size) of the value of header attribute ``name``."""
    tag = name.encode() + b"\0" + type_name.encode() + b"\0"
    i = data.index(tag) + len(tag)
    (size,) = struct.unpack("<i", data[i:i + 4])
    return i + 4, size


HEADER_FIELDS = [("dataWindow", "box2i"), ("displayWindow", "box2i"), ("compression", "compression"),
                 ("lineOrder", "lineOrder"), ("channels", "chlist")]
int32 = st.integers(-2**31, 2**31 - 1)
small = st.integers(-3, 70000)


@FUZZ
@given(kind=st.sampled_from(EXR_BASES), field=st.sampled_from(HEADER_FIELDS + [("tiles", "tiledesc")]),
       values=st.lists(st.one_of(int32, small), min_size=1, max_size=4), where=st.integers(0, 64))
def test_exr_with_arbitrary_header_values_reads_or_is_refused(tmp_path, bases, kind, field, values, where):
    data = bases[kind]
    name, type_name = field
    assume(name != "tiles" or kind == "piz-tiled")
    offset, size = _attribute(data, name, type_name)
    packed = struct.pack(f"<{len(values)}i", *values)
    start = offset + (where % max(1, size)) if name == "channels" else offset
    out = bytearray(data)
    out[start:start + len(packed)] = packed[: max(0, offset + size - start)]  # stay inside the value
    path = tmp_path / "h.exr"
    path.write_bytes(bytes(out[: len(data)]))
    event(read_or_refuse(path))


@pytest.mark.parametrize("window", [
    (0, 0, 40000, 40000),            # 12 GiB of float32 declared by a file of a few hundred bytes
    (0, 0, 2**20, 2**20),
    (0, 0, 2**30, 7),
    (-2**31, -2**31, 2**31 - 1, 2**31 - 1),
    (0, 0, 5, -1), (5, 0, 0, 7),      # empty windows
])
@pytest.mark.parametrize("kind", ["zip-half", "piz-tiled"])
def test_absurd_declared_size_is_refused_before_allocating(tmp_path, bases, kind, window):
    """A tiled file whose data window and tile both claim 40000 x 40000 made the decoder fill 6 GB
    and take 24 s before the size check (measured here); now it is refused from the header."""
    data = bytearray(bases[kind])
    offset, _ = _attribute(bytes(data), "dataWindow", "box2i")
    data[offset:offset + 16] = struct.pack("<4i", *window)
    if kind == "piz-tiled":
        t, _ = _attribute(bytes(data), "tiles", "tiledesc")
        w = max(1, min(2**31 - 1, window[2] - window[0] + 1))
        data[t:t + 8] = struct.pack("<2I", w, w)
    path = tmp_path / "big.exr"
    path.write_bytes(bytes(data))
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    assert read_or_refuse(path) == "error"
    grown_mb = (resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - before) / 1024   # ru_maxrss: KiB (Linux)
    assert grown_mb < 256, f"peak memory grew by {grown_mb:.0f} MB"


def test_size_limit_names_the_file_the_size_and_the_way_out(tmp_path, bases, monkeypatch):
    path = tmp_path / "wide.exr"
    data = bytearray(bases["zip-half"])
    offset, _ = _attribute(bytes(data), "dataWindow", "box2i")
    data[offset:offset + 16] = struct.pack("<4i", 0, 0, 99999, 99999)
    path.write_bytes(bytes(data))
    with pytest.raises(OpError) as info:
        read_exr(str(path))
    assert info.value.file == str(path)
    assert "100000 x 100000" in info.value.message and "4 channel" in info.value.message
    assert "MIDFRAME_MAX_IMAGE_MB" in info.value.fix
    # just under the limit is not refused for its size: 8 x 6 RGBA half needs 768 bytes as float32
    monkeypatch.setenv("MIDFRAME_MAX_IMAGE_MB", str(768 / (1 << 20)))
    (tmp_path / "ok.exr").write_bytes(bases["zip-half"])
    assert read_exr(str(tmp_path / "ok.exr")).pixels.shape == (8, 6, 4)
    monkeypatch.setenv("MIDFRAME_MAX_IMAGE_MB", str(767 / (1 << 20)))
    with pytest.raises(OpError, match="more than"):
        read_exr(str(tmp_path / "ok.exr"))
    assert MAX_IMAGE_BYTES == 4 << 30


# -- odd and missing channels ----------------------------------------------------------------------
channel_names = st.text(st.characters(codec="utf-8", exclude_characters="\0"), min_size=1, max_size=40)


@FUZZ
@given(names=st.lists(channel_names, min_size=1, max_size=5, unique=True),
       ask=st.one_of(st.none(), st.lists(st.sampled_from(["R", "G", "B", "A", "fwd.x", "Z"]), min_size=1,
                                        max_size=3, unique=True)))
def test_odd_and_missing_channels(tmp_path, names, ask):
    """Any channel names OpenEXR writes come back by name; asking for channels the file lacks is
    an error naming them, the file and the param."""
    planes = {n: np.full((3, 4), i, np.float16) for i, n in enumerate(names)}
    path = tmp_path / "odd.exr"
    try:
        _exr(path, planes)
    except (RuntimeError, ValueError, TypeError, UnicodeError):   # names the bindings refuse to write
        assume(False)
    try:
        img = READ.compute(ReadParams(path=str(path), channels=tuple(ask) if ask else None), {}, op_context())
    except OpError as e:
        assert e.file == str(path)
        assert ask and e.field == "channels" and any(c not in names for c in ask)
        assert all(c in e.message for c in ask if c not in names)
        return
    if ask:
        assert img.channels == tuple(ask)
    else:
        assert sorted(img.channels) == sorted(names)
    for c in img.channels:
        assert np.all(img.channel(c) == names.index(c))


@pytest.mark.parametrize("content", [b"", b"v/1\x01", b"v/1\x01\x02\x00\x00\x00", b"\0" * 64, b"not an image"])
@pytest.mark.parametrize("suffix", [".exr", ".png", ".tif"])
def test_empty_and_stub_files_are_refused(tmp_path, content, suffix):
    path = tmp_path / f"z{suffix}"
    path.write_bytes(content)
    assert read_or_refuse(path) == "error"


def test_a_well_formed_base_still_reads_exactly(tmp_path, bases):
    """The fuzz starts from valid files: each base reads, and the EXR ones give back the values
    written (OpenEXR's own writer, half and float exact)."""
    for kind in EXR_BASES + RASTER_BASES:
        path = tmp_path / f"ok{_suffix(kind)}"
        path.write_bytes(bases[kind])
        assert read_or_refuse(path) == "image"
    path = tmp_path / "ok.exr"
    path.write_bytes(bases["none-float-layers"])
    img = read_exr(str(path))
    expect = _planes(5, 7, ("R", "G", "B", "fwd.x", "fwd.y", "conf"), np.float32)
    for c in expect:
        np.testing.assert_array_equal(img.channel(c), expect[c])
    assert isinstance(img, Image)
