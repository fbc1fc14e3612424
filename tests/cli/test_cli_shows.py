"""Show-level defaults (issue 6): the example show files in graphs/shows/ layer beneath the shipped
templates unchanged, and what they set reaches the written files (checked through OpenEXR's own
reader and the provenance header)."""

from __future__ import annotations

import json

import numpy as np
import PyOpenColorIO as OCIO

from tests.cli.test_cli_retime import sequence
from tests.cli.test_cli_run import cli, header, raw_channels, write_plate
from tests.conftest import GRAPHS

SHOWS = GRAPHS / "shows"


def test_every_show_file_validates_under_every_template(tmp_path):
    for show in sorted(SHOWS.glob("*.json")):
        for graph in ("retime.json", "viewmorph.json", "stereo-shot.json", "convert.json"):
            rc, out, err = cli("check", str(GRAPHS / graph), "--defaults", str(show))
            assert rc == 0, (show.name, graph, err)


def test_aces_show_reads_and_writes_aces2065_and_works_in_acescg(tmp_path):
    """Plates in ACES2065-1 (AP0) pass through a retime's whole frames back to ACES2065-1 within half
    precision, written half/PIZ; the colour conversion is OpenColorIO's built-in CG config's."""
    cfg = OCIO.Config.CreateFromFile("ocio://cg-config-latest")
    to_ap0 = cfg.getProcessor("ACEScg", "ACES2065-1").getOptimizedCPUProcessor(OCIO.OPTIMIZATION_LOSSLESS)
    src = tmp_path / "src"
    src.mkdir()
    rng = np.random.default_rng(1)
    for i in range(3):
        rgb = np.ascontiguousarray(rng.random((24, 32, 3)).astype(np.float32) * 0.8 + 0.05)
        to_ap0.applyRGB(rgb)
        write_plate(src / f"p.{1001 + i}.exr", {"R": rgb[..., 0].copy(), "G": rgb[..., 1].copy(), "B": rgb[..., 2].copy()})
    rc, _, err = cli("run", str(GRAPHS / "retime.json"), "--set", f"src={src}/p.%04d.exr",
                     "--set", f"dst={tmp_path}/o.%04d.exr", "--set", "slowdown=2",
                     "--defaults", str(SHOWS / "aces-feature.json"), "-q")
    assert rc == 0, err
    out = raw_channels(tmp_path / "o.1003.exr")                  # whole source frame 1002
    assert out["R"].dtype == np.float16
    src_ch = raw_channels(src / "p.1002.exr")
    for c in "RGB":
        np.testing.assert_allclose(out[c].astype(np.float32), src_ch[c], rtol=2e-3, atol=1e-4)
    hdr = header(tmp_path / "o.1003.exr")
    assert "piz" in str(hdr["compression"]).lower()
    prov = json.loads(hdr["midframe.provenance"])
    write = [n for n in prov["nodes"] if n["op"] == "write"][0]
    assert write["params"]["colorspace"] == "ACES2065-1"


def test_preview_show_renders_with_draft_vectors(tmp_path):
    src = sequence(tmp_path / "src", 3, np.float32)
    rc, _, err = cli("run", str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set", f"dst={tmp_path}/o.%04d.exr",
                     "--set", "slowdown=2", "--defaults", str(SHOWS / "episodic-preview.json"), "-q")
    assert rc == 0, err
    prov = json.loads(header(tmp_path / "o.1002.exr")["midframe.provenance"])
    flow = [n for n in prov["nodes"] if n["op"] == "flow-estimate"][0]
    assert flow["params"]["quality"] == "draft"
    assert "dwaa" in str(header(tmp_path / "o.1002.exr")["compression"]).lower()
