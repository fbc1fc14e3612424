"""Tests of midframe's own motion-vector estimator (operators.vectors.estimate).

Known answers are seeded noise moved by a known translation, rotation and zoom (invented data,
exact ground truth); the outside references are the Middlebury 2014 'Motorcycle' pair with its
ground-truth disparity (Scharstein et al., GCPR 2014; scikit-image's quarter-size copy), OpenCV's
DIS flow (Kroeger et al., ECCV 2016) measured in the same test, and scikit-image's
optical_flow_tvl1 (Zach, Pock & Bischof, DAGM 2007).
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from operators.vectors.estimate import PRESETS, estimate_flow, estimate_flow_pair

H, W = 96, 128


def _noise(h: int, w: int, seed: int, channels: int = 3) -> np.ndarray:
    """Seeded noise with a little blur (so it has gradients at every scale), float32 0..1."""
    rng = np.random.default_rng(seed)
    img = rng.random((h, w, channels)).astype(np.float32)
    return cv2.GaussianBlur(img, (0, 0), 1.0).reshape(h, w, channels)


def _grid(h: int = H, w: int = W) -> tuple[np.ndarray, np.ndarray]:
    ys, xs = np.mgrid[0:h, 0:w].astype(np.float32)
    return xs, ys


def _affine_pair(mat: np.ndarray, seed: int = 1):
    """first, second and the true vectors when content at p (about the centre) moves to mat @ p."""
    xs, ys = _grid()
    pad = 40
    big = _noise(H + 2 * pad, W + 2 * pad, seed)
    cx, cy = W / 2, H / 2
    first = cv2.remap(big, xs + pad, ys + pad, cv2.INTER_CUBIC)
    p = np.stack([xs - cx, ys - cy], axis=-1)
    q = p @ np.linalg.inv(mat).T
    second = cv2.remap(big, (q[..., 0] + cx + pad).astype(np.float32),
                       (q[..., 1] + cy + pad).astype(np.float32), cv2.INTER_CUBIC)
    return first, second, (p @ mat.T - p).astype(np.float32)


def _translated(tx: float, ty: float, seed: int = 3):
    xs, ys = _grid()
    big = _noise(H + 40, W + 40, seed)
    first = cv2.remap(big, xs + 20, ys + 20, cv2.INTER_CUBIC)
    second = cv2.remap(big, xs + 20 - tx, ys + 20 - ty, cv2.INTER_CUBIC)
    return first, second


def _mean_err(flow: np.ndarray, truth: np.ndarray, margin: int = 8) -> float:
    d = (flow - truth)[margin:-margin, margin:-margin]
    return float(np.hypot(d[..., 0], d[..., 1]).mean())


# -- known answers ---------------------------------------------------------------------------------
@pytest.mark.parametrize("quality", ["draft", "standard"])
def test_subpixel_translation_under_a_tenth_of_a_pixel(quality):
    # Known answer: seeded noise moved by (2.3, -1.7) px; issue 3 asks for mean error < 0.1 px
    # (measured here: 0.090 draft, 0.093 standard; 0.078 / 0.080 before the soft census features,
    # whose bilinear resampling costs a little subpixel accuracy).
    first, second = _translated(2.3, -1.7)
    flow = estimate_flow(first, second, quality=quality)
    truth = np.broadcast_to(np.float32([2.3, -1.7]), flow.shape)
    assert _mean_err(flow, truth) < 0.1


def test_rotation_known_answer():
    # Known answer: 3 degree rotation about the centre (vectors up to 4.3 px); measured 0.072 px.
    a = np.deg2rad(3.0)
    first, second, truth = _affine_pair(np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]]))
    assert _mean_err(estimate_flow(first, second), truth) < 0.12


def test_zoom_known_answer():
    # Known answer: 5 % zoom about the centre (vectors up to 4 px); measured 0.062 px.
    first, second, truth = _affine_pair(np.eye(2) * 1.05)
    assert _mean_err(estimate_flow(first, second), truth) < 0.12


def test_large_translation_is_found():
    # Known answer: a 37 px move, far beyond what a linearised step can reach without the
    # coarse-to-fine search (the default search range here would be 12.8 px: 10 % of the width).
    first, second = _translated(-37.0, 5.0, seed=5)
    flow = estimate_flow(first, second, search_range=48)
    inside = flow[8:-8, 45:-8]                     # pixels whose content stays in view
    assert np.median(inside[..., 0]) == pytest.approx(-37.0, abs=0.1)
    assert np.median(inside[..., 1]) == pytest.approx(5.0, abs=0.1)


def test_smooth_field_against_scikit_image_tvl1():
    # Reference: scikit-image's optical_flow_tvl1 (Zach, Pock & Bischof 2007) on a smooth
    # synthetic field; it returns (v, u) = (row, column) order. Measured: ours 0.071 px,
    # TV-L1 0.046 px mean error; we hold ours under 0.1 px and within 2x of TV-L1.
    from skimage.registration import optical_flow_tvl1

    xs, ys = _grid()
    fx = (2.5 * np.sin(2 * np.pi * xs / W) * np.cos(np.pi * ys / H)).astype(np.float32)
    fy = (1.5 * np.cos(2 * np.pi * ys / H)).astype(np.float32)
    big = _noise(H + 40, W + 40, 3)
    first = cv2.remap(big, xs + 20, ys + 20, cv2.INTER_CUBIC)
    second = cv2.remap(big, xs + 20 - fx, ys + 20 - fy, cv2.INTER_CUBIC)
    # second(y) = first(y - f(y)): the forward vector at x solves g(x) = f(x + g(x)).
    g = np.dstack([fx, fy])
    for _ in range(20):
        mx, my = xs + g[..., 0], ys + g[..., 1]
        g = np.dstack([cv2.remap(fx, mx, my, cv2.INTER_LINEAR), cv2.remap(fy, mx, my, cv2.INTER_LINEAR)])
    ours = _mean_err(estimate_flow(first, second), g)
    v, u = optical_flow_tvl1(cv2.cvtColor(first, cv2.COLOR_RGB2GRAY),
                             cv2.cvtColor(second, cv2.COLOR_RGB2GRAY))
    ref = _mean_err(np.dstack([u, v]), g)
    assert ours < 0.1
    assert ours < 2.0 * ref


# -- invariants ------------------------------------------------------------------------------------
@pytest.mark.parametrize("quality", list(PRESETS))
def test_identical_frames_give_zero_vectors(quality):
    img = _noise(H, W, 7)
    flow = estimate_flow(img, img.copy(), quality=quality)
    assert flow.shape == (H, W, 2) and flow.dtype == np.float32
    assert np.abs(flow).max() < 1e-4


def test_forward_and_backward_agree_on_a_translation():
    # Measured: |fwd + bwd| 0.107 px mean; each direction 0.074 / 0.075 px from the truth.
    first, second = _translated(1.6, 2.4, seed=11)
    fwd, bwd = estimate_flow_pair(first, second)
    assert _mean_err(fwd + bwd, np.zeros_like(fwd)) < 0.15
    assert _mean_err(bwd, np.broadcast_to(np.float32([-1.6, -2.4]), bwd.shape)) < 0.1


def test_pair_shares_work_but_equals_two_separate_estimates():
    # Exact invariant: the pair solve shares pyramids and features, nothing else, by default.
    first, second = _translated(2.2, -0.8, seed=12)
    fwd, bwd = estimate_flow_pair(first, second)
    assert np.array_equal(fwd, estimate_flow(first, second))
    assert np.array_equal(bwd, estimate_flow(second, first))
    # and solving the two directions in two threads changes nothing
    fwd2, bwd2 = estimate_flow_pair(first, second, workers=2)
    assert np.array_equal(fwd, fwd2) and np.array_equal(bwd, bwd2)
    with pytest.raises(ValueError, match="workers"):
        estimate_flow_pair(first, second, workers=0)


def test_joint_occlusion_option_keeps_both_layers():
    # Known answer (invented data): a noise square moves 5 px right over still noise, so a
    # strip of background is uncovered at its left and covered at its right. With the opt-in
    # occlusion field (occluded pixels lose their likelihood), both layers keep their motion.
    bg, fg = _noise(H, W, 21), _noise(H, W, 22)
    first, second = bg.copy(), bg.copy()
    first[32:64, 40:72] = fg[32:64, 40:72]
    second[32:64, 45:77] = fg[32:64, 40:72]
    fwd, bwd = estimate_flow_pair(first, second, occluded_weight=0.0)
    assert np.all(np.isfinite(fwd)) and np.all(np.isfinite(bwd))
    inner = fwd[36:60, 44:68] - np.float32([5, 0])
    assert float(np.hypot(inner[..., 0], inner[..., 1]).mean()) < 0.2
    still = np.ones((H, W), bool)
    still[24:72, 30:86] = False
    assert float(np.hypot(fwd[..., 0], fwd[..., 1])[still].mean()) < 0.1


def test_deterministic_for_a_seed():
    first, second = _translated(1.2, 0.4, seed=2)
    a = estimate_flow(first, second, seed=4)
    b = estimate_flow(first, second, seed=4)
    assert np.array_equal(a, b)


def test_prefilter_keeps_a_noisy_translation():
    # Grain: independent noise on both frames; the pre-filter (sigma 1 px) must not bias the answer.
    first, second = _translated(2.0, 1.0, seed=13)
    rng = np.random.default_rng(0)
    first = first + rng.normal(0, 0.03, first.shape).astype(np.float32)
    second = second + rng.normal(0, 0.03, second.shape).astype(np.float32)
    flow = estimate_flow(first, second, prefilter=1.0)
    assert _mean_err(flow, np.broadcast_to(np.float32([2.0, 1.0]), flow.shape)) < 0.25


# -- Middlebury 2014 Motorcycle ----------------------------------------------------------------------
def test_motorcycle_beats_opencv_dis_medium():
    # Source: Scharstein et al., "High-resolution stereo datasets with subpixel-accurate ground
    # truth", GCPR 2014 ('Motorcycle', quarter size, scikit-image's copy). Vectors left -> right
    # are x = -disparity, y = 0 where the disparity is finite (occluded pixels included).
    # Baseline measured in the same test: OpenCV DIS, preset MEDIUM, grey 8-bit input
    # (2.63 px / 16.8 % here). Measured for ours (standard): 1.831 px, bad-3 10.7 % (1.847 px
    # before the likelihood-chosen enlargement into every level; 1.887 px, 10.9 % before the
    # adaptive support weights; 2.10 px, 13.4 % before the soft census
    # features; 2.16 px, 14.0 % before the likelihood-chosen enlargement); issue 3's targets
    # (1.5 px, 9 %) are not reached yet.
    from skimage.data import stereo_motorcycle

    left, right, disp = stereo_motorcycle()
    valid = np.isfinite(disp)
    truth = np.zeros(disp.shape + (2,), np.float32)
    truth[..., 0] = np.where(valid, -disp, 0)

    def score(flow):
        e = np.hypot(*(flow - truth).transpose(2, 0, 1))[valid]
        return e.mean(), (e > 3).mean()

    dis = cv2.DISOpticalFlow_create(cv2.DISOPTICAL_FLOW_PRESET_MEDIUM)
    base = dis.calc(cv2.cvtColor(left, cv2.COLOR_RGB2GRAY), cv2.cvtColor(right, cv2.COLOR_RGB2GRAY), None)
    ours = estimate_flow(left.astype(np.float32) / 255, right.astype(np.float32) / 255)
    epe, bad3 = score(ours)
    dis_epe, dis_bad3 = score(base)
    assert epe < dis_epe and bad3 < dis_bad3
    assert epe < 1.9 and bad3 < 0.111         # measured 1.831 px and 10.66 %


def test_soft_census_ignores_a_brightness_offset_and_reads_the_sign():
    # Known answer (invented data): the census signature compares each neighbour with the centre
    # (Zabih & Woodfill, ECCV 1994), so adding a constant changes nothing, and a neighbour 2 px
    # to the right that is brighter gives +weight * tanh(difference / scale).
    from operators.vectors._pyramid import CENSUS_OFFSETS, soft_census

    lum = _noise(20, 24, 5, channels=1)[..., 0]
    plain = soft_census(lum, 0.08, 0.03)
    shifted = soft_census(lum + np.float32(0.25), 0.08, 0.03)
    assert len(plain) == len(CENSUS_OFFSETS)
    for p, q in zip(plain, shifted):
        np.testing.assert_allclose(p, q, atol=1e-5)
    step = np.zeros((9, 9), np.float32)
    step[:, 6:] = 0.06
    right = soft_census(step, 0.08, 0.03)[CENSUS_OFFSETS.index((2, 0))]
    assert right[4, 4] == pytest.approx(0.08 * np.tanh(0.06 / 0.03), rel=1e-5)
    assert right[4, 2] == 0.0 and right[4, 7] == 0.0


def test_support_weights_keep_a_cost_from_crossing_a_colour_edge():
    # Known answer (invented data): the first image is dark left of column 10 and bright from it
    # on; the cost is 1 on the bright side, 0 on the dark side. Yoon & Kweon's (IEEE PAMI 28(4),
    # 2006) colour-weighted window keeps the dark pixels beside the edge near 0, where a 5 x 5
    # box mean gives them 0.4 and 0.2; a constant cost stays exactly constant (weights sum to 1,
    # also at the frame border).
    from operators.vectors._support import Support

    guide = np.zeros((12, 20, 3), np.float32)
    guide[:, 10:] = 0.8
    cost = np.zeros((12, 20), np.float32)
    cost[:, 10:] = 1.0
    sup = Support(guide, 2, 0.05, 100.0)
    out = sup.aggregate(cost)
    box = cv2.boxFilter(cost, -1, (5, 5), borderType=cv2.BORDER_REFLECT)
    assert out.shape == cost.shape and out.dtype == np.float32
    assert box[5, 9] == pytest.approx(0.4) and box[5, 8] == pytest.approx(0.2)
    assert out[:, :10].max() < 1e-5 and out[:, 10:].min() > 1 - 1e-5
    np.testing.assert_allclose(sup.aggregate(np.full((12, 20), 0.3, np.float32)), 0.3, rtol=1e-5)


def test_translation_survives_an_exposure_offset():
    # Known answer (invented data): seeded noise moved by (1.3, 0.6) px, the second frame 0.1
    # brighter (an exposure difference between cameras of a rig). The census part of the
    # likelihood is blind to the offset; measured 0.11 px mean error (0.55 px without it).
    first, second = _translated(1.3, 0.6)
    flow = estimate_flow(first, second + np.float32(0.1))
    assert _mean_err(flow, np.broadcast_to(np.float32([1.3, 0.6]), flow.shape)) < 0.2


def test_likelihood_upsampling_keeps_a_step_edge_sharp():
    # Known answer: a coarse field with a vertical step (0 left, 4 px right, in coarse pixels)
    # and a fine-level cost that is zero only at the true fine field. Bilinear enlargement blends
    # the columns next to the step; the likelihood's choice among the coarse neighbours does not.
    from operators.vectors._grid import resize_flow
    from operators.vectors._upsample import select_upsample

    cu = np.zeros((8, 8), np.float32)
    cu[:, 4:] = 4.0
    cv_ = np.zeros_like(cu)
    true_u = np.zeros((16, 16), np.float32)
    true_u[:, 8:] = 8.0

    def cost(u, v):
        return np.abs(u - true_u) + np.abs(v)

    u, v = select_upsample(cu, cv_, 16, 16, cost)
    bu, _ = resize_flow(cu, cv_, 16, 16)
    assert np.array_equal(u, true_u) and not v.any()
    assert np.abs(bu - true_u).max() > 1.0          # the bilinear start is blurred there


def test_unknown_upsample_override_raises():
    img = _noise(16, 16, 0)
    with pytest.raises(ValueError, match="upsample"):
        estimate_flow(img, img, upsample="cubic")


# -- bad input -------------------------------------------------------------------------------------
def test_different_shapes_raise_naming_both():
    with pytest.raises(ValueError, match=r"\(10, 12, 3\).*\(10, 13, 3\)"):
        estimate_flow(np.zeros((10, 12, 3), np.float32), np.zeros((10, 13, 3), np.float32))
    with pytest.raises(ValueError, match=r"\(10, 12, 3\).*\(10, 12, 1\)"):
        estimate_flow_pair(np.zeros((10, 12, 3), np.float32), np.zeros((10, 12, 1), np.float32))


def test_unknown_quality_raises():
    img = _noise(16, 16, 0)
    with pytest.raises(ValueError, match="quality"):
        estimate_flow(img, img, quality="ultra")


def test_nan_and_inf_input_give_finite_vectors():
    first, second = _translated(1.5, 0.5, seed=17)
    first[10:20, 10:30] = np.nan
    second[40:45, :] = np.inf
    second[0, 0] = -np.inf
    fwd, bwd = estimate_flow_pair(first, second)
    assert np.isfinite(fwd).all() and np.isfinite(bwd).all()
    clean = fwd[50:-8, 40:-8]                      # far from the damaged rows and block
    assert np.median(clean[..., 0]) == pytest.approx(1.5, abs=0.1)


@pytest.mark.parametrize("value", [0.0, 0.5])
def test_constant_and_black_images_give_zero(value):
    img = np.full((H, W, 3), value, np.float32)
    fwd, bwd = estimate_flow_pair(img, img.copy())
    assert np.array_equal(fwd, np.zeros_like(fwd)) and np.array_equal(bwd, np.zeros_like(bwd))


def test_one_channel_and_two_dimensional_input():
    first, second = _translated(2.0, -1.0, seed=19)
    grey1 = cv2.cvtColor(first, cv2.COLOR_RGB2GRAY)
    grey2 = cv2.cvtColor(second, cv2.COLOR_RGB2GRAY)
    truth = np.broadcast_to(np.float32([2.0, -1.0]), (H, W, 2))
    assert _mean_err(estimate_flow(grey1[..., None], grey2[..., None]), truth) < 0.1
    assert _mean_err(estimate_flow(grey1, grey2), truth) < 0.1


@pytest.mark.parametrize("shape", [(1, 1, 3), (3, 2, 3), (2, 3, 1), (5, 40, 3)])
def test_tiny_images_still_work(shape):
    rng = np.random.default_rng(0)
    a = rng.random(shape).astype(np.float32)
    b = rng.random(shape).astype(np.float32)
    for q in PRESETS:
        flow = estimate_flow(a, b, quality=q)
        assert flow.shape == shape[:2] + (2,) and np.isfinite(flow).all()


def test_small_image_uses_fewer_levels_and_finds_motion():
    # 24 x 32 with an asked-for depth of 6 levels: the pyramid stops at 12 px; the motion is found.
    xs, ys = _grid(24, 32)
    big = _noise(44, 52, 23)
    first = cv2.remap(big, xs + 10, ys + 10, cv2.INTER_CUBIC)
    second = cv2.remap(big, xs + 10 - 1.5, ys + 10, cv2.INTER_CUBIC)
    flow = estimate_flow(first, second, levels=6)
    assert np.median(flow[4:-4, 4:-4, 0]) == pytest.approx(1.5, abs=0.15)
