"""Tests of ``resize`` (operators/transform/resize.py).

Reference library: scikit-image's ``skimage.transform.resize`` (order 0 and 1, no
anti-aliasing, mode 'edge') uses the same pixel-centre geometry and is compared with directly.
Area averaging is checked against its definition (each output pixel is the mean of the input
pixels it covers; common practice, no single source). Crop/pad geometry and vector scaling are
known answers on invented images.
"""

from __future__ import annotations

import numpy as np
import pydantic
import pytest
from skimage.transform import resize as sk_resize

from graphcore.errors import OpError
from graphcore.image import Image
from operators.transform.resize import MAX_SIZE, RESIZE, ResizeParams, vector_axis
from tests.conftest import noise_image
from tests.operators.conftest import RGBA, const_image, op_runner

_run = op_runner(RESIZE)


def run(image, **kw):
    """Resize ``image`` (the operator's only input); ``kw`` as for ``op_runner``."""
    return _run({"image": image}, **kw)


def index_image(w, h, channels=("R",)):
    """Pixel (y, x) of channel k holds y * 1000 + x + k / 10: every value tells where it came from."""
    y, x = np.mgrid[0:h, 0:w].astype(np.float32)
    return Image(np.dstack([y * 1000 + x + k / 10 for k in range(len(channels))]), channels)


# -- known answers -----------------------------------------------------------------------------

@pytest.mark.parametrize("filt", ["nearest", "bilinear", "bicubic", "lanczos", "area"])
def test_constant_stays_constant(filt):
    img = const_image([0.2, 0.4, 2.5, 0.75], (5, 7))
    out = run(img, scale=2.0, filter=filt)
    assert out.size == (14, 10)
    np.testing.assert_allclose(out.pixels, np.broadcast_to(img.pixels[0, 0], out.pixels.shape),
                               rtol=1e-6)


def test_scale_rounds_half_up():
    assert run(index_image(5, 3), scale=0.5).size == (3, 2)
    assert run(index_image(5, 3), scale=1e-6).size == (1, 1)


def test_vectors_scaled_by_axis_factors_conf_not():
    planes = {"R": 0.5, "fwd.x": 3.0, "fwd.y": -2.0, "bwd.x": 1.0, "bwd.y": 4.0, "conf": 0.5,
              "left.fwd.x": 2.0, "motion.x": 5.0}
    img = const_image(list(planes.values()), (4, 6), tuple(planes))
    out = run(img, width=12, height=12)          # x factor 2, y factor 3
    expected = {"R": 0.5, "fwd.x": 6.0, "fwd.y": -6.0, "bwd.x": 2.0, "bwd.y": 12.0, "conf": 0.5,
                "left.fwd.x": 4.0, "motion.x": 5.0}   # 'motion' is not a vector layer
    for name, value in expected.items():
        np.testing.assert_allclose(out.channel(name), value, rtol=1e-6, err_msg=name)


def test_vector_axis_names():
    assert [vector_axis(n) for n in ("fwd.x", "bwd.y", "cam2.bwd.x", "fwd.z", "fwdx", "R")] == \
        ["x", "y", "x", None, None, None]


def test_area_downscale_of_checker_is_the_mean():
    # Area averaging by definition: 1-px checker, 2x2 blocks -> 0.5 everywhere.
    y, x = np.mgrid[0:8, 0:8]
    checker = ((x + y) % 2).astype(np.float32)
    out = run(Image(checker, ("R",)), width=4, height=4, filter="area")
    np.testing.assert_allclose(out.pixels, 0.5, rtol=1e-6)
    # 9x9 -> 3x3: each output is the mean of its 3x3 block (5/9 or 4/9).
    y, x = np.mgrid[0:9, 0:9]
    checker = ((x + y) % 2).astype(np.float32)
    out = run(Image(checker, ("R",)), width=3, height=3, filter="area")
    block_means = checker.reshape(3, 3, 3, 3).mean(axis=(1, 3))
    np.testing.assert_allclose(out.pixels[..., 0], block_means, rtol=1e-6)


def test_area_with_many_channels_non_integer_factor():
    # OpenCV's area path takes at most 4 channels (opencv/opencv#11138); 9 channels must still
    # work and equal channel-by-channel resampling (the mean of covered pixels, partial weights).
    names = ("R", "G", "B", "A", "fwd.x", "fwd.y", "bwd.x", "bwd.y", "conf")
    px = noise_image(10, 10, names, seed=4, premultiplied=False).pixels
    out = run(Image(px, names), width=4, height=4, filter="area", data_filter="area")
    for k, name in enumerate(names):
        single = run(Image(px[..., k], (name,)), width=4, height=4, filter="area", data_filter="area")
        np.testing.assert_array_equal(out.channel(name), single.channel(name))
    # the overall mean of an area downscale equals the input mean (exact factor 10/4 per axis)
    np.testing.assert_allclose(out.channel("R").mean(), px[..., 0].mean(), rtol=1e-5)


@pytest.mark.parametrize("size", [(18, 14), (13, 10), (4, 3), (27, 21)])
@pytest.mark.parametrize("filt, order", [("nearest", 0), ("bilinear", 1)])
def test_matches_scikit_image(size, filt, order):
    # Reference library: skimage.transform.resize(order=0/1, mode='edge', anti_aliasing=False).
    px = noise_image(7, 9, ("R", "conf"), seed=7).pixels
    out = run(Image(px, ("R", "conf")), width=size[0], height=size[1], filter=filt, data_filter=filt)
    ref = sk_resize(px.astype(np.float64), (size[1], size[0], 2), order=order, mode="edge",
                    anti_aliasing=False)
    np.testing.assert_allclose(out.pixels, ref, atol=1e-6)


def test_lanczos_rings_colour_but_alpha_is_clipped():
    # A hard-edged opaque square: lanczos overshoots next to the edge (the reason for the clip).
    px = np.zeros((16, 16, 4), np.float32)
    px[4:12, 4:12] = [1.0, 1.0, 1.0, 1.0]
    out = run(Image(px, RGBA), scale=2.5, filter="lanczos")
    alpha = out.channel("A")
    assert alpha.min() >= 0.0 and alpha.max() <= 1.0
    assert out.channel("R").min() < 0.0 or out.channel("R").max() > 1.0  # colour left unclipped


# -- crop / pad / fit / fill geometry ------------------------------------------------------------

# With an odd number of spare pixels and a centred anchor the picture sits half a pixel up/left
# of centre: 3 spare rows are cut 2 above and 1 below; 3 spare columns are padded 1 left, 2 right.
@pytest.mark.parametrize("anchor, x0, y0", [
    ("center", 2, 2), ("top-left", 0, 0), ("bottom-right", 4, 3), ("top", 2, 0), ("right", 4, 2)])
def test_canvas_crop_geometry(anchor, x0, y0):
    img = index_image(10, 7, ("R", "fwd.x"))
    out = run(img, width=6, height=4, fit="canvas", anchor=anchor)
    assert out.size == (6, 4)
    assert np.array_equal(out.pixels, img.pixels[y0:y0 + 4, x0:x0 + 6])  # vectors untouched


@pytest.mark.parametrize("anchor, x0, y0", [("center", 2, 1), ("top-left", 0, 0), ("bottom-right", 5, 3)])
def test_canvas_pad_geometry(anchor, x0, y0):
    img = index_image(4, 3, RGBA)
    out = run(img, width=9, height=6, fit="canvas", anchor=anchor)
    expected = np.zeros((6, 9, 4), np.float32)
    expected[y0:y0 + 3, x0:x0 + 4] = img.pixels
    assert np.array_equal(out.pixels, expected)


def test_canvas_odd_spare_columns_put_the_picture_left_of_centre():
    img = index_image(5, 2)
    padded = run(img, width=8, height=2, fit="canvas")     # 3 spare: 1 left, 2 right
    assert np.array_equal(padded.pixels[:, 1:6], img.pixels)
    assert not padded.pixels[:, [0, 6, 7]].any()
    cropped = run(img, width=2, height=2, fit="canvas")    # 3 too many: cut 2 left, 1 right
    assert np.array_equal(cropped.pixels, img.pixels[:, 2:4])


def test_canvas_crop_one_axis_pad_the_other():
    img = index_image(10, 3)
    out = run(img, width=4, height=5, fit="canvas")
    expected = np.zeros((5, 4, 1), np.float32)
    expected[1:4] = img.pixels[:, 3:7]
    assert np.array_equal(out.pixels, expected)


def test_fill_crops_after_scaling():
    # 200x100 filling 100x100: the scale is max(0.5, 1) = 1, so no resampling, then the centre
    # 100 columns are cut out exactly.
    img = index_image(200, 100)
    out = run(img, width=100, height=100, fit="fill", filter="lanczos")
    assert np.array_equal(out.pixels, img.pixels[:, 50:150])


def test_fit_pads_after_scaling_and_scales_vectors():
    img = const_image([0.5, 1.0, 4.0, 2.0], (100, 200), ("R", "A", "fwd.x", "fwd.y"))
    out = run(img, width=100, height=100, fit="fit")        # picture 100x50, rows 25..75
    assert out.size == (100, 100)
    np.testing.assert_allclose(out.pixels[25:75],
                               np.broadcast_to([0.5, 1.0, 2.0, 1.0], (50, 100, 4)), rtol=1e-6)
    assert np.array_equal(out.pixels[:25], np.zeros((25, 100, 4)))
    assert np.array_equal(out.pixels[75:], np.zeros((25, 100, 4)))


def test_same_size_passes_through():
    img = index_image(5, 4, RGBA)
    assert run(img, width=5, height=4, filter="lanczos") is img
    assert run(img, scale=1.0) is img


# -- warnings and bad input --------------------------------------------------------------------

def test_area_when_enlarging_warns():
    warnings = []
    run(index_image(4, 4), warnings=warnings, scale=2.0, filter="area")
    assert len(warnings) == 1 and "shrinking" in warnings[0]


@pytest.mark.parametrize("params", [
    {"scale": 2.0, "width": 10},
    {"width": 10},
    {"height": 10},
    {},
    {"scale": 2.0, "fit": "fit"},
    {"width": 0, "height": 10},
    {"scale": 0.0},
    {"scale": float("inf")},
    {"width": 10, "height": 10, "filter": "gaussian"},
    {"width": 10, "height": 10, "data_filter": "lanczos"},
    {"width": 10, "height": 10, "size": 3},
])
def test_bad_params_are_refused(params):
    with pytest.raises(pydantic.ValidationError):
        ResizeParams(**params)


def test_huge_scale_is_an_op_error():
    with pytest.raises(OpError) as err:
        run(index_image(10, 10), scale=MAX_SIZE)
    assert err.value.field == "scale" and err.value.fix


def test_unconnected_image():
    with pytest.raises(OpError) as err:
        run(None, scale=2.0)
    assert err.value.field == "image"


def test_meta_kept():
    img = const_image(0.0, (4, 4), ("R",), {"source.path": "plate.1001.exr"})
    assert run(img, scale=0.5).meta["source.path"] == "plate.1001.exr"
