"""Tests of ``matte-composite`` (operators/composite/porter_duff.py).

External source for the compositing checks: Porter, T. and Duff, T., "Compositing Digital
Images", SIGGRAPH 1984 (below: "Porter & Duff 1984"). Their table gives, per operation, the
fractions Fa, Fb with result = Fa*A + Fb*B for premultiplied colour and alpha alike; their
derivation splits a pixel into four subpixel regions (neither, A only, B only, both) under the
assumption that the two coverages are uncorrelated (overlap area = aA * aB).
"""

from __future__ import annotations

import numpy as np
import pydantic
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from graphcore.errors import OpError
from graphcore.image import Image
from operators.composite.porter_duff import MATTE_COMPOSITE, MatteCompositeParams
from tests.operators.conftest import RGBA, const_image, op_runner, premultiply_rgba

TWO_INPUT = ("over", "in", "out", "atop", "xor", "plus")

# Porter & Duff 1984, table of area fractions (written out here independently of the module).
PAPER_TABLE = {
    "over": (lambda aA, aB: 1.0, lambda aA, aB: 1.0 - aA),
    "in": (lambda aA, aB: aB, lambda aA, aB: 0.0),
    "out": (lambda aA, aB: 1.0 - aB, lambda aA, aB: 0.0),
    "atop": (lambda aA, aB: aB, lambda aA, aB: 1.0 - aA),
    "xor": (lambda aA, aB: 1.0 - aB, lambda aA, aB: 1.0 - aA),
    "plus": (lambda aA, aB: 1.0, lambda aA, aB: 1.0),
}

# Porter & Duff 1984, region diagram: which input each operation keeps in the regions
# "A only" and "B only" and "both" (the region covered by neither is always clear).
PAPER_REGIONS = {
    "over": {"A": "A", "B": "B", "AB": "A"},
    "in": {"A": None, "B": None, "AB": "A"},
    "out": {"A": "A", "B": None, "AB": None},
    "atop": {"A": None, "B": "B", "AB": "A"},
    "xor": {"A": "A", "B": "B", "AB": None},
}


run = op_runner(MATTE_COMPOSITE)


def random_rgba(rng, shape=(16, 24), hdr=1.5):
    """Premultiplied RGBA: straight colour in 0..hdr, alpha in 0..1 with exact 0s and 1s."""
    alpha = rng.random(shape).astype(np.float32)
    alpha.flat[::7] = 0.0
    alpha.flat[3::7] = 1.0
    straight = (rng.random((*shape, 3)) * hdr).astype(np.float32)
    return premultiply_rgba(np.dstack([straight, alpha]))


@pytest.mark.parametrize("operation", TWO_INPUT)
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_matches_paper_table(operation, seed):
    # Source: Porter & Duff 1984, table of Fa/Fb; result = Fa*A + Fb*B for colour and alpha.
    rng = np.random.default_rng(seed)
    a, b = random_rgba(rng), random_rgba(rng)
    out = run({"a": a, "b": b}, operation=operation, clamp_alpha=False)
    assert out.channels == RGBA
    aA = a.pixels[..., 3:4].astype(np.float64)
    aB = b.pixels[..., 3:4].astype(np.float64)
    fa_fn, fb_fn = PAPER_TABLE[operation]
    expected = fa_fn(aA, aB) * a.pixels + fb_fn(aA, aB) * b.pixels
    np.testing.assert_allclose(out.pixels, expected, rtol=1e-6, atol=1e-6)


@pytest.mark.parametrize("operation", list(PAPER_REGIONS) + ["plus"])
def test_matches_subpixel_region_model(operation):
    # Source: Porter & Duff 1984, the four subpixel regions. A covers the first i of n columns
    # of an n x n subpixel grid and B the first j rows, so the overlap is exactly aA * aB (the
    # paper's uncorrelated-coverage assumption). Supersampling the region rule must equal the
    # per-pixel operator on premultiplied values.
    n = 8
    cA = np.array([0.9, 0.2, 1.7])   # straight colours (invented; 1.7 is HDR)
    cB = np.array([0.1, 0.6, 0.3])
    cols, rows = np.meshgrid(np.arange(n), np.arange(n))
    a_px, b_px, expected = [], [], []
    for i in range(n + 1):
        row_a, row_b, row_e = [], [], []
        for j in range(n + 1):
            in_a, in_b = cols < i, rows < j
            region = {"A": in_a & ~in_b, "B": in_b & ~in_a, "AB": in_a & in_b}
            colour = np.zeros(3)
            cover = 0.0
            if operation == "plus":
                colour = (cA * in_a.sum() + cB * in_b.sum()) / n**2
                cover = (in_a.sum() + in_b.sum()) / n**2
            else:
                for name, mask in region.items():
                    src = PAPER_REGIONS[operation][name]
                    if src is not None:
                        colour = colour + (cA if src == "A" else cB) * mask.sum() / n**2
                        cover += mask.sum() / n**2
            aA, aB = i / n, j / n
            row_a.append([*(cA * aA), aA])
            row_b.append([*(cB * aB), aB])
            row_e.append([*colour, cover])
        a_px.append(row_a)
        b_px.append(row_b)
        expected.append(row_e)
    a = Image(np.array(a_px, np.float32), RGBA)
    b = Image(np.array(b_px, np.float32), RGBA)
    out = run({"a": a, "b": b}, operation=operation, clamp_alpha=False)
    np.testing.assert_allclose(out.pixels, np.array(expected), rtol=1e-6, atol=1e-6)


def test_over_known_answer():
    # Hand computation with Porter & Duff 1984 'over': 0.4 + (1 - 0.5) * 0.2 = 0.5.
    a = Image(np.array([[[0.4, 0.0, 0.25, 0.5]]], np.float32), RGBA)
    b = Image(np.array([[[0.2, 1.0, 0.0, 1.0]]], np.float32), RGBA)
    out = run({"a": a, "b": b}, operation="over")
    np.testing.assert_allclose(out.pixels[0, 0], [0.5, 0.5, 0.25, 1.0], rtol=1e-7)


# -- exact invariants (Porter & Duff 1984) -----------------------------------------------------

rgba_arrays = hnp.arrays(np.float32, (3, 4, 4),
                         elements=st.floats(0.0, 1.0, width=32, allow_nan=False))


@settings(max_examples=40, deadline=None)
@given(rgba_arrays)
def test_over_transparent_is_identity(px):
    a = premultiply_rgba(px)
    clear = const_image(0.0, px.shape[:2])
    assert np.array_equal(run({"a": a, "b": clear}).pixels, a.pixels)
    assert np.array_equal(run({"a": a}).pixels, a.pixels)  # unconnected b is clear


@settings(max_examples=40, deadline=None)
@given(rgba_arrays, rgba_arrays)
def test_opaque_over_anything_is_a(pa, pb):
    pa = pa.copy()
    pa[..., 3] = 1.0
    a, b = premultiply_rgba(pa), premultiply_rgba(pb)
    assert np.array_equal(run({"a": a, "b": b}).pixels, a.pixels)


@settings(max_examples=40, deadline=None)
@given(rgba_arrays, rgba_arrays)
def test_plus_commutes_and_xor_is_symmetric(pa, pb):
    a, b = premultiply_rgba(pa), premultiply_rgba(pb)
    for op in ("plus", "xor"):
        assert np.array_equal(run({"a": a, "b": b}, operation=op).pixels,
                              run({"a": b, "b": a}, operation=op).pixels)


@settings(max_examples=40, deadline=None)
@given(rgba_arrays, rgba_arrays)
def test_alpha_of_over(pa, pb):
    # Porter & Duff 1984: alpha of A over B = aA + aB - aA*aB.
    a, b = premultiply_rgba(pa), premultiply_rgba(pb)
    aA, aB = pa[..., 3].astype(np.float64), pb[..., 3].astype(np.float64)
    out = run({"a": a, "b": b})
    np.testing.assert_allclose(out.channel("A"), aA + aB - aA * aB, atol=2e-7)


def test_plus_clamps_alpha_but_not_colour():
    a = const_image(0.8, (2, 2))
    out = run({"a": a, "b": a}, operation="plus")
    np.testing.assert_allclose(out.channel("A"), 1.0)
    np.testing.assert_allclose(out.channel("R"), 1.6, rtol=1e-6)
    raw = run({"a": a, "b": a}, operation="plus", clamp_alpha=False)
    np.testing.assert_allclose(raw.channel("A"), 1.6, rtol=1e-6)


# -- premultiply / unpremultiply ---------------------------------------------------------------

def test_premultiply_unpremultiply_round_trip():
    rng = np.random.default_rng(5)
    straight = rng.random((8, 8, 3)).astype(np.float32) * 2
    alpha = rng.uniform(0.05, 1.0, (8, 8)).astype(np.float32)
    img = Image(np.dstack([straight, alpha]), RGBA)
    pre = run({"a": img}, operation="premultiply")
    np.testing.assert_allclose(pre.pixels[..., :3], straight * alpha[..., None], rtol=1e-6)
    np.testing.assert_array_equal(pre.channel("A"), alpha)
    back = run({"a": pre}, operation="unpremultiply")
    np.testing.assert_allclose(back.pixels[..., :3], straight, rtol=1e-5)
    again = run({"a": back}, operation="premultiply")
    np.testing.assert_allclose(again.pixels, pre.pixels, rtol=1e-5, atol=1e-7)


def test_unpremultiply_leaves_colour_where_alpha_is_zero():
    px = np.array([[[0.3, 0.2, 0.1, 0.0], [0.25, 0.5, 0.0, 0.5]]], np.float32)
    out = run({"a": Image(px, RGBA)}, operation="unpremultiply")
    np.testing.assert_array_equal(out.pixels[0, 0], px[0, 0])  # documented choice: unchanged
    np.testing.assert_allclose(out.pixels[0, 1], [0.5, 1.0, 0.0, 0.5])


def test_premultiply_by_separate_matte_sets_alpha():
    plate = const_image(0.8, (3, 3), ("R", "G", "B"))
    m = np.linspace(0, 1, 9, dtype=np.float32).reshape(3, 3)
    out = run({"a": plate, "matte": Image(m, ("mask",))}, operation="premultiply")
    assert out.channels == RGBA
    np.testing.assert_allclose(out.channel("G"), 0.8 * m, rtol=1e-6)
    np.testing.assert_array_equal(out.channel("A"), m)


def test_one_input_operations_refuse_b():
    img = const_image(0.0, (2, 2))
    for op in ("premultiply", "unpremultiply"):
        with pytest.raises(OpError) as err:
            run({"a": img, "b": img}, operation=op)
        assert err.value.field == "b"


def test_premultiply_without_alpha_warns_and_passes_colour():
    warnings = []
    img = const_image(0.3, (2, 2), ("R", "G", "B"))
    out = run({"a": img}, warnings=warnings, operation="premultiply")
    assert len(warnings) == 1 and "no A channel" in warnings[0]
    np.testing.assert_array_equal(out.pixels[..., :3], img.pixels)
    np.testing.assert_array_equal(out.channel("A"), 1.0)


# -- separate matte ----------------------------------------------------------------------------

def test_separate_matte_over_background():
    # Straight plate colour P, matte m over premultiplied background B: m*P + (1-m)*B
    # (Porter & Duff 1984 'over' with A = m*P, aA = m).
    rng = np.random.default_rng(3)
    plate = rng.random((6, 7, 3)).astype(np.float32)
    m = rng.random((6, 7)).astype(np.float32)
    bg = random_rgba(rng, (6, 7))
    out = run({"a": Image(plate, ("R", "G", "B")), "b": bg, "matte": Image(m, ("Y",))})
    expected_rgb = m[..., None] * plate + (1 - m[..., None]) * bg.pixels[..., :3]
    expected_a = m + (1 - m) * bg.channel("A")
    np.testing.assert_allclose(out.pixels[..., :3], expected_rgb, rtol=1e-6, atol=1e-7)
    np.testing.assert_allclose(out.channel("A"), expected_a, rtol=1e-6, atol=1e-7)

    # Already premultiplied by the matte: colour used as it is.
    pre = Image(plate * m[..., None], ("R", "G", "B"))
    out2 = run({"a": pre, "b": bg, "matte": Image(m, ("Y",))}, a_premultiplied=True)
    np.testing.assert_allclose(out2.pixels, out.pixels, rtol=1e-6, atol=1e-7)


def test_matte_uses_its_a_channel_and_replaces_a_alpha():
    a = const_image([0.5, 0.5, 0.5, 1.0], (2, 2))
    matte = const_image([0.9, 0.25], (2, 2), ("R", "A"))
    out = run({"a": a, "matte": matte})
    np.testing.assert_allclose(out.channel("A"), 0.25)
    np.testing.assert_allclose(out.channel("R"), 0.125)


def test_matte_with_several_channels_and_no_a_is_an_error():
    a = const_image(0.0, (2, 2), ("R", "G", "B"))
    with pytest.raises(OpError) as err:
        run({"a": a, "matte": const_image(0.0, (2, 2), ("R", "G"))})
    assert err.value.field == "matte"
    assert "R, G" in str(err.value) and err.value.fix


def test_matte_out_of_range_is_clipped_with_one_warning():
    warnings = []
    a = const_image(1.0, (2, 2), ("R", "G", "B"))
    m = np.array([[-0.5, 0.5], [1.5, 1.0]], np.float32)
    out = run({"a": a, "matte": Image(m, ("A",))}, warnings=warnings)
    assert len(warnings) == 1 and "clipped" in warnings[0]
    np.testing.assert_array_equal(out.channel("A"), [[0.0, 0.5], [1.0, 1.0]])


# -- channels and sizes ------------------------------------------------------------------------

def test_channel_union_order_missing_colour_and_opaque_default():
    a = const_image([0.5, 3.0], (2, 2), ("G", "fwd.x"))  # no A: opaque
    b = const_image([0.25, 0.7, 7.0, 0.5], (2, 2), ("R", "conf", "fwd.x", "A"))
    out = run({"a": a, "b": b}, operation="atop")
    assert out.channels == ("R", "G", "A", "fwd.x", "conf")
    # atop: Fa = aB = 0.5, Fb = 1 - aA = 0. R missing on a counts 0; G missing on b counts 0.
    np.testing.assert_allclose(out.channel("R"), 0.0)
    np.testing.assert_allclose(out.channel("G"), 0.25)
    np.testing.assert_allclose(out.channel("A"), 0.5)
    np.testing.assert_array_equal(out.channel("fwd.x"), 3.0)   # from a, not scaled
    np.testing.assert_array_equal(out.channel("conf"), b.channel("conf"))  # only b has it


@pytest.mark.parametrize("port", ["b", "matte"])
def test_size_mismatch_names_sizes_and_suggests_resize(port):
    a = const_image(0.0, (4, 6))
    other = const_image(0.0, (5, 6))
    with pytest.raises(OpError) as err:
        run({"a": a, port: other})
    assert err.value.field == port
    assert "6x4" in str(err.value) and "6x5" in str(err.value)
    assert "resize" in err.value.fix


def test_meta_comes_from_a():
    a = const_image(0.0, (2, 2), meta={"source.path": "fg.exr"})
    b = const_image(0.0, (2, 2), meta={"source.path": "bg.exr"})
    assert run({"a": a, "b": b}).meta["source.path"] == "fg.exr"


def test_params_model_rejects_unknown_fields_and_operations():
    with pytest.raises(pydantic.ValidationError):
        MatteCompositeParams(operation="multiply")
    with pytest.raises(pydantic.ValidationError):
        MatteCompositeParams(mode="over")
    assert MATTE_COMPOSITE.name == "matte-composite" and MATTE_COMPOSITE.version == 1
    assert MATTE_COMPOSITE.doc and MATTE_COMPOSITE.summary and MATTE_COMPOSITE.outputs
