"""The ``write`` operator: atomic writes, overwrite guard, provenance, format options."""

import json
import os
from fractions import Fraction

import cv2
import numpy as np
import OpenEXR
import pydantic
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.registry.operator import Operator
from graphcore.sample import Sample
from operators.io import exr
from operators.io.read import READ, ReadParams
from operators.io.write import TEMP_PREFIX, WRITE, WriteParams
from tests.operators.conftest import RGBA, op_context, premultiply_rgba, read_raw_exr, write_raw_exr


def _image(channels=RGBA, meta=None, shape=(6, 8)):
    rng = np.random.default_rng(11)
    px = rng.random((*shape, len(channels))).astype(np.float16).astype(np.float32)
    return Image(px, channels, meta or {})


def _ctx(sample, **kw):
    base = dict(node_id="out", graph_file="/shows/demo/retime.json", graph_hash="abc123",
                tool_version="0.1.0", path_nodes=({"id": "plate", "op": "read", "params": {}},),
                sources=("/plates/p.1001.exr",))
    base.update(kw)
    return op_context(sample, **base)


def _leftovers(folder):
    return [n for n in os.listdir(folder) if n.startswith(TEMP_PREFIX)]


def test_declaration():
    assert isinstance(WRITE, Operator) and WRITE.name == "write" and WRITE.version == 1
    assert WRITE.sink and not WRITE.cacheable
    assert [p.name for p in WRITE.inputs] == ["image"]
    assert all(f.description for f in WriteParams.model_fields.values())


def test_params_validation():
    p = WriteParams(path="o.%04d.exr")
    assert (p.pixel_type, p.compression, p.transfer, p.bit_depth) == ("source", "source", "auto", 8)
    with pytest.raises(pydantic.ValidationError, match="extension"):
        WriteParams(path="o.%04d.mov")
    with pytest.raises(pydantic.ValidationError):
        WriteParams(path="o.png", bit_depth=12)
    with pytest.raises(pydantic.ValidationError):
        WriteParams(path="o.jpg", quality=0)
    with pytest.raises(pydantic.ValidationError):
        WriteParams(path="o.exr", compression="lzma")


def test_writes_exr_with_provenance_and_returns_input(tmp_path):
    img = _image(meta={"exr.attributes": {"owner": "demo", exr.PROVENANCE_ATTRIBUTE: "{\"old\": 1}"}})
    params = WriteParams(path=str(tmp_path / "out" / "o.%04d.exr"))   # folder does not exist yet
    ctx = _ctx(Sample(1001))
    result = WRITE.compute(params, {"image": img}, ctx)
    assert result is img
    path = tmp_path / "out" / "o.1001.exr"
    assert path.is_file() and _leftovers(tmp_path / "out") == []
    header = OpenEXR.File(str(path), header_only=True).header()
    record = json.loads(header[exr.PROVENANCE_ATTRIBUTE])
    assert record == json.loads(json.dumps(ctx.provenance()))   # replaces the old record
    assert record["node"] == "out" and record["frame"] == "1001"
    assert record["sources"] == ["/plates/p.1001.exr"]
    assert header["owner"] == "demo"
    assert exr.read_provenance(str(path)) == record


def test_read_write_round_trip_keeps_types_and_compression(tmp_path):
    # half / float per channel and the compression survive read -> write ('source' options).
    planes = {"R": np.full((4, 4), 0.1, np.float16), "fwd.x": np.full((4, 4), 1234.567, np.float32)}
    write_raw_exr(tmp_path / "s.exr", planes, {"compression": OpenEXR.PIZ_COMPRESSION,
                                               "framesPerSecond": Fraction(24000, 1001)})
    img = READ.compute(ReadParams(path=str(tmp_path / "s.exr")), {}, _ctx(Sample(1)))
    WRITE.compute(WriteParams(path=str(tmp_path / "d.exr")), {"image": img}, _ctx(Sample(1)))
    raw, header = read_raw_exr(tmp_path / "d.exr")
    assert raw["R"].dtype == np.float16 and raw["fwd.x"].dtype == np.float32
    np.testing.assert_array_equal(raw["R"].view(np.uint16), planes["R"].view(np.uint16))
    np.testing.assert_array_equal(raw["fwd.x"], planes["fwd.x"])
    assert header["compression"] == OpenEXR.PIZ_COMPRESSION
    assert header["framesPerSecond"] == Fraction(24000, 1001)

    WRITE.compute(WriteParams(path=str(tmp_path / "e.exr"), pixel_type="float", compression="zips"),
                  {"image": img}, _ctx(Sample(1)))
    raw, header = read_raw_exr(tmp_path / "e.exr")
    assert raw["R"].dtype == np.float32
    assert header["compression"] == OpenEXR.ZIPS_COMPRESSION


def test_unknown_types_default_to_half_and_zip(tmp_path):
    WRITE.compute(WriteParams(path=str(tmp_path / "d.exr")), {"image": _image()}, _ctx(Sample(1)))
    raw, header = read_raw_exr(tmp_path / "d.exr")
    assert {px.dtype for px in raw.values()} == {np.dtype(np.float16)}
    assert header["compression"] == OpenEXR.ZIP_COMPRESSION


def test_channel_selection(tmp_path):
    img = _image(("R", "G", "B", "fwd.x"))
    WRITE.compute(WriteParams(path=str(tmp_path / "v.exr"), channels=["fwd.x"]), {"image": img},
                  _ctx(Sample(1)))
    assert set(read_raw_exr(tmp_path / "v.exr")[0]) == {"fwd.x"}
    with pytest.raises(OpError) as info:
        WRITE.compute(WriteParams(path=str(tmp_path / "w.exr"), channels=["conf"]), {"image": img},
                      _ctx(Sample(1)))
    assert info.value.field == "channels" and not (tmp_path / "w.exr").exists()


def _failing_writer(monkeypatch, seen):
    real = exr.write_exr

    def half_then_fail(path, image, **kw):
        seen.append(path)
        real(path, image, **kw)
        with open(path, "r+b") as fh:  # leave a half-written file behind, then fail
            fh.truncate(os.path.getsize(path) // 2)
        raise RuntimeError("disk went away mid-write")

    monkeypatch.setattr(exr, "write_exr", half_then_fail)


def test_atomic_write_leaves_nothing_on_failure(tmp_path, monkeypatch):
    seen = []
    _failing_writer(monkeypatch, seen)
    params = WriteParams(path=str(tmp_path / "o.%04d.exr"))
    with pytest.raises(RuntimeError, match="mid-write"):
        WRITE.compute(params, {"image": _image()}, _ctx(Sample(7)))
    assert not (tmp_path / "o.0007.exr").exists()
    assert _leftovers(tmp_path) == []
    # The temporary file was beside the target and kept the real extension.
    tmp = os.path.basename(seen[0])
    assert os.path.dirname(seen[0]) == str(tmp_path)
    assert tmp.startswith(TEMP_PREFIX) and tmp.endswith("-o.0007.exr")


def test_atomic_write_keeps_previous_file_on_failure(tmp_path, monkeypatch):
    params = WriteParams(path=str(tmp_path / "o.%04d.exr"))
    first = _image()
    WRITE.compute(params, {"image": first}, _ctx(Sample(7)))
    before = (tmp_path / "o.0007.exr").read_bytes()
    _failing_writer(monkeypatch, [])
    with pytest.raises(RuntimeError):
        WRITE.compute(params, {"image": _image(("R",))}, _ctx(Sample(7)))
    assert (tmp_path / "o.0007.exr").read_bytes() == before
    assert _leftovers(tmp_path) == []


def test_refuses_to_overwrite_a_source_plate(tmp_path):
    plate = tmp_path / "p.0001.exr"
    exr.write_exr(str(plate), _image())
    before = plate.read_bytes()
    params = WriteParams(path=str(tmp_path / "p.%04d.exr"))
    ctx = _ctx(Sample(1), protected_paths=frozenset({str(plate)}), sources=())
    with pytest.raises(OpError) as info:
        WRITE.compute(params, {"image": _image(("R",))}, ctx)
    assert info.value.field == "path" and info.value.file == str(plate)
    assert plate.read_bytes() == before
    # Through a symbolic link to the same folder, too.
    os.symlink(tmp_path, tmp_path / "alias")
    with pytest.raises(OpError):
        WRITE.compute(WriteParams(path=str(tmp_path / "alias" / "p.%04d.exr")),
                      {"image": _image(("R",))}, ctx)
    assert plate.read_bytes() == before
    # Another frame of the same pattern is not protected.
    WRITE.compute(params, {"image": _image(("R",))}, _ctx(Sample(2), protected_paths=ctx.protected_paths))
    assert (tmp_path / "p.0002.exr").exists()


def test_fractional_sample_is_an_error(tmp_path):
    with pytest.raises(OpError) as info:
        WRITE.compute(WriteParams(path=str(tmp_path / "o.%04d.exr")), {"image": _image()},
                      _ctx(Sample(Fraction(7, 2))))
    assert "fractional" in info.value.message
    assert os.listdir(tmp_path) == []


def test_axis_view_and_targets(tmp_path):
    params = WriteParams(path=str(tmp_path / "cam.%02d.exr"), axis="view")
    WRITE.compute(params, {"image": _image()}, _ctx(Sample(frame=1001, view=3)))
    assert (tmp_path / "cam.03.exr").exists()
    assert WRITE.targets(WriteParams(path=str(tmp_path / "o.%04d.exr")), [1, 2]) == \
        [str(tmp_path / "o.0001.exr"), str(tmp_path / "o.0002.exr")]
    assert WRITE.targets(WriteParams(path=str(tmp_path / "one.exr")), [1, 2, 3]) == \
        [str(tmp_path / "one.exr")]


def test_png_16_bit_and_jpeg_limits(tmp_path):
    img = premultiply_rgba(_image().pixels)   # valid premultiplied colour: straight colour <= 1
    WRITE.compute(WriteParams(path=str(tmp_path / "o.%d.png"), bit_depth=16), {"image": img},
                  _ctx(Sample(1)))
    back = cv2.imread(str(tmp_path / "o.1.png"), cv2.IMREAD_UNCHANGED)
    assert back.dtype == np.uint16 and back.shape == (6, 8, 4)
    # Read back through the read operator: within one 16-bit code of the written image
    # (sRGB, IEC 61966-2-1, straight alpha in the file).
    again = READ.compute(ReadParams(path=str(tmp_path / "o.%d.png")), {}, _ctx(Sample(1)))
    # One 16-bit code near white is 3.5e-5 in linear light; measured max error 1.5e-5.
    assert np.abs(again.pixels - img.pixels).max() < 3.5e-5
    with pytest.raises(OpError) as info:
        WRITE.compute(WriteParams(path=str(tmp_path / "o.jpg"), bit_depth=16), {"image": img},
                      _ctx(Sample(1)))
    assert info.value.field == "bit_depth" and not (tmp_path / "o.jpg").exists()
    with pytest.raises(OpError) as info:   # alpha in a JPEG: error names the final path
        WRITE.compute(WriteParams(path=str(tmp_path / "o.jpg")), {"image": img}, _ctx(Sample(1)))
    assert info.value.file == str(tmp_path / "o.jpg")
    assert _leftovers(tmp_path) == []


def test_unwritable_folder_is_an_op_error(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_bytes(b"x")
    with pytest.raises(OpError) as info:
        WRITE.compute(WriteParams(path=str(blocker / "o.exr")), {"image": _image()},
                      _ctx(Sample(1)))
    assert info.value.file == str(blocker / "o.exr") and info.value.field == "path"
