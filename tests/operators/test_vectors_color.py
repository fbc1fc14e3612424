"""vector-color: the flow colour coding of Baker et al., IJCV 2011 (the Middlebury flow database)."""

from __future__ import annotations

import numpy as np
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from operators.io.transfer import encode
from operators.vectors.color import VECTOR_COLOR, VectorColorParams, colorwheel, flow_to_codes, legend
from tests.operators.conftest import run_op


def test_wheel_has_the_published_ramps():
    """Baker et al. 2011 colour code: 55 hues, ramps RY 15, YG 6, GC 4, CB 11, BM 13, MR 6, starting at
    pure red (the construction of the database's published code; ramp lengths from memory of it)."""
    w = colorwheel()
    assert w.shape == (55, 3)
    assert tuple(w[0]) == (255, 0, 0)          # red
    assert tuple(w[15]) == (255, 255, 0)       # yellow starts the YG ramp
    assert tuple(w[21]) == (0, 255, 0)         # green starts GC
    assert tuple(w[25]) == (0, 255, 255)       # cyan starts CB
    assert tuple(w[36]) == (0, 0, 255)         # blue starts BM
    assert tuple(w[49]) == (255, 0, 255)       # magenta starts MR


@pytest.mark.parametrize("u, v, code", [
    (1.0, 0.0, (255, 0, 0)),      # right: red
    (0.0, 1.0, (255, 229, 0)),    # down (y down): yellow, halfway between wheel entries 13 and 14
    (0.0, 0.0, (255, 255, 255)),  # no motion: white
])
def test_known_directions(u, v, code):
    """Values worked by hand from the coding's definition (Baker et al. 2011): hue from
    atan2(-v, -u), saturation from length, floor(255 * colour)."""
    got = flow_to_codes(np.array([[u]]), np.array([[v]]))[0, 0]
    assert tuple(int(c) for c in got) == code


def test_longer_than_reference_is_darkened():
    inside = flow_to_codes(np.array([[1.0]]), np.array([[0.0]]))[0, 0]
    outside = flow_to_codes(np.array([[2.0]]), np.array([[0.0]]))[0, 0]
    assert tuple(outside) == tuple(np.floor(255 * 0.75 * inside / 255).astype(np.uint8))


def test_operator_output_writes_back_to_the_codes():
    """Linear output, sRGB-encoded (IEC 61966-2-1), gives the coding's 8-bit values back."""
    u = np.linspace(-3, 3, 40, dtype=np.float32)[None, :].repeat(30, 0)
    v = np.linspace(-2, 2, 30, dtype=np.float32)[:, None].repeat(40, 1)
    img = Image(np.dstack([u, v]), ("fwd.x", "fwd.y"))
    out = run_op(VECTOR_COLOR, VectorColorParams(max_magnitude=3.0, show_legend=False), {"vectors": img})
    codes = np.round(encode("srgb", out.pixels[:, :, :3]) * 255).astype(np.uint8)
    assert np.array_equal(codes, flow_to_codes(u.astype(np.float64) / 3.0, v.astype(np.float64) / 3.0))
    assert out.channels == ("R", "G", "B", "A") and np.all(out.channel("A") == 1)


def test_legend_is_drawn_and_centre_is_white():
    img = Image(np.zeros((200, 300, 2), np.float32), ("bwd.x", "bwd.y"))
    out = run_op(VECTOR_COLOR, VectorColorParams(layer="bwd"), {"vectors": img})
    lg = legend(40)
    assert lg[20, 20].min() >= 240  # half a pixel from the centre: nearly white
    corner = encode("srgb", out.pixels[2:42, 2:42, :3])
    assert corner.std() > 0.1  # the wheel is there: many hues
    assert out.meta["vectors.max_magnitude"] == 1.0  # no motion: reference length falls back to 1


def test_missing_layer_names_the_layers_there():
    img = Image(np.zeros((4, 4, 2), np.float32), ("fwd.x", "fwd.y"))
    with pytest.raises(OpError) as info:
        run_op(VECTOR_COLOR, VectorColorParams(layer="bwd"), {"vectors": img})
    assert info.value.field == "layer" and "fwd" in info.value.fix
