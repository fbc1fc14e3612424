"""Named colour spaces through OpenColorIO in ``read`` and ``write`` (operators/io/colorspace.py).

Sources of the checks:

- IEC 61966-2-1:1999, the sRGB transfer function: our built-in curve (operators.io.transfer).
- OpenColorIO (Academy Software Foundation): a minimal config written here with the library's
  ExponentWithLinearTransform (gamma 2.4, offset 0.055: the IEC 61966-2-1 curve as OpenColorIO
  documents it), and the library's own built-in CG config ('ocio://cg-config-latest', whose
  'sRGB Encoded Rec.709 (sRGB)' and 'Linear Rec.709 (sRGB)' spaces differ by that curve alone).
"""

from __future__ import annotations

import cv2
import numpy as np
import pydantic
import PyOpenColorIO as OCIO
import pytest

from graphcore.errors import OpError
from graphcore.image import Image
from graphcore.sample import Sample
from operators.io import transfer as tf
from operators.io.read import READ, ReadParams
from operators.io.write import WRITE, WriteParams
from tests.cli.test_cli_run import raw_channels
from tests.operators.conftest import run_op



@pytest.fixture
def config_file(tmp_path):
    """A minimal OpenColorIO v2 config: 'linear' (the scene_linear role) and 'srgb_tx' (sRGB-encoded
    values, IEC 61966-2-1 through ExponentWithLinearTransform)."""
    cfg = OCIO.Config.CreateRaw()
    lin = OCIO.ColorSpace(name="linear")
    srgb = OCIO.ColorSpace(name="srgb_tx")
    srgb.setTransform(OCIO.ExponentWithLinearTransform(gamma=[2.4, 2.4, 2.4, 1.0], offset=[0.055, 0.055, 0.055, 0.0]),
                      OCIO.COLORSPACE_DIR_TO_REFERENCE)
    cfg.addColorSpace(lin)
    cfg.addColorSpace(srgb)
    cfg.setRole(OCIO.ROLE_SCENE_LINEAR, "linear")
    cfg.setRole(OCIO.ROLE_DEFAULT, "linear")
    path = tmp_path / "show.ocio"
    path.write_text(cfg.serialize())
    return str(path)


def _ramp(h=16, w=64) -> np.ndarray:
    x = np.linspace(0.0, 1.0, w, dtype=np.float32)
    return np.dstack([np.tile(x, (h, 1)), np.tile(x[::-1], (h, 1)), np.full((h, w), 0.5, np.float32)])


def test_minimal_config_srgb_matches_the_builtin_iec_curve(config_file):
    cpu = OCIO.Config.CreateFromFile(config_file).getProcessor("srgb_tx", "linear").getOptimizedCPUProcessor(
        OCIO.OPTIMIZATION_LOSSLESS)
    code = np.ascontiguousarray(_ramp())
    lin = code.copy()
    cpu.applyRGB(lin)
    np.testing.assert_allclose(lin, tf.decode("srgb", code), atol=2e-6)


def test_read_png_through_the_config_equals_the_builtin_decoding(tmp_path, config_file):
    code8 = np.round(_ramp() * 255).astype(np.uint8)
    png = tmp_path / "ramp.png"
    cv2.imwrite(str(png), cv2.cvtColor(code8, cv2.COLOR_RGB2BGR))
    builtin = run_op(READ, ReadParams(path=str(png)), {}, sample=Sample(0))
    named = run_op(READ, ReadParams(path=str(png), colorspace="srgb_tx", ocio_config=config_file), {},
                   sample=Sample(0))
    assert named.channels == builtin.channels
    np.testing.assert_allclose(named.pixels, builtin.pixels, atol=2e-6)


def test_read_uses_the_OCIO_variable_when_no_config_is_named(tmp_path, config_file, monkeypatch):
    code = _ramp()
    png = tmp_path / "ramp.png"
    cv2.imwrite(str(png), cv2.cvtColor(np.round(code * 255).astype(np.uint8), cv2.COLOR_RGB2BGR))
    monkeypatch.setenv("OCIO", config_file)
    named = run_op(READ, ReadParams(path=str(png), colorspace="srgb_tx"), {}, sample=Sample(0))
    np.testing.assert_allclose(named.pixels, tf.decode("srgb", np.round(code * 255) / 255), atol=2e-6)


def test_write_exr_in_a_named_space_and_keep_alpha(tmp_path, config_file):
    lin = tf.decode("srgb", _ramp())
    a = np.full(lin.shape[:2], 0.5, np.float32)
    img = Image(np.dstack([lin * a[..., None], a]), ("R", "G", "B", "A"))     # premultiplied
    out = tmp_path / "o.exr"
    run_op(WRITE, WriteParams(path=str(out), pixel_type="float", colorspace="srgb_tx", ocio_config=config_file),
           {"image": img}, sample=Sample(0))
    ch = raw_channels(out)
    np.testing.assert_array_equal(ch["A"], a)
    # straight colour converted, then premultiplied again (measured within 8e-6 of the curve:
    # float32 rounding of premultiplying, dividing and the two curves)
    got = np.dstack([ch[c] for c in "RGB"]) / a[..., None]
    np.testing.assert_allclose(got, _ramp(), atol=2e-5)


def test_builtin_cg_config_agrees_with_the_iec_curve(tmp_path):
    """The library's CG config: sRGB-encoded Rec.709 read to its scene_linear (ACEScg), written
    out as linear Rec.709, is the IEC 61966-2-1 decoding of the code values."""
    code = _ramp()
    src = tmp_path / "in.exr"
    run_op(WRITE, WriteParams(path=str(src), pixel_type="float"), {"image": Image(code, ("R", "G", "B"))},
           sample=Sample(0))
    cg = "ocio://cg-config-latest"
    acescg = run_op(READ, ReadParams(path=str(src), colorspace="sRGB Encoded Rec.709 (sRGB)", ocio_config=cg),
                    {}, sample=Sample(0))
    assert not np.allclose(acescg.pixels, tf.decode("srgb", code), atol=1e-3)   # other primaries
    out = tmp_path / "out.exr"
    run_op(WRITE, WriteParams(path=str(out), pixel_type="float", colorspace="Linear Rec.709 (sRGB)", ocio_config=cg),
           {"image": acescg}, sample=Sample(0))
    ch = raw_channels(out)
    np.testing.assert_allclose(np.dstack([ch[c] for c in "RGB"]), tf.decode("srgb", code), atol=1e-4)


def test_bad_configs_and_names_are_clear_errors(tmp_path, config_file, monkeypatch):
    png = tmp_path / "p.png"
    cv2.imwrite(str(png), np.zeros((4, 4, 3), np.uint8))
    monkeypatch.delenv("OCIO", raising=False)
    cases = [
        (ReadParams(path=str(png), colorspace="srgb_tx"), "ocio_config", "OCIO environment variable"),
        (ReadParams(path=str(png), colorspace="srgb_tx", ocio_config=str(tmp_path / "none.ocio")),
         "ocio_config", "does not exist"),
        (ReadParams(path=str(png), colorspace="ACEScct", ocio_config=config_file), "colorspace", "srgb_tx"),
    ]
    for params, field, text in cases:
        with pytest.raises(OpError) as e:
            run_op(READ, params, {}, sample=Sample(0))
        assert e.value.field == field and text in e.value.describe(), e.value.describe()
    broken = tmp_path / "broken.ocio"
    broken.write_text("ocio_profile_version: 2\ncolorspaces: [this is not a config\n")
    with pytest.raises(OpError) as e:
        run_op(READ, ReadParams(path=str(png), colorspace="x", ocio_config=str(broken)), {}, sample=Sample(0))
    assert e.value.field == "ocio_config" and str(broken) in e.value.describe()
    with pytest.raises(pydantic.ValidationError, match="set one of them"):
        ReadParams(path=str(png), colorspace="srgb_tx", transfer="srgb")
    with pytest.raises(pydantic.ValidationError, match="no colorspace"):
        WriteParams(path=str(tmp_path / "o.exr"), ocio_config=config_file)
