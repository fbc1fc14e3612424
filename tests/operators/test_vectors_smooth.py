"""Tests of ``vector-smooth`` (operators/vectors/smooth.py) and its parts.

External sources of the checks:

- Sundaram, N., Brox, T., Keutzer, K., "Dense point trajectories by GPU-accelerated large
  displacement optical flow", ECCV 2010 ("Sundaram et al. 2010"): a pixel is occluded when
  |w + ŵ|^2 >= 0.01 (|w|^2 + |ŵ|^2) + 0.5, ŵ sampled at x + w.
- Sun, D., Roth, S., Black, M.J., "Secrets of optical flow estimation and their principles",
  CVPR 2010 ("Sun et al. 2010"): the weighted median minimises sum_j w_j |u - u_j|;
  median filtering removes outliers while keeping motion boundaries.
- He, K., Sun, J., Tang, X., "Guided image filtering", PAMI 2013 ("He et al. 2013"): the grey-guide
  algorithm and the colour-guide form (3x3 solve per window), written out independently below,
  normalising window means by the valid-pixel count as the authors' reference code does.

Known-answer scenes are invented here: a textured square moving over a textured background with
exact, analytic vectors (``layered``), and piecewise-constant fields with a colour edge.
"""

from __future__ import annotations

import dataclasses

import cv2
import numpy as np
import pydantic
import pytest
from pydantic import BaseModel, ConfigDict, Field

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry import FrameRange, Operator
from graphcore.sample import Sample
from operators.io.transfer import encode
from operators.vectors import _filters as F
from operators.vectors.channels import SMOOTHED, VECTORS
from operators.vectors.consistency import fb_check, fb_consistency, mapping_conflicts, target_outside
from operators.vectors.smooth import (SUSPECT_JUMP, VECTOR_SMOOTH, VectorSmoothParams, edge_aware_smooth,
                                      edge_energy, fill_occluded, motion_edges, smooth_direction,
                                      weighted_median)
from tests.operators.conftest import op_runner

run = op_runner(VECTOR_SMOOTH)


# -- scenes ------------------------------------------------------------------------------------------
def texture(h: int, w: int, seed: int, lo: float = 0.05, hi: float = 0.9) -> np.ndarray:
    """Seeded smooth colour noise, linear light in lo..hi, shape (h, w, 3)."""
    rng = np.random.default_rng(seed)
    t = cv2.GaussianBlur(rng.random((h, w, 3)).astype(np.float32), (0, 0), 1.5)
    t = (t - t.min()) / (t.max() - t.min())
    return (lo + (hi - lo) * t).astype(np.float32)


@dataclasses.dataclass
class Layered:
    """Frames k = 0..n-1 of a textured square moving by ``d_fg`` per frame over a textured
    background moving by ``d_bg`` per frame; exact vectors and masks."""

    images: list[np.ndarray]      # (H, W, 3) linear
    fwd: list[np.ndarray]         # (H, W, 2) toward k + 1
    bwd: list[np.ndarray]         # (H, W, 2) toward k - 1
    square: list[np.ndarray]      # (H, W) bool, where the square is at frame k
    d_fg: np.ndarray
    d_bg: np.ndarray


def layered(n: int = 2, h: int = 64, w: int = 96, top: int = 18, left: int = 24, size: int = 24,
            d_fg=(6, 2), d_bg=(0, 0), seed: int = 0) -> Layered:
    d_fg, d_bg = np.array(d_fg, np.int64), np.array(d_bg, np.int64)
    margin = int(np.abs(d_bg).max()) * n + 2
    bg_big = texture(h + 2 * margin, w + 2 * margin, seed, 0.05, 0.45)   # darker background
    fg_tex = texture(size, size, seed + 1, 0.5, 0.95)                     # brighter square
    images, fwd, bwd, square = [], [], [], []
    for k in range(n):
        ox, oy = margin - d_bg[0] * k, margin - d_bg[1] * k              # content moves by d_bg
        img = bg_big[oy:oy + h, ox:ox + w].copy()
        y0, x0 = top + d_fg[1] * k, left + d_fg[0] * k
        img[y0:y0 + size, x0:x0 + size] = fg_tex
        m = np.zeros((h, w), bool)
        m[y0:y0 + size, x0:x0 + size] = True
        f = np.empty((h, w, 2), np.float32)
        f[:] = d_bg
        f[m] = d_fg
        images.append(img)
        fwd.append(f)
        bwd.append(-f)
        square.append(m)
    return Layered(images, fwd, bwd, square, d_fg, d_bg)


def shifted_mask(mask: np.ndarray, d) -> np.ndarray:
    """``out[x] = mask[x + d]`` (False outside)."""
    h, w = mask.shape
    out = np.zeros_like(mask)
    dx, dy = int(d[0]), int(d[1])
    ys, xs = np.nonzero(mask)
    ys, xs = ys - dy, xs - dx
    ok = (ys >= 0) & (ys < h) & (xs >= 0) & (xs < w)
    out[ys[ok], xs[ok]] = True
    return out


def perceptual(img: np.ndarray) -> np.ndarray:
    return encode("srgb", np.clip(img, 0, None)).astype(np.float32)


def two_regions(h=40, w=60, edge=30, seed=0, noise=0.3):
    """Left colour / right colour with vectors (3, 0) / (-2, 1) plus seeded noise."""
    rng = np.random.default_rng(seed)
    img = np.empty((h, w, 3), np.float32)
    img[:, :edge] = (0.8, 0.3, 0.2)
    img[:, edge:] = (0.2, 0.4, 0.9)
    truth = np.empty((h, w, 2), np.float32)
    truth[:, :edge] = (3.0, 0.0)
    truth[:, edge:] = (-2.0, 1.0)
    noisy = truth + rng.normal(0, noise, truth.shape).astype(np.float32)
    return perceptual(img), truth, noisy


# -- forward-backward consistency ------------------------------------------------------------------------
@pytest.mark.parametrize("d", [(2.0, -1.0), (2.5, 0.0), (-3.25, 1.5)])
def test_consistency_on_a_translation_marks_only_the_strip_that_leaves_the_frame(d):
    # Sundaram et al. 2010: a translation is consistent everywhere (residual 0); pixels whose
    # vector lands outside the other frame are occluded. Landing span [0, W-1] x [0, H-1], so a
    # shift of dx > 0 flags the last ceil(dx) columns (known answer).
    h, w = 20, 30
    fwd = np.zeros((h, w, 2), np.float32)
    fwd[:] = d
    conf, occ = fb_consistency(fwd, -fwd)
    xs = np.arange(w)[None, :] + d[0]
    ys = np.arange(h)[:, None] + d[1]
    leaves = (xs < 0) | (xs > w - 1) | (ys < 0) | (ys > h - 1)
    assert np.array_equal(occ.astype(bool), leaves)
    assert np.array_equal(target_outside(fwd), leaves)
    np.testing.assert_array_equal(conf[~leaves], 1.0)
    np.testing.assert_array_equal(conf[leaves], 0.0)
    strip_x = int(np.ceil(abs(d[0])))
    assert leaves[h // 2].sum() == strip_x     # exact strip width in x


def test_identical_frames_give_zero_vectors_full_confidence_and_no_occlusion():
    # Invariant: zero vectors both ways are perfectly consistent and nothing leaves the frame;
    # every step must keep them zero.
    zero = np.zeros((24, 32, 2), np.float32)
    out, conf, occ = smooth_direction(zero, zero, perceptual(texture(24, 32, 1)))
    np.testing.assert_array_equal(out, 0.0)
    np.testing.assert_array_equal(conf, 1.0)
    np.testing.assert_array_equal(occ, 0.0)


def test_fb_check_is_fb_consistency_and_target_outside_together():
    # exact invariant: the shared-work form returns what the two public functions do
    rng = np.random.default_rng(8)
    fwd = rng.normal(0, 4, (20, 30, 2)).astype(np.float32)
    bwd = (-fwd + rng.normal(0, 1, fwd.shape)).astype(np.float32)
    conf, occ, outside = fb_check(fwd, bwd)
    want_conf, want_occ = fb_consistency(fwd, bwd)
    np.testing.assert_array_equal(conf, want_conf)
    np.testing.assert_array_equal(occ, want_occ)
    np.testing.assert_array_equal(outside, target_outside(fwd))


def test_occlusion_is_confidence_below_one_half():
    # Documented relation: conf = 2^(-r^2/T) and occ = (r^2 >= T) or outside, so occ == conf < 0.5
    # (away from float rounding exactly at the threshold).
    rng = np.random.default_rng(8)
    fwd = rng.normal(0, 0.5, (40, 50, 2)).astype(np.float32)
    bwd = -fwd + rng.normal(0, 0.6, (40, 50, 2)).astype(np.float32)
    conf, occ = fb_consistency(fwd, bwd)
    clear = np.abs(conf - 0.5) > 1e-4
    assert np.array_equal(occ.astype(bool)[clear], (conf < 0.5)[clear])
    assert 0.05 < occ.mean() < 0.95


def test_consistency_threshold_is_the_papers_formula():
    # Sundaram et al. 2010: occluded iff |w + ŵ|^2 >= 0.01 (|w|^2 + |ŵ|^2) + 0.5.
    h, w = 8, 40
    fwd = np.zeros((h, w, 2), np.float32)
    fwd[..., 0] = 3.0
    for delta, expect in ((-1e-3, 0.0), (1e-3, 1.0)):
        # choose ŵ = (-3 + e, 0) with e^2 = 0.01 (9 + (3 - e)^2) + 0.5 + delta, solved for e > 0
        a = 1 - 0.01
        b = 0.06
        c = -(0.01 * 18 + 0.5 + delta)
        e = (-b + np.sqrt(b * b - 4 * a * c)) / (2 * a)
        bwd = np.zeros_like(fwd)
        bwd[..., 0] = -3.0 + e
        conf, occ = fb_consistency(fwd, bwd)
        assert occ[4, 10] == expect
        assert conf[4, 10] == pytest.approx(0.5, abs=2e-3)   # 2^(-r^2/T) is 0.5 at the threshold


@pytest.mark.parametrize("d_bg", [(0, 0), (-2, 1)])
def test_consistency_marks_exactly_what_the_square_covers_and_uncovers(d_bg):
    # Sundaram et al. 2010 criterion on an analytic layered scene: fwd at frame 0 is occluded
    # exactly where background gets covered by the square at frame 1 (plus pixels leaving the
    # frame); bwd at frame 1 exactly where frame 1 shows background that the square hid at
    # frame 0. Integer motions, so no interpolation: tolerance 0 pixels.
    s = layered(d_bg=d_bg)
    sq0, sq1 = s.square
    covered = ~sq0 & shifted_mask(sq1, s.d_bg)          # x + d_bg lands in the square at 1
    uncovered = ~sq1 & shifted_mask(sq0, -s.d_bg)         # x - d_bg was in the square at 0
    _, occ_f = fb_consistency(s.fwd[0], s.bwd[1])
    _, occ_b = fb_consistency(s.bwd[1], s.fwd[0])
    assert np.array_equal(occ_f.astype(bool), covered | target_outside(s.fwd[0]))
    assert np.array_equal(occ_b.astype(bool), uncovered | target_outside(s.bwd[1]))
    assert covered.sum() > 100 and uncovered.sum() > 100


def test_consistency_with_subpixel_motion_is_exact_within_one_pixel_of_the_square():
    # Same criterion, motion (5.5, 2.25): bilinear sampling blends the square's edge, so
    # disagreement with the analytic region is allowed only within 1 px of its boundary.
    h, w, top, left, size = 64, 96, 18, 24, 24
    d = np.array([5.5, 2.25])
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float64)
    sq0 = (yy >= top) & (yy < top + size) & (xx >= left) & (xx < left + size)
    sq1 = ((yy >= top + d[1]) & (yy < top + size + d[1]) & (xx >= left + d[0]) & (xx < left + size + d[0]))
    fwd = np.zeros((h, w, 2), np.float32)
    fwd[sq0] = d
    bwd = np.zeros((h, w, 2), np.float32)
    bwd[sq1] = -d
    _, occ = fb_consistency(fwd, bwd)
    truth = sq1 & ~sq0
    wrong = occ.astype(bool) ^ truth
    near = cv2.dilate((sq1 ^ cv2.erode(sq1.astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool))
                      .astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
    near |= cv2.dilate((sq0 ^ cv2.erode(sq0.astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool))
                       .astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
    assert not (wrong & ~near).any()
    assert truth.sum() > 100 and (occ.astype(bool) & truth).sum() >= 0.8 * truth.sum()


# -- weighted median ---------------------------------------------------------------------------------------
def brute_weighted_median(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Sun et al. 2010, weighted median by brute force: the value u_k minimising sum_j w_j |u_k - u_j|
    (ties: the smallest)."""
    cost = (weights[:, None, :] * np.abs(values[:, :, None] - values[:, None, :])).sum(axis=2)
    best = cost.min(axis=1, keepdims=True)
    cand = np.where(cost <= best * (1 + 1e-6) + 1e-9, values, np.inf)
    return cand.min(axis=1)


def test_weighted_median_rows_minimise_the_papers_cost():
    rng = np.random.default_rng(3)
    values = (rng.normal(0, 20, (2000, 25))).astype(np.float32)
    values[:50] = np.round(values[:50])            # ties
    weights = rng.random((2000, 25)).astype(np.float32)
    weights[::7, ::3] = 0.0
    got = F.weighted_median_rows(values, weights)
    ref = brute_weighted_median(values.astype(np.float64), weights.astype(np.float64))
    cost = lambda u: (weights * np.abs(u[:, None] - values)).sum(axis=1)  # noqa: E731
    # our median attains the minimal cost (up to float32 rounding of the cost)
    np.testing.assert_allclose(cost(got), cost(ref.astype(np.float32)), rtol=1e-5, atol=1e-4)


def test_weighted_median_removes_salt_noise_without_moving_the_edge():
    # Sun et al. 2010: median filtering of flow removes outliers while keeping motion edges.
    h, w, edge = 48, 64, 30
    guide, truth, _ = two_regions(h, w, edge, noise=0.0)
    rng = np.random.default_rng(7)
    salt = rng.random((h, w)) < 0.05
    noisy = truth.copy()
    noisy[salt] = rng.uniform(-10, 10, (int(salt.sum()), 2))
    out = weighted_median(noisy, guide, radius=2, skip_below=0.0)
    exact = np.all(out == truth, axis=2)
    assert exact.mean() >= 0.995, exact.mean()
    # the edge: in every row, the last column with the left value is edge - 1 (within 1 px)
    left_val = np.all(np.abs(out - truth[0, 0]) < 0.5, axis=2)
    last_left = np.array([np.nonzero(row)[0].max() for row in left_val])
    assert np.all(np.abs(last_left - (edge - 1)) <= 1)
    assert np.abs(out - truth).max(axis=2)[:, edge - 4:edge + 4].max() < 0.5  # no blur at the edge
    # control: the same noise through a plain 5x5 mean leaves errors > 0.5 px at > 10 % of pixels
    mean = cv2.blur(noisy, (5, 5))
    assert (np.abs(mean - truth).max(axis=2) > 0.5).mean() > 0.1


def test_weighted_median_skip_is_bounded_by_the_window_range():
    # Documented acceleration: a pixel whose window spans less than skip_below keeps its value,
    # and the full median could move it by less than that.
    rng = np.random.default_rng(1)
    field = (rng.normal(0, 0.05, (30, 40, 2))).astype(np.float32)
    field[:, 20:] += 4.0
    guide = perceptual(texture(30, 40, 2))
    full = weighted_median(field, guide, radius=2, skip_below=0.0)
    fast = weighted_median(field, guide, radius=2, skip_below=0.3)
    assert np.abs(full - fast).max() < 0.3
    assert not np.array_equal(full, field)


# -- edge-aware smoothing --------------------------------------------------------------------------------
def box_valid_mean(a: np.ndarray, r: int) -> np.ndarray:
    """Mean over the valid pixels of each (2r+1)^2 window, by integral images (He's f_mean)."""
    h, w = a.shape
    ii = np.zeros((h + 1, w + 1))
    ii[1:, 1:] = np.cumsum(np.cumsum(a.astype(np.float64), 0), 1)
    y0 = np.clip(np.arange(h) - r, 0, h)
    y1 = np.clip(np.arange(h) + r + 1, 0, h)
    x0 = np.clip(np.arange(w) - r, 0, w)
    x1 = np.clip(np.arange(w) + r + 1, 0, w)
    s = ii[y1][:, x1] - ii[y0][:, x1] - ii[y1][:, x0] + ii[y0][:, x0]
    n = (y1 - y0)[:, None] * (x1 - x0)[None, :]
    return s / n


def he_guided_filter_grey(I, p, r, eps):
    """He et al. 2013, the grey-guide guided filter, written out from the paper."""
    mean_I, mean_p = box_valid_mean(I, r), box_valid_mean(p, r)
    var_I = box_valid_mean(I * I, r) - mean_I ** 2
    cov_Ip = box_valid_mean(I * p, r) - mean_I * mean_p
    a = cov_Ip / (var_I + eps)
    b = mean_p - a * mean_I
    return box_valid_mean(a, r) * I + box_valid_mean(b, r)


def he_guided_filter_colour(I, p, r, eps):
    """He et al. 2013, colour guide, per pixel with a 3x3 solve."""
    mean_I = np.stack([box_valid_mean(I[..., c], r) for c in range(3)], -1)
    mean_p = box_valid_mean(p, r)
    cov = np.empty(I.shape[:2] + (3, 3))
    for i in range(3):
        for j in range(3):
            cov[..., i, j] = box_valid_mean(I[..., i] * I[..., j], r) - mean_I[..., i] * mean_I[..., j]
    cov_Ip = np.stack([box_valid_mean(I[..., c] * p, r) for c in range(3)], -1) - mean_I * mean_p[..., None]
    a = np.linalg.solve(cov + eps * np.eye(3), cov_Ip[..., None])[..., 0]
    b = mean_p - np.sum(a * mean_I, -1)
    mean_a = np.stack([box_valid_mean(a[..., c], r) for c in range(3)], -1)
    return np.sum(mean_a * I, -1) + box_valid_mean(b, r)


@pytest.mark.parametrize("channels", [1, 3])
def test_guided_filter_with_equal_weights_is_he_et_al(channels):
    # He et al. 2013, grey and colour forms. With equal weights our weighted filter is theirs;
    # it averages windows by their support, which equals theirs where every window covering the
    # pixel lies inside the frame (>= 2r from the border): compared exactly there.
    rng = np.random.default_rng(5)
    h, w, r, eps = 30, 41, 3, 0.01
    I = perceptual(texture(h, w, 9))
    if channels == 1:
        I = I[..., 1]
    p = rng.normal(0, 1, (h, w)).astype(np.float32)
    planes = [I] if channels == 1 else [np.ascontiguousarray(I[..., c]) for c in range(3)]
    (q,), _ = F.weighted_guided_filter(planes, [p], np.ones((h, w), np.float32), r, eps)
    ref = he_guided_filter_grey(I, p, r, eps) if channels == 1 else he_guided_filter_colour(I, p, r, eps)
    inner = (slice(2 * r, h - 2 * r), slice(2 * r, w - 2 * r))
    np.testing.assert_allclose(q[inner], ref[inner], atol=2e-4)
    assert np.abs(q - ref).max() < 0.1


@pytest.mark.parametrize("subsample,tolerance", [(1, 0.3), (2, 0.45)])
def test_edge_aware_smoothing_does_not_bleed_across_a_colour_edge(subsample, tolerance):
    # Known answer (He et al. 2013: the output follows the guide's edges). Vectors (3, 0) left
    # and (-2, 1) right of a colour edge, noise sigma 0.3 px: every pixel ends within 0.3 px of
    # its side's value (0.45 px with the fast filter's interpolated coefficients: measured
    # 0.40 px at the two edge columns, below the 0.5 px jump bound). Control: a plain 9x9 box
    # filter bleeds more than 1.5 px at the edge.
    guide, truth, noisy = two_regions()
    out = edge_aware_smooth(noisy, guide, None, radius=4, strength=1.0, subsample=subsample)
    err = np.abs(out - truth).max(axis=2)
    assert err.max() < tolerance, err.max()
    rms_in = np.sqrt(np.mean((noisy - truth) ** 2))
    rms_out = np.sqrt(np.mean((out - truth) ** 2))
    assert rms_out < 0.35 * rms_in
    box = cv2.blur(noisy, (9, 9), borderType=cv2.BORDER_REPLICATE)
    assert np.abs(box - truth).max(axis=2)[:, 28:32].max() > 1.5


def test_edge_aware_smoothing_strength_and_confidence():
    # Documented blend: out = v + (1 - (1 - strength) conf) (filtered - v).
    guide, truth, noisy = two_regions(seed=2)
    conf = np.ones(truth.shape[:2], np.float32)
    keep = edge_aware_smooth(noisy, guide, conf, radius=4, strength=0.0)
    np.testing.assert_array_equal(keep, noisy)               # confident vectors kept
    conf[10, 10] = 0.0
    noisy_bad = noisy.copy()
    noisy_bad[10, 10] = (40.0, -40.0)                        # a doubtful outlier
    out = edge_aware_smooth(noisy_bad, guide, conf, radius=4, strength=0.0)
    assert np.abs(out[10, 10] - truth[10, 10]).max() < 0.3   # replaced from its neighbours
    assert np.abs(out[20, 40] - noisy[20, 40]).max() < 1e-5  # elsewhere unchanged


# -- occlusion filling ------------------------------------------------------------------------------------
@pytest.mark.parametrize("rule,d_fg,d_bg,size", [
    ("dominant", (6, 2), (0, 0), 24),      # locked-off camera
    ("slower", (6, 2), (0, 0), 24),
    ("dominant", (6, 2), (-2, 1), 24),     # camera pans: the background moves too
    ("dominant", (1, 0), (-5, -2), 24),    # camera follows the square: the background is faster
    ("auto", (6, 2), (0, 0), 24),
    ("auto", (6, 2), (-2, 1), 24),
    ("auto", (1, 0), (-5, -2), 24),        # where 'slower' fails (next test)
    ("slower", (6, 2), (0, 0), 56),        # the square is the larger region (where 'dominant' fails)
    ("auto", (6, 2), (0, 0), 56),
])
def test_fill_gives_uncovered_and_covered_background_the_background_motion(rule, d_fg, d_bg, size):
    # Known layered scene: the occluded pixels are background (the square is in front). With
    # garbage vectors there, the fill must restore the background motion: >= 95 % of them
    # within 0.5 px (measured: all of them).
    s = layered(d_fg=d_fg, d_bg=d_bg, seed=4, top=(64 - size) // 2 - 2, size=size)
    rng = np.random.default_rng(0)
    for vec, rev, img, sign in ((s.bwd[1], s.fwd[0], s.images[1], -1), (s.fwd[0], s.bwd[1], s.images[0], 1)):
        _, occ = fb_consistency(vec, rev)
        refill = (occ > 0.5) & ~target_outside(vec)
        garbage = vec.copy()
        garbage[refill] = rng.uniform(-8, 8, (int(refill.sum()), 2))
        out = fill_occluded(garbage, occ, perceptual(img), rule=rule, refill=refill)
        err = np.linalg.norm(out[refill] - sign * s.d_bg, axis=1)
        assert refill.sum() > 100
        assert np.mean(err < 0.5) >= 0.95, np.mean(err < 0.5)
        np.testing.assert_array_equal(out[~refill], garbage[~refill])


def test_fill_rule_slower_fails_when_the_camera_follows_the_foreground():
    # The documented limit of 'slower' (control for the test above): when the square is slower
    # than the background, 'slower' gives the occluded background the square's motion.
    s = layered(d_fg=(1, 0), d_bg=(-5, -2), seed=4)
    _, occ = fb_consistency(s.bwd[1], s.fwd[0])
    refill = (occ > 0.5) & ~target_outside(s.bwd[1])
    out = fill_occluded(s.bwd[1], occ, perceptual(s.images[1]), rule="slower", refill=refill)
    err = np.linalg.norm(out[refill] + s.d_bg, axis=1)
    assert np.mean(err < 0.5) < 0.5


def test_fill_rule_dominant_fails_when_the_foreground_is_the_larger_region():
    # The documented limit of 'dominant' (control for 'auto' above): a square covering more of
    # the frame than the background is taken for the background.
    s = layered(d_fg=(6, 2), d_bg=(0, 0), seed=4, top=2, size=56)
    assert s.square[0].mean() > 0.5                                    # the square: 51 % of the frame
    _, occ = fb_consistency(s.fwd[0], s.bwd[1])
    refill = (occ > 0.5) & ~target_outside(s.fwd[0])
    out = fill_occluded(s.fwd[0], occ, perceptual(s.images[0]), rule="dominant", refill=refill)
    assert np.mean(np.linalg.norm(out[refill] - s.d_bg, axis=1) < 0.5) < 0.5


def test_edge_energy_is_lower_when_the_motion_edge_lies_on_the_image_edge():
    # Exact values: a one-row image with a colour edge between columns 3 and 4 and a 2 px step in
    # x: on the edge the pair weighs exp(-|dI|_1 / sigma), elsewhere 1.
    img = np.zeros((1, 8, 1), np.float32)
    img[:, 4:] = 0.6
    on, off = np.zeros((1, 8, 2), np.float32), np.zeros((1, 8, 2), np.float32)
    on[:, 4:, 0] = 2.0
    off[:, 6:, 0] = 2.0
    planes = F.guide_planes(img, (1, 8))
    assert edge_energy(on, planes, 0.1) == pytest.approx(2.0 * np.exp(-6.0), rel=1e-5)
    assert edge_energy(off, planes, 0.1) == pytest.approx(2.0)
    assert edge_energy(off, [], 0.1) == pytest.approx(2.0)


def test_motion_edges_mark_both_sides_of_a_step():
    flow = np.zeros((4, 9, 2), np.float32)
    flow[:, 5:, 1] = 1.5                      # a step of 1.5 px in y between columns 4 and 5
    flow[:, :2, 0] = 0.5                      # a step of 0.5 px: under the threshold
    marked = motion_edges(flow, 1.0)
    expected = np.zeros((4, 9), bool)
    expected[:, 4:6] = True
    np.testing.assert_array_equal(marked, expected)


def test_suspect_strip_removes_edge_fattening():
    # The foreground's vector carried 1 px into the visible background on the side away from
    # the occluded strip (edge fattening that the forward-backward check cannot see when the
    # reverse field is fattened alike). With suspect_jump the background there gets its own
    # vector back (>= 90 % within 0.5 px; measured: all); the truth inside is kept. (One pixel
    # per side is what the strip reaches: wider fattening is only narrowed by one pixel.)
    s = layered(d_fg=(6, 0), d_bg=(0, 0), seed=4)
    fat = [f.copy() for f in (s.fwd[0], s.bwd[1])]
    for f, sq in zip(fat, (s.square[0], s.square[1])):
        ys, xs = np.nonzero(sq)
        band = np.zeros_like(sq)
        band[ys, np.maximum(xs - 1, 0)] = True          # 1 px left of the square's left edge
        band &= ~sq
        f[band] = f[sq][0]
    strip = np.zeros_like(s.square[0])
    ys, xs = np.nonzero(s.square[0])
    strip[ys, np.maximum(xs - 1, 0)] = True
    strip &= ~s.square[0]
    img = perceptual(s.images[0])
    plain, _, _ = smooth_direction(fat[0], fat[1], img, fill_rule="auto")
    out, _, _ = smooth_direction(fat[0], fat[1], img, fill_rule="auto", suspect_jump=SUSPECT_JUMP)
    err_plain = np.linalg.norm(plain[strip] - s.d_bg, axis=1)
    err = np.linalg.norm(out[strip] - s.d_bg, axis=1)
    assert np.mean(err_plain < 0.5) < 0.5                     # without: the fattening stays
    assert np.mean(err < 0.5) >= 0.9
    inside = s.square[0] & ~motion_edges(s.fwd[0], SUSPECT_JUMP)
    assert np.mean(np.linalg.norm(out[inside] - s.d_fg, axis=1) < 0.5) >= 0.95


def fattened_both_ways(s: Layered) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Forward vectors of frame 0 with the square's vector carried over the strip it covers next
    (occluded), and backward vectors of frame 1 fattened so that the strip passes the
    forward-backward check; and the strip's mask."""
    d = int(s.d_fg[0])
    fwd, bwd = s.fwd[0].copy(), s.bwd[1].copy()
    ys, xs = np.nonzero(s.square[0])
    right = xs.max()
    strip = np.zeros_like(s.square[0])
    strip[ys.min():ys.max() + 1, right + 1:right + 1 + d] = True
    fwd[strip] = s.d_fg
    bwd[ys.min():ys.max() + 1, right + 1 + d:right + 1 + 2 * d] = -s.d_fg
    return fwd, bwd, strip


def test_mapping_conflicts_find_the_occluded_strip_the_round_trip_passes():
    # Known answer (invented layered scene): the strip covered next carries the square's vector
    # and its partners in frame 1 agree, so the forward-backward check (Sundaram et al. 2010)
    # passes it; its pixels land where the visible background beyond it lands too, with a
    # worse match, so the uniqueness of the mapping marks them (all, measured) and nothing of
    # the correctly matched background or the square.
    s = layered(d_fg=(6, 0), d_bg=(0, 0), seed=4)
    fwd, bwd, strip = fattened_both_ways(s)
    _, occ = fb_consistency(fwd, bwd)
    assert occ[strip].mean() < 0.05                        # the round trip passes the strip
    a, b = perceptual(s.images[0]), perceptual(s.images[1])
    lost = mapping_conflicts(fwd, a, b)
    assert lost[strip].mean() >= 0.9
    assert lost[~strip].mean() < 0.01
    # exact vectors: what is marked is truly occluded (covered by the square in frame 1)
    exact = mapping_conflicts(s.fwd[0], a, b)
    _, occ_exact = fb_consistency(s.fwd[0], s.bwd[1])
    assert exact.any() and (occ_exact[exact] > 0.5).all()


def test_smooth_direction_refills_mapping_conflicts_with_the_background():
    s = layered(d_fg=(6, 0), d_bg=(0, 0), seed=4)
    fwd, bwd, strip = fattened_both_ways(s)
    a, b = perceptual(s.images[0]), perceptual(s.images[1])
    plain, _, _ = smooth_direction(fwd, bwd, a, fill_rule="auto")
    out, conf, occ = smooth_direction(fwd, bwd, a, fill_rule="auto", other=b)
    assert np.mean(np.linalg.norm(plain[strip] - s.d_bg, axis=1) < 0.5) < 0.5
    assert np.mean(np.linalg.norm(out[strip] - s.d_bg, axis=1) < 0.5) >= 0.9
    c2, o2 = fb_consistency(fwd, bwd)                       # conf and occ stay as measured
    np.testing.assert_array_equal(conf, c2)
    np.testing.assert_array_equal(occ, o2)


def test_fill_with_no_candidate_keeps_the_vector():
    flow = np.full((5, 6, 2), 3.0, np.float32)
    out = fill_occluded(flow, np.ones((5, 6), np.float32))
    np.testing.assert_array_equal(out, flow)


def test_nearest_valid_at_matches_the_scanline_search_exactly():
    # exact invariant: the run-based search answers what the full-row/column scan does
    rng = np.random.default_rng(11)
    for _ in range(100):
        h, w = rng.integers(1, 14, 2)
        invalid = rng.random((h, w)) < rng.random()
        invalid[:, 0] |= rng.random(h) < 0.5            # runs touching the frame's edges
        ys, xs = np.nonzero(invalid)
        left, right = F.nearest_valid(~invalid, None)
        up, down = F.nearest_valid(np.ascontiguousarray(~invalid.T), None)
        got = F.nearest_valid_at(invalid, ys, xs)
        for g, want in zip(got, (left[ys, xs], right[ys, xs], up[xs, ys], down[xs, ys])):
            np.testing.assert_array_equal(g, want)


def test_nearest_valid_at_known_answer():
    invalid = np.array([[0, 1, 1, 0, 1],
                        [1, 1, 0, 0, 0]], bool)
    ys, xs = np.nonzero(invalid)                        # (0,1) (0,2) (0,4) (1,0) (1,1)
    left, right, up, down = F.nearest_valid_at(invalid, ys, xs)
    assert left.tolist() == [0, 0, 3, -1, -1]
    assert right.tolist() == [3, 3, -1, 2, 2]
    assert up.tolist() == [-1, -1, -1, 0, -1]
    assert down.tolist() == [-1, 1, 1, -1, -1]


# -- matte -------------------------------------------------------------------------------------------------
def stripe_scene(seed=0, noise=0.2):
    """A matte that is a 2 px wide vertical stripe moving (5, -3); outside (0.5, 0.5); a guide
    with no edge at all, so only the matte tells the two motions apart."""
    h, w = 40, 48
    matte = np.zeros((h, w), np.float32)
    matte[:, 23:25] = 1.0
    truth = np.where(matte[..., None] > 0.5, np.float32([5, -3]), np.float32([0.5, 0.5])).astype(np.float32)
    rng = np.random.default_rng(seed)
    noisy = truth + rng.normal(0, noise, truth.shape).astype(np.float32)
    guide = np.full((h, w, 3), 0.5, np.float32)
    return guide, matte, truth, noisy


@pytest.mark.parametrize("name", ["median", "smooth", "smooth-fast"])
def test_matte_keeps_inside_and_outside_vectors_apart(name):
    # Known answer: a thin inside structure survives only if the sides never mix. Without the
    # matte (control) a 5x5 median erases the 2 px stripe (it is a minority in every window)
    # and the smoothing blends it away.
    guide, matte, truth, noisy = stripe_scene()
    filt = {"median": lambda m: weighted_median(noisy, guide, 2, skip_below=0.0, matte=m),
            "smooth": lambda m: edge_aware_smooth(noisy, guide, None, radius=4, strength=1.0, matte=m),
            "smooth-fast": lambda m: edge_aware_smooth(noisy, guide, None, radius=4, strength=1.0,
                                                       matte=m, subsample=2)}[name]
    split = filt(matte)
    assert np.abs(split - truth).max() < 1.0      # noise 0.2 px: no vector crosses the matte
    mixed = filt(None)
    assert np.abs(mixed - truth)[:, 23:25].max() > 2.0


def test_fill_takes_candidates_from_the_pixels_own_matte_side():
    # Inside (left half, matte 1) moves (4, 0); outside, the dominant side, is still. A strip of
    # occluded inside pixels next to the matte edge: without the matte the still outside
    # vector (the dominant motion) is chosen; with it, only inside vectors may be.
    h, w = 20, 40
    matte = np.zeros((h, w), np.float32)
    matte[:, :16] = 1.0
    flow = np.zeros((h, w, 2), np.float32)
    flow[:, :16] = (4.0, 0.0)
    occ = np.zeros((h, w), np.float32)
    occ[:, 12:16] = 1.0
    flow[:, 12:16] = (-9.0, 9.0)                    # garbage
    without = fill_occluded(flow, occ)
    assert np.allclose(without[:, 12:16], 0.0)
    with_matte = fill_occluded(flow, occ, matte=matte)
    assert np.allclose(with_matte[:, 12:16], (4.0, 0.0))


# -- one direction ------------------------------------------------------------------------------------
def test_smooth_direction_on_the_layered_scene():
    # The whole chain on noisy analytic vectors: visible pixels end near the truth, the
    # uncovered background takes the background motion, conf/occ are those of the input.
    s = layered(d_bg=(-2, 1), seed=6)
    rng = np.random.default_rng(2)
    vec = s.bwd[1] + rng.normal(0, 0.15, s.bwd[1].shape).astype(np.float32)
    _, occ_clean = fb_consistency(s.bwd[1], s.fwd[0])
    vec[occ_clean > 0.5] = rng.uniform(-8, 8, (int((occ_clean > 0.5).sum()), 2))
    out, conf, occ = smooth_direction(vec, s.fwd[0], perceptual(s.images[1]))
    c2, o2 = fb_consistency(vec, s.fwd[0])
    np.testing.assert_array_equal(conf, c2)
    np.testing.assert_array_equal(occ, o2)
    inside = ~target_outside(s.bwd[1])
    err = np.linalg.norm(out - s.bwd[1], axis=2)
    assert np.mean(err[inside] < 0.5) > 0.97
    assert np.mean(err[(occ_clean > 0.5) & inside] < 0.5) > 0.9


@pytest.mark.parametrize("options", [dict(median_where="everywhere"), dict(smooth_radius=0),
                                     dict(median_radius=0), dict(fill=False)])
def test_smooth_direction_variants_stay_accurate_on_visible_pixels(options):
    # Each optional step switched off or widened: visible pixels of the noisy layered scene
    # (noise 0.15 px) still end within 0.5 px of the truth (>= 95 %).
    s = layered(d_bg=(-2, 1), seed=6)
    rng = np.random.default_rng(5)
    vec = s.bwd[1] + rng.normal(0, 0.15, s.bwd[1].shape).astype(np.float32)
    out, conf, occ = smooth_direction(vec, s.fwd[0], perceptual(s.images[1]), **options)
    visible = (occ == 0)
    err = np.linalg.norm(out - s.bwd[1], axis=2)
    assert np.mean(err[visible] < 0.5) >= 0.95


def test_no_neighbour_gives_confidence_zero_and_unchanged_vectors():
    flow = np.random.default_rng(0).normal(0, 2, (10, 12, 2)).astype(np.float32)
    out, conf, occ = smooth_direction(flow, None, None)
    np.testing.assert_array_equal(out, flow)
    assert not conf.any() and not occ.any()


# -- the operator ---------------------------------------------------------------------------------------
def vec_image(fwd: np.ndarray, bwd: np.ndarray) -> Image:
    return Image(np.concatenate([fwd, bwd], axis=2), VECTORS)


def rgb(img: np.ndarray) -> Image:
    return Image(img, ("R", "G", "B"))


def test_operator_layout_and_the_ends_of_a_sequence():
    s = layered(n=3)
    v = [vec_image(s.fwd[k], s.bwd[k]) for k in range(3)]
    mid = run({"vectors": (v[0], v[1], v[2]), "image": rgb(s.images[1])})
    assert mid.channels == SMOOTHED and mid.pixels.dtype == np.float32
    assert mid.size == v[1].size
    sq0, sq1, sq2 = s.square
    assert np.array_equal(mid.channel("fwd.occ").astype(bool), (sq2 & ~sq1) | target_outside(s.fwd[1]))
    assert np.array_equal(mid.channel("bwd.occ").astype(bool), (sq0 & ~sq1) | target_outside(s.bwd[1]))
    last = run({"vectors": (v[1], v[2], None), "image": rgb(s.images[2])})
    assert not last.channel("fwd.conf").any() and not last.channel("fwd.occ").any()
    np.testing.assert_array_equal(last.pixels[..., 0:2], s.fwd[2])        # left as they are
    assert last.channel("bwd.conf").max() == 1.0
    first = run({"vectors": (None, v[0], v[1]), "image": rgb(s.images[0])})
    assert not first.channel("bwd.conf").any()
    np.testing.assert_array_equal(first.pixels[..., 2:4], s.bwd[0])


def test_operator_matte_input_uses_A_or_the_only_channel():
    guide, matte, truth, noisy = stripe_scene(seed=3)
    v = vec_image(noisy, -noisy)
    nb = vec_image(-noisy, noisy)   # consistent neighbours both ways (small motions)
    for m in (Image(matte, ("A",)), Image(matte, ("matte",)),
              Image(np.dstack([matte * 0.3, matte]), ("R", "A"))):
        out = run({"vectors": (nb, v, nb), "image": rgb(guide), "matte": m},
                  median_where="everywhere", smooth_strength=1.0)
        assert np.abs(out.pixels[..., 0:2] - truth).max() < 1.0
    bad = Image(np.dstack([matte, matte]), ("R", "G"))
    with pytest.raises(OpError) as info:
        run({"vectors": (nb, v, nb), "image": rgb(guide), "matte": bad})
    assert info.value.field == "matte" and "A" in info.value.fix


def test_operator_takes_a_single_channel_guide():
    s = layered(n=2)
    v0, v1 = vec_image(s.fwd[0], s.bwd[0]), vec_image(s.fwd[1], s.bwd[1])
    grey = Image(s.images[0].mean(axis=2), ("Y",))
    out = run({"vectors": (None, v0, v1), "image": grey})
    assert out.channels == SMOOTHED
    assert np.array_equal(out.channel("fwd.occ").astype(bool),
                          (s.square[1] & ~s.square[0]) | target_outside(s.fwd[0]))


def test_operator_errors_name_the_field_and_the_fix():
    s = layered(n=2)
    v = vec_image(s.fwd[0], s.bwd[0])
    img = rgb(s.images[0])
    only_fwd = Image(s.fwd[0], ("fwd.x", "fwd.y"))
    with pytest.raises(OpError) as info:
        run({"vectors": (None, only_fwd, None), "image": img})
    assert info.value.field == "vectors" and "flow-estimate" in info.value.fix
    assert "bwd.x" in str(info.value) and "fwd.x, fwd.y" in str(info.value)
    small = rgb(s.images[0][:32, :48])
    with pytest.raises(OpError) as info:
        run({"vectors": (None, v, None), "image": small})
    assert info.value.field == "image" and "resize" in info.value.fix
    with pytest.raises(OpError) as info:
        run({"vectors": (None, v, None), "image": img, "matte": Image(np.ones((10, 10)), ("A",))})
    assert info.value.field == "matte" and "resize" in info.value.fix
    with pytest.raises(OpError) as info:
        run({"vectors": (None, v, vec_image(s.fwd[0][:32], s.bwd[0][:32])), "image": img})
    assert info.value.field == "vectors" and "resize" in info.value.fix
    with pytest.raises(OpError) as info:
        run({"vectors": (None, v, None), "image": Image(s.images[0][..., :2], ("X", "Y"))})
    assert info.value.field == "image"
    with pytest.raises(pydantic.ValidationError):
        VectorSmoothParams(median_radius=-1)
    with pytest.raises(pydantic.ValidationError):
        VectorSmoothParams(smoothness=3)


def test_operator_replaces_nan_vectors_with_zero_and_warns_once():
    s = layered(n=2)
    fwd = s.fwd[0].copy()
    fwd[3, 4] = np.nan
    fwd[5, 6, 1] = np.inf
    v = vec_image(fwd, s.bwd[0])
    nxt = s.bwd[1].copy()
    nxt[0, 0] = np.nan
    warnings: list[str] = []
    out = run({"vectors": (None, v, vec_image(s.fwd[1], nxt)), "image": rgb(s.images[0])},
              warnings=warnings, median_radius=0, smooth_radius=0, fill_occlusions=False)
    assert np.isfinite(out.pixels).all()
    np.testing.assert_array_equal(out.pixels[3, 4, 0:2], 0.0)
    assert len(warnings) == 1 and "NaN" in warnings[0] and "next frame" in warnings[0]


def test_needs_asks_for_both_neighbours_along_the_axis():
    s = Sample(5, 2)
    frame = VECTOR_SMOOTH.needs(VectorSmoothParams(), s)
    assert frame["vectors"] == (Sample(4, 2), s, Sample(6, 2)) and frame["image"] == s
    view = VECTOR_SMOOTH.needs(VectorSmoothParams(axis="view"), s)
    assert view["vectors"] == (Sample(5, 1), s, Sample(5, 3))
    assert VECTOR_SMOOTH.edge_samples


# -- through the engine ---------------------------------------------------------------------------------
class SceneParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)
    what: str = Field("vectors", description="'vectors' or 'plate' of the layered test scene.")


_SCENE = layered(n=3, d_bg=(-2, 1))


def _scene(params: SceneParams, inputs, ctx) -> Image:
    k = int(ctx.sample.frame) - 1
    if params.what == "plate":
        return rgb(_SCENE.images[k])
    return vec_image(_SCENE.fwd[k], _SCENE.bwd[k])


SCENE = Operator(name="test-layered-scene", version=1, summary="analytic layered scene, frames 1-3",
                 params=SceneParams, compute=_scene, frames=lambda p, i: FrameRange(1, 3))


def test_through_the_engine_the_last_frame_has_no_forward_confidence(registry):
    from graphcore.evaluate import Evaluator
    from graphcore.validate import load_graph
    from tests.conftest import graph_doc

    registry.add(SCENE)
    registry.add(VECTOR_SMOOTH)
    nodes = {"vec": {"op": "test-layered-scene"},
             "plate": {"op": "test-layered-scene", "params": {"what": "plate"}},
             "sm": {"op": "vector-smooth", "inputs": {"vectors": "vec", "image": "plate"}}}
    ev = Evaluator(load_graph(graph_doc(nodes), registry=registry, file="t.json").graph, registry)
    out = {f: ev.evaluate("sm", Sample(f)) for f in (1, 2, 3)}
    assert ev.calls["vec"] == 3                          # frames 0 and 4 never asked for
    assert not out[3].channel("fwd.conf").any()
    assert not out[1].channel("bwd.conf").any()
    sq = _SCENE.square
    assert np.array_equal(out[2].channel("fwd.occ").astype(bool),
                          (~sq[1] & shifted_mask(sq[2], _SCENE.d_bg)) | target_outside(_SCENE.fwd[1]))
    visible = out[2].channel("fwd.occ") == 0
    assert out[2].channel("fwd.conf")[visible].min() == 1.0
    # exact, confident input vectors move by at most smooth_strength * jump = 0.5 * 0.5 px
    # (documented bound of edge_aware_smooth), and most do not move at all
    moved = np.abs(out[2].pixels[..., 0:2] - _SCENE.fwd[1]).max(axis=2)[visible]
    assert moved.max() <= 0.25 + 1e-4 and np.mean(moved < 0.05) > 0.8
