"""EXR reading and writing through OpenEXR's own bindings (OpenEXR.File API).

Bit-exactness is judged by reading the written file back through ``OpenEXR.File`` itself and
comparing raw bit patterns, so the check does not depend on our reader.
"""

import json
from fractions import Fraction

import numpy as np
import OpenEXR
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from operators.io import exr
from tests.operators.conftest import RGBA, const_image, read_raw_exr, truncated_copy, write_raw_exr

# Lossless in the OpenEXR format description (Technical Introduction: none, rle, zips, zip,
# piz) plus those measured lossless here on random half/float/uint data with OpenEXR 3.5.3
# (zstd, htj2k256, htj2k32, lj2k). pxr24 is lossless for half and uint only.
LOSSLESS = ["none", "rle", "zips", "zip", "piz", "zstd", "htj2k256", "htj2k32", "lj2k"]
LOSSY = ["pxr24", "b44", "b44a", "dwaa", "dwab"]


def _all_half_bits():
    """Every finite half value plus +-inf (all 16-bit patterns except NaNs), shape (70, 907)."""
    bits = np.arange(65536, dtype=np.uint32).astype(np.uint16)
    nan = ((bits & 0x7C00) == 0x7C00) & ((bits & 0x03FF) != 0)
    return bits[~nan].reshape(70, 907)


def _float_bits(rng, shape):
    bits = rng.integers(0, 2**32, size=shape, dtype=np.uint64).astype(np.uint32)
    f = bits.view(np.float32)
    return np.where(np.isnan(f), np.float32(1.5), f).astype(np.float32)


def test_half_float_uint_round_trip_bit_exact(tmp_path):
    # OpenEXR pixel types half/float/uint (Technical Introduction). Every finite half value
    # must survive half -> float32 Image -> half exactly.
    rng = np.random.default_rng(0)
    half = _all_half_bits().view(np.float16)
    flt = _float_bits(rng, half.shape)
    uint = rng.integers(0, 2**24, size=half.shape, dtype=np.uint32)  # exact in float32
    src, dst = tmp_path / "src.exr", tmp_path / "dst.exr"
    write_raw_exr(src, {"R": half, "Z": flt, "id": uint})

    img = exr.read_exr(str(src))
    assert img.meta["exr.pixel_types"] == {"R": "half", "Z": "float", "id": "uint"}
    exr.write_exr(str(dst), img, pixel_types=img.meta["exr.pixel_types"])
    raw, _ = read_raw_exr(dst)
    assert raw["R"].dtype == np.float16 and raw["Z"].dtype == np.float32
    assert raw["id"].dtype == np.uint32
    np.testing.assert_array_equal(raw["R"].view(np.uint16), half.view(np.uint16))
    np.testing.assert_array_equal(raw["Z"].view(np.uint32), flt.view(np.uint32))
    np.testing.assert_array_equal(raw["id"], uint)


def test_half_overflow_warns(tmp_path):
    img = Image(np.array([[[1.0, 70000.0]]], np.float32), ("R", "G"))
    warnings = []
    exr.write_exr(str(tmp_path / "o.exr"), img, pixel_types="half", warn=warnings.append)
    raw, _ = read_raw_exr(tmp_path / "o.exr")
    assert np.isinf(raw["G"][0, 0]) and raw["R"][0, 0] == 1.0
    assert len(warnings) == 1 and "'G'" in warnings[0]


def test_layers_preserved_and_ordered(tmp_path):
    # EXR layer naming layer.channel (Technical Introduction).
    rng = np.random.default_rng(1)
    names = ["fwd.y", "diffuse.R", "A", "conf", "B", "fwd.x", "R", "G"]
    planes = {n: rng.random((6, 9)).astype(np.float32) for n in names}
    write_raw_exr(tmp_path / "l.exr", planes)
    img = exr.read_exr(str(tmp_path / "l.exr"))
    assert img.channels == ("R", "G", "B", "A", "conf", "diffuse.R", "fwd.x", "fwd.y")
    for n in names:
        np.testing.assert_array_equal(img.channel(n), planes[n])
    exr.write_exr(str(tmp_path / "o.exr"), img, pixel_types="float")
    raw, _ = read_raw_exr(tmp_path / "o.exr")
    assert set(raw) == set(names)
    for n in names:
        np.testing.assert_array_equal(raw[n], planes[n])


def _rich_header():
    tc = OpenEXR.TimeCode(1, 2, 3, 4, 1, 0, 1, 0, 1, 0, 1, 2, 3, 4, 5, 6, 7, 8)
    kc = OpenEXR.KeyCode()
    kc.filmMfcCode, kc.prefix, kc.count = 3, 123, 55
    return {
        "owner": "demo show",
        "comments": "written by a test",
        "shot.take": 7,
        "exposure": 0.5,
        "lensDistance": np.array([0.1], dtype=np.float64),      # double
        "framesPerSecond": Fraction(24000, 1001),                # rational
        "offset": np.array([3, -4], dtype=np.int32),             # v2i
        "centre": np.array([0.25, 0.75], dtype=np.float32),      # v2f
        "origin": np.array([1.0, 2.0, 3.0], dtype=np.float64),   # v3d
        "worldToCamera": np.arange(16, dtype=np.float32).reshape(4, 4),   # m44f
        "rot": np.eye(3, dtype=np.float64),                      # m33d
        "crop": (np.array([1, 2], np.int32), np.array([30, 40], np.int32)),  # box2i
        "chromaticities": (0.64, 0.33, 0.3, 0.6, 0.15, 0.06, 0.3127, 0.329),
        "multiView": ["left", "right"],                          # stringvector
        "weights": [0.25, 0.5, 0.125],                           # floatvector
        "timeCode": tc,
        "keyCode": kc,
        "envmap": OpenEXR.ENVMAP_LATLONG,
        "pixelAspectRatio": 2.0,                                 # anamorphic
    }


def _same_attribute(a, b):
    if isinstance(a, np.ndarray):
        return isinstance(b, np.ndarray) and a.dtype == b.dtype and np.array_equal(a, b)
    if isinstance(a, tuple) and a and isinstance(a[0], np.ndarray):
        return all(_same_attribute(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, (OpenEXR.TimeCode, OpenEXR.KeyCode)):
        return type(a) is type(b) and repr(a) == repr(b) and \
            getattr(a, "userData", 0) == getattr(b, "userData", 0)
    return type(a) is type(b) and a == b


def test_header_attributes_round_trip(tmp_path):
    # OpenEXR header attributes (Technical Introduction / file layout): each attribute must come
    # back with the same type and value after read_exr -> write_exr.
    px = {"R": np.ones((4, 5), np.float16)}
    write_raw_exr(tmp_path / "a.exr", px, _rich_header())
    _, original = read_raw_exr(tmp_path / "a.exr")
    img = exr.read_exr(str(tmp_path / "a.exr"))
    json.dumps(dict(img.meta))  # meta must be JSON-able
    assert "exr.dropped_attributes" not in img.meta
    exr.write_exr(str(tmp_path / "b.exr"), img, attributes=img.meta["exr.attributes"])
    _, again = read_raw_exr(tmp_path / "b.exr")
    for name in _rich_header():
        assert name in again, name
        assert _same_attribute(original[name], again[name]), (name, original[name], again[name])


def test_plain_attribute_forms():
    # The JSON-able meta form: plain str/int/float/list values, tagged dicts for the rest.
    assert exr.attribute_to_meta(Fraction(24, 1)) == {"type": "rational", "value": [24, 1]}
    assert exr.attribute_to_meta(["a", "b"]) == ["a", "b"]
    assert exr.attribute_to_meta(np.array([1.5], np.float64)) == {"type": "double", "value": 1.5}
    with pytest.raises(ValueError, match="32-bit"):
        exr.attribute_from_meta("big", 2**40)  # the bindings would silently wrap it
    with pytest.raises(ValueError, match="empty"):
        exr.attribute_from_meta("e", [])
    with pytest.raises(ValueError):
        exr.attribute_from_meta("mixed", [1, "a"])
    with pytest.raises(ValueError):
        exr.attribute_from_meta("d", {"a": 1})


def test_uncarried_attributes_are_listed(tmp_path):
    write_raw_exr(tmp_path / "p.exr", {"R": np.ones((4, 4), np.float16)},
                  {"preview": OpenEXR.PreviewImage(2, 2)})
    img = exr.read_exr(str(tmp_path / "p.exr"))
    assert img.meta["exr.dropped_attributes"] == ["preview"]
    assert "preview" not in img.meta["exr.attributes"]


@pytest.mark.parametrize("name", [c for c in LOSSLESS if c in exr.available_compressions()])
def test_lossless_compressions_round_trip(tmp_path, name):
    rng = np.random.default_rng(2)
    half = (rng.standard_normal((33, 47)) * 4).astype(np.float16)
    flt = _float_bits(rng, (33, 47))
    write_raw_exr(tmp_path / "s.exr", {"R": half, "Z": flt})
    img = exr.read_exr(str(tmp_path / "s.exr"))
    exr.write_exr(str(tmp_path / "c.exr"), img, pixel_types=img.meta["exr.pixel_types"],
                  compression=name)
    raw, header = read_raw_exr(tmp_path / "c.exr")
    assert header["compression"].name == exr.COMPRESSIONS[name]
    np.testing.assert_array_equal(raw["R"].view(np.uint16), half.view(np.uint16))
    np.testing.assert_array_equal(raw["Z"].view(np.uint32), flt.view(np.uint32))
    assert exr.read_exr(str(tmp_path / "c.exr")).meta["exr.compression"] == name


@pytest.mark.parametrize("name", [c for c in LOSSY if c in exr.available_compressions()])
def test_lossy_compressions_load(tmp_path, name):
    rng = np.random.default_rng(3)
    img = Image(rng.random((32, 48, 4)).astype(np.float16).astype(np.float32), RGBA)
    exr.write_exr(str(tmp_path / "c.exr"), img, compression=name)
    back = exr.read_exr(str(tmp_path / "c.exr"))
    assert back.channels == img.channels and back.size == img.size
    assert back.meta["exr.compression"] == name
    assert np.isfinite(back.pixels).all()


def test_unavailable_compression_is_an_op_error(tmp_path, monkeypatch):
    monkeypatch.setitem(exr.COMPRESSIONS, "future", "FUTURE_COMPRESSION")
    img = const_image(0.0, (2, 2), ("R",))
    with pytest.raises(OpError) as info:
        exr.write_exr(str(tmp_path / "x.exr"), img, compression="future")
    assert info.value.field == "compression" and "zip" in info.value.fix


def test_windows_kept_when_sizes_match(tmp_path):
    # OpenEXR data window / display window (Technical Introduction), inclusive corners.
    dw = (np.array([10, 20], np.int32), np.array([13, 22], np.int32))
    disp = (np.array([0, 0], np.int32), np.array([99, 49], np.int32))
    px = np.arange(12, dtype=np.float32).reshape(3, 4)
    write_raw_exr(tmp_path / "w.exr", {"R": px}, {"dataWindow": dw, "displayWindow": disp})
    img = exr.read_exr(str(tmp_path / "w.exr"))
    assert img.size == (4, 3)
    assert img.meta["exr.data_window"] == [10, 20, 13, 22]
    assert img.meta["exr.display_window"] == [0, 0, 99, 49]
    np.testing.assert_array_equal(img.channel("R"), px)
    exr.write_exr(str(tmp_path / "o.exr"), img)
    _, h = read_raw_exr(tmp_path / "o.exr")
    assert [*h["dataWindow"][0], *h["dataWindow"][1]] == [10, 20, 13, 22]
    assert [*h["displayWindow"][0], *h["displayWindow"][1]] == [0, 0, 99, 49]

    # A different size (e.g. after a resize) gets default windows.
    smaller = const_image(0.0, (2, 2), ("R",), img.meta)
    exr.write_exr(str(tmp_path / "s.exr"), smaller)
    _, h = read_raw_exr(tmp_path / "s.exr")
    assert [*h["dataWindow"][0], *h["dataWindow"][1]] == [0, 0, 1, 1]
    assert [*h["displayWindow"][0], *h["displayWindow"][1]] == [0, 0, 1, 1]


def test_caller_array_not_replaced(tmp_path):
    # OpenEXR.File replaces arrays in the dict it is given; our writer must not touch the Image.
    img = const_image(1.0, (3, 3), ("R", "G"))
    before = img.pixels.copy()
    exr.write_exr(str(tmp_path / "o.exr"), img)
    np.testing.assert_array_equal(img.pixels, before)


def test_provenance_helper(tmp_path):
    img = const_image(0.0, (2, 2), ("R",))
    exr.write_exr(str(tmp_path / "plain.exr"), img)
    assert exr.read_provenance(str(tmp_path / "plain.exr")) is None
    record = {"tool": "midframe", "frame": "1001"}
    exr.write_exr(str(tmp_path / "p.exr"), img,
                  attributes={exr.PROVENANCE_ATTRIBUTE: json.dumps(record)})
    assert exr.read_provenance(str(tmp_path / "p.exr")) == record


# -- bad files ---------------------------------------------------------------------------------------
def _good_file(tmp_path):
    rng = np.random.default_rng(4)
    return write_raw_exr(tmp_path / "g.exr", {"R": rng.random((64, 64)).astype(np.float16),
                                              "G": rng.random((64, 64)).astype(np.float16)})


@pytest.mark.parametrize("fraction", [0.05, 0.5, 0.97])
def test_truncated_file_is_an_op_error(tmp_path, fraction):
    bad = truncated_copy(_good_file(tmp_path), tmp_path / "t.exr", keep=fraction)
    with pytest.raises(OpError) as info:
        exr.read_exr(str(bad))
    assert info.value.file == str(bad) and info.value.fix


def test_garbage_and_missing_files(tmp_path):
    junk = tmp_path / "junk.exr"
    junk.write_bytes(bytes(range(256)) * 8)
    with pytest.raises(OpError, match="not an OpenEXR") as info:
        exr.read_exr(str(junk))
    assert info.value.file == str(junk)
    with pytest.raises(OpError, match="not found") as info:
        exr.read_exr(str(tmp_path / "nope.exr"))
    assert info.value.file == str(tmp_path / "nope.exr")
    png_named_exr = tmp_path / "fake.exr"
    png_named_exr.write_bytes(b"\x89PNG\r\n\x1a\n" + b"\0" * 100)
    with pytest.raises(OpError):
        exr.read_exr(str(png_named_exr))


def test_tiled_file_reads(tmp_path):
    # OpenEXR tiled storage (Technical Introduction): same pixels as scanline storage.
    r = np.random.default_rng(9).random((37, 41)).astype(np.float16)
    OpenEXR.File({"type": OpenEXR.tiledimage, "tiles": OpenEXR.TileDescription(),
                  "compression": OpenEXR.ZIP_COMPRESSION}, {"R": r.copy()}).write(str(tmp_path / "t.exr"))
    img = exr.read_exr(str(tmp_path / "t.exr"))
    np.testing.assert_array_equal(img.channel("R"), r.astype(np.float32))
    assert "exr.dropped_attributes" not in img.meta


def test_multipart_files(tmp_path):
    a, b = np.ones((3, 4), np.float16), np.full((3, 4), 2.0, np.float32)
    parts = [OpenEXR.Part({"type": OpenEXR.scanlineimage}, {"R": a.copy()}, "colour"),
             OpenEXR.Part({"type": OpenEXR.scanlineimage}, {"fwd.x": b.copy()}, "vectors")]
    OpenEXR.File(parts).write(str(tmp_path / "m.exr"))
    img = exr.read_exr(str(tmp_path / "m.exr"))
    assert img.channels == ("R", "fwd.x")
    assert img.meta["exr.pixel_types"] == {"R": "half", "fwd.x": "float"}
    np.testing.assert_array_equal(img.channel("fwd.x"), b)
    clash = [OpenEXR.Part({"type": OpenEXR.scanlineimage}, {"R": a.copy()}, "left"),
             OpenEXR.Part({"type": OpenEXR.scanlineimage}, {"R": a.copy()}, "right")]
    OpenEXR.File(clash).write(str(tmp_path / "s.exr"))
    with pytest.raises(OpError, match="more than one part") as info:
        exr.read_exr(str(tmp_path / "s.exr"))
    assert info.value.file == str(tmp_path / "s.exr")
