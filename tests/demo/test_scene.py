"""The demo scene: exact invariants of its layers, composite, motion and parallax.

The scene is invented data (our own procedural generator); these tests check it against its own
analytic motion and against the Porter-Duff over formula, so later tests can trust its ground truth.
"""

from __future__ import annotations

import math
from fractions import Fraction

import cv2
import numpy as np
import pytest

from graphcore.demo import RigImperfections, Scene
from graphcore.sample import Sample

FG_LAYERS = ("ball", "stick", "pinwheel", "streamer")


@pytest.fixture(scope="module")
def scene() -> Scene:
    return Scene(320, 180, seed=7)


def _over(front: np.ndarray, back: np.ndarray) -> np.ndarray:
    # Porter, T. and Duff, T., "Compositing Digital Images", SIGGRAPH 1984: A over B on
    # premultiplied colour is  A + (1 - alpha_A) * B  for colour and alpha alike.
    return front + (1.0 - front[..., 3:4]) * back


def _centroid_x(alpha: np.ndarray) -> float:
    cols = np.arange(alpha.shape[1]) + 0.5
    return float((alpha.sum(axis=0) * cols).sum() / alpha.sum())


def _centroid(alpha: np.ndarray) -> tuple[float, float]:
    rows = np.arange(alpha.shape[0]) + 0.5
    return _centroid_x(alpha), float((alpha.sum(axis=1) * rows).sum() / alpha.sum())


# -- outputs and the composite ---------------------------------------------------------------
def test_outputs_have_the_documented_channels(scene):
    out = scene.render(12, 4)
    for key in ("fg", "bg", "comp"):
        img = out[key]
        assert img.channels == ("R", "G", "B", "A")
        assert img.pixels.shape == (180, 320, 4) and img.pixels.dtype == np.float32
        assert np.isfinite(img.pixels).all()
    assert out["matte"].channels == ("A",) and out["matte"].pixels.shape == (180, 320, 1)
    assert "layers" not in out


@pytest.mark.parametrize("frame, view", [(1, 0), (20, 4), (Fraction(61, 3), Fraction(7, 2)),
                                         (33.25, 8), (48, Fraction(1, 5))])
def test_comp_is_fg_over_bg(frame, view):
    # Porter & Duff 1984, over operator (see _over); also with every rig imperfection switched on
    rig = RigImperfections(exposure_stops=0.4, white_balance_stops=0.1, position_jitter=0.2,
                           aim_jitter=0.01, roll_jitter_deg=1.0)
    for sc in (Scene(seed=3), Scene(seed=3, rig=rig)):
        out = sc.render(frame, view)
        fg, bg, comp = out["fg"].pixels, out["bg"].pixels, out["comp"].pixels
        np.testing.assert_allclose(comp, _over(fg, bg), rtol=0, atol=1e-6)
        np.testing.assert_array_equal(out["matte"].pixels[..., 0], fg[..., 3])
        np.testing.assert_array_equal(comp[..., 3], 1.0)


def test_layers_stack_to_fg_and_bg(scene):
    out = scene.render(Fraction(53, 2), 2, layers=True)
    planes = out["layers"]
    assert tuple(planes) == scene.layer_names == ("backdrop",) + FG_LAYERS
    np.testing.assert_array_equal(planes["backdrop"].pixels, out["bg"].pixels)
    fg = np.zeros_like(out["fg"].pixels)
    for name in FG_LAYERS:  # far to near, each over what is already there (Porter & Duff 1984)
        fg = _over(planes[name].pixels, fg)
    np.testing.assert_allclose(fg, out["fg"].pixels, rtol=0, atol=1e-6)


def test_layers_are_valid_premultiplied_colour(scene):
    out = scene.render(30, 5, layers=True)
    for name, img in out["layers"].items():
        px = img.pixels
        a = px[..., 3]
        assert a.min() >= 0.0 and a.max() <= 1.0, name
        # premultiplied: no colour without coverage, none negative, and the straight colour
        # (colour / alpha) stays near the palette (<= 1) after texture modulation (bound: ours)
        assert np.all(px[..., :3][a == 0.0] == 0.0), name
        assert px[..., :3].min() >= 0.0, name
        assert np.all(px[..., :3] <= 1.25 * a[..., None] + 1e-6), name


def test_matte_has_soft_anti_aliased_edges(scene):
    matte = scene.render(25, 4)["matte"].pixels[..., 0]
    partial = (matte > 0.02) & (matte < 0.98)
    assert partial.sum() > 100  # edges are ramps, not steps
    assert (matte == 1.0).sum() > 1000 and (matte == 0.0).sum() > 10000


def test_ball_edge_coverage_is_the_analytic_ramp():
    # known answer of the coverage model: alpha = clip(0.5 - (distance - radius) / pixel, 0, 1)
    sc = Scene(320, 180)
    frame = 20
    alpha = sc.render(frame, 4, layers=True)["layers"]["ball"].pixels[..., 3]
    pose = sc.pose("ball", frame)
    cx, cy = pose.x * 180 + 160, pose.y * 180 + 90  # H units about the centre -> pixels
    radius = 0.08 * 180
    jj, ii = np.meshgrid(np.arange(320) + 0.5, np.arange(180) + 0.5)
    expected = np.clip(0.5 - (np.hypot(jj - cx, ii - cy) - radius), 0.0, 1.0)
    np.testing.assert_allclose(alpha, expected, rtol=0, atol=2e-4)


def test_background_plate_is_opaque_and_clean(scene):
    bg1 = scene.render(1, 3)["bg"].pixels
    bg2 = scene.render(Fraction(97, 3), 3)["bg"].pixels
    np.testing.assert_array_equal(bg1[..., 3], 1.0)
    np.testing.assert_array_equal(bg1, bg2)  # the clean plate does not change with time
    assert not np.array_equal(bg1, scene.render(1, 4)["bg"].pixels)  # but it does with the view


# -- determinism --------------------------------------------------------------------------
def test_same_seed_same_pixels_other_seed_other_pixels():
    a = Scene(seed=11).render(17, 2)["comp"].pixels
    b = Scene(seed=11).render(17, 2)["comp"].pixels
    c = Scene(seed=12).render(17, 2)["comp"].pixels
    np.testing.assert_array_equal(a, b)
    assert np.abs(a - c).mean() > 1e-3


def test_integer_frames_repeat_bit_for_bit(scene):
    first = scene.render(10, 4)
    for frame in (10, Fraction(10), 10.0, "10"):
        again = scene.render(frame, 4)
        for key in ("fg", "bg", "comp", "matte"):
            np.testing.assert_array_equal(first[key].pixels, again[key].pixels)


# -- motion in time ----------------------------------------------------------------------------
def test_time_shift_moves_the_ball_by_its_velocity():
    # 100 px high: the ball's speed is 0.021 H/frame = 2.1 px/frame, so 10 frames = 21 whole pixels
    sc = Scene(200, 100)
    vx, vy, _ = sc.velocity("ball", 5)
    shift = vx * 10
    assert vy == 0.0 and shift == pytest.approx(21.0, abs=1e-9)
    a = sc.render(5, 4, layers=True)["layers"]["ball"].pixels[..., 3]
    b = sc.render(15, 4, layers=True)["layers"]["ball"].pixels[..., 3]
    assert a.sum() > 100
    # the ball's matte is round, so its rotation leaves it unchanged: a pure 21-pixel shift
    np.testing.assert_allclose(b[:, 21:], a[:, :-21], rtol=0, atol=1e-4)
    assert np.abs(b - a).max() > 0.5  # and it did move


def test_fractional_time_lands_between_frames(scene):
    # a centroid of a pixel-sampled soft disc follows its true position to ~0.01 px (sampling)
    def ball_centroid(frame):
        return _centroid(scene.render(frame, 4, layers=True)["layers"]["ball"].pixels[..., 3])

    (x0, y0), (x1, _) = ball_centroid(10), ball_centroid(11)
    xm, ym = ball_centroid(Fraction(31, 3))
    vx = scene.velocity("ball", 10)[0]
    assert x1 - x0 == pytest.approx(vx, abs=0.02)
    assert xm - x0 == pytest.approx(vx / 3, abs=0.02) and ym == pytest.approx(y0, abs=1e-4)


# -- parallax between views -------------------------------------------------------------------
def test_nearer_layers_move_more_between_views(scene):
    frame = 25  # every foreground layer is inside the frame horizontally
    a = scene.render(frame, 3, layers=True)["layers"]
    b = scene.render(frame, 4, layers=True)["layers"]
    shifts = {}
    for name in FG_LAYERS:
        shifts[name] = _centroid_x(b[name].pixels[..., 3]) - _centroid_x(a[name].pixels[..., 3])
        # pinhole parallax: focal * baseline / depth (common practice), camera right -> image left
        # (centroids of pixel-sampled soft shapes follow the true shift to ~0.01 px)
        assert shifts[name] == pytest.approx(scene.disparity(name), abs=0.02), name
    # the backdrop is textured everywhere; with baseline 1/9 at depth 10 and 180 px height it
    # moves by exactly 2 whole pixels per view, so compare shifted pixels
    sc = Scene(320, 180, baseline=1 / 9)
    assert sc.disparity("backdrop") == pytest.approx(-2.0, abs=1e-9)
    bg3, bg4 = sc.render(frame, 3)["bg"].pixels, sc.render(frame, 4)["bg"].pixels
    np.testing.assert_allclose(bg4[:, :-2], bg3[:, 2:], rtol=0, atol=1e-4)
    assert np.abs(bg4 - bg3).max() > 0.01
    shifts["backdrop"] = scene.disparity("backdrop")
    by_depth = sorted(scene.layer_names, key=scene.depth)  # near first
    moved = [abs(shifts[n]) for n in by_depth if n != "stick"]  # stick shares the pinwheel's depth
    assert moved == sorted(moved, reverse=True) and len(set(moved)) == len(moved)
    assert all(shifts[n] < 0 for n in shifts)


# -- true vectors ------------------------------------------------------------------------------
def test_vectors_at_the_ball_centre_are_its_velocity(scene):
    frame = 20
    vec = scene.vectors((frame, 4), (frame + 1, 4))
    assert vec.channels == ("fwd.x", "fwd.y", "occ")
    pose = scene.pose("ball", frame)
    j, i = int(pose.x * 180 + 160), int(pose.y * 180 + 90)
    centre = np.array([pose.x * 180 + 160, pose.y * 180 + 90])
    d = np.array([j + 0.5, i + 0.5]) - centre
    vx, vy, omega = scene.velocity("ball", frame)
    # constant speed and spin: exact over a whole frame as a rotation about the moving centre
    rot = np.array([[math.cos(omega), -math.sin(omega)], [math.sin(omega), math.cos(omega)]])
    expected = centre + np.array([vx, vy]) + rot @ d - (centre + d)
    assert vec.channel("fwd.x")[i, j] == pytest.approx(expected[0], abs=1e-3)
    assert vec.channel("fwd.y")[i, j] == pytest.approx(expected[1], abs=1e-3)


def test_vectors_follow_the_analytic_velocity_of_the_streamer(scene):
    frame, dt = 25, Fraction(1, 1000)
    vec = scene.vectors(Sample(frame, 4), Sample(frame + dt, 4), target="fg")
    alpha = scene.render(frame, 4, layers=True)["layers"]["streamer"].pixels[..., 3]
    ii, jj = np.nonzero(alpha > 0.999)
    assert len(ii) > 50
    pose = scene.pose("streamer", frame)
    vx, vy, omega = scene.velocity("streamer", frame)
    dx = jj + 0.5 - (pose.x * 180 + 160)
    dy = ii + 0.5 - (pose.y * 180 + 90)
    # rigid motion: v + omega * (-dy, dx), to first order in dt
    np.testing.assert_allclose(vec.channel("fwd.x")[ii, jj] / float(dt), vx - omega * dy, atol=2e-3)
    np.testing.assert_allclose(vec.channel("fwd.y")[ii, jj] / float(dt), vy + omega * dx, atol=2e-3)


def test_vectors_between_views_are_the_disparity(scene):
    vec = scene.vectors((25, 2), (25, 3))
    fwd = vec.channel("fwd.x")
    matte = scene.render(25, 2)["matte"].pixels[..., 0]
    np.testing.assert_allclose(fwd[matte == 0.0], scene.disparity("backdrop"), atol=1e-4)
    np.testing.assert_allclose(vec.channel("fwd.y"), 0.0, atol=1e-9)
    assert np.isclose(fwd, scene.disparity("streamer"), atol=1e-4).sum() > 100


def test_warping_by_the_true_vectors_rebuilds_the_source():
    # The vectors say where each surface point goes: sampling dst at p + fwd(p) must give src's
    # colour wherever the point stays visible (brightness constancy holds: shading moves with it).
    sc = Scene(320, 180)
    src, dst = (30, 4), (Fraction(61, 2), Fraction(9, 2))  # time and view move together
    vec = sc.vectors(src, dst)
    a = sc.render(*src)["comp"].pixels[..., :3]
    b = sc.render(*dst)["comp"].pixels[..., :3]
    H, W = a.shape[:2]
    mx = (np.arange(W)[None, :] + vec.channel("fwd.x")).astype(np.float32)
    my = (np.arange(H)[:, None] + vec.channel("fwd.y")).astype(np.float32)
    warped = cv2.remap(np.ascontiguousarray(b), mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    keep = vec.channel("occ") == 0
    assert 0.9 < keep.mean() < 1.0  # some pixels are occluded or leave the frame, most are not
    err = np.abs(warped - a).mean(axis=-1)[keep].mean()
    still = np.abs(b - a).mean(axis=-1)[keep].mean()
    assert err < 0.002 and err < still / 5


def test_fg_vectors_are_zero_off_the_foreground(scene):
    vec = scene.vectors(12, 13, target="fg")
    matte = scene.render(12)["matte"].pixels[..., 0]
    off = matte == 0.0
    assert np.all(vec.channel("fwd.x")[off] == 0) and np.all(vec.channel("occ")[off] == 0)
    assert np.abs(vec.channel("fwd.x")[~off]).max() > 1.0


# -- rig imperfections -------------------------------------------------------------------------
def test_rig_is_perfect_by_default(scene):
    for view in (0, Fraction(5, 2), 8):
        assert scene.camera(view) == scene.camera(view, ideal=True)
        assert scene.camera(view).gain == (1.0, 1.0, 1.0)


def test_exposure_and_white_balance_scale_colour_only():
    rig = RigImperfections(exposure_stops=0.5, white_balance_stops=0.2)
    off, ideal = Scene(seed=5, rig=rig), Scene(seed=5)
    for view in (2, Fraction(5, 2)):
        gain = np.array(off.camera(view).gain, np.float32)
        assert not np.allclose(gain, 1.0)
        a, b = off.render(14, view), ideal.render(14, view)
        np.testing.assert_allclose(a["comp"].pixels[..., :3], b["comp"].pixels[..., :3] * gain,
                                   rtol=1e-5, atol=1e-7)
        np.testing.assert_array_equal(a["matte"].pixels, b["matte"].pixels)
        np.testing.assert_array_equal(off.render(14, view, ideal=True)["comp"].pixels,
                                      b["comp"].pixels)


def test_fractional_views_interpolate_the_neighbouring_cameras():
    rig = RigImperfections(exposure_stops=0.5, position_jitter=0.3, aim_jitter=0.02, roll_jitter_deg=2)
    sc = Scene(rig=rig)
    c2, c3, mid = sc.camera(2), sc.camera(3), sc.camera(Fraction(5, 2))
    assert mid.x == pytest.approx((c2.x + c3.x) / 2) and mid.roll == pytest.approx((c2.roll + c3.roll) / 2)
    assert math.log2(mid.gain[1]) == pytest.approx((math.log2(c2.gain[1]) + math.log2(c3.gain[1])) / 2)
    assert c2.x != pytest.approx(sc.camera(2, ideal=True).x)
    # jitter moves layers by their own parallax, so near layers move more than the backdrop
    lay, ideal = sc.render(20, 2, layers=True)["layers"], sc.render(20, 2, ideal=True, layers=True)["layers"]
    assert not np.array_equal(lay["streamer"].pixels, ideal["streamer"].pixels)


# -- sizes and bad input ---------------------------------------------------------------------
def test_film_resolution_renders():
    out = Scene(2048, 1080).render(Fraction(49, 2), 4)
    assert out["comp"].pixels.shape == (1080, 2048, 4)
    assert np.isfinite(out["comp"].pixels).all()
    matte = out["matte"].pixels
    assert 0.01 < matte.mean() < 0.3 and ((matte > 0.02) & (matte < 0.98)).any()


@pytest.mark.parametrize("kwargs", [dict(width=0), dict(height=7.5), dict(cameras=0),
                                    dict(baseline=-1.0), dict(focal=0.0), dict(motion=math.inf)])
def test_bad_scene_settings_are_refused(kwargs):
    with pytest.raises(ValueError):
        Scene(**kwargs)


def test_bad_requests_name_the_problem(scene):
    with pytest.raises(ValueError, match="target"):
        scene.vectors(1, 2, target="bg")
    with pytest.raises(KeyError, match="layers are backdrop"):
        scene.depth("kite")
    with pytest.raises(TypeError):
        scene.render(True)


def test_like_gives_the_perfect_rig_with_one_cameras_imperfections():
    # exact invariants of Scene.camera(view, like=r): at view r it is camera r itself; elsewhere it
    # is the ideal camera shifted by camera r's position offset and carrying its gains, aim and roll
    rig = RigImperfections(exposure_stops=0.3, white_balance_stops=0.15, position_jitter=0.05,
                           aim_jitter=0.02, roll_jitter_deg=1.5, seed=3)
    sc = Scene(96, 54, cameras=5, rig=rig)
    for r in range(5):
        assert sc.camera(r, like=r) == sc.camera(r)
        np.testing.assert_array_equal(sc.render(7, r, like=r)["comp"].pixels, sc.render(7, r)["comp"].pixels)
    ref = sc.camera(2)
    for v in (0, Fraction(5, 4), 4):
        cam, ideal = sc.camera(v, like=2), sc.camera(v, ideal=True)
        assert cam.gain == ref.gain and cam.shift == ref.shift and cam.roll == ref.roll and cam.y == ref.y
        assert cam.x - ideal.x == pytest.approx(ref.x - sc.camera(2, ideal=True).x, abs=1e-12)
    # with a perfect rig, like= is the ideal camera
    assert Scene(96, 54, cameras=5).camera(Fraction(3, 2), like=0) == Scene(96, 54, cameras=5).camera(
        Fraction(3, 2), ideal=True)
