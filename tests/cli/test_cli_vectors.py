"""`midframe vectors FIRST SECOND --out OUT.exr` end to end on real files."""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest

from tests.cli.test_cli_run import cli_proc, header, raw_channels


@pytest.fixture(scope="module")
def motorcycle(tmp_path_factory):
    """Middlebury 2014 'Motorcycle', quarter size, from scikit-image (Scharstein et al., GCPR 2014)."""
    from skimage.data import stereo_motorcycle

    left, right, disp = stereo_motorcycle()
    folder = tmp_path_factory.mktemp("moto")
    cv2.imwrite(str(folder / "left.png"), cv2.cvtColor(left, cv2.COLOR_RGB2BGR))
    cv2.imwrite(str(folder / "right.png"), cv2.cvtColor(right, cv2.COLOR_RGB2BGR))
    return folder, left, right, disp


def test_vectors_on_motorcycle_beat_dis(motorcycle):
    """Vectors left -> right are x = -disparity, y = 0 where the disparity is finite (occluded pixels
    included). Ours, through the whole command (PNG in, EXR out), against OpenCV DIS MEDIUM on the
    same pair, measured in this test."""
    folder, left, right, disp = motorcycle
    out = folder / "vec.exr"
    proc = cli_proc("vectors", str(folder / "left.png"), str(folder / "right.png"), "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    ch = raw_channels(out)
    assert sorted(ch) == sorted(["fwd.x", "fwd.y", "bwd.x", "bwd.y", "conf", "bwd.conf", "fwd.occ", "bwd.occ"])
    assert ch["fwd.x"].dtype == np.float32 and ch["fwd.x"].shape == disp.shape
    valid = np.isfinite(disp)
    gt = np.where(valid, -disp, 0)

    def score(u, v):
        ep = np.hypot(u - gt, v)[valid]
        return float(ep.mean()), float((ep > 3).mean())

    ours = score(ch["fwd.x"], ch["fwd.y"])
    grey = [cv2.cvtColor(x, cv2.COLOR_RGB2GRAY) for x in (left, right)]
    dis = cv2.DISOpticalFlow_create(cv2.DISOPTICAL_FLOW_PRESET_MEDIUM).calc(grey[0], grey[1], None)
    base = score(dis[..., 0], dis[..., 1])
    assert ours[0] < base[0] and ours[1] < base[1], (ours, base)
    # measured 1.488 px / 8.19 % (1.724 / 10.14 % before the 'auto' fill rule, the suspect strip at
    # motion edges, the uniqueness check, the likelihood-chosen enlargement into every level and
    # the 7 x 7 median; 1.759 / 10.38 % before the adaptive support weights); issue 3 targets
    # 1.5 px / 9 %
    assert ours[0] < 1.5 and ours[1] < 0.085
    # the backward vectors are the same disparity seen from the right image: mostly positive x
    assert np.median(ch["bwd.x"][valid]) > 0
    conf = ch["conf"]
    assert 0 <= conf.min() and conf.max() <= 1
    prov = json.loads(header(out)["midframe.provenance"])
    assert prov["command"] == "vectors" and prov["params"]["quality"] == "standard"


def test_vectors_bad_input(tmp_path, motorcycle):
    folder = motorcycle[0]
    small = tmp_path / "small.png"
    cv2.imwrite(str(small), np.zeros((20, 30, 3), np.uint8))
    cases = [
        (["vectors", str(folder / "left.png"), str(small), "--out", str(tmp_path / "o.exr")], "differ in size"),
        (["vectors", str(folder / "left.png"), str(folder / "right.png"), "--out", str(tmp_path / "o.png")],
         "must be an EXR"),
        (["vectors", str(folder / "left.png"), str(tmp_path / "missing.png"), "--out", str(tmp_path / "o.exr")],
         "missing.png"),
    ]
    for args, text in cases:
        proc = cli_proc(*args)
        assert proc.returncode == 2, (args, proc.stderr)
        assert "Traceback" not in proc.stderr and text in proc.stderr
    assert not (tmp_path / "o.exr").exists()
