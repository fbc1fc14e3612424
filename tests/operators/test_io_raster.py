"""PNG / TIFF / JPEG through OpenCV: transfer, bit depth, channel order, straight <-> premultiplied."""

import cv2
import numpy as np
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from operators.io.raster import read_raster, write_raster
from operators.io.transfer import decode
from tests.operators.conftest import RGBA, const_image, truncated_copy


def _codes(rng, shape, bits):
    return rng.integers(0, 2**bits, size=shape, dtype=np.uint64).astype(
        np.uint8 if bits == 8 else np.uint16)


@pytest.mark.parametrize("ext", [".png", ".tif"])
@pytest.mark.parametrize("bits", [8, 16])
def test_rgb_round_trip_within_one_code(tmp_path, ext, bits):
    rng = np.random.default_rng(bits)
    bgr = _codes(rng, (40, 50, 3), bits)
    src, dst = str(tmp_path / f"s{ext}"), str(tmp_path / f"d{ext}")
    assert cv2.imwrite(src, bgr)
    img = read_raster(src)
    assert img.channels == ("R", "G", "B") and img.meta["raster.bit_depth"] == bits
    write_raster(dst, img, bit_depth=bits, transfer="srgb")
    back = cv2.imread(dst, cv2.IMREAD_UNCHANGED)
    assert back.dtype == bgr.dtype
    diff = np.abs(back.astype(np.int64) - bgr.astype(np.int64))
    assert diff.max() <= 1  # measured: 0 for every code value


def test_decoded_values_follow_srgb(tmp_path):
    # IEC 61966-2-1: 8-bit code 128 -> 0.2158605 linear (formula evaluated by hand).
    bgr = np.zeros((1, 3, 3), np.uint8)
    bgr[0, 0] = (0, 0, 128)     # red 128 (OpenCV stores BGR)
    bgr[0, 1] = (255, 0, 0)     # pure blue
    bgr[0, 2] = (0, 255, 0)     # pure green
    cv2.imwrite(str(tmp_path / "c.png"), bgr)
    img = read_raster(str(tmp_path / "c.png"))
    assert img.pixels[0, 0, 0] == pytest.approx(0.2158605, abs=1e-6)
    np.testing.assert_array_equal(img.pixels[0, 1], [0, 0, 1])   # BGR -> RGB
    np.testing.assert_array_equal(img.pixels[0, 2], [0, 1, 0])


def test_explicit_transfer_on_read(tmp_path):
    cv2.imwrite(str(tmp_path / "g.png"), np.full((2, 2), 200, np.uint8))
    lin = read_raster(str(tmp_path / "g.png"), transfer="linear")
    assert lin.pixels[0, 0, 0] == pytest.approx(200 / 255)
    r709 = read_raster(str(tmp_path / "g.png"), transfer="rec709")
    assert r709.pixels[0, 0, 0] == pytest.approx(float(decode("rec709", 200 / 255)), rel=1e-6)
    assert r709.meta["raster.transfer"] == "rec709"


def test_straight_alpha_becomes_premultiplied(tmp_path):
    # Files hold straight alpha, the Image premultiplied linear colour; alpha itself is linear
    # (common practice for PNG/TIFF; the PNG specification, ISO/IEC 15948, says alpha samples
    # are linear and not gamma-encoded - cited from memory).
    rng = np.random.default_rng(5)
    bgra = _codes(rng, (30, 30, 4), 8)
    bgra[0, 0] = (10, 20, 30, 0)      # fully transparent
    bgra[0, 1] = (10, 20, 30, 255)    # opaque
    cv2.imwrite(str(tmp_path / "a.png"), bgra)
    img = read_raster(str(tmp_path / "a.png"))
    assert img.channels == RGBA
    alpha = bgra[:, :, 3] / 255.0
    expected_r = decode("srgb", bgra[:, :, 2] / 255.0) * alpha
    np.testing.assert_allclose(img.channel("R"), expected_r, rtol=0, atol=2e-7)
    np.testing.assert_allclose(img.channel("A"), alpha, rtol=0, atol=1e-7)
    assert img.pixels[0, 0, :3].tolist() == [0, 0, 0]

    write_raster(str(tmp_path / "b.png"), img)
    back = cv2.imread(str(tmp_path / "b.png"), cv2.IMREAD_UNCHANGED).astype(np.int64)
    np.testing.assert_array_equal(back[:, :, 3], bgra[:, :, 3])
    visible = bgra[:, :, 3] > 0
    diff = np.abs(back[:, :, :3] - bgra[:, :, :3].astype(np.int64))[visible]
    assert diff.max() <= 1  # measured 0
    assert back[0, 0, :3].tolist() == [0, 0, 0]  # colour under alpha 0 is lost (documented)


def test_grey_files_become_rgb(tmp_path):
    from PIL import Image as PILImage

    cv2.imwrite(str(tmp_path / "g.png"), np.arange(256, dtype=np.uint8).reshape(16, 16))
    img = read_raster(str(tmp_path / "g.png"))
    assert img.channels == ("R", "G", "B")
    np.testing.assert_array_equal(img.channel("R"), img.channel("G"))
    np.testing.assert_array_equal(img.channel("R"), img.channel("B"))
    la = np.zeros((4, 4, 2), np.uint8)
    la[..., 0], la[..., 1] = 200, 128
    PILImage.fromarray(la, "LA").save(tmp_path / "la.png")
    img = read_raster(str(tmp_path / "la.png"))
    assert img.channels == RGBA
    assert img.pixels[0, 0, 3] == pytest.approx(128 / 255)
    assert img.pixels[0, 0, 0] == pytest.approx(float(decode("srgb", 200 / 255)) * 128 / 255,
                                                 rel=1e-6)


def test_single_channel_written_grey(tmp_path):
    img = const_image(0.2158605, (3, 3), ("Y",))
    write_raster(str(tmp_path / "y.png"), img)
    back = cv2.imread(str(tmp_path / "y.png"), cv2.IMREAD_UNCHANGED)
    assert back.ndim == 2 and back[0, 0] == 128


def test_float_tiff_read_linear(tmp_path):
    rng = np.random.default_rng(6)
    f = (rng.standard_normal((8, 9, 3)) * 3).astype(np.float32)
    cv2.imwrite(str(tmp_path / "f.tif"), f)
    img = read_raster(str(tmp_path / "f.tif"))
    assert img.meta["raster.bit_depth"] == 32 and img.meta["raster.transfer"] == "linear"
    np.testing.assert_array_equal(img.pixels, f[:, :, ::-1])


def test_write_rounds_and_clips(tmp_path):
    img = Image(np.array([[[2.0, -1.0, np.nan]]], np.float32), ("R", "G", "B"))
    write_raster(str(tmp_path / "c.png"), img, transfer="linear")
    assert cv2.imread(str(tmp_path / "c.png"), cv2.IMREAD_UNCHANGED)[0, 0].tolist() == [0, 0, 255]
    img = const_image(100.4 / 255, (1, 1), ("R", "G", "B"))
    write_raster(str(tmp_path / "r.png"), img, transfer="linear")
    assert cv2.imread(str(tmp_path / "r.png"), cv2.IMREAD_UNCHANGED)[0, 0].tolist() == [100] * 3


def test_jpeg(tmp_path):
    rng = np.random.default_rng(7)
    smooth = cv2.GaussianBlur(rng.random((64, 64, 3)).astype(np.float32), (0, 0), 4)
    img = Image(smooth, ("R", "G", "B"))
    write_raster(str(tmp_path / "j.jpg"), img, quality=98)
    back = read_raster(str(tmp_path / "j.jpg"))
    assert back.size == img.size
    assert np.abs(back.pixels - img.pixels).mean() < 0.01  # lossy; measured 0.0036
    with pytest.raises(OpError) as info:
        write_raster(str(tmp_path / "k.jpg"), img, bit_depth=16)
    assert info.value.field == "bit_depth"
    rgba = const_image(1.0, (2, 2), RGBA)
    with pytest.raises(OpError, match="alpha"):
        write_raster(str(tmp_path / "a.jpg"), rgba)


def test_bad_files(tmp_path):
    rng = np.random.default_rng(8)
    cv2.imwrite(str(tmp_path / "ok.jpg"), _codes(rng, (64, 64, 3), 8))
    truncated_copy(tmp_path / "ok.jpg", tmp_path / "cut.jpg")
    with pytest.raises(OpError, match="truncated") as info:
        read_raster(str(tmp_path / "cut.jpg"))
    assert info.value.file == str(tmp_path / "cut.jpg")
    cv2.imwrite(str(tmp_path / "ok.png"), _codes(rng, (64, 64, 3), 8))
    truncated_copy(tmp_path / "ok.png", tmp_path / "cut.png")
    with pytest.raises(OpError) as info:
        read_raster(str(tmp_path / "cut.png"))
    assert info.value.file == str(tmp_path / "cut.png")
    (tmp_path / "junk.tif").write_bytes(b"not an image at all" * 10)
    with pytest.raises(OpError):
        read_raster(str(tmp_path / "junk.tif"))
    with pytest.raises(OpError, match="not found"):
        read_raster(str(tmp_path / "missing.png"))


def test_channel_selection_errors(tmp_path):
    img = const_image(0.0, (2, 2), ("fwd.x", "fwd.y"))
    with pytest.raises(OpError, match="fwd.x, fwd.y") as info:
        write_raster(str(tmp_path / "v.png"), img)
    assert info.value.field == "channels"
    with pytest.raises(OpError, match="two|2 channels"):
        write_raster(str(tmp_path / "v.png"), img, channels=["fwd.x", "fwd.y"])
    with pytest.raises(OpError, match="conf"):
        write_raster(str(tmp_path / "v.png"), img, channels=["conf"])
