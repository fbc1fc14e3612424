"""`midframe assess`: a risk for every in-between output frame, from the shot itself.

Known answers on invented data: a textured plate panning steadily except for one jolt (a frame
knocked off the path, as a bumped camera gives) must put the in-betweens beside the jolt at the top;
every in-between output frame gets exactly one entry, real frames none. Bad input exits 2 with a
named field and no traceback. The correlation with the true error on real footage is in
tests/operators/test_assess_correlation.py.
"""

from __future__ import annotations

import contextlib
import io
import json
from fractions import Fraction

import cv2
import numpy as np
import pytest

from graphcore.cli.main import main
from graphcore.image import Image
from operators.io.exr import write_exr
from tests.conftest import GRAPHS

FIRST = 1001


def _texture(h: int, w: int) -> np.ndarray:
    rng = np.random.default_rng(11)
    big = cv2.GaussianBlur(rng.random((h, w, 3)).astype(np.float32), (0, 0), 2.0)
    return (big - big.min()) / (big.max() - big.min())


def _plate(folder, shifts) -> str:
    """A 64 x 96 crop of one texture at horizontal offsets ``shifts`` (pixels), one EXR per frame."""
    folder.mkdir(parents=True, exist_ok=True)
    tex = _texture(96, 160)
    for i, dx in enumerate(shifts):
        m = np.float32([[1, 0, -dx], [0, 1, 0]])
        rgb = cv2.warpAffine(tex, m, (160, 96), flags=cv2.INTER_CUBIC)[16:80, 24:120]
        write_exr(str(folder / f"p.{FIRST + i:04d}.exr"),
                  Image(np.dstack([rgb, np.ones(rgb.shape[:2], np.float32)]), ("R", "G", "B", "A")))
    return str(folder / "p.%04d.exr")


def _assess(*args: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main(["assess", *args])
    return rc, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def jolted(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("jolt")
    shifts = [1.5 * k for k in range(9)]
    shifts[4] += 4.0                       # frame 1005 knocked 4 px off a steady 1.5 px/frame pan
    src = _plate(tmp / "src", shifts)
    rc, out, err = _assess(str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set",
                           f"dst={tmp}/out/o.%04d.exr", "--set", "slowdown=2", "--json", str(tmp / "a.json"),
                           "--report", str(tmp / "report"), "--worst", "3")
    assert rc == 0, err
    return json.loads((tmp / "a.json").read_text()), out, err, tmp


def test_the_jolt_is_where_the_risk_is(jolted):
    doc, _out, err, _ = jolted
    ranked = sorted(doc["frames"], key=lambda e: -e["risk"])
    # in-betweens at source times 1004 1/2 and 1005 1/2 (output frames 1008 and 1010) have the
    # knocked frame as a neighbour: they must be the two riskiest
    assert {ranked[0]["frame"], ranked[1]["frame"]} == {1008, 1010}, [(e["frame"], e["risk"]) for e in ranked]
    steady = [e["risk"] for e in doc["frames"] if e["frame"] in (1002, 1004, 1014, 1016)]
    assert ranked[1]["risk"] > 2 * max(steady)
    assert doc["summary"]["worst"][:2] == [ranked[0]["frame"], ranked[1]["frame"]]
    assert "1008" in err and "riskiest first" in err


def test_one_entry_per_inbetween_and_none_for_real_frames(jolted):
    doc, out, _, _ = jolted
    frames = [e["frame"] for e in doc["frames"]]
    # slowdown 2 over 1001..1009: output 1001..1017, the even ones are in-betweens
    assert frames == list(range(1002, 1017, 2))
    for e in doc["frames"]:
        when = Fraction(e["source_time"])
        assert when == FIRST + Fraction(e["frame"] - FIRST, 2)
        assert e["pair"] == [int(when), int(when) + 1] and e["t"] == 0.5
        assert e["level"] in ("ok", "watch", "high")
    assert doc["schema"] == "midframe.assess" and doc["time_node"] == "timing"
    assert doc["inbetween_node"] == "inbetween" and doc["vectors_node"] == "smooth"
    # the leave-one-out rebuilds: every source frame but the two ends, the knocked one worst
    sources = {s["frame"]: s["psnr"] for s in doc["sources"]}
    assert sorted(sources) == list(range(1002, 1009))
    assert min(sources, key=sources.get) == 1005
    assert len(out.strip().splitlines()) == 1 + len(frames)       # a header and a row per in-between


def test_report_shows_the_worst_frames_with_their_pictures(jolted):
    doc, _, _, tmp = jolted
    page = (tmp / "report" / "index.html").read_text()
    for k in doc["summary"]["worst"]:
        assert f"frame{k}-thumb.png" in page and (tmp / "report" / "pictures" / f"frame{k}-error.png").is_file()
        assert (tmp / "report" / "pictures" / f"frame{k}-vectors.png").is_file()
    assert "<script" not in page.lower()


def test_slowdown_3_gives_both_thirds_the_same_weight(tmp_path):
    src = _plate(tmp_path / "src", [1.5 * k for k in range(4)])
    rc, _, err = _assess(str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set",
                         f"dst={tmp_path}/o.%04d.exr", "--set", "slowdown=3", "--json", str(tmp_path / "a.json"))
    assert rc == 0, err
    frames = json.loads((tmp_path / "a.json").read_text())["frames"]
    assert [e["source_time"] for e in frames] == ["3004/3", "3005/3", "3007/3", "3008/3", "3010/3", "3011/3"]
    assert [round(e["t"], 6) for e in frames] == [0.333333, 0.666667] * 3


def test_a_graph_without_retime_exits_2(tmp_path):
    src = _plate(tmp_path / "src", [0, 1, 2])
    rc, out, err = _assess(str(GRAPHS / "convert.json"), "--set", f"src={src}", "--set", f"dst={tmp_path}/o.%04d.exr")
    assert rc == 2 and "retime" in err and "Traceback" not in err + out


def test_too_short_a_source_exits_2(tmp_path):
    src = _plate(tmp_path / "src", [0, 1])
    rc, out, err = _assess(str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set",
                           f"dst={tmp_path}/o.%04d.exr", "--set", "slowdown=2")
    assert rc == 2 and "three source frames" in err and "Traceback" not in err + out


def test_unknown_node_exits_2(tmp_path):
    src = _plate(tmp_path / "src", [0, 1, 2])
    rc, _out, err = _assess(str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set",
                           f"dst={tmp_path}/o.%04d.exr", "--set", "slowdown=2", "--node", "plate")
    assert rc == 2 and "--node" in err and "not a retime" in err


def test_a_foreign_report_folder_is_refused_and_left_alone(tmp_path):
    src = _plate(tmp_path / "src", [0, 1, 2])
    mine = tmp_path / "shots"
    mine.mkdir()
    (mine / "notes.txt").write_text("keep me")
    rc, _out, err = _assess(str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set",
                           f"dst={tmp_path}/o.%04d.exr", "--set", "slowdown=2", "--report", str(mine))
    assert rc == 2 and "--report" in err and (mine / "notes.txt").read_text() == "keep me"
    assert sorted(p.name for p in mine.iterdir()) == ["notes.txt"]


def test_render_falls_back_whole_frames_where_vectors_fail_and_lists_them(tmp_path):
    """A cut between two unrelated pictures: no vectors can join them, so with a blend frame_fallback
    the in-between across the cut is the plain dissolve of the two real frames, and the run says so."""
    from operators.io.exr import read_exr

    folder = tmp_path / "src"
    folder.mkdir()
    tex = _texture(96, 160)
    other = 0.6 + 0.4 * _texture(96, 160)[::-1, ::-1]       # another shot, brighter
    frames = [tex[:64, :96], tex[:64, 2:98], other[:64, :96], other[:64, 2:98]]
    for i, rgb in enumerate(frames):
        write_exr(str(folder / f"p.{FIRST + i:04d}.exr"),
                  Image(np.dstack([rgb, np.ones(rgb.shape[:2], np.float32)]), ("R", "G", "B", "A")))
    show = tmp_path / "show.json"
    show.write_text(json.dumps({"schema": "midframe.defaults", "version": 1,
                                "params": {"blend": {"frame_fallback": 0.2}}}))
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        rc = main(["run", str(GRAPHS / "retime.json"), "--set", f"src={folder}/p.%04d.exr", "--set",
                   f"dst={tmp_path}/o/o.%04d.exr", "--set", "slowdown=2", "--defaults", str(show)])
    text = err.getvalue()
    assert rc == 0, text
    assert "fell back whole" in text and "1004" in text, text       # source time 1002 1/2: output 1004
    got = read_exr(str(tmp_path / "o" / "o.1004.exr")).select(("R", "G", "B")).pixels
    a = read_exr(str(folder / "p.1002.exr")).select(("R", "G", "B")).pixels
    b = read_exr(str(folder / "p.1003.exr")).select(("R", "G", "B")).pixels
    np.testing.assert_allclose(got, 0.5 * a + 0.5 * b, atol=1e-3)     # written as half float
    # the pan on either side of the cut is still built along its vectors (not listed)
    listed = text.split("fell back whole")[1].splitlines()[0]
    assert "1002" not in listed and "1006" not in listed


def test_a_view_morph_is_assessed_along_the_cameras(tmp_path):
    """graphs/viewmorph.json over a row of seven cameras panning steadily, camera 4 knocked off the
    line: the in-between views beside it are the riskiest; real cameras get no entry."""
    folder = tmp_path / "rig"
    folder.mkdir()
    tex = _texture(96, 160)
    for j in range(1, 8):
        dx = 1.5 * j + (4.0 if j == 4 else 0.0)
        m = np.float32([[1, 0, -dx], [0, 1, 0]])
        rgb = cv2.warpAffine(tex, m, (160, 96), flags=cv2.INTER_CUBIC)[16:80, 24:120]
        write_exr(str(folder / f"cam.{j:04d}.exr"),
                  Image(np.dstack([rgb, np.ones(rgb.shape[:2], np.float32)]), ("R", "G", "B", "A")))
    rc, _, err = _assess(str(GRAPHS / "viewmorph.json"), "--set", f"src={folder}/cam.%04d.exr", "--set",
                         f"dst={tmp_path}/o/o.%04d.exr", "--set", "between=1", "--json", str(tmp_path / "a.json"))
    assert rc == 0, err
    doc = json.loads((tmp_path / "a.json").read_text())
    assert doc["axis"] == "view" and doc["cameras"] == [1, 7]
    # camera j lands on output 1 + 2 (j - 1); the in-betweens are the even outputs
    assert [e["frame"] for e in doc["frames"]] == [2, 4, 6, 8, 10, 12]
    assert [e["source_view"] for e in doc["frames"]] == ["3/2", "5/2", "7/2", "9/2", "11/2", "13/2"]
    ranked = sorted(doc["frames"], key=lambda e: -e["risk"])
    assert {ranked[0]["frame"], ranked[1]["frame"]} == {6, 8}, [(e["frame"], e["risk"]) for e in ranked]
    assert {s["camera"] for s in doc["sources"]} == set(range(2, 7))


def test_jobs_give_the_same_assessment(jolted, tmp_path):
    """Two worker processes, each a run of the in-betweens: the same risks, rebuilds and worst frames."""
    doc, _, _, tmp = jolted
    src = doc["graph"]["vars"]["src"]
    rc, _, err = _assess(str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set",
                         f"dst={tmp}/out/o.%04d.exr", "--set", "slowdown=2", "--json", str(tmp_path / "j.json"),
                         "--worst", "3", "--jobs", "2", "--report", str(tmp_path / "rep"))
    assert rc == 0, err
    par = json.loads((tmp_path / "j.json").read_text())
    assert par["frames"] == doc["frames"]
    assert par["sources"] == doc["sources"] and par["summary"] == doc["summary"]
    for k in par["summary"]["worst"]:
        assert (tmp_path / "rep" / "pictures" / f"frame{k}-thumb.png").is_file()
