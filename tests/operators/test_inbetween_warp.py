"""Tests of ``warp`` (operators/inbetween/warp.py) and of ``blend`` mode ``inbetween`` with it.

Known answers: a textured layer moving over a moving textured background, built here with numpy
from analytic textures, so the true in-between is exact at any time, including the background it
uncovers. The vectors fed in are the exact ones, to test warp and blend apart from any estimator.
The method is Baker et al.'s frame interpolation (IJCV 92(1), 2011: splat the vectors to time t,
fill holes, warp both frames and weigh them by time and occlusion) with softmax splatting
(Niklaus & Liu, CVPR 2020); the baseline it must beat is their cross-dissolve
(1 - t) I0 + t I1.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.sample import Sample
from operators.composite.blend import BLEND, BlendParams
from operators.inbetween.warp import OCCLUDED_RELIABILITY, VIS, WARP, WarpParams, warp_needs
from operators.vectors.channels import FWD, BWD, SMOOTHED
from operators.vectors.consistency import fb_consistency
from tests.conftest import noise_image
from tests.operators.conftest import run_op

# -- the scene: an invented known-answer case ----------------------------------------------------
H, W, SIZE = 48, 64, 16
LAYER_AT_0 = (20, 14)   # top-left (x, y) of the layer at time 0, px
LAYER_MOVE = (8, 4)     # layer motion per frame, px
BG_MOVE = (-4, 0)       # background motion per frame, px (a pan)
CHANNELS = ("R", "G", "B", "A", "extra.depth", "extra.u")
VECTOR_NAMES = FWD + BWD


def _bg(u, v):
    return np.stack([0.45 + 0.2 * np.sin(0.7 * u + 0.3 * v) + 0.1 * np.cos(0.23 * v - 0.51 * u),
                     0.40 + 0.2 * np.cos(0.55 * u - 0.4 * v),
                     0.35 + 0.15 * np.sin(0.9 * v + 0.2 * u) + 0.1 * np.sin(1.3 * u)], -1)


def _layer(u, v):
    return np.stack([0.8 + 0.15 * np.sin(1.1 * u) * np.cos(0.9 * v),
                     0.2 + 0.15 * np.cos(0.8 * u + 1.2 * v),
                     0.1 + 0.08 * np.sin(1.7 * v)], -1)


def _inside(t, y, x):
    px, py = LAYER_AT_0[0] + LAYER_MOVE[0] * t, LAYER_AT_0[1] + LAYER_MOVE[1] * t
    return (x >= px) & (x < px + SIZE) & (y >= py) & (y < py + SIZE)


def render(t) -> Image:
    """The exact picture at time ``t`` (frames; pixel centres at integer x, y): R G B, A = 1,
    ``extra.depth`` (2 on the layer, 10 behind) and ``extra.u`` (a texture coordinate)."""
    t = float(t)
    y, x = np.mgrid[0:H, 0:W].astype(np.float64)
    px, py = LAYER_AT_0[0] + LAYER_MOVE[0] * t, LAYER_AT_0[1] + LAYER_MOVE[1] * t
    m = _inside(t, y, x)
    rgb = np.where(m[..., None], _layer(x - px, y - py), _bg(x - BG_MOVE[0] * t, y - BG_MOVE[1] * t))
    depth = np.where(m, 2.0, 10.0)
    u = np.where(m, x - px, x - BG_MOVE[0] * t) * 0.01
    return Image(np.concatenate([rgb, np.ones((H, W, 1)), depth[..., None], u[..., None]], -1), CHANNELS)


def exact_vectors() -> tuple[Image, Image]:
    """The true vectors at frame 0 (fwd, toward 1) and at frame 1 (bwd, toward 0); unused
    directions are 0."""
    y, x = np.mgrid[0:H, 0:W]
    m0, m1 = _inside(0, y, x), _inside(1, y, x)
    v0 = np.zeros((H, W, 4), np.float32)
    v0[..., 0], v0[..., 1] = np.where(m0, LAYER_MOVE[0], BG_MOVE[0]), np.where(m0, LAYER_MOVE[1], BG_MOVE[1])
    v1 = np.zeros((H, W, 4), np.float32)
    v1[..., 2], v1[..., 3] = np.where(m1, -LAYER_MOVE[0], -BG_MOVE[0]), np.where(m1, -LAYER_MOVE[1], -BG_MOVE[1])
    return Image(v0, VECTOR_NAMES), Image(v1, VECTOR_NAMES)


def uncovered(t) -> tuple[np.ndarray, np.ndarray]:
    """Background visible at time ``t`` that the layer hides at frame 0, and at frame 1."""
    t = float(t)
    y, x = np.mgrid[0:H, 0:W].astype(np.float64)
    behind = ~_inside(t, y, x)
    x0 = x - BG_MOVE[0] * t          # where that background point is at frame 0
    return behind & _inside(0, y, x0), behind & _inside(1, y, x0 + BG_MOVE[0])


def inbetween(t, i0: Image, i1: Image, vectors, *, filter="bilinear", warnings=None, **blend):
    s = Sample(1000 + t)
    a = run_op(WARP, WarpParams(side="previous", filter=filter), {"image": i0, "vectors": vectors}, sample=s)
    b = run_op(WARP, WarpParams(side="next", filter=filter), {"image": i1, "vectors": vectors}, sample=s)
    out = run_op(BLEND, BlendParams(mode="inbetween", **blend), {"a": a, "b": b}, sample=s,
                 warnings=warnings)
    return a, b, out


def rgb_error(img: Image, truth: Image) -> np.ndarray:
    return np.abs(img.pixels[..., :3] - truth.pixels[..., :3]).mean(axis=-1)


# -- known answers ---------------------------------------------------------------------------------
@pytest.mark.parametrize("filter", ["bilinear", "bicubic", "lanczos"])
@pytest.mark.parametrize("t", [Fraction(1, 4), Fraction(1, 2), Fraction(3, 4)])
def test_moving_layer_inbetween_matches_truth_including_uncovered_background(t, filter):
    """At these times both motions move whole pixels, so the exact vectors give the exact picture.
    Measured (this test's scene): mean error over all pixels <= 2e-5, largest 0.008 (at the
    layer's corners), 0 in both uncovered regions; the cross-dissolve's error there is 0.08-0.18."""
    i0, i1 = render(0), render(1)
    warnings: list[str] = []
    _, _, out = inbetween(t, i0, i1, exact_vectors(), filter=filter, warnings=warnings)
    truth = render(t)
    err = rgb_error(out, truth)
    dissolve = Image((1 - float(t)) * i0.pixels + float(t) * i1.pixels, CHANNELS)
    derr = rgb_error(dissolve, truth)
    hid0, hid1 = uncovered(t)
    assert hid0.sum() > 50 and hid1.sum() > 50          # the regions are really there
    assert err[hid0].mean() < 1e-3 and err[hid1].mean() < 1e-3
    assert err.mean() < 1e-4 and err.max() < 0.02
    # the cross-dissolve baseline, same scene, same regions (Baker et al. 2011)
    assert derr[hid0].mean() > 0.05 and derr[hid1].mean() > 0.05
    assert err[hid0 | hid1].mean() < 0.02 * derr[hid0 | hid1].mean()
    assert not warnings                                  # nothing fell back: every pixel was seen


@pytest.mark.parametrize("t", [Fraction(1, 4), Fraction(1, 2)])
def test_uncovered_background_comes_from_the_side_that_sees_it(t):
    """Background hidden at frame 0 has visibility 0 on the 'previous' side and at least
    OCCLUDED_RELIABILITY (0.5: those pixels of frame 1 are hidden at frame 0, so the consistency
    check cannot confirm them) on 'next'; background hidden at frame 1 the other way round."""
    a, b, _ = inbetween(t, render(0), render(1), exact_vectors())
    hid0, hid1 = uncovered(t)
    va, vb = a.channel(VIS), b.channel(VIS)
    assert va[hid0].max() == 0.0 and vb[hid0].min() >= OCCLUDED_RELIABILITY
    assert vb[hid1].max() == 0.0 and va[hid1].min() >= OCCLUDED_RELIABILITY


def test_every_channel_travels_with_the_colour():
    """Alpha and extra layers are warped like colour: extra.u (a texture coordinate) matches the
    truth as closely as colour does; extra.depth puts the layer in the right place."""
    t = Fraction(1, 2)
    _, _, out = inbetween(t, render(0), render(1), exact_vectors())
    truth = render(t)
    assert out.channels == CHANNELS
    assert np.abs(out.channel("A") - 1.0).max() < 1e-6
    assert np.abs(out.channel("extra.u") - truth.channel("extra.u")).max() < 0.01
    wrong_depth = np.abs(out.channel("extra.depth") - truth.channel("extra.depth")) > 0.5
    assert wrong_depth.sum() == 0


def test_fractional_pixel_motion_beats_dissolve():
    """At t = 1/3 the motions are not whole pixels (resampling, edges at sub-pixel positions):
    measured mean error 0.006-0.012 against the dissolve's 0.094 over the frame."""
    t = Fraction(1, 3)
    i0, i1 = render(0), render(1)
    truth = render(t)
    dissolve = Image((1 - float(t)) * i0.pixels + float(t) * i1.pixels, CHANNELS)
    for filt in ("bilinear", "lanczos"):
        _, _, out = inbetween(t, i0, i1, exact_vectors(), filter=filt)
        assert rgb_error(out, truth).mean() < 0.2 * rgb_error(dissolve, truth).mean()


def test_confidence_channels_from_vector_smooth_are_used():
    """With fwd.conf / fwd.occ (as vector-smooth writes them) the warp uses them instead of its own
    check: the same consistency check given as channels gives the same picture; confidence 0
    everywhere (nothing to prefer) makes the uncovered region a plain average of what lands."""
    t = Fraction(1, 2)
    v0, v1 = exact_vectors()
    fwd, bwd = v0.pixels[..., :2], v1.pixels[..., 2:4]
    fconf, focc = fb_consistency(fwd, bwd)
    bconf, bocc = fb_consistency(bwd, fwd)
    zero = np.zeros((H, W), np.float32)

    def smoothed(vec: Image, conf_f, conf_b, occ_f, occ_b) -> Image:
        planes = {n: vec.channel(n) for n in VECTOR_NAMES}
        planes.update({"fwd.conf": conf_f, "bwd.conf": conf_b, "fwd.occ": occ_f, "bwd.occ": occ_b})
        return Image.from_planes({n: planes[n] for n in SMOOTHED})

    given = (smoothed(v0, fconf, zero, focc, zero), smoothed(v1, zero, bconf, zero, bocc))
    _, _, out_given = inbetween(t, render(0), render(1), given)
    _, _, out_own = inbetween(t, render(0), render(1), exact_vectors())
    np.testing.assert_allclose(out_given.pixels, out_own.pixels, atol=1e-6)


def test_still_image_with_zero_vectors_is_unchanged_apart_from_vis():
    img = noise_image(12, 16, channels=("R", "G", "B", "A", "diffuse.R"), seed=5)
    zero = Image(np.zeros((12, 16, 4), np.float32), VECTOR_NAMES)
    for side in ("previous", "next"):
        out = run_op(WARP, WarpParams(side=side), {"image": img, "vectors": (zero, zero)},
                     sample=Sample(Fraction(7, 3)))
        assert out.channels == img.channels + (VIS,)
        np.testing.assert_allclose(out.pixels[..., :5], img.pixels, atol=1e-6)
        np.testing.assert_allclose(out.channel(VIS), 1.0)


def test_translation_by_vectors_known_answer():
    """A whole frame moving 6 px right: at t = 1/2 the 'previous' side shows the frame moved by 3 px
    (columns 3.. equal the source's columns 0..); the 3 columns it cannot see have vis 0, and the
    last 3, whose source pixels leave the frame by t = 1 (unverifiable), OCCLUDED_RELIABILITY."""
    img = noise_image(10, 20, channels=("R", "G", "B"), seed=9, premultiplied=False)
    vec = np.zeros((10, 20, 4), np.float32)
    vec[..., 0], vec[..., 2] = 6.0, -6.0
    v = Image(vec, VECTOR_NAMES)
    out = run_op(WARP, WarpParams(side="previous"), {"image": img, "vectors": (v, v)},
                 sample=Sample(Fraction(21, 2)))
    np.testing.assert_allclose(out.pixels[:, 3:, :3], img.pixels[:, :-3, :], atol=1e-6)
    vis = out.channel(VIS)
    assert vis[:, :3].max() == 0.0 and vis[:, 3:17].min() > 0.99
    np.testing.assert_array_equal(vis[:, 17:], OCCLUDED_RELIABILITY)


# -- integer samples -------------------------------------------------------------------------------
@pytest.mark.parametrize("side", ["previous", "next"])
def test_integer_sample_needs_only_the_image_and_returns_it_bit_for_bit(side):
    p = WarpParams(side=side)
    assert warp_needs(p, Sample(1001, 2)) == {"image": Sample(1001, 2)}
    img = noise_image(6, 7, seed=1)
    out = run_op(WARP, p, {"image": img}, sample=Sample(1001))
    assert out is img


def test_needs_at_a_fraction():
    s = Sample(Fraction(3004, 3))          # 1001 1/3
    assert warp_needs(WarpParams(side="previous"), s) == {"image": Sample(1001),
                                                          "vectors": (Sample(1001), Sample(1002))}
    assert warp_needs(WarpParams(side="next"), s)["image"] == Sample(1002)
    v = Sample(5, Fraction(5, 2))
    assert warp_needs(WarpParams(side="next", axis="view"), v) == {
        "image": Sample(5, 3), "vectors": (Sample(5, 2), Sample(5, 3))}


# -- bad input -------------------------------------------------------------------------------------
def test_missing_neighbour_is_a_clear_error():
    """A one-frame sequence has no in-betweens: the edge sample arrives as None."""
    with pytest.raises(OpError) as err:
        run_op(WARP, WarpParams(side="next"), {"image": None, "vectors": (None, None)},
               sample=Sample(Fraction(3, 2)))
    assert err.value.field == "image" and "frame 2" in str(err.value) and err.value.fix


def test_vectors_missing_name_the_port():
    img = noise_image(6, 7, seed=1)
    with pytest.raises(OpError) as err:
        run_op(WARP, WarpParams(side="previous"), {"image": img}, sample=Sample(Fraction(1, 2)))
    assert err.value.field == "vectors" and "vectors" in str(err.value)
    no_bwd = Image(np.zeros((6, 7, 2), np.float32), FWD)
    with pytest.raises(OpError) as err:
        run_op(WARP, WarpParams(side="previous"), {"image": img, "vectors": (no_bwd, no_bwd)},
               sample=Sample(Fraction(1, 2)))
    assert err.value.field == "vectors" and "bwd.x" in str(err.value)
    problems = WARP.check_links(WarpParams(side="previous"), frozenset({"image"}))
    assert [p.field for p in problems] == ["vectors"]


def test_vectors_of_another_size():
    img = noise_image(6, 7, seed=1)
    v = Image(np.zeros((3, 4, 4), np.float32), VECTOR_NAMES)
    with pytest.raises(OpError) as err:
        run_op(WARP, WarpParams(side="previous"), {"image": img, "vectors": (v, v)},
               sample=Sample(Fraction(1, 2)))
    assert err.value.field == "vectors" and "resize" in err.value.fix


def test_declaration():
    assert WARP.name == "warp" and [p.name for p in WARP.inputs] == ["image", "vectors"]
    assert WARP.edge_samples and WARP.needs is warp_needs


# -- quadratic motion (Xu et al., "Quadratic video interpolation", NeurIPS 2019) -------------------
@pytest.mark.parametrize("tau", [0.25, 0.5, 0.8, 1.0])
def test_trajectory_follows_constant_acceleration_exactly(tau):
    # Known answer: p(s) = v0 s + a s^2 / 2 through the samples s = -1, 0, 1 (invented values).
    from operators.inbetween.warp import trajectory

    rng = np.random.default_rng(3)
    v0, acc = rng.normal(0, 4, (5, 6, 2)), rng.normal(0, 2, (5, 6, 2))
    to_next, to_outer = v0 + acc / 2, -v0 + acc / 2
    got = tau * trajectory(to_next.astype(np.float32), to_outer.astype(np.float32), tau)
    np.testing.assert_allclose(got, v0 * tau + acc * tau ** 2 / 2, atol=1e-4)
    # constant velocity (o = -v): the straight line, whatever tau
    np.testing.assert_allclose(trajectory(to_next.astype(np.float32), -to_next.astype(np.float32), tau),
                               to_next, atol=1e-5)


def test_quadratic_motion_falls_back_to_linear_without_outer_vectors():
    # The outer directions of exact_vectors() are zero (a two-frame sequence): same as 'linear'.
    i0 = render(0)
    s = Sample(Fraction(2001, 2))
    outs = {}
    for motion in ("quadratic", "linear"):
        outs[motion] = run_op(WARP, WarpParams(side="previous", motion=motion),
                              {"image": i0, "vectors": exact_vectors()}, sample=s)
    assert outs["quadratic"].meta["inbetween.motion"] == "linear"
    np.testing.assert_array_equal(outs["quadratic"].pixels, outs["linear"].pixels)
