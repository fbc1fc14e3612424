"""Tests of ``view-path`` (operators/inbetween/view_path.py), ``rig`` and the parallax measure.

Numbering is checked against design.md (shipped templates, viewmorph.json): src numbers the cameras
1..N; dst is numbered from 1 and holds the N cameras with ``between`` in-between views after each
one but the last; camera j lands on output 1 + (j - 1) * (between + 1). The expected values are
worked by hand beside each check. The smooth keyed path is checked against SciPy's
PchipInterpolator (a reference implementation of the same monotone cubic, Fritsch & Carlson 1980 /
Fritsch & Butland 1984).
"""

from __future__ import annotations

from fractions import Fraction as F

import numpy as np
import pydantic
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry.operator import FrameRange, InputRange
from graphcore.sample import Sample
from operators.inbetween._parallax import measure_parallax
from operators.inbetween.rig import RIG, RigParams, link_problems, rig_needs
from operators.inbetween.view_path import (VIEW_PATH, ViewPathParams, output_range, path_point,
                                           path_step, view_path_needs)
from tests.conftest import noise_image
from tests.operators.conftest import run_op

RIG3 = FrameRange(1, 3)          # cameras 1..3
STILLS = InputRange(None, RIG3)  # a rig of stills read with axis 'view': no frame axis


def morph(**kw) -> ViewPathParams:
    return ViewPathParams(mode="viewmorph", **kw)


def keys(k, **kw) -> ViewPathParams:
    return ViewPathParams(mode="keys", keys=k, **kw)


# -- viewmorph numbering (design.md) ------------------------------------------------------------------
@pytest.mark.parametrize("k, view", [
    # between 2, cameras 1..3, worked by hand: view(k) = 1 + (k - 1) / 3
    (1, F(1)), (2, F(4, 3)), (3, F(5, 3)), (4, F(2)), (5, F(7, 3)), (6, F(8, 3)), (7, F(3)),
])
def test_viewmorph_view_of_each_output(k, view):
    p = morph(between=2)
    assert path_point(p, k, views=RIG3) == (view, F(0))
    assert view_path_needs(p, Sample(k), {"image": STILLS}) == {"image": Sample(0, view)}


@pytest.mark.parametrize("between, n", [(0, 3), (1, 3), (2, 3), (3, 5), (7, 2)])
def test_camera_j_lands_on_output_1_plus_j_minus_1_times_between_plus_1(between, n):
    """design.md: camera j lands on output 1 + (j - 1) * (between + 1); the output ends on camera N."""
    p = morph(between=between)
    cams = FrameRange(1, n)
    for j in range(1, n + 1):
        k = 1 + (j - 1) * (between + 1)
        assert path_point(p, k, views=cams)[0] == j            # exactly the whole camera number
    assert output_range(p, cams) == FrameRange(1, 1 + (n - 1) * (between + 1))
    # e.g. between 2, 3 cameras: outputs 1..7; between 3, 5 cameras: 1..17; between 7, 2 cameras: 1..9


def test_viewmorph_output_range_from_the_engine_ranges():
    frames_hook = VIEW_PATH.frames
    assert frames_hook(morph(between=2), {"image": STILLS}) == FrameRange(1, 7)
    assert frames_hook(morph(between=2, first_output=1001), {"image": STILLS}) == FrameRange(1001, 1007)
    # first_view 3/2 on cameras 1..3 with between 1: views 3/2, 2, 5/2, 3 -> outputs 1..4
    assert frames_hook(morph(between=1, first_view="3/2"), {"image": STILLS}) == FrameRange(1, 4)
    assert VIEW_PATH.views(morph(), {"image": RIG3}) is None        # one output sequence, no views


def test_frames_hook_without_views_leaves_the_viewmorph_range_open():
    """An engine that hands the frames hook only frame ranges cannot tell the camera count."""
    assert VIEW_PATH.frames(morph(between=2), {"image": None}) is None


def test_source_time_rule():
    """time param; else the input's first frame; else 0 (a rig of stills has no frame axis)."""
    seq = InputRange(FrameRange(1001, 1010), RIG3)
    assert view_path_needs(morph(), Sample(2), {"image": STILLS})["image"] == Sample(0, F(3, 2))
    assert view_path_needs(morph(), Sample(2), {"image": seq})["image"] == Sample(1001, F(3, 2))
    assert view_path_needs(morph(time="2011/2"), Sample(2), {"image": seq})["image"] == Sample(F(2011, 2), F(3, 2))
    with pytest.raises(OpError) as err:
        VIEW_PATH.frames(morph(time=990), {"image": seq})
    assert err.value.field == "time" and "1001-1010" in str(err.value)


def test_output_is_one_view_and_the_image_passes_unchanged():
    img = noise_image(6, 8, seed=3)
    out = run_op(VIEW_PATH, morph(), {"image": img}, sample=Sample(5))
    assert out is img
    assert VIEW_PATH.canonical_sample(morph(), Sample(5, 2)) == Sample(5, 0)


# -- views (sequences of a rig or a stereo pair, one output sequence per view) ---------------------------
def test_views_mode_maps_each_output_view_at_its_own_frame():
    """between 2 on cameras 1..3 over frames 1001..1010, worked by hand: output view v at frame f shows
    view 1 + (v - 1) / 3 at time f; outputs are the source frames and views 1..7."""
    seq = InputRange(FrameRange(1001, 1010), RIG3)
    p = ViewPathParams(mode="views", between=2)
    for v, view in ((1, F(1)), (2, F(4, 3)), (4, F(2)), (7, F(3))):
        assert view_path_needs(p, Sample(1004, v), {"image": seq}) == {"image": Sample(1004, view)}
    assert VIEW_PATH.frames(p, {"image": seq}) == FrameRange(1001, 1010)
    assert VIEW_PATH.views(p, {"image": seq}) == FrameRange(1, 7)
    assert VIEW_PATH.canonical_sample(p, Sample(1004, 3)) == Sample(1004, 3)   # every view its own
    assert path_step(p, 1004) == F(1, 3)                                          # parallax step
    with pytest.raises(pydantic.ValidationError, match="remove 'time'"):
        ViewPathParams(mode="views", time=1001)


def test_write_view_token_names_a_file_per_frame_and_view(tmp_path):
    from operators.io.write import WRITE, WriteParams

    p = WriteParams(path=str(tmp_path / "v%02d" / "sh.%04d.exr"), view_token="%02d")
    assert WRITE.per_view(p) and not WRITE.per_view(WriteParams(path=str(tmp_path / "sh.%04d.exr")))
    assert WRITE.targets(p, [(1001, 2), (1002, 2)]) == [str(tmp_path / "v02" / "sh.1001.exr"),
                                                       str(tmp_path / "v02" / "sh.1002.exr")]
    img = noise_image(4, 5, seed=1)
    run_op(WRITE, p, {"image": img}, sample=Sample(1001, 3))
    assert (tmp_path / "v03" / "sh.1001.exr").is_file()
    with pytest.raises(OpError) as err:
        run_op(WRITE, p, {"image": img}, sample=Sample(1001, F(5, 2)))
    assert err.value.field == "view_token"
    for bad, words in (({"view_token": "%03d"}, "does not occur"),
                       ({"path": str(tmp_path / "v%02d.exr"), "view_token": "%02d"}, "no frame token"),
                       ({"view_token": None}, "view_token")):
        with pytest.raises(pydantic.ValidationError, match=words):
            WriteParams(**{"path": str(tmp_path / "v%02d" / "sh.%04d.exr"), **bad})


# -- keys ---------------------------------------------------------------------------------------------
def test_keys_linear_known_answers():
    """Sweep cameras 1 -> 3 over outputs 1..9 while time runs 1001 -> 1002; by hand:
    view(k) = 1 + (k - 1) / 4, time(k) = 1001 + (k - 1) / 8."""
    p = keys([[1, 1, 1001], [9, 3, 1002]])
    assert path_point(p, 1) == (F(1), F(1001))
    assert path_point(p, 3) == (F(3, 2), 1001 + F(1, 4))
    assert path_point(p, 5) == (F(2), 1001 + F(1, 2))
    assert path_point(p, 9) == (F(3), F(1002))
    assert path_point(p, 12) == (F(3), F(1002))          # beyond the last key: stays put
    assert path_step(p, 5) == F(1, 4)
    assert VIEW_PATH.frames(p, {"image": InputRange(FrameRange(1001, 1002), RIG3)}) == FrameRange(1, 9)


def test_keys_time_stops_and_view_only_keys():
    """Equal times freeze the moment; [frame, view] keys use the default time."""
    p = keys([[1, 1, "1005/2"], [5, 3, "1005/2"], [9, 1, "1005/2"]])
    assert [path_point(p, k)[1] for k in range(1, 10)] == [F(1005, 2)] * 9
    assert [path_point(p, k)[0] for k in (1, 3, 5, 7, 9)] == [1, 2, 3, 2, 1]     # there and back
    q = keys([[1, 1], [5, 3]])
    assert view_path_needs(q, Sample(3), {"image": STILLS}) == {"image": Sample(0, 2)}


def test_keys_smooth_matches_scipy_pchip():
    """Monotone cubic per coordinate; SciPy's PchipInterpolator is the reference."""
    from scipy.interpolate import PchipInterpolator

    k = [[1, 1, 1001], [4, 2, 1001], [10, 5, 1004], [16, 6, 1010]]
    p = keys(k, interpolation="smooth")
    xs = [r[0] for r in k]
    ref_v, ref_t = PchipInterpolator(xs, [r[1] for r in k]), PchipInterpolator(xs, [r[2] for r in k])
    for x in range(1, 17):
        v, t = path_point(p, x)
        assert float(v) == pytest.approx(float(ref_v(x)), abs=1e-12)
        assert float(t) == pytest.approx(float(ref_t(x)), abs=1e-12)
    # a held time (first two keys equal) stays exactly there: no overshoot below 1001
    assert all(path_point(p, x)[1] == 1001 for x in range(1, 5))


@pytest.mark.parametrize("bad, words", [
    ([[3, 1, 1], [2, 2, 1]], "does not come after"),
    ([[1, 1, 1], [2, 2]], "some keys give a time"),
    ([[1.5, 1, 1]], "whole number"),
    ([[1]], "[output_frame, view, time]"),
    ([[1, "x", 1]], "is not a number"),
])
def test_bad_keys_are_refused(bad, words):
    with pytest.raises(pydantic.ValidationError) as err:
        keys(bad)
    assert words in str(err.value)


def test_keys_mode_needs_keys():
    with pytest.raises(pydantic.ValidationError, match="needs 'keys'"):
        ViewPathParams(mode="keys")


# -- out of range and bad inputs --------------------------------------------------------------------------
def test_view_outside_the_rig_is_an_error_before_rendering():
    with pytest.raises(OpError) as err:
        VIEW_PATH.frames(keys([[1, 1, 0], [9, 4, 0]]), {"image": STILLS})
    assert err.value.field == "keys" and "view 4" in str(err.value) and "1-3" in str(err.value)
    with pytest.raises(OpError) as err:
        VIEW_PATH.frames(keys([[1, 1, 1000], [9, 3, 1004]]),
                         {"image": InputRange(FrameRange(1001, 1010), RIG3)})
    assert err.value.field == "keys" and "source time 1000" in str(err.value)
    with pytest.raises(OpError) as err:
        VIEW_PATH.frames(morph(first_view=0), {"image": STILLS})
    assert err.value.field == "first_view"


def test_hold_clamps_to_the_rig():
    p = keys([[1, 0, 1000], [9, 5, 1020]], out_of_range="hold")
    rng = {"image": InputRange(FrameRange(1001, 1010), RIG3)}
    assert VIEW_PATH.frames(p, rng) == FrameRange(1, 9)       # no error with hold
    assert view_path_needs(p, Sample(1), rng)["image"] == Sample(1001, 1)
    assert view_path_needs(p, Sample(9), rng)["image"] == Sample(1010, 3)


def test_frame_beyond_the_path_fails_at_render_with_a_clear_error():
    """An output frame past the last camera (asked with --frames) gets no image: an OpError."""
    assert view_path_needs(morph(between=2), Sample(8), {"image": STILLS})["image"] == Sample(0, F(10, 3))
    with pytest.raises(OpError) as err:
        run_op(VIEW_PATH, morph(between=2), {"image": None}, sample=Sample(8))
    assert "outside the rig" in str(err.value) and err.value.fix


def test_between_below_zero_is_refused():
    with pytest.raises(pydantic.ValidationError) as err:
        morph(between=-1)
    assert "between" in str(err.value) and "greater than or equal to 0" in str(err.value)


@pytest.mark.parametrize("views, words", [(FrameRange(1, 1), "rig of one camera"), (None, "has no views")])
def test_a_rig_of_one_camera_or_none_is_refused(views, words):
    rng = {"image": InputRange(None, views)}
    with pytest.raises(OpError, match=words):
        VIEW_PATH.frames(morph(), rng)
    with pytest.raises(OpError, match=words):
        view_path_needs(morph(), Sample(1), rng)


# -- stereo parallax -----------------------------------------------------------------------------------------
def vectors(width: int, fwd_x: float, conf: float | None = None) -> Image:
    chans = {"fwd.x": np.full((4, width), fwd_x, np.float32), "fwd.y": np.zeros((4, width), np.float32)}
    if conf is not None:
        chans["fwd.conf"] = np.full((4, width), conf, np.float32)
    return Image(np.stack(list(chans.values()), axis=2), tuple(chans))


def test_parallax_known_answer():
    """fwd.x = +4 px on a 100 px wide image between views half a camera apart: 2 % behind the screen;
    -6 px at a third of a spacing: 2 % in front."""
    p = measure_parallax(vectors(100, 4.0), 0.5)
    assert p.positive == pytest.approx(2.0) and p.negative == 0.0 and p.overall == pytest.approx(2.0)
    q = measure_parallax(vectors(100, -6.0), 1 / 3)
    assert q.negative == pytest.approx(2.0) and q.positive == 0.0


def test_parallax_warning_fires_over_the_limit_only():
    img = noise_image(4, 100, seed=1)
    rng = {"image": STILLS, "vectors": STILLS}
    # between 1 (step 1/2): fwd.x = -6 px -> 3 % in front, over the 2 % limit
    warnings: list[str] = []
    assert view_path_needs(morph(between=1), Sample(2), rng)["vectors"] == Sample(0, 1)
    run_op(VIEW_PATH, morph(between=1), {"image": img, "vectors": vectors(100, -6.0)}, sample=Sample(2),
           warnings=warnings)
    assert len(warnings) == 1 and "3.00 % of the image width (limit 2 %)" in warnings[0]
    # between 3 (step 1/4): 1.5 % in front: under both limits
    warnings.clear()
    run_op(VIEW_PATH, morph(between=3), {"image": img, "vectors": vectors(100, -6.0)}, sample=Sample(2),
           warnings=warnings)
    assert warnings == []
    # +6 px at step 1/4 = 1.5 % behind the screen: over the 1 % positive limit only
    run_op(VIEW_PATH, morph(between=3), {"image": img, "vectors": vectors(100, 6.0)}, sample=Sample(2),
           warnings=warnings)
    assert len(warnings) == 1 and "behind the screen" in warnings[0] and "of the image width" not in warnings[0]


def test_last_view_reads_the_vectors_of_the_camera_before_it():
    rng = {"image": STILLS, "vectors": STILLS}
    assert view_path_needs(morph(between=2), Sample(7), rng) == {"image": Sample(0, 3), "vectors": Sample(0, 2)}


# -- rig -------------------------------------------------------------------------------------------------------
def test_rig_maps_view_v_to_port_v():
    left, right = noise_image(4, 6, seed=1), noise_image(4, 6, seed=2)
    assert rig_needs(RigParams(), Sample(7, 2)) == {"view2": Sample(7, 0)}
    assert RIG.views(RigParams(), {"view1": None, "view2": None}) == FrameRange(1, 2)
    assert run_op(RIG, RigParams(), {"view2": right}, sample=Sample(7, 2)) is right
    assert run_op(RIG, RigParams(), {"view1": left}, sample=Sample(7, 1)) is left


def test_rig_refuses_gaps_and_fractional_views():
    problems = link_problems(RigParams(), frozenset({"view1", "view3"}))
    assert problems and problems[0].field == "view2"
    assert link_problems(RigParams(), frozenset())[0].field == "view1"
    with pytest.raises(OpError, match="whole views"):
        rig_needs(RigParams(), Sample(0, F(3, 2)))
