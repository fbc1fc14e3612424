"""Tests of ``blend`` (operators/composite/blend.py).

Known answers on invented constant images; the time cross-dissolve is the frame-interpolation
baseline of Baker et al., "A Database and Evaluation Methodology for Optical Flow", IJCV 2011:
the in-between at fraction t is (1 - t) * I0 + t * I1.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pydantic
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.sample import Sample
from operators.composite.blend import BLEND, BlendParams, blend_needs
from tests.conftest import noise_image
from tests.operators.conftest import const_image, op_runner, run_op

run = op_runner(BLEND)


def test_equal_weights_average():
    out = run({"a": const_image(1.0), "b": const_image(3.0), "c": const_image(5.0)})
    np.testing.assert_allclose(out.pixels, 3.0, rtol=1e-7)


@pytest.mark.parametrize("normalize, expected", [(True, 3.0), (False, 12.0)])
def test_weights_known_answer(normalize, expected):
    # (1*1 + 2*3 + 1*5) = 12; / (1 + 2 + 1) = 3.
    out = run({"a": const_image(1.0), "b": const_image(3.0), "c": const_image(5.0)},
              weights=[1, 2, 1], normalize=normalize)
    np.testing.assert_allclose(out.pixels, expected, rtol=1e-7)


def test_weights_skip_unconnected_ports():
    # a and c connected: weights (1, 3) -> (1*1 + 3*5) / 4 = 4.
    out = run({"a": const_image(1.0), "c": const_image(5.0)}, weights=[1, 3])
    np.testing.assert_allclose(out.pixels, 4.0, rtol=1e-7)


def test_single_input_passes_through_exactly():
    a = noise_image(5, 6, seed=0)
    assert np.array_equal(run({"a": a}).pixels, a.pixels)


def test_cross_dissolve_mix():
    a, b = noise_image(5, 6, seed=1), noise_image(5, 6, seed=2)
    out = run({"a": a, "b": b}, mix=0.25)
    np.testing.assert_allclose(out.pixels, 0.75 * a.pixels + 0.25 * b.pixels, rtol=1e-6, atol=1e-7)
    assert np.array_equal(run({"a": a, "b": b}, mix=0.0).pixels, a.pixels)
    assert np.array_equal(run({"a": a, "b": b}, mix=1.0).pixels, b.pixels)


def test_channel_order_may_differ():
    a = const_image([1.0, 2.0], (2, 2), ("R", "A"))
    b = const_image([4.0, 3.0], (2, 2), ("A", "R"))
    out = run({"a": a, "b": b})
    assert out.channels == ("R", "A")
    np.testing.assert_allclose(out.channel("R"), 2.0)
    np.testing.assert_allclose(out.channel("A"), 3.0)


# -- bad input ---------------------------------------------------------------------------------

def test_mix_needs_exactly_a_and_b():
    with pytest.raises(OpError) as err:
        run({"a": const_image(1.0), "b": const_image(2.0), "c": const_image(3.0)}, mix=0.5)
    assert err.value.field == "mix" and err.value.fix
    with pytest.raises(OpError):
        run({"a": const_image(1.0)}, mix=0.5)


def test_mix_and_weights_together_are_refused():
    with pytest.raises(pydantic.ValidationError):
        BlendParams(mix=0.5, weights=[1, 1])


def test_zero_weight_sum_with_normalize_is_refused():
    with pytest.raises(pydantic.ValidationError):
        BlendParams(weights=[1, -1])
    BlendParams(weights=[1, -1], normalize=False)  # allowed without normalize


def test_wrong_number_of_weights():
    with pytest.raises(OpError) as err:
        run({"a": const_image(1.0), "b": const_image(2.0)}, weights=[1, 2, 3])
    assert err.value.field == "weights"
    assert "3 weights" in str(err.value) and "2 connected" in str(err.value)


def test_channel_mismatch_names_ports_and_channels():
    with pytest.raises(OpError) as err:
        run({"a": const_image(1.0), "b": const_image(1.0, channels=("R", "G", "B"))})
    assert err.value.field == "b"
    text = str(err.value)
    assert "'a'" in text and "'b'" in text and "R, G, B, A" in text and "only in 'a': A" in text


def test_size_mismatch_suggests_resize():
    with pytest.raises(OpError) as err:
        run({"a": const_image(1.0, (3, 4)), "b": const_image(1.0, (6, 8))})
    assert err.value.field == "b" and "resize" in err.value.fix
    assert "4x3" in str(err.value) and "8x6" in str(err.value)


# -- time-dissolve -----------------------------------------------------------------------------

def td(**kw):
    return BlendParams(mode="time-dissolve", **kw)


def test_needs_mix_mode_is_default():
    assert blend_needs(BlendParams(), Sample(Fraction(7, 2))) is None


@pytest.mark.parametrize("frame, lo, hi", [
    (Fraction(37, 3), 12, 13),        # 12 1/3
    (Fraction(-1, 2), -1, 0),
    (Fraction(1001 * 1001 + 500, 1001), 1001, 1002),
])
def test_needs_fractional_frame_asks_floor_and_ceil_same_view(frame, lo, hi):
    need = blend_needs(td(), Sample(frame, Fraction(3, 2)))
    assert need == {"a": (Sample(lo, Fraction(3, 2)), Sample(hi, Fraction(3, 2)))}


def test_needs_integer_frame_asks_only_that_frame():
    s = Sample(1001, 2)
    assert blend_needs(td(), s) == {"a": (s,)}


def test_time_dissolve_integer_frame_is_bit_for_bit():
    rng = np.random.default_rng(2)
    a = Image(rng.standard_normal((4, 5, 6)).astype(np.float32),
              ("R", "G", "B", "A", "fwd.x", "fwd.y"), {"source.frame": 1001})
    out = run_op(BLEND, td(), {"a": (a,)}, sample=Sample(1001))
    assert np.array_equal(out.pixels, a.pixels) and out.channels == a.channels
    assert out.meta["source.frame"] == 1001


@pytest.mark.parametrize("t", [Fraction(1, 3), Fraction(1, 2), Fraction(999, 1000)])
def test_time_dissolve_fraction_is_weighted_mix(t):
    # Baker et al. 2011 cross-dissolve baseline: (1 - t) * I0 + t * I1.
    i0, i1 = noise_image(4, 5, seed=3), noise_image(4, 5, seed=4)
    out = run_op(BLEND, td(), {"a": (i0, i1)}, sample=Sample(12 + t))
    expected = (1 - float(t)) * i0.pixels.astype(np.float64) + float(t) * i1.pixels
    np.testing.assert_allclose(out.pixels, expected, rtol=1e-6, atol=1e-7)


def test_time_dissolve_refuses_other_inputs_and_mix_params():
    with pytest.raises(OpError) as err:
        run_op(BLEND, td(), {"a": (const_image(1.0),), "b": const_image(1.0)})
    assert err.value.field == "b"
    with pytest.raises(pydantic.ValidationError):
        td(mix=0.5)


def test_time_dissolve_frames_of_different_size():
    with pytest.raises(OpError) as err:
        run_op(BLEND, td(), {"a": (const_image(1.0, (3, 4)), const_image(1.0, (4, 4)))},
               sample=Sample(Fraction(1, 2)))
    assert "resize" in err.value.fix


def test_declaration():
    assert BLEND.name == "blend" and BLEND.version == 1
    assert [p.name for p in BLEND.inputs] == ["a", "b", "c", "d"]
    assert [p.optional for p in BLEND.inputs] == [False, True, True, True]
    assert BLEND.needs is blend_needs and BLEND.doc and BLEND.outputs


# -- inbetween (two warped neighbours, weighted by time and visibility) ------------------------------
# Baker et al., IJCV 2011 (frame interpolation): the warped frames are weighted (1 - t) and t, each
# only where it sees the pixel; known answers on invented constant images.

VIS = "inbetween.vis"


def ib(**kw):
    return BlendParams(mode="inbetween", **kw)


def warped(value, vis, shape=(3, 4)):
    """An RGBA image of ``value`` with an inbetween.vis channel of ``vis`` (number or plane)."""
    px = np.empty((*shape, 5), np.float32)
    px[..., :4] = value
    px[..., 4] = vis
    return Image(px, ("R", "G", "B", "A", VIS))


def test_inbetween_needs():
    assert blend_needs(ib(), Sample(1001)) == {"a": Sample(1001)}
    s = Sample(Fraction(5, 2))
    assert blend_needs(ib(), s) == {"a": s, "b": s}
    assert blend_needs(ib(axis="view"), Sample(Fraction(5, 2), 3)) == {"a": Sample(Fraction(5, 2), 3)}


@pytest.mark.parametrize("t", [Fraction(1, 4), Fraction(1, 2), Fraction(9, 10)])
def test_inbetween_weights_by_time_where_both_see(t):
    out = run_op(BLEND, ib(), {"a": warped(1.0, 1.0), "b": warped(3.0, 1.0)}, sample=Sample(7 + t))
    assert out.channels == ("R", "G", "B", "A")          # vis dropped
    np.testing.assert_allclose(out.pixels, (1 - float(t)) * 1.0 + float(t) * 3.0, rtol=1e-6)


def test_inbetween_weights_by_visibility():
    # t = 1/4: weights 3/4 * 0.5 and 1/4 * 1 -> (0.375 * 1 + 0.25 * 3) / 0.625 = 1.8
    vis_a = np.array([[0.5, 0.0, 1.0, 0.6]] * 3, np.float32)
    vis_b = np.array([[1.0, 1.0, 0.0, 0.6]] * 3, np.float32)
    out = run_op(BLEND, ib(), {"a": warped(1.0, vis_a), "b": warped(3.0, vis_b)},
                 sample=Sample(Fraction(1, 4)))
    np.testing.assert_allclose(out.channel("R")[0], [1.8, 3.0, 1.0, 1.5], rtol=1e-6)


@pytest.mark.parametrize("fallback, expected", [("dissolve", 1.5), ("nearest", 1.0)])
def test_inbetween_falls_back_where_neither_side_sees_and_reports_the_share(fallback, expected):
    vis = np.ones((3, 4), np.float32)
    vis[0, :2] = 0.0                         # 2 of 12 pixels seen by neither side
    warnings: list[str] = []
    out = run_op(BLEND, ib(fallback=fallback), {"a": warped(1.0, vis), "b": warped(3.0, vis)},
                 sample=Sample(Fraction(1, 4)), warnings=warnings)
    np.testing.assert_allclose(out.channel("R")[0, :2], expected, rtol=1e-6)
    np.testing.assert_allclose(out.channel("R")[1:], 1.5, rtol=1e-6)
    assert out.meta["inbetween.fallback_share"] == pytest.approx(2 / 12)
    assert len(warnings) == 1 and "16.67 %" in warnings[0] and fallback in warnings[0]


def test_inbetween_share_leaves_out_pixels_transparent_on_both_sides():
    # A matted foreground: outside it both sides are transparent black (A = 0) and poorly seen;
    # the fallback changes nothing there, so those pixels are not reported.
    vis = np.ones((3, 4), np.float32)
    vis[0, :2] = 0.0
    vis[2, :] = 0.0                           # row 2: transparent on both sides
    a, b = (warped(v, vis).pixels.copy() for v in (1.0, 3.0))
    a[2, :, :4] = b[2, :, :4] = 0.0
    a, b = (Image(px, ("R", "G", "B", "A", VIS)) for px in (a, b))
    out = run_op(BLEND, ib(), {"a": a, "b": b}, sample=Sample(Fraction(1, 4)), warnings=[])
    assert out.meta["inbetween.fallback_share"] == pytest.approx(2 / 12)
    np.testing.assert_array_equal(out.pixels[2], 0.0)


def test_inbetween_fades_to_the_fallback_below_the_threshold():
    # max vis 0.1 with threshold 0.4: a quarter of the seen mix, three quarters of the fallback
    out = run_op(BLEND, ib(threshold=0.4), {"a": warped(1.0, 0.1), "b": warped(3.0, 0.0)},
                 sample=Sample(Fraction(1, 2)))
    np.testing.assert_allclose(out.pixels, 0.25 * 1.0 + 0.75 * 2.0, rtol=1e-6)


def test_inbetween_integer_sample_passes_a_bit_for_bit():
    a = warped(1.0, 0.3)
    out = run_op(BLEND, ib(), {"a": a}, sample=Sample(12))
    assert out is a


def test_inbetween_bad_input():
    with pytest.raises(OpError) as err:
        run_op(BLEND, ib(), {"a": warped(1.0, 1.0), "b": const_image(1.0)}, sample=Sample(Fraction(1, 2)))
    assert err.value.field == "b" and "warp" in err.value.fix
    with pytest.raises(OpError) as err:
        run_op(BLEND, ib(), {"a": warped(1.0, 1.0)}, sample=Sample(Fraction(1, 2)))
    assert err.value.field == "b"
    assert [p.field for p in BLEND.check_links(ib(), frozenset({"a"}))] == ["b"]
    assert [p.field for p in BLEND.check_links(ib(), frozenset({"a", "b", "c"}))] == ["c"]
    with pytest.raises(pydantic.ValidationError):
        ib(mix=0.5)
    with pytest.raises(pydantic.ValidationError):
        ib(threshold=0)


def test_frame_fallback_needs_the_real_frames_too():
    s = Sample(Fraction(5, 2))
    assert blend_needs(ib(frame_fallback=0.3), s) == {"a": (s, Sample(2)), "b": (s, Sample(3))}
    assert blend_needs(ib(frame_fallback=0.3), Sample(2)) == {"a": Sample(2)}
    v = Sample(4, Fraction(7, 3))
    assert blend_needs(ib(frame_fallback=0.3, axis="view"), v) == {"a": (v, Sample(4, 2)), "b": (v, Sample(4, 3))}


def _real(value):
    return Image(np.full((3, 4, 4), value, np.float32), ("R", "G", "B", "A"))


@pytest.mark.parametrize("fallback", ["dissolve", "nearest"])
def test_frame_fallback_makes_the_whole_frame_from_the_real_frames(fallback):
    # 4 of 12 pixels seen by neither side: above a frame_fallback of 0.25, so the whole frame is
    # the dissolve (1 - t) * 10 + t * 30 of the real frames, or a hold of the nearer (t = 1/4: the previous)
    vis = np.ones((3, 4), np.float32)
    vis[0, :] = 0.0
    warnings: list[str] = []
    prev, nxt = _real(10.0), _real(30.0)
    out = run_op(BLEND, ib(fallback=fallback, frame_fallback=0.25),
                 {"a": (warped(2.0, vis), prev), "b": (warped(2.05, vis), nxt)}, sample=Sample(Fraction(1, 4)),
                 warnings=warnings)
    assert out.channels == ("R", "G", "B", "A")
    if fallback == "dissolve":
        np.testing.assert_allclose(out.pixels, 0.75 * 10.0 + 0.25 * 30.0, rtol=1e-6)
    else:
        np.testing.assert_array_equal(out.pixels, prev.pixels)          # a hold: bit for bit
    assert out.meta["inbetween.fallback"] == "frame"
    assert len(warnings) == 1 and "whole frame" in warnings[0] and "33.3 %" in warnings[0]


def test_frame_fallback_below_its_share_changes_nothing():
    vis = np.ones((3, 4), np.float32)
    vis[0, :2] = 0.0                         # 2 of 12: below 0.25
    a, b = warped(2.0, vis), warped(2.05, vis)   # the sides agree within mismatch (0.1)
    plain = run_op(BLEND, ib(), {"a": a, "b": b}, sample=Sample(Fraction(1, 4)), warnings=[])
    guarded = run_op(BLEND, ib(frame_fallback=0.25), {"a": (a, _real(10.0)), "b": (b, _real(30.0))},
                     sample=Sample(Fraction(1, 4)), warnings=[])
    np.testing.assert_array_equal(guarded.pixels, plain.pixels)
    assert "inbetween.fallback" not in guarded.meta


def test_frame_fallback_counts_pixels_where_the_sides_tell_different_stories():
    # every pixel seen from both sides, but 6 of 12 differ by 0.5 (> mismatch 0.1): above 0.25
    a, b = warped(2.0, 1.0), warped(2.0, 1.0).pixels.copy()
    b[:, :2, :3] = 2.5
    b = Image(b, a.channels)
    warnings: list[str] = []
    out = run_op(BLEND, ib(frame_fallback=0.25), {"a": (a, _real(10.0)), "b": (b, _real(30.0))},
                 sample=Sample(Fraction(1, 2)), warnings=warnings)
    np.testing.assert_allclose(out.pixels, 20.0, rtol=1e-6)
    assert "50.0 %" in warnings[0]
    loose = run_op(BLEND, ib(frame_fallback=0.25, mismatch=0.6), {"a": (a, _real(10.0)), "b": (b, _real(30.0))},
                   sample=Sample(Fraction(1, 2)), warnings=[])
    assert "inbetween.fallback" not in loose.meta
