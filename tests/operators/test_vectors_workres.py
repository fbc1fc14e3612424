"""The reduced working resolution of vector work on large plates (operators/vectors/_workres.py) and
what uses it: ``vector-smooth`` and ``warp`` with ``vector_resolution='half'``, and the reuse of a
frame's encoding across ``flow-estimate`` samples.

Known answers only (invented scenes with exact vectors, from the tests of those operators). The
joint enlargement is Kopf et al.'s joint bilateral upsampling (ACM TOG 26(3), SIGGRAPH 2007): a
field reduced by 2 and enlarged again keeps its edges on the full-size guide's edges, which plain
bilinear enlargement does not.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from graphcore.image import Image
from graphcore.sample import Sample
from operators.composite.blend import BLEND, BlendParams
from operators.inbetween.warp import WARP, WarpParams
from operators.vectors import _workres as R
from operators.vectors import flow as flow_module
from operators.vectors.consistency import target_outside
from tests.operators.conftest import run_op
from tests.operators.test_inbetween_warp import (CHANNELS, exact_vectors, render, rgb_error,
                                                 uncovered)
from tests.operators.test_vectors_smooth import layered, rgb, run as smooth, vec_image


def test_work_step_auto_halves_only_large_plates():
    assert R.work_step(1080, 2048, "auto") == 2          # 2K: 2.2 megapixels
    assert R.work_step(1080, 1920, "auto") == 2          # HD
    assert R.work_step(720, 1280, "auto") == 1           # 0.9 megapixels
    assert R.work_step(144, 176, "auto") == 1
    assert R.work_step(144, 176, "half") == 2 and R.work_step(1080, 2048, "full") == 1
    assert R.work_step(20, 2000, "half") == 1            # too thin to halve
    with pytest.raises(ValueError, match="'auto', 'full' or 'half'"):
        R.work_step(10, 10, "quarter")


def test_shrink_and_enlarge_keep_a_uniform_translation_exact():
    v = np.empty((37, 50, 2), np.float32)               # odd size: reduced size rounds up
    v[:] = (3.25, -1.5)
    small = R.shrink_vectors(v, 2)
    assert small.shape == (19, 25, 2)
    np.testing.assert_allclose(small[..., 0], 3.25 * 25 / 50, rtol=1e-6)
    np.testing.assert_allclose(small[..., 1], -1.5 * 19 / 37, rtol=1e-6)
    np.testing.assert_allclose(R.enlarge_vectors(small, 37, 50), v, rtol=1e-5)


def test_joint_enlargement_puts_the_edge_on_the_guide_edge():
    # A field with a step between two motions exactly where the guide steps, at an odd column
    # (between two reduced samples): bilinear enlargement smears the step over the columns
    # around it, the joint enlargement keeps every full-size pixel on its own side.
    h, w, edge = 24, 40, 17
    guide = np.where(np.arange(w)[None, :] < edge, 0.2, 0.8).astype(np.float32) * np.ones((h, 1), np.float32)
    field = np.zeros((h, w, 2), np.float32)
    field[:, edge:] = (5.0, -2.0)
    small_f, small_g = R.shrink(field, 2), R.shrink(guide, 2)
    joint = R.enlarge_joint(small_f, small_g, guide, tolerance=(0.5, 0.5))
    plain = R.enlarge(small_f, h, w)
    # (the reduced sample that straddles the edge is mixed; its guide is half-way, so it keeps a
    # weight of exp(-0.3 / 0.05) = 0.0025 beside the edge)
    np.testing.assert_allclose(joint[:, :edge - 1], 0.0, atol=0.01)
    np.testing.assert_allclose(joint[:, edge + 1:], field[:, edge + 1:], atol=0.01)
    bad_joint = np.abs(joint - field).max(axis=2) > 0.5
    bad_plain = np.abs(plain - field).max(axis=2) > 0.5
    assert bad_plain.sum() >= 2 * h and bad_joint.sum() <= h   # at most the mixed column itself
    flat = R.enlarge_joint(np.full((12, 20, 1), 7.0, np.float32), small_g, guide, tolerance=(0.1,))
    np.testing.assert_array_equal(flat, 7.0)                     # a flat field: no weights at all


def _noisy_layered():
    s = layered(n=3, h=96, w=128, top=30, left=40, size=32, d_bg=(-2, 1), seed=6)
    rng = np.random.default_rng(2)
    noise = lambda a: a + rng.normal(0, 0.15, a.shape).astype(np.float32)   # noqa: E731
    return s, [vec_image(noise(s.fwd[k]), noise(s.bwd[k])) for k in range(3)]


def test_vector_smooth_at_half_resolution_is_as_accurate_on_the_layered_scene():
    # Noisy exact vectors (0.15 px) of a textured square over a moving background. Measured:
    # full 99.9 % / half 100 % of in-frame pixels within 0.5 px of the truth, mean error
    # 0.095 px full, 0.040 px half (the reduction averages the noise).
    s, v = _noisy_layered()
    for mode in ("full", "half"):
        out = smooth({"vectors": (v[0], v[1], v[2]), "image": rgb(s.images[1])}, vector_resolution=mode)
        assert out.size == v[1].size and out.channels[:4] == ("fwd.x", "fwd.y", "bwd.x", "bwd.y")
        for sl, truth in ((slice(0, 2), s.fwd[1]), (slice(2, 4), s.bwd[1])):
            err = np.linalg.norm(out.pixels[..., sl] - truth, axis=2)[~target_outside(truth)]
            assert np.mean(err < 0.5) > 0.99 and err.mean() < 0.12, (mode, err.mean())


def test_vector_smooth_at_half_resolution_leaves_a_missing_direction_unchanged():
    s, v = _noisy_layered()
    last = smooth({"vectors": (v[1], v[2], None), "image": rgb(s.images[2])}, vector_resolution="half")
    np.testing.assert_array_equal(last.pixels[..., 0:2], v[2].pixels[..., 0:2])
    assert not last.channel("fwd.conf").any() and not last.channel("fwd.occ").any()
    assert last.channel("bwd.conf").max() > 0.9


@pytest.mark.parametrize("t", [Fraction(1, 4), Fraction(1, 2), Fraction(3, 4)])
def test_warp_at_half_resolution_stays_close_to_the_exact_inbetween(t):
    # The moving-layer scene of test_inbetween_warp with its exact vectors. At full resolution
    # the in-between is exact (that test); at half, the splat's 2 px blocks leave errors along the
    # layer's edges only. Measured: mean error 0.0028-0.0034 (full: < 2e-5), uncovered
    # background 0-0.025 against the cross-dissolve's 0.08-0.18.
    s = Sample(1000 + t)
    i0, i1 = render(0), render(1)
    vec = exact_vectors()
    sides = [run_op(WARP, WarpParams(side=side, filter="bilinear", vector_resolution="half"),
                    {"image": img, "vectors": vec}, sample=s) for side, img in (("previous", i0), ("next", i1))]
    out = run_op(BLEND, BlendParams(mode="inbetween"), {"a": sides[0], "b": sides[1]}, sample=s, warnings=[])
    truth = render(t)
    err = rgb_error(out, truth)
    dissolve = rgb_error(Image((1 - float(t)) * i0.pixels + float(t) * i1.pixels, CHANNELS), truth)
    hid = uncovered(t)[0] | uncovered(t)[1]
    assert err.mean() < 0.005 and err[hid].mean() < 0.035
    assert err[hid].mean() < 0.3 * dissolve[hid].mean()
    assert np.mean(err > 0.01) < 0.04                    # only along the edges


def test_flow_estimate_encodes_each_frame_once(monkeypatch):
    # Three neighbouring flow-estimate samples share their frames: each frame is encoded once
    # while its pixels live, and a new image (even with equal values) is encoded anew.
    calls = []
    real = flow_module.perceptual
    monkeypatch.setattr(flow_module, "perceptual", lambda img, ch: calls.append(id(img)) or real(img, ch))
    monkeypatch.setattr(flow_module, "_ENCODED", type(flow_module._ENCODED)())
    rng = np.random.default_rng(0)
    frames = [Image(rng.random((24, 32, 3)).astype(np.float32), ("R", "G", "B")) for _ in range(5)]
    params = flow_module.FlowParams(engine="dis")
    for k in range(1, 4):
        flow_module._compute(params, {"image": (frames[k - 1], frames[k], frames[k + 1])}, None)
    assert sorted(calls) == sorted(id(f) for f in frames)
    first = flow_module._encoded(frames[2], ("R", "G", "B"))
    assert not first.flags.writeable
    copy = Image(frames[2].pixels.copy(), ("R", "G", "B"))
    again = flow_module._encoded(copy, ("R", "G", "B"))
    assert again is not first and np.array_equal(again, first)


def test_flow_estimate_gives_the_same_vectors_with_one_thread_or_two():
    # With two OpenCV threads allowed (a serial render) the two directions run side by side; pool and
    # Dask workers allow one. The vectors must not depend on it (pixel-identical renders).
    import cv2

    rng = np.random.default_rng(4)
    base = cv2.GaussianBlur(rng.random((60, 90, 3)).astype(np.float32), (0, 0), 1.5)
    frames = [Image(np.roll(base, 2 * k, axis=1), ("R", "G", "B")) for k in range(3)]
    params = flow_module.FlowParams(quality="draft")
    before = cv2.getNumThreads()
    try:
        out = {}
        for n in (1, 2):
            cv2.setNumThreads(n)
            flow_module._ENCODED.clear()
            out[n] = flow_module._compute(params, {"image": tuple(frames)}, None).pixels
    finally:
        cv2.setNumThreads(before)
    np.testing.assert_array_equal(out[1], out[2])
    assert abs(float(np.median(out[1][..., 0])) - 2.0) < 0.1        # fwd: 2 px right
