"""The static report of `midframe assess` (graphcore/report.py) on synthetic, known data: the risk
strip, the order of the worst frames, the pictures (sizes, channel order, heat scale), the page
being static and escaped, the graph drawing, bad input, and the page in headless Chromium.

All data here is invented for known-answer checks; nothing is measured against the outside world
except the PNG files, decoded back with OpenCV.
"""

from __future__ import annotations

import itertools
import json
import math
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import cv2
import numpy as np
import pytest

from graphcore import report
from graphcore.report import error_scale, heat_map, picture_size, write_report

REPO = Path(__file__).resolve().parents[2]
THRESHOLD = {"watch": 0.5, "high": 1.0}


# -- synthetic data ----------------------------------------------------------------------------
def _risks(n: int = 24, seed: int = 3) -> list[float]:
    rng = np.random.default_rng(seed)
    values = rng.permutation(np.linspace(0.02, 1.4, n))  # distinct, so the order is unambiguous
    return [float(v) for v in values]


def _assessment(risks: list[float] | None = None, **extra) -> dict:
    risks = _risks() if risks is None else risks
    frames = []
    for k, r in enumerate(risks):
        f = 1001 + 2 * k + 1  # slow-down 2: odd frames are the in-betweens
        frames.append({"frame": f, "source_time": f"{2 * 1001 + 2 * k + 1}/2", "t": 0.5,
                       "pair": [1001 + k, 1002 + k], "risk": r,
                       "level": "high" if r >= 1.0 else "watch" if r >= 0.5 else "ok",
                       "loo_psnr": 40.0 - 10 * r, "confidence": 1 - r / 2, "occluded": r / 20,
                       "motion": 3 * r, "warp_share": 0.25, "comment": "not a number"})
    doc = {"schema": "midframe.assess", "version": 1,
           "graph": {"file": "graphs/retime.json", "hash": "sha256:" + "ab" * 32,
                     "vars": {"src": "plates/a.%04d.exr", "dst": "out/a.%04d.exr", "slowdown": "2"}},
           "time_node": "timing", "inbetween_node": "inbetween", "vectors_node": "smooth",
           "threshold": dict(THRESHOLD), "frames": frames,
           "sources": [{"frame": 1002 + k, "psnr": 30.0 + k / 10, "rebuilt_from": [1001 + k, 1003 + k]}
                       for k in range(len(risks) - 1)]}
    doc.update(extra)
    return doc


def _graph_doc() -> dict:
    return json.loads((REPO / "graphs" / "retime.json").read_text())


class _Page(HTMLParser):
    """Tags, attributes and text of a page; the rects of the risk strip; the worst-frame rows."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.attrs: list[tuple[str, str | None]] = []
        self.refs: list[str] = []
        self.bars: list[dict[str, str]] = []
        self.thresholds: list[dict[str, str]] = []
        self.worst: list[int] = []
        self.frame_rows: list[int] = []
        self.ids: set[str] = set()
        self.header: list[list[str]] = []
        self._th: list[str] | None = None
        self._in_th = False
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        self.attrs.extend(attrs)
        for name in ("src", "href"):
            if a.get(name):
                self.refs.append(a[name])
        if a.get("id"):
            self.ids.add(a["id"])
        cls = (a.get("class") or "").split()
        if tag == "rect" and "bar" in cls:
            self.bars.append(a)
        if tag == "line" and "threshold" in cls:
            self.thresholds.append(a)
        if tag == "tr" and "worst" in cls:
            self.worst.append(int(a["data-frame"]))
        if tag == "tr" and "frame" in cls:
            self.frame_rows.append(int(a["data-frame"]))
        if tag == "table":
            self._th = []
            self.header.append(self._th)
        self._in_th = tag == "th"

    def handle_endtag(self, tag):
        if tag == "th":
            self._in_th = False

    def handle_data(self, data):
        self.text.append(data)
        if self._in_th and self._th is not None:
            self._th.append(data)


def _parse(path: Path) -> tuple[str, _Page]:
    text = path.read_text(encoding="utf-8")
    page = _Page()
    page.feed(text)
    return text, page


def _pictures(frames: list[int], size: tuple[int, int] = (540, 960)) -> dict[int, dict[str, np.ndarray]]:
    h, w = size
    rng = np.random.default_rng(7)
    out = {}
    for f in frames:
        out[f] = {"thumb": rng.integers(0, 256, (h, w, 3), dtype=np.uint8),
                  "vectors": rng.integers(0, 256, (h, w, 3), dtype=np.uint8),
                  "confidence": rng.random((h, w)),
                  "error": rng.random((h, w)) * 0.04,
                  "rebuilt": rng.integers(0, 256, (h, w, 3), dtype=np.uint8)}
    return out


# -- the risk strip ------------------------------------------------------------------------------
def test_strip_has_one_bar_per_frame_with_heights_in_risk_order(tmp_path):
    risks = _risks()
    a = _assessment(risks)
    _, page = _parse(write_report(tmp_path / "r", a, {}, _graph_doc()))
    frames = [f["frame"] for f in a["frames"]]
    bars = page.bars
    assert len(bars) == len(frames)
    assert [int(b["data-frame"]) for b in bars] == sorted(frames)          # frame order, left to right
    xs = [float(b["x"]) for b in bars]
    assert xs == sorted(xs) and len(set(xs)) == len(xs)
    by_frame = {f["frame"]: f["risk"] for f in a["frames"]}
    heights = {int(b["data-frame"]): float(b["height"]) for b in bars}
    # the heights sort the frames exactly as the risks do, and are proportional to them
    assert sorted(heights, key=heights.get) == sorted(by_frame, key=by_frame.get)
    ratios = [heights[f] / by_frame[f] for f in frames]
    assert max(ratios) == pytest.approx(min(ratios), rel=2e-3)
    # every bar stands on the same baseline
    bottoms = {round(float(b["y"]) + float(b["height"]), 2) for b in bars}
    assert len(bottoms) == 1
    base = bottoms.pop()
    # the threshold lines sit at the heights a bar of that risk would have
    lines = {t["data-level"]: base - float(t["y1"]) for t in page.thresholds}
    assert set(lines) == {"watch", "high"}
    for name, v in THRESHOLD.items():
        assert lines[name] == pytest.approx(v * ratios[0], rel=2e-3)
    # colour follows the level assess gave
    level = {f["frame"]: f["level"] for f in a["frames"]}
    for b in bars:
        assert b["fill"] == report.LEVEL_COLOURS.get(level[int(b["data-frame"])], report._OTHER_COLOUR)


def test_strip_levels_from_thresholds_and_missing_risk(tmp_path):
    # no level given: derived from the thresholds; a risk of None draws a bar of height 0
    a = {"threshold": {"watch": 0.5, "high": 1.0},
         "frames": [{"frame": 3, "risk": 0.2}, {"frame": 1, "risk": 1.5}, {"frame": 2, "risk": None},
                    {"frame": 4, "risk": 0.5}]}
    _, page = _parse(write_report(tmp_path, a, {}, {"nodes": {}}))
    bars = {int(b["data-frame"]): b for b in page.bars}
    assert sorted(bars) == [1, 2, 3, 4]
    assert float(bars[2]["height"]) == 0.0 and bars[2]["data-risk"] == ""
    assert bars[1]["fill"] == report.LEVEL_COLOURS["high"]
    assert bars[4]["fill"] == report.LEVEL_COLOURS["watch"]          # at the threshold counts
    assert bars[3]["fill"] == report.LEVEL_COLOURS["low"]
    frame_header = "|".join(page.header[-2])                        # the every-frame table
    assert frame_header.startswith("frame|risk|level")
    assert report.level_of(0.7, None, {}) is None                    # nothing to go by
    assert report.level_of(0.7, "custom", THRESHOLD) == "custom"      # assess's word wins


# -- the worst frames -----------------------------------------------------------------------------
def test_worst_frames_are_listed_by_decreasing_risk(tmp_path):
    risks = _risks()
    a = _assessment(risks)
    frames = {f["frame"]: f["risk"] for f in a["frames"]}
    riskiest = sorted(frames, key=frames.get, reverse=True)
    named = [riskiest[4], riskiest[0], riskiest[2], 999]               # scrambled, one unknown
    a["summary"] = {"in_betweens": len(risks), "high": 3, "watch": 5, "worst": named}
    pic_frame = riskiest[-1]                                           # the safest frame has pictures
    text, page = _parse(write_report(tmp_path, a, _pictures([pic_frame], (60, 80)), _graph_doc()))
    _assert_static(text, page, tmp_path)                               # 999 is not linked
    expected = sorted([riskiest[4], riskiest[0], riskiest[2], pic_frame], key=frames.get, reverse=True)
    assert page.worst == expected
    assert "not in the frame list: 999" in "".join(page.text)
    # without a list in the summary: the WORST_LIMIT riskiest
    b = _assessment(risks)
    _, page = _parse(write_report(tmp_path / "b", b, {}, _graph_doc()))
    assert page.worst == riskiest[:report.WORST_LIMIT]


def test_every_frame_table_has_a_row_per_frame_and_extra_numeric_columns(tmp_path):
    a = _assessment()
    _, page = _parse(write_report(tmp_path, a, {}, _graph_doc()))
    assert page.frame_rows == sorted(f["frame"] for f in a["frames"])
    assert {f"frame-{f['frame']}" for f in a["frames"]} <= page.ids
    headers = ["".join(h) for h in page.header]
    frame_header = next(h for h in headers if "leave-one-out PSNR" in h and "rank" not in h)
    assert "warp_share" in frame_header          # an unknown numeric field becomes a column
    assert "comment" not in frame_header         # a non-numeric unknown field does not
    assert "rebuilt from" in "".join(headers)    # the leave-one-out source table


def test_optional_keys_may_all_be_absent(tmp_path):
    page_path = write_report(tmp_path / "new" / "dir", {"frames": [{"frame": 7, "risk": 0.3}]}, {},
                             {"nodes": {}})
    text, page = _parse(page_path)
    assert page_path == tmp_path / "new" / "dir" / "index.html"
    assert len(page.bars) == 1 and page.frame_rows == [7] and page.worst == [7]
    assert 'id="sources"' not in text and "<img" not in text


# -- the pictures --------------------------------------------------------------------------------
def test_every_picture_exists_and_decodes_to_the_expected_size(tmp_path):
    a = _assessment()
    worst = sorted(a["frames"], key=lambda f: -f["risk"])[:3]
    pics = _pictures([worst[0]["frame"]], (540, 960))                   # shrunk to 480 x 270
    pics.update(_pictures([worst[1]["frame"]], (200, 300)))             # kept as it is
    pics[worst[2]["frame"]] = {"confidence": np.full((1001, 1000, 1), 128, np.uint8)}  # odd sizes
    pics[1002] = {"rebuilt": np.zeros((40, 50, 3), np.uint8)}            # a source frame
    pics[5] = {"thumb": np.zeros((10, 12, 3), np.uint8)}                 # listed nowhere
    out = tmp_path / "rep"
    text, page = _parse(write_report(out, a, pics, _graph_doc()))
    imgs = [r for r in page.refs if r.endswith(".png")]
    expected = {f"pictures/frame{f}-{k}.png": arr.shape[:2] for f, kinds in pics.items() for k, arr in kinds.items()}
    assert set(imgs) == set(expected)                                   # each shown, none extra
    assert sorted(p.name for p in (out / "pictures").iterdir()) == sorted(Path(e).name for e in expected)
    for rel, (h, w) in expected.items():
        img = cv2.imread(str(out / rel), cv2.IMREAD_UNCHANGED)
        assert img is not None, rel
        assert img.shape[:2] == picture_size(h, w), rel
        assert img.shape[1] <= report.MAX_PICTURE_WIDTH
    assert picture_size(540, 960) == (270, 480) and picture_size(200, 300) == (200, 300)
    assert picture_size(1001, 1000) == (480, 480)                        # round(1001 * 0.48)
    assert 'id="source-1002"' in text and ">frame 5<" in text


def test_picture_channel_order_and_grey_levels(tmp_path):
    # RGB in, PNG out: OpenCV decodes PNG to BGR, so pure red must come back as (0, 0, 255)
    red = np.zeros((30, 40, 3), np.uint8)
    red[..., 0] = 255
    blue = np.zeros((30, 40, 3), np.float32)
    blue[..., 2] = 1.0                                                  # float 0..1 accepted too
    conf = np.linspace(0, 1, 40)[None, :].repeat(30, axis=0)            # 0 .. 1 left to right
    a = {"frames": [{"frame": 1, "risk": 0.9}]}
    write_report(tmp_path, a, {1: {"thumb": red, "vectors": blue, "confidence": conf}}, {"nodes": {}})
    got = cv2.imread(str(tmp_path / "pictures" / "frame1-thumb.png"), cv2.IMREAD_UNCHANGED)
    assert got.shape == (30, 40, 3) and (got == (0, 0, 255)).all()
    got = cv2.imread(str(tmp_path / "pictures" / "frame1-vectors.png"), cv2.IMREAD_UNCHANGED)
    assert (got == (255, 0, 0)).all()
    got = cv2.imread(str(tmp_path / "pictures" / "frame1-confidence.png"), cv2.IMREAD_UNCHANGED)
    assert got.ndim == 2 and got[0, 0] == 0 and got[0, -1] == 255
    np.testing.assert_array_equal(got[0], np.rint(conf[0] * 255).astype(np.uint8))


def test_error_heat_map_scale_and_colours(tmp_path):
    # the scale: the largest 99.5th percentile, rounded up to 1, 2 or 5 times a power of ten
    assert error_scale([np.full((4, 4), 0.043)]) == pytest.approx(0.05)
    assert error_scale([np.full((4, 4), 0.3), np.full((2, 2), 0.011)]) == pytest.approx(0.5)
    assert error_scale([np.full((4, 4), 0.2)]) == pytest.approx(0.2)
    assert error_scale([np.zeros((4, 4))]) == 1.0 and error_scale([]) is None
    spiky = np.full((100, 100), 0.01)
    spiky[0, 0] = 50.0                                                   # one stray pixel of 10 000
    assert error_scale([spiky]) == pytest.approx(0.01)
    # the colours: 0 is the map's first colour, the top of the scale and above its last
    err = np.zeros((20, 40))
    err[:, 20:] = 0.3                                                    # scale 0.5: level 153
    err[0, 39] = 9.0                                                     # clipped to the top
    write_report(tmp_path, {"frames": [{"frame": 1, "risk": 1.0}]}, {1: {"error": err}}, {"nodes": {}})
    got = cv2.imread(str(tmp_path / "pictures" / "frame1-error.png"), cv2.IMREAD_COLOR)
    lut = cv2.applyColorMap(np.arange(256, dtype=np.uint8)[:, None], cv2.COLORMAP_INFERNO)[:, 0]
    assert (got[5, 5] == lut[0]).all()
    assert (got[5, 30] == lut[round(0.3 / 0.5 * 255)]).all()
    assert (got[0, 39] == lut[255]).all()
    assert "0.5 or more" in (tmp_path / "index.html").read_text()      # the scale is stated
    # shrinking keeps a one-pixel fault at full strength wherever it lies
    for y, x in ((100, 300), (101, 301), (0, 0), (539, 959)):
        e = np.zeros((540, 1000))
        e[y, x] = 1.0
        small = heat_map(e, 1.0)
        assert small.shape[:2] == picture_size(540, 1000)
        assert (small == lut[255]).all(axis=2).sum() >= 1, (y, x)


# -- static, self-contained, escaped ---------------------------------------------------------------
def _assert_static(text: str, page: _Page, folder: Path) -> None:
    assert "script" not in page.tags and "<script" not in text.lower()
    assert not any(name.lower().startswith("on") for name, _ in page.attrs)    # no event handlers
    assert "link" not in page.tags and "@import" not in text
    assert not re.search(r"url\((?!#)", text)                                 # only url(#local) in SVG
    assert not re.search(r"(?i)\b(?:https?|ftp|data|javascript):", " ".join(page.refs))
    for ref in page.refs:
        assert not ref.startswith("//"), ref
        if ref.startswith("#"):
            assert ref[1:] in page.ids, ref
        else:
            assert (folder / ref).is_file(), ref


def test_page_is_static_and_self_contained(tmp_path):
    a = _assessment()
    a["summary"] = {"worst": [a["frames"][0]["frame"]]}
    out = tmp_path / "rep"
    text, page = _parse(write_report(out, a, _pictures([a["frames"][0]["frame"]], (90, 160)), _graph_doc()))
    _assert_static(text, page, out)
    assert not list(out.rglob("*.tmp"))                                         # no temporary left
    assert "How to read this" in text and "Higher is worse" in text


def test_the_top_names_the_graph_file_hash_and_variables(tmp_path):
    a = _assessment()
    text, _ = _parse(write_report(tmp_path, a, {}, _graph_doc()))
    assert "<title>midframe assess: graphs/retime.json</title>" in text
    facts = re.search(r'<table class="facts">(.*?)</table>', text, re.DOTALL).group(1)
    rows = dict(re.findall(r"<tr><th class=l>(.*?)</th><td class=l>(.*?)</td></tr>", facts))
    assert rows["graph file"] == "graphs/retime.json" and rows["graph hash"] == a["graph"]["hash"]
    for k, v in a["graph"]["vars"].items():
        assert rows[f"variable {k}"] == v
    assert rows["time node"] == "timing" and rows["threshold: high"] == "1"
    assert text.index('class="facts"') < text.index('class="strip"') < text.index('id="worst"')


def test_text_from_files_is_escaped(tmp_path):
    evil = "<script>alert(1)</script>"
    img = '"><img src=x onerror=alert(2)>'
    graph = {"nodes": {
        evil: {"op": "read", "params": {"path": "</pre><script>alert(3)</script>"}},
        "b": {"op": img, "params": {"note": "a & b"}, "inputs": {"image": evil}},
        "c": {"op": "rig", "inputs": {"image": [evil, "b"]}, "doc": "<strong>bold</strong>"}}}
    a = {"graph": {"file": "shots/<x>&.json", "hash": "sha256:1", "vars": {"src": "<em>v</em>"}},
         "time_node": evil, "frames": [{"frame": 1, "risk": 0.5, "level": "<u>lv</u>"}],
         "summary": {"<k>": "<v>"}}
    text, page = _parse(write_report(tmp_path, a, {}, graph))
    _assert_static(text, page, tmp_path)
    assert not {"img", "em", "strong", "u", "k", "v", "x"} & set(page.tags)
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text                    # shown, as text
    assert "&lt;/pre&gt;&lt;script&gt;alert(3)" in text
    assert "shots/&lt;x&gt;&amp;.json" in text and "a &amp; b" in text
    words = "".join(page.text)
    assert evil in words and img in words                                      # readable as written


# -- the graph drawing -----------------------------------------------------------------------------
def _overlap(a, b) -> bool:
    return not (a.x + a.w <= b.x or b.x + b.w <= a.x or a.y + a.h <= b.y or b.y + b.h <= a.y)


@pytest.mark.parametrize("name", ["retime.json", "fg-retime-over.json", "stereo-shot.json"])
def test_graph_is_drawn_in_topological_columns_and_no_link_crosses_a_box(name):
    doc = json.loads((REPO / "graphs" / name).read_text())
    lay = report.graph_layout(doc)
    nodes = doc["nodes"]
    assert set(lay.boxes) == set(nodes) and not lay.dangling
    pairs = {(src, nid) for nid, spec in nodes.items() for src in spec.get("inputs", {}).values()}
    assert set(lay.links) == pairs
    for src, nid in pairs:
        assert lay.column[src] < lay.column[nid]                              # links run left to right
        a, b = lay.boxes[src], lay.boxes[nid]
        assert a.x + a.w < b.x
        assert b.y < lay.entries[(src, nid)] < b.y + b.h                     # enters its target's side
        # a link skipping columns passes through each of them in a slot no box covers
        passes = lay.passes[(src, nid)]
        assert len(passes) == lay.column[nid] - lay.column[src] - 1
        for x0, x1, y in passes:
            for box in lay.boxes.values():
                if box.x < x1 and x0 < box.x + box.w:
                    assert not box.y - 2 <= y <= box.y + box.h + 2, (src, nid, y, box)
    for a in lay.boxes:                                                       # no two boxes overlap
        for b in lay.boxes:
            if a < b:
                assert not _overlap(lay.boxes[a], lay.boxes[b]), (a, b)
    for t in nodes:                                                           # entries spread out
        ys = sorted(y for (s, tt), y in lay.entries.items() if tt == t)
        assert all(y1 - y0 >= 14 for y0, y1 in itertools.pairwise(ys)), t
    svg = report.graph_svg(doc, {"timing": "time"})
    page = _Page()
    page.feed(svg)
    assert page.tags.count("path") - 1 == len(pairs)                         # + the arrow head
    assert sorted(a for n, a in page.attrs if n == "data-node") == sorted(nodes)
    text = "".join(page.text)
    for spec in nodes.values():
        assert spec["op"] in text
        for port in spec.get("inputs", {}):
            assert port in text


def test_graph_with_list_links_cycles_and_dangling_links():
    doc = {"nodes": {"a": {"op": "read"}, "b": {"op": "read"},
                     "r": {"op": "rig", "inputs": {"image": ["a", "b", "a"]}},
                     "x": {"op": "blend", "inputs": {"a": "y", "b": "r"}},
                     "y": {"op": "blend", "inputs": {"a": "x", "c": "ghost"}}}}
    lay = report.graph_layout(doc)
    assert lay.column["a"] == lay.column["b"] == 0 and lay.column["r"] == 1
    assert lay.column["x"] == lay.column["y"] == 2                            # a cycle shares a column
    assert lay.dangling == [("ghost", "y", "c")]
    assert lay.links[("a", "r")] == ["image[0]", "image[2]"]
    svg = report.graph_svg(doc)
    assert "image[0], image[2]" in svg and "image[1]" in svg                   # one line a -> r


# -- bad input ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("assessment, pictures, graph, message", [
    ({}, {}, {"nodes": {}}, "no 'frames'"),
    ({"frames": [{"frame": 1}]}, {}, {"nodes": {}}, "assessment['frames'][0]"),
    ({"frames": [{"frame": 1.5, "risk": 0}]}, {}, {"nodes": {}}, "['frame'] must be a whole number"),
    ({"frames": [{"frame": 1, "risk": "high"}]}, {}, {"nodes": {}}, "['risk'] must be a number"),
    ({"frames": [{"frame": 1, "risk": 0}, {"frame": 1, "risk": 1}]}, {}, {"nodes": {}}, "listed twice"),
    ({"frames": []}, {1: {"thumb": np.zeros((4, 4), np.uint8)}}, {"nodes": {}}, "pictures[1]['thumb']"),
    ({"frames": []}, {1: {"error": np.zeros((4, 4, 3))}}, {"nodes": {}}, "pictures[1]['error']"),
    ({"frames": []}, {1: {"depth": np.zeros((4, 4))}}, {"nodes": {}}, "unknown kind 'depth'"),
    ({"frames": []}, {}, {"graph": {}}, "graph_doc has no 'nodes'"),
])
def test_bad_input_is_refused_before_anything_is_written(tmp_path, assessment, pictures, graph, message):
    old = tmp_path / "index.html"
    old.write_text("previous report")
    with pytest.raises(ValueError) as info:
        write_report(tmp_path, assessment, pictures, graph)
    assert message in str(info.value)
    assert old.read_text() == "previous report"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["index.html"]


def test_wrong_types_are_refused(tmp_path):
    with pytest.raises(TypeError, match=r"assessment\['frames'\] must be a list"):
        write_report(tmp_path, {"frames": "1001-1010"}, {}, {"nodes": {}})
    with pytest.raises(TypeError, match=r"graph_doc\['nodes'\] must be a mapping"):
        write_report(tmp_path, {"frames": []}, {}, {"nodes": ["read"]})
    with pytest.raises(ValueError, match="is not a frame number"):
        write_report(tmp_path, {"frames": []}, {"1001": {}}, {"nodes": {}})
    assert not list(tmp_path.iterdir())


def test_a_report_folder_is_rewritten_in_place(tmp_path):
    a = _assessment()
    first = write_report(tmp_path, a, {}, _graph_doc()).read_text()
    a["frames"][0]["risk"] = 0.123456
    second = write_report(tmp_path, a, {}, _graph_doc()).read_text()
    assert first != second and "0.123" in second
    assert sorted(p.name for p in tmp_path.iterdir()) == ["index.html", "pictures"]


# -- the page in a headless browser ------------------------------------------------------------------
def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return None


def test_page_renders_in_headless_chromium(tmp_path):
    """Debian's Chromium (as in tests/demo/test_demo_cli.py) loads the page headless: the DOM holds
    every frame row and the worst frames' pictures, and the screenshot shows the page with the
    strip's red bars drawn."""
    exe = _chromium()
    if exe is None:
        pytest.skip("Chromium is not installed, so the page was not loaded in a browser: install it "
                    "with `apt-get install chromium` (Debian; .ci/run does this before the tests)")
    a = _assessment()
    riskiest = max(a["frames"], key=lambda f: f["risk"])["frame"]
    page_path = write_report(tmp_path / "rep", a, _pictures([riskiest], (90, 160)), _graph_doc())
    url = page_path.as_uri()
    common = [exe, "--headless", "--disable-gpu", "--no-sandbox", "--hide-scrollbars",
              f"--user-data-dir={tmp_path / 'profile'}", "--window-size=1200,1600"]
    env = dict(os.environ, HOME=str(tmp_path))
    dom = subprocess.run([*common, "--dump-dom", url], capture_output=True, text=True, timeout=60, env=env,
                         check=False)
    assert dom.returncode == 0, dom.stderr[-2000:]
    for f in a["frames"]:
        assert f'id="frame-{f["frame"]}"' in dom.stdout
    assert dom.stdout.count('class="bar"') == len(a["frames"])
    assert f"pictures/frame{riskiest}-error.png" in dom.stdout
    shot = tmp_path / "page.png"
    run = subprocess.run([*common, f"--screenshot={shot}", url], capture_output=True, text=True, timeout=60,
                         env=env, check=False)
    assert run.returncode == 0 and shot.is_file(), run.stderr[-2000:]
    img = cv2.imread(str(shot), cv2.IMREAD_COLOR)
    assert img is not None and img.shape[:2] == (1600, 1200)
    assert img.std() > 30                                                      # not a blank page
    assert (img > 245).all(axis=2).mean() > 0.3                                # a white page
    high = np.array([int(report.LEVEL_COLOURS["high"][i:i + 2], 16) for i in (5, 3, 1)])  # BGR
    red = (np.abs(img.astype(int) - high) <= 6).all(axis=2)
    n_high = sum(f["risk"] >= 1.0 for f in a["frames"])
    assert red.sum() > 200 * n_high                                            # the high bars drawn
    assert math.isfinite(img.mean())
