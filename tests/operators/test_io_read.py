"""The ``read`` operator: params, frame discovery, identity, sources, compute."""

import os
from fractions import Fraction

import cv2
import numpy as np
import pydantic
import pytest

from graphcore.errors import OpError
from graphcore.registry.operator import FrameRange, Operator
from graphcore.sample import Sample
from operators.io.read import READ, ReadParams
from operators.io.transfer import decode
from tests.operators.conftest import op_context, truncated_copy, write_raw_exr


def _plate(tmp_path, frames, name="p"):
    """Tiny EXR frames whose R value is the frame number (known answer)."""
    for f in frames:
        write_raw_exr(tmp_path / f"{name}.{f:04d}.exr",
                      {"R": np.full((4, 6), f), "G": np.zeros((4, 6)), "B": np.zeros((4, 6))})
    return str(tmp_path / f"{name}.%04d.exr")


def test_declaration():
    assert isinstance(READ, Operator) and READ.name == "read" and READ.version == 1
    assert READ.inputs == () and not READ.sink
    assert all(f.description for f in ReadParams.model_fields.values())


def test_params_validation():
    ok = ReadParams(path="a.%04d.exr")
    assert ok.axis == "frame" and ok.transfer == "auto" and ok.nonfinite == "zero"
    assert ReadParams(path="a.exr", channels=["R", "G"]).channels == ("R", "G")
    with pytest.raises(pydantic.ValidationError):
        ReadParams(path="a.%04d.exr", colour="x")          # extra field
    with pytest.raises(pydantic.ValidationError, match="extension"):
        ReadParams(path="a.%04d.dpx")
    with pytest.raises(pydantic.ValidationError, match="more than one"):
        ReadParams(path="a.%04d.%04d.exr")
    with pytest.raises(pydantic.ValidationError):
        ReadParams(path="a.exr", channels=[])
    with pytest.raises(pydantic.ValidationError):
        ReadParams(path="a.exr", nonfinite="ignore")
    with pytest.raises(pydantic.ValidationError):
        ok.path = "b.exr"  # frozen


def test_frames_from_disk(tmp_path):
    pattern = _plate(tmp_path, range(1001, 1006))
    assert READ.frames(ReadParams(path=pattern), {}) == FrameRange(1001, 1005)
    assert READ.frames(ReadParams(path=pattern, axis="view"), {}) is None


def test_frames_gap_and_nothing_found(tmp_path):
    pattern = _plate(tmp_path, [1001, 1002, 1006, 1007, 1008, 1009, 1011])
    with pytest.raises(OpError) as info:
        READ.frames(ReadParams(path=pattern), {})
    assert "1003-1005, 1010" in info.value.message
    assert info.value.file == pattern and info.value.field == "path"
    empty = str(tmp_path / "none.%04d.exr")
    with pytest.raises(OpError) as info:
        READ.frames(ReadParams(path=empty), {})
    assert info.value.file == empty and info.value.field == "path"


def test_still_file(tmp_path):
    write_raw_exr(tmp_path / "bg.exr", {"R": np.full((2, 3), 0.5)})
    params = ReadParams(path=str(tmp_path / "bg.exr"))
    assert READ.frames(params, {}) is None  # available at every frame
    for s in (Sample(1), Sample(1001), Sample(Fraction(2001, 2))):
        img = READ.compute(params, {}, op_context(s))
        assert img.channel("R")[0, 0] == 0.5
    assert img.meta["source.frame"] is None
    with pytest.raises(OpError) as info:
        READ.frames(ReadParams(path=str(tmp_path / "nope.exr")), {})
    assert info.value.file == str(tmp_path / "nope.exr")


def test_compute_reads_the_frame(tmp_path):
    pattern = _plate(tmp_path, range(1001, 1004))
    params = ReadParams(path=pattern)
    for f in (1001, 1002, 1003):
        img = READ.compute(params, {}, op_context(Sample(f)))
        assert np.all(img.channel("R") == f)
        assert img.meta["source.frame"] == f
        assert img.meta["source.path"] == os.path.abspath(pattern % f)


def test_axis_view(tmp_path):
    pattern = _plate(tmp_path, range(1, 4), name="cam")
    params = ReadParams(path=pattern, axis="view")
    img = READ.compute(params, {}, op_context(Sample(frame=1001, view=2)))
    assert np.all(img.channel("R") == 2) and img.meta["source.axis"] == "view"
    # Time may be fractional when the files number views; the view must be an integer.
    img = READ.compute(params, {}, op_context(Sample(frame=Fraction(1, 3), view=3)))
    assert np.all(img.channel("R") == 3)
    with pytest.raises(OpError):
        READ.compute(params, {}, op_context(Sample(frame=1, view=Fraction(3, 2))))


def test_fractional_sample_is_an_error(tmp_path):
    pattern = _plate(tmp_path, [1001, 1002])
    with pytest.raises(OpError) as info:
        READ.compute(ReadParams(path=pattern), {},
                     op_context(Sample(Fraction(3003, 3) + Fraction(1, 3))))
    assert "fractional" in info.value.message and info.value.file == pattern


def test_missing_frame_names_file_and_existing_frames(tmp_path):
    pattern = _plate(tmp_path, [1001, 1002, 1003, 1007])
    with pytest.raises(OpError) as info:
        READ.compute(ReadParams(path=pattern), {}, op_context(Sample(1005)))
    err = info.value
    assert err.file == pattern % 1005 and err.field == "path"
    assert "1001-1003, 1007" in err.fix


def test_identity_and_sources(tmp_path):
    pattern = _plate(tmp_path, [1001])
    params = ReadParams(path=pattern)
    ident = READ.identity(params, Sample(1001))
    path = os.path.realpath(pattern % 1001)
    st = os.stat(path)
    assert path in ident and str(st.st_size) in ident and str(st.st_mtime_ns) in ident
    assert "missing" in READ.identity(params, Sample(1002))       # does not raise
    assert "fractional" in READ.identity(params, Sample(Fraction(1, 2)))
    assert READ.sources(params, Sample(1001)) == [path]
    # A rewritten file gets a new identity (cache keys change).
    write_raw_exr(pattern % 1001, {"R": np.zeros((5, 5))})
    os.utime(pattern % 1001, ns=(st.st_atime_ns, st.st_mtime_ns + 10**9))
    assert READ.identity(params, Sample(1001)) != ident
    # Symbolic links resolve to the real file.
    os.symlink(path, tmp_path / "link.0001.exr")
    assert READ.sources(ReadParams(path=str(tmp_path / "link.%04d.exr")), Sample(1)) == [path]


def test_channels_selection(tmp_path):
    write_raw_exr(tmp_path / "v.exr", {"R": np.ones((2, 2)), "fwd.x": np.full((2, 2), 3.0),
                                       "conf": np.full((2, 2), 0.5)})
    params = ReadParams(path=str(tmp_path / "v.exr"), channels=["fwd.x", "R"])
    img = READ.compute(params, {}, op_context(Sample(1)))
    assert img.channels == ("fwd.x", "R") and img.channel("fwd.x")[0, 0] == 3.0
    with pytest.raises(OpError) as info:
        READ.compute(ReadParams(path=str(tmp_path / "v.exr"), channels=["A"]), {},
                     op_context(Sample(1)))
    assert info.value.field == "channels"
    assert "R, conf, fwd.x" in info.value.message  # lists what the file has


def _nan_plate(tmp_path):
    for f in (1, 2):
        r = np.ones((3, 3))
        r[0, 0], r[1, 1] = np.nan, np.inf
        write_raw_exr(tmp_path / f"n.{f:04d}.exr", {"R": r, "G": np.full((3, 3), -np.inf)})
    return str(tmp_path / "n.%04d.exr")


def test_nonfinite_zero_warns_once_per_file(tmp_path):
    pattern = _nan_plate(tmp_path)
    warnings = []
    params = ReadParams(path=pattern)
    for f in (1, 2):
        img = READ.compute(params, {}, op_context(Sample(f), warnings))
        assert np.isfinite(img.pixels).all()
        assert img.channel("R")[0, 0] == 0 and img.channel("R")[1, 1] == 0
        assert img.channel("R")[2, 2] == 1 and np.all(img.channel("G") == 0)
    assert len(warnings) == 2
    assert pattern % 1 in warnings[0] and pattern % 2 in warnings[1] and "11" in warnings[0]


def test_nonfinite_error_and_keep(tmp_path):
    pattern = _nan_plate(tmp_path)
    with pytest.raises(OpError) as info:
        READ.compute(ReadParams(path=pattern, nonfinite="error"), {}, op_context(Sample(1)))
    assert info.value.file == pattern % 1 and info.value.field == "nonfinite"
    img = READ.compute(ReadParams(path=pattern, nonfinite="keep"), {}, op_context(Sample(1)))
    assert np.isnan(img.channel("R")[0, 0]) and np.isinf(img.channel("R")[1, 1])


def test_explicit_transfer_on_exr_decodes_colour_only(tmp_path):
    # IEC 61966-2-1 decode applied to R, G, B; vectors and alpha untouched; premultiplication
    # respected (decode the straight colour, then multiply by alpha).
    write_raw_exr(tmp_path / "s.exr", {"R": np.full((2, 2), 0.25), "G": np.full((2, 2), 0.5),
                                       "B": np.full((2, 2), 0.5), "A": np.full((2, 2), 0.5),
                                       "fwd.x": np.full((2, 2), 0.5)})
    img = READ.compute(ReadParams(path=str(tmp_path / "s.exr"), transfer="srgb"), {},
                       op_context(Sample(1)))
    assert img.channel("R")[0, 0] == pytest.approx(float(decode("srgb", 0.5)) * 0.5, rel=1e-6)
    assert img.channel("G")[0, 0] == pytest.approx(float(decode("srgb", 1.0)) * 0.5, rel=1e-6)
    assert img.channel("A")[0, 0] == 0.5 and img.channel("fwd.x")[0, 0] == 0.5


def test_png_sequence(tmp_path):
    for f in (1, 2):
        cv2.imwrite(str(tmp_path / f"g.{f}.png"), np.full((2, 2, 3), 128, np.uint8))
    params = ReadParams(path=str(tmp_path / "g.%d.png"))
    assert READ.frames(params, {}) == FrameRange(1, 2)
    img = READ.compute(params, {}, op_context(Sample(2)))
    # IEC 61966-2-1: code 128 -> 0.2158605 linear.
    assert img.pixels[0, 0, 0] == pytest.approx(0.2158605, abs=1e-6)
    lin = READ.compute(ReadParams(path=str(tmp_path / "g.%d.png"), transfer="linear"), {},
                       op_context(Sample(2)))
    assert lin.pixels[0, 0, 0] == pytest.approx(128 / 255)


def test_corrupt_frame_is_an_op_error(tmp_path):
    pattern = _plate(tmp_path, [1, 2])
    truncated_copy(tmp_path / "p.0002.exr", tmp_path / "p.0002.exr")
    with pytest.raises(OpError) as info:
        READ.compute(ReadParams(path=pattern), {}, op_context(Sample(2)))
    assert info.value.file == pattern % 2


def test_a_still_is_read_once_for_every_frame(tmp_path):
    """canonical_sample: a still's result is shared by every frame and view through the cache."""
    from graphcore.evaluate import Evaluator
    from graphcore.sample import Sample
    from graphcore.validate import load_graph
    from operators.io.exr import write_exr
    from tests.conftest import noise_image

    write_exr(str(tmp_path / "still.exr"), noise_image(8, 8, seed=1))
    doc = {"schema": "midframe.graph", "version": 2,
           "nodes": {"s": {"op": "read", "params": {"path": str(tmp_path / "still.exr")}}}}
    ev = Evaluator(load_graph(doc).graph)
    images = [ev.evaluate("s", Sample(f, v)) for f in (1, 2, 7) for v in (0, 3)]
    assert ev.calls["s"] == 1
    assert all(img is images[0] for img in images)


# -- view_token: a rig whose cameras each recorded a sequence -------------------------------------------
def _rig(tmp_path, views, frames, token_dir="cam{:02d}"):
    """Tiny EXRs whose R value is 100 * camera + frame (known answer)."""
    for v in views:
        folder = tmp_path / token_dir.format(v)
        folder.mkdir(parents=True, exist_ok=True)
        for f in frames:
            write_raw_exr(folder / f"plate.{f:04d}.exr",
                          {"R": np.full((4, 6), 100 * v + f), "G": np.zeros((4, 6)), "B": np.zeros((4, 6))})
    return str(tmp_path / "cam%02d" / "plate.%04d.exr")


def test_view_token_fills_the_camera_and_the_frame(tmp_path):
    path = _rig(tmp_path, (1, 2, 3), (1001, 1002))
    p = ReadParams(path=path, view_token="%02d")
    assert READ.views(p, {}) == FrameRange(1, 3)
    assert READ.frames(p, {}) == FrameRange(1001, 1002)
    for v, f in ((1, 1001), (3, 1002), (2, 1002)):
        img = READ.compute(p, {}, op_context(Sample(f, v)))
        assert float(img.channel("R")[0, 0]) == 100 * v + f
        assert img.meta["source.view"] == v and img.meta["source.frame"] == f
    # the result depends on both numbers, so the cache keeps both
    assert READ.canonical_sample(p, Sample(1001, 2)) == Sample(1001, 2)
    assert READ.sources(p, Sample(1002, 3)) == [os.path.realpath(tmp_path / "cam03" / "plate.1002.exr")]


def test_view_token_hash_form_and_padding_is_exact(tmp_path):
    _rig(tmp_path, (1, 2), (5,))
    (tmp_path / "cam7").mkdir()                        # '7' is not written as %02d writes it: ignored
    write_raw_exr(tmp_path / "cam7" / "plate.0005.exr", {"R": np.zeros((4, 6))})
    p = ReadParams(path=str(tmp_path / "cam##" / "plate.%04d.exr"), view_token="##")
    assert READ.views(p, {}) == FrameRange(1, 2)
    assert float(READ.compute(p, {}, op_context(Sample(5, 2))).channel("R")[0, 0]) == 205


def test_view_token_cameras_must_share_frames_and_have_no_gaps(tmp_path):
    path = _rig(tmp_path, (1, 2), (1, 2, 3))
    _rig(tmp_path, (3,), (1, 2))
    with pytest.raises(OpError) as err:
        READ.frames(ReadParams(path=path, view_token="%02d"), {})
    assert "camera 3 holds frames 1-2" in str(err.value) and "cam03" in err.value.file
    gap = _rig(tmp_path / "gap", (1, 3), (1,))
    with pytest.raises(OpError, match="cameras 2 are missing"):
        READ.views(ReadParams(path=gap, view_token="%02d"), {})


def test_view_token_missing_and_fractional(tmp_path):
    path = _rig(tmp_path, (1, 2), (1, 2))
    p = ReadParams(path=path, view_token="%02d")
    with pytest.raises(OpError) as err:
        READ.compute(p, {}, op_context(Sample(3, 2)))
    assert "frame 3 of camera 2" in str(err.value) and err.value.fix
    with pytest.raises(OpError) as err:
        READ.compute(p, {}, op_context(Sample(1, Fraction(3, 2))))
    assert err.value.field == "view_token" and "fractional view" in str(err.value)


@pytest.mark.parametrize("kw, words", [
    (dict(path="r/c%02d/p.%04d.exr"), "name it in view_token"),
    (dict(path="r/c%04d/p.%04d.exr", view_token="%04d"), "occurs 2 times"),
    (dict(path="r/c%02d/p.%04d.exr", view_token="%03d"), "does not occur"),
    (dict(path="r/c%02d/p.exr", view_token="%02d"), "no frame token besides"),
    (dict(path="r/c%02d/p.%04d.exr", view_token="%02d", axis="view"), "set axis to 'frame'"),
    (dict(path="r/c%02d/p.%04d.exr", view_token="cam"), "not a number token"),
])
def test_view_token_bad_params(kw, words):
    with pytest.raises(pydantic.ValidationError, match=words):
        ReadParams(**kw)
