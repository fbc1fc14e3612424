"""Tests of ``color-match`` (operators/rig/color_match.py).

Known answers on invented data: a seeded texture is given a known per-channel gain and offset, or
a known 3x3 matrix, and the fit must recover it. The outlier checks follow the robust-regression
literature the operator cites (Holland and Welsch 1977; Beaton and Tukey 1974): content that
differs in a patch must not bias the fit, where plain least squares is biased (measured beside
the check). The premultiplied identity ``M (a c) + o a = a (M c + o)`` is Porter and Duff's
premultiplied colour (SIGGRAPH 1984).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from operators.rig.color_match import COLOR_MATCH, ColorMatchParams, fit_color
from tests.operators.conftest import rig_context, run_op, run_rig_op, texture

RGB = ("R", "G", "B")
GAIN = np.array([1.25, 0.8, 1.1], np.float32)
OFFSET = np.array([0.02, -0.01, 0.005], np.float32)
MATRIX = np.array([[1.10, 0.06, -0.02],
                   [0.03, 0.92, 0.04],
                   [-0.05, 0.12, 1.18]], np.float32)


def rig(reference: np.ndarray, other: np.ndarray, channels=RGB, meta=None) -> dict[int, Image]:
    """Three cameras; camera 2 (the middle one, the default reference) shows ``reference``,
    cameras 1 and 3 show ``other``."""
    ref = Image(reference, channels, meta or {})
    cam = Image(other, channels, meta or {})
    return {1: cam, 2: ref, 3: cam}


def diag_and_offset(out: Image) -> tuple[np.ndarray, np.ndarray]:
    return np.diag(np.array(out.meta["color-match.matrix"])), np.array(out.meta["color-match.offset"])


# -- known answers ------------------------------------------------------------------------------------
def test_gain_and_offset_recovered():
    """reference = g * camera + o per channel; measured: recovered to within 3e-8 (float32 data);
    asserted to 1e-4."""
    cam = texture(120, 160, seed=1)
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(), rig(cam * GAIN + OFFSET, cam), view=1)
    g, o = diag_and_offset(out)
    np.testing.assert_allclose(g, GAIN, atol=1e-4)
    np.testing.assert_allclose(o, OFFSET, atol=1e-4)
    off_diag = np.array(out.meta["color-match.matrix"]) - np.diag(g)
    assert np.all(off_diag == 0)
    np.testing.assert_allclose(out.pixels, cam * GAIN + OFFSET, atol=1e-4)
    assert out.meta["color-match.reference"] == 2 and out.meta["color-match.view"] == 1


def test_gain_only_model_recovered():
    cam = texture(120, 160, seed=2)
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(model="gain"), rig(cam * GAIN, cam), view=3)
    g, o = diag_and_offset(out)
    np.testing.assert_allclose(g, GAIN, atol=1e-4)
    assert np.all(o == 0)


@pytest.mark.parametrize("model, offset", [("matrix", np.zeros(3, np.float32)), ("matrix-offset", OFFSET)])
def test_3x3_matrix_recovered(model, offset):
    """reference = M @ camera (+ o); measured: every entry within 6e-8; asserted to 1e-4."""
    cam = texture(120, 160, seed=3)
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(model=model), rig(cam @ MATRIX.T + offset, cam), view=1)
    np.testing.assert_allclose(np.array(out.meta["color-match.matrix"]), MATRIX, atol=1e-4)
    np.testing.assert_allclose(np.array(out.meta["color-match.offset"]), offset, atol=1e-4)
    assert out.meta["color-match.residual"] < 1e-4


# -- robustness -----------------------------------------------------------------------------------------
def outlier_pair(seed: int = 4) -> tuple[np.ndarray, np.ndarray]:
    """reference = g * camera + o except a patch of 20 % of the frame showing other content (as
    parallax or a subject only one camera sees would)."""
    cam = texture(120, 160, seed=seed)
    ref = cam * GAIN + OFFSET
    ref[20:68, 30:110] = texture(48, 80, seed=seed + 100) * 1.5       # 48 * 80 / (120 * 160) = 20 %
    return cam, ref


def test_a_patch_of_other_content_is_rejected():
    """Measured: gains and offsets within 3e-8 and an inlier share of exactly 0.80 (the patch is
    20 %) with the robust fit; plain least squares on the same pixels is off by 0.31 to 0.49 in
    the gains (asserted > 0.02, so the patch is a real test of the rejection)."""
    cam, ref = outlier_pair()
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(), rig(ref, cam), view=1)
    g, o = diag_and_offset(out)
    np.testing.assert_allclose(g, GAIN, atol=1e-4)
    np.testing.assert_allclose(o, OFFSET, atol=1e-4)
    assert 0.78 < out.meta["color-match.inliers"] < 0.82
    plain = [np.linalg.lstsq(np.column_stack([cam[:, :, c].ravel(), np.ones(cam[:, :, c].size)]),
                             ref[:, :, c].ravel(), rcond=None)[0][0] for c in range(3)]
    assert np.max(np.abs(np.array(plain) - GAIN)) > 0.02


def test_a_matte_restricts_the_fit():
    """Left half: gain 1.25; right half: gain 0.5. A matte over the right half recovers 0.5."""
    cam = texture(100, 160, seed=5)
    ref = cam * 1.25
    ref[:, 80:] = cam[:, 80:] * 0.5
    matte = np.zeros((100, 160, 1), np.float32)
    matte[:, 84:] = 1.0                                                  # a margin off the seam
    m = Image(matte, ("A",))
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(model="gain"), rig(ref, cam), view=1,
                     matte={1: m, 2: m, 3: m})
    g, _ = diag_and_offset(out)
    np.testing.assert_allclose(g, [0.5, 0.5, 0.5], atol=1e-4)


def test_warns_when_few_pixels_agree():
    """Unrelated content: measured, the fit explains 0.4 % of the reference's colour variance."""
    cam = texture(80, 100, seed=6)
    other = texture(80, 100, seed=60)                                   # unrelated content
    warnings: list[str] = []
    run_rig_op(COLOR_MATCH, ColorMatchParams(), rig(other, cam), view=1, warnings=warnings)
    assert len(warnings) == 1 and "view 1" in warnings[0] and "align-views" in warnings[0]


# -- channels and premultiplied colour -------------------------------------------------------------------
def test_premultiplied_colour_alpha_and_other_layers():
    """Straight colour c, alpha a: the reference is a (g c + o). The result equals it, A and every
    other layer are unchanged bit for bit, and empty pixels (A = 0) stay empty."""
    h, w = 90, 120
    straight = texture(h, w, seed=7)
    alpha = np.clip(texture(h, w, seed=8, channels=1)[:, :, 0] * 1.6 - 0.3, 0, 1)
    alpha[:10] = 0.0
    vec = np.random.default_rng(9).normal(0, 5, (h, w, 2)).astype(np.float32)
    chans = ("R", "G", "B", "A", "fwd.x", "fwd.y")
    cam = np.dstack([straight * alpha[:, :, None], alpha, vec])
    ref = np.dstack([(straight * GAIN + OFFSET) * alpha[:, :, None], alpha, vec])
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(), rig(ref, cam, chans), view=3)
    g, o = diag_and_offset(out)
    np.testing.assert_allclose(g, GAIN, atol=1e-4)
    np.testing.assert_allclose(o, OFFSET, atol=1e-4)
    np.testing.assert_allclose(out.pixels[:, :, :3], ref[:, :, :3], atol=1e-4)
    for i in (3, 4, 5):
        assert out.pixels[:, :, i].tobytes() == cam[:, :, i].astype(np.float32).tobytes()
    assert np.all(out.pixels[:10, :, :3] == 0)
    assert out.channels == chans


def test_reference_camera_passes_through_bit_for_bit():
    cams = rig(texture(40, 50, seed=10), texture(40, 50, seed=11))
    assert run_rig_op(COLOR_MATCH, ColorMatchParams(), cams, view=2) is cams[2]
    assert COLOR_MATCH.needs(ColorMatchParams(), rig_context(2, 3).sample,
                             rig_context(2, 3).input_ranges) == {"image": (rig_context(2, 3).sample,)}
    # an explicit reference
    assert run_rig_op(COLOR_MATCH, ColorMatchParams(reference=1), cams, view=1) is cams[1]


def test_default_reference_is_the_middle_camera():
    """Cameras 1..4: the lower middle, camera 2; cameras 1..5: camera 3."""
    from graphcore.registry.operator import FrameRange, InputRange
    from graphcore.sample import Sample

    for n, ref in ((4, 2), (5, 3), (1, 1)):
        wanted = COLOR_MATCH.needs(ColorMatchParams(), Sample(0, 1), {"image": InputRange(None, FrameRange(1, n))})
        assert wanted["image"][-1] == Sample(0, ref)


def test_report_reaches_the_exr_header_attributes():
    cam = texture(60, 80, seed=12)
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(), rig(cam * GAIN + OFFSET, cam), view=1)
    record = json.loads(out.meta["exr.attributes"]["midframe.color-match"])
    assert record["reference"] == 2 and record["model"] == "gain-offset"
    np.testing.assert_allclose(np.diag(record["matrix"]), GAIN, atol=1e-4)


# -- bad input -----------------------------------------------------------------------------------------------
def test_constant_image_is_a_clear_error_and_gain_still_works():
    """A constant camera cannot tell a gain from an offset; model 'gain' is the stated way out."""
    flat = np.full((40, 50, 3), 0.25, np.float32)
    cams = rig(flat * GAIN, flat, meta={"source.path": "rig/cam.01.exr"})
    with pytest.raises(OpError) as err:
        run_rig_op(COLOR_MATCH, ColorMatchParams(), cams, view=1)
    assert err.value.field == "image" and "constant" in str(err.value)
    assert "gain" in err.value.fix and err.value.file == "rig/cam.01.exr"
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(model="gain"), cams, view=1)
    np.testing.assert_allclose(diag_and_offset(out)[0], GAIN, atol=1e-5)


def test_cameras_of_different_sizes_are_an_error():
    cams = {1: Image(texture(40, 50, seed=1), RGB), 2: Image(texture(40, 60, seed=1), RGB),
            3: Image(texture(40, 50, seed=1), RGB)}
    with pytest.raises(OpError) as err:
        run_rig_op(COLOR_MATCH, ColorMatchParams(), cams, view=1)
    assert "50x40" in str(err.value) and "60x40" in str(err.value) and "resize" in err.value.fix


def test_nonfinite_pixels_take_no_part_and_stay():
    cam = texture(60, 80, seed=13)
    cam[5, 5] = np.nan
    cam[6, 6, 1] = np.inf
    ref = cam * GAIN + OFFSET
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(), rig(ref, cam), view=1)
    g, o = diag_and_offset(out)
    np.testing.assert_allclose(g, GAIN, atol=1e-3)
    assert np.isnan(out.pixels[5, 5]).all() and np.isinf(out.pixels[6, 6, 1])
    assert np.isfinite(out.pixels[6, 6, [0, 2]]).all()      # gains keep a bad value in its channel


def test_not_a_rig_and_a_reference_outside_it_are_errors():
    from graphcore.registry.operator import FrameRange, InputRange
    from graphcore.sample import Sample

    with pytest.raises(OpError, match="not a rig"):
        COLOR_MATCH.needs(ColorMatchParams(), Sample(0, 1), {"image": InputRange(None, None)})
    with pytest.raises(OpError) as err:
        COLOR_MATCH.needs(ColorMatchParams(reference=7), Sample(0, 1),
                          {"image": InputRange(None, FrameRange(1, 3))})
    assert err.value.field == "reference" and "1-3" in str(err.value)


def test_matrix_model_needs_rgb():
    grey = {v: Image(texture(30, 40, seed=v, channels=1), ("Y",)) for v in (1, 2, 3)}
    with pytest.raises(OpError) as err:
        run_rig_op(COLOR_MATCH, ColorMatchParams(model="matrix"), grey, view=1)
    assert err.value.field == "model"


def test_fractional_view_is_an_error():
    from graphcore.sample import Sample

    ctx = rig_context(1, 3)
    ctx.sample = Sample(0, "3/2")
    cams = rig(texture(30, 40, seed=1), texture(30, 40, seed=2))
    with pytest.raises(OpError, match="in-between view 3/2"):
        run_op(COLOR_MATCH, ColorMatchParams(), {"image": (cams[1], cams[2])}, ctx=ctx)


def test_fit_color_is_independent_of_the_working_grid_on_smooth_content():
    """The fit on a 64-pixel grid agrees with the one on a 256-pixel grid (area averaging is
    linear, so an exact gain and offset survive it)."""
    cam = texture(200, 300, seed=14)
    ref = Image(cam * GAIN + OFFSET, RGB)
    a = fit_color(Image(cam, RGB), ref, fit_size=64)
    b = fit_color(Image(cam, RGB), ref, fit_size=256)
    np.testing.assert_allclose(a.matrix, b.matrix, atol=1e-4)


def test_an_empty_border_takes_no_part():
    """align-views leaves pixels outside a camera's frame at 0 in every channel (no alpha here):
    they are no data, not black, so the fit ignores them. Measured: recovery within 3e-8 with a
    border of 30 columns; plain least squares over every pixel is off by 1.11 in the red gain
    (asserted > 0.01 off)."""
    cam = texture(100, 140, seed=15)
    ref = cam * GAIN + OFFSET
    cam[:, :30] = 0.0
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(), rig(ref, cam), view=1)
    g, o = diag_and_offset(out)
    np.testing.assert_allclose(g, GAIN, atol=1e-4)
    np.testing.assert_allclose(o, OFFSET, atol=1e-4)
    plain = np.linalg.lstsq(np.column_stack([cam[:, :, 0].ravel(), np.ones(cam[:, :, 0].size)]),
                            ref[:, :, 0].ravel(), rcond=None)[0]
    assert abs(plain[0] - GAIN[0]) > 0.01


def test_fit_frame_applies_one_fit_to_every_frame():
    """A rig of sequences, frames 1-3: at frame 3 something unrelated crosses camera 1. With
    fit_frame 1 every frame gets the frame-1 gains (checked equal, bit for bit in the report), so
    frame 3 is corrected like the others; fitted at frame 3 itself the gains are off."""
    base = {f: texture(80, 100, seed=40 + f) for f in (1, 2, 3)}
    cams = {}
    for f, tex in base.items():
        cam = tex.copy()
        if f == 3:
            cam[:, :60] = texture(80, 60, seed=99)       # 60 % of camera 1 shows something else
        cams[(f, 1)], cams[(f, 2)], cams[(f, 3)] = (Image(cam, RGB), Image(tex * GAIN + OFFSET, RGB),
                                                    Image(tex, RGB))
    p = ColorMatchParams(fit_frame=1)
    reports = [run_rig_op(COLOR_MATCH, p, cams, view=1, frame=f, frames=(1, 3)).meta for f in (1, 2, 3)]
    assert reports[0]["color-match.matrix"] == reports[1]["color-match.matrix"] == reports[2]["color-match.matrix"]
    assert reports[2]["color-match.fit_frame"] == 1
    np.testing.assert_allclose(np.diag(reports[2]["color-match.matrix"]), GAIN, atol=1e-4)
    own = run_rig_op(COLOR_MATCH, ColorMatchParams(), cams, view=1, frame=3, frames=(1, 3), warnings=[])
    assert np.max(np.abs(np.diag(own.meta["color-match.matrix"]) - GAIN)) > 0.01


def test_fit_frame_outside_the_input_is_an_error():
    cams = {(f, v): Image(texture(30, 40, seed=f), RGB) for f in (1, 2) for v in (1, 2, 3)}
    with pytest.raises(OpError) as err:
        run_rig_op(COLOR_MATCH, ColorMatchParams(fit_frame=9), cams, view=1, frame=1, frames=(1, 2))
    assert err.value.field == "fit_frame" and "1-2" in str(err.value)


def test_chain_composes_neighbour_fits():
    """Five cameras; each camera further from camera 3 has its colour through one more step
    C -> S C + s (a mild matrix and offset). Chained camera by camera, the composed fit of camera 1
    is the inverse of two steps, exactly as composing affine maps says; measured: every entry
    within 1e-6 of it (asserted 1e-4)."""
    step_m = np.array([[1.05, 0.02, 0.0], [0.01, 0.97, 0.02], [0.0, 0.03, 1.08]])
    step_o = np.array([0.01, -0.005, 0.004])
    tex = texture(90, 120, seed=70).astype(np.float64)
    def steps(px, n):
        for _ in range(n):
            px = px @ step_m.T + step_o
        return px.astype(np.float32)
    cams = {k: Image(steps(tex, abs(k - 3)), RGB) for k in range(1, 6)}
    out = run_rig_op(COLOR_MATCH, ColorMatchParams(model="matrix-offset", pairs="chain"), cams, view=1)
    assert out.meta["color-match.compared_with"] == 2
    inv_m = np.linalg.inv(step_m)
    want_m = inv_m @ inv_m
    want_o = -(inv_m @ inv_m @ step_o + inv_m @ step_o)
    np.testing.assert_allclose(np.array(out.meta["color-match.matrix"]), want_m, atol=1e-4)
    np.testing.assert_allclose(np.array(out.meta["color-match.offset"]), want_o, atol=1e-4)
    np.testing.assert_allclose(out.pixels, cams[3].pixels, atol=1e-4)


def test_a_matte_of_another_size_is_an_error():
    cam = texture(40, 50, seed=16)
    small = Image(np.ones((20, 25, 1), np.float32), ("A",), {"source.path": "mattes/m.exr"})
    with pytest.raises(OpError) as err:
        run_rig_op(COLOR_MATCH, ColorMatchParams(), rig(cam * GAIN, cam), view=1,
                   matte={1: small, 2: small, 3: small})
    assert err.value.field == "matte" and err.value.file == "mattes/m.exr" and "25x20" in str(err.value)
