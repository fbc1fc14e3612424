"""Transfer functions against IEC 61966-2-1 (sRGB) and ITU-R BT.709 (Rec.709 OETF)."""

import numpy as np
import pytest

from operators.io.transfer import (REC709_LINEAR_BREAK, REC709_SIGNAL_BREAK, SRGB_DECODE_BREAK,
                                   SRGB_ENCODE_BREAK, decode, encode)


# -- sRGB: IEC 61966-2-1 ------------------------------------------------------------------------------
def test_srgb_constants_are_the_standards():
    # IEC 61966-2-1, section 5.2: breakpoints 0.0031308 (linear) and 0.04045 (signal).
    assert SRGB_ENCODE_BREAK == 0.0031308
    assert SRGB_DECODE_BREAK == 0.04045


def test_srgb_8bit_code_128():
    # IEC 61966-2-1 formula ((V + 0.055) / 1.055) ** 2.4 at V = 128/255, evaluated by hand:
    # 0.2158605 (the commonly tabulated linear value of 8-bit code 128).
    assert float(decode("srgb", 128 / 255)) == pytest.approx(0.2158605, abs=5e-8)


def test_srgb_linear_segment():
    # IEC 61966-2-1: V = 12.92 L for L <= 0.0031308; L = V / 12.92 for V <= 0.04045.
    x = np.linspace(0.0, SRGB_ENCODE_BREAK, 50)
    np.testing.assert_allclose(encode("srgb", x), 12.92 * x, rtol=0, atol=1e-15)
    v = np.linspace(0.0, SRGB_DECODE_BREAK, 50)
    np.testing.assert_allclose(decode("srgb", v), v / 12.92, rtol=0, atol=1e-15)


def test_srgb_power_segment():
    # IEC 61966-2-1: V = 1.055 L ** (1/2.4) - 0.055 above the breakpoint.
    x = np.linspace(0.01, 1.0, 50)
    np.testing.assert_allclose(encode("srgb", x), 1.055 * x ** (1 / 2.4) - 0.055, rtol=1e-14)
    assert float(encode("srgb", 1.0)) == pytest.approx(1.0, abs=1e-15)
    assert float(decode("srgb", 1.0)) == pytest.approx(1.0, abs=1e-15)


def test_srgb_continuity_at_breakpoints():
    # IEC 61966-2-1 constants make the two segments meet to ~3e-8 (measured 2.9e-8 for the
    # encode side, 2.3e-9 for the decode side).
    eps = 1e-12
    enc = encode("srgb", np.array([SRGB_ENCODE_BREAK - eps, SRGB_ENCODE_BREAK + eps]))
    assert abs(enc[1] - enc[0]) < 5e-8
    dec = decode("srgb", np.array([SRGB_DECODE_BREAK - eps, SRGB_DECODE_BREAK + eps]))
    assert abs(dec[1] - dec[0]) < 5e-9


def test_srgb_matches_reference_library():
    # scikit-image's rgb2xyz / xyz2rgb apply the IEC 61966-2-1 curve before/after a matrix;
    # undo the matrix and compare with our decode/encode.
    from skimage.color import rgb2xyz, xyz2rgb
    from skimage.color.colorconv import xyz_from_rgb

    v = np.linspace(0.0, 1.0, 301)
    rgb = np.stack([v, np.roll(v, 100), np.roll(v, 200)], axis=-1)[None]
    ours = decode("srgb", rgb) @ xyz_from_rgb.T
    np.testing.assert_allclose(ours, rgb2xyz(rgb), rtol=0, atol=1e-12)
    back = xyz2rgb(ours)  # clips to 0..1, which our in-range values already are
    np.testing.assert_allclose(encode("srgb", decode("srgb", rgb)), back, rtol=0, atol=1e-9)


@pytest.mark.parametrize("bits", [8, 16])
def test_srgb_every_code_value_round_trips(bits):
    # Every integer code decoded to linear and re-encoded lands on the same code (IEC 61966-2-1
    # curve is strictly monotonic, so quantisation must invert exactly).
    top = 2 ** bits - 1
    codes = np.arange(top + 1)
    lin = decode("srgb", codes / top)
    back = np.rint(encode("srgb", lin) * top).astype(np.int64)
    np.testing.assert_array_equal(back, codes)


# -- Rec.709: ITU-R BT.709 ------------------------------------------------------------------------
def test_rec709_constants_are_the_recommendations():
    # ITU-R BT.709-6 item 1.2: V = 4.500 L for L < 0.018, V = 1.099 L**0.45 - 0.099 for L >= 0.018.
    assert REC709_LINEAR_BREAK == 0.018
    assert REC709_SIGNAL_BREAK == pytest.approx(0.081)


def test_rec709_segments():
    # ITU-R BT.709-6 item 1.2.
    low = np.linspace(0.0, 0.0179, 40)
    np.testing.assert_allclose(encode("rec709", low), 4.5 * low, rtol=0, atol=1e-15)
    high = np.linspace(0.018, 1.0, 40)
    np.testing.assert_allclose(encode("rec709", high), 1.099 * high ** 0.45 - 0.099, rtol=1e-14)
    assert float(encode("rec709", 1.0)) == pytest.approx(1.0, abs=1e-12)
    # 18 % grey: 1.099 * 0.18**0.45 - 0.099 = 0.40901 (BT.709 formula, evaluated by hand).
    assert float(encode("rec709", 0.18)) == pytest.approx(0.40901, abs=1e-5)


def test_rec709_breakpoint_step():
    # With BT.709's rounded constants the segments do not meet exactly: at L = 0.018 the linear
    # segment gives 0.081 and the power segment 0.0812479 (measured); the step is 2.48e-4,
    # about a quarter of one 10-bit code (1/1023 = 9.8e-4).
    eps = 1e-12
    below, at = encode("rec709", np.array([REC709_LINEAR_BREAK - eps, REC709_LINEAR_BREAK]))
    assert below == pytest.approx(0.081, abs=1e-9)
    assert at == pytest.approx(0.0812479440, abs=1e-9)
    assert 2.4e-4 < at - below < 2.5e-4


def test_rec709_inverse_round_trips_outside_the_step():
    v = np.linspace(0.0, 1.0, 2001)
    outside = (v < REC709_SIGNAL_BREAK) | (v >= 0.0812479441)
    back = encode("rec709", decode("rec709", v))
    np.testing.assert_allclose(back[outside], v[outside], rtol=0, atol=1e-12)
    # Inside the step (signals encode never produces) the error is bounded by its size.
    assert np.max(np.abs(back - v)) < 2.5e-4


# -- properties common to all three ----------------------------------------------------------------
@pytest.mark.parametrize("name", ["srgb", "rec709", "linear"])
def test_decode_inverts_encode_everywhere(name):
    # Out-of-range values are mapped sign-symmetrically, so the round trip holds beyond 0..1.
    x = np.concatenate([np.linspace(-3, 5, 4001), [0.0, 0.018, 0.0031308, 1.0]])
    np.testing.assert_allclose(decode(name, encode(name, x)), x, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("name", ["srgb", "rec709"])
def test_sign_symmetric_and_unclipped(name):
    x = np.linspace(0, 4, 101)
    np.testing.assert_array_equal(encode(name, -x), -encode(name, x))
    assert np.all(np.diff(encode(name, x)) > 0)  # monotonic, continues above 1
    assert float(encode(name, 4.0)) > 1.0


@pytest.mark.parametrize("name", ["srgb", "rec709", "linear"])
def test_dtype_and_nan(name):
    x = np.array([0.25, np.nan], dtype=np.float32)
    out = encode(name, x)
    assert out.dtype == np.float32 and out.shape == x.shape
    assert np.isnan(out[1])
    assert decode(name, x).dtype == np.float32


def test_unknown_name():
    with pytest.raises(ValueError, match="unknown transfer"):
        encode("gamma22", 0.5)
