"""The static report of ``midframe assess``: one HTML page and its PNG pictures.

``write_report(folder, assessment, pictures, graph_doc)`` turns the JSON document assess writes
(the predicted risk of every in-between output frame, the leave-one-out scores of the source
frames), a few pictures of the worst frames and the resolved graph into a folder that opens in any
browser:

- ``index.html``: plain HTML with inline CSS and inline SVG. No scripts, no external fonts, style
  sheets or URLs, no server; every text that comes from a file (node ids, params, paths, variable
  values) is HTML-escaped. Links point into the page (``#frame-1003``) or at the PNG files beside it.
- ``pictures/frame<N>-<kind>.png``: the pictures, written with OpenCV, at most
  :data:`MAX_PICTURE_WIDTH` pixels wide.

The page holds, top to bottom: the graph file, its hash and variables (with the nodes assess
looked at and the thresholds); a short text on how to read it all; the summary; a strip with one
bar per listed output frame (height = risk, colour = level, thresholds as dashed lines); the worst
frames with their pictures; every frame; the leave-one-out table of the source frames; pictures of
any other frame; the graph drawn as a layered diagram (our own layout: networkx topological
generations give the columns) and every node's params.

Every file is written to a temporary name in the folder first and moved into place with
``os.replace``, pictures before the page, so the page never names a picture that is not there and
no final path ever holds half a file.

Pictures (``pictures[frame][kind]``, any of):

==============  =====================================  ===============================================
kind            array                                  shown as
==============  =====================================  ===============================================
``thumb``       H x W x 3 uint8 RGB (or float 0..1)    the picture, area-averaged when shrunk
``vectors``     H x W x 3 uint8 RGB, colour-coded      the picture, area-averaged when shrunk
``confidence``  H x W uint8, or float 0..1             grey levels: 0 black, 1 (255) white
``rebuilt``     H x W x 3 uint8 RGB (or float 0..1)    the picture, area-averaged when shrunk
``error``       H x W float, absolute error            heat map on one scale shared by every frame
==============  =====================================  ===============================================

The heat map uses OpenCV's ``COLORMAP_INFERNO`` (the perceptually uniform "inferno" map of van der
Walt and Smith, published with matplotlib): black at 0, pale yellow at the top of the scale and
above. The top is the 99.5th percentile of all error maps shown, rounded up to 1, 2 or 5 times a
power of ten (:func:`error_scale`), so one stray pixel does not wash out the rest and every frame is
drawn on the same scale. When an error map is shrunk, each page pixel shows the largest error of
the plate pixels it covers, so small faults stay visible.
"""

from __future__ import annotations

import html
import itertools
import json
import math
import os
import tempfile
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import cv2
import networkx as nx
import numpy as np

__all__ = ["LEVEL_COLOURS", "MAX_PICTURE_WIDTH", "PICTURE_KINDS", "WORST_LIMIT", "GraphLayout", "error_scale",
           "graph_layout", "graph_svg", "heat_map", "level_of", "page_html", "picture_size", "strip_svg",
           "worst_frames", "write_report"]

#: Pictures on the page are shrunk (aspect kept) to at most this many pixels wide.
MAX_PICTURE_WIDTH = 480
#: Picture kinds in the order they are shown, with their captions.
PICTURE_KINDS: dict[str, str] = {
    "thumb": "the frame (the in-between, or its nearest source frame)",
    "vectors": "motion vectors (colour = direction, paleness = short, strong colour = long)",
    "confidence": "vector confidence: white = trusted, black = not trusted",
    "rebuilt": "the source frame rebuilt from its neighbours one step further apart",
    "error": "leave-one-out error, |rebuilt - real|, on the heat scale shown above the table",
}
_COLOUR_KINDS = ("thumb", "rebuilt", "vectors")
#: Bar and label colours of the risk levels (sRGB hex); any other level is drawn grey.
LEVEL_COLOURS: dict[str, str] = {"high": "#c0141e", "watch": "#e8a100", "ok": "#2f6a9e", "low": "#2f6a9e"}
_OTHER_COLOUR = "#6e6e6e"
#: Without a list of worst frames in the summary, the page shows this many of the riskiest.
WORST_LIMIT = 10
_HEAT_MAP = cv2.COLORMAP_INFERNO
_HEAT_PERCENTILE = 99.5

# Known frame fields: column title and number format. Other numeric fields become columns too.
_FRAME_FIELDS: dict[str, tuple[str, str]] = {
    "frame": ("frame", "d"),
    "source_time": ("source time", ""),
    "t": ("t", ".4g"),
    "pair": ("between", ""),
    "risk": ("risk", ".3f"),
    "level": ("level", ""),
    "loo_psnr": ("leave-one-out PSNR (dB)", ".2f"),
    "confidence": ("confidence", ".3f"),
    "disagree": ("sides disagree (RMS)", ".4f"),
    "unsure": ("unsure vectors (share)", ".3f"),
    "occluded": ("occluded (share)", ".3f"),
    "motion": ("motion, 95th pct (px)", ".2f"),
}
_SOURCE_FIELDS: dict[str, tuple[str, str]] = {
    "frame": ("source frame", "d"),
    "psnr": ("PSNR (dB)", ".2f"),
    "rebuilt_from": ("rebuilt from", ""),
}


# -- small helpers ------------------------------------------------------------------------------
def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, (bool, np.bool_))


def _finite(value: Any) -> bool:
    return _is_number(value) and math.isfinite(float(value))


def _fmt(value: Any, fmt: str = "") -> str:
    """Text of one table cell (not yet escaped)."""
    if value is None:
        return "-"
    if isinstance(value, (list, tuple)):
        return " - ".join(_fmt(v) for v in value) if len(value) == 2 else ", ".join(_fmt(v) for v in value)
    if _is_number(value):
        x = float(value)
        if math.isnan(x):
            return "n/a"
        if math.isinf(x):
            return "inf" if x > 0 else "-inf"
        if isinstance(value, (int, np.integer)) and not fmt:
            return str(int(value))
        if fmt == "d":
            return str(int(value)) if x == int(x) else format(x, ".4g")
        return format(x, fmt or ".4g")
    if isinstance(value, Mapping):
        return json.dumps(value, ensure_ascii=False, sort_keys=True)
    return str(value)


def _atomic_write_bytes(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` through a temporary file in the same folder and ``os.replace``."""
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def _nice_ceil(x: float) -> float:
    """The smallest of 1, 2, 5 times a power of ten that is >= x (x > 0)."""
    p = 10.0 ** math.floor(math.log10(x))
    for m in (1.0, 2.0, 5.0, 10.0):
        if m * p >= x * (1 - 1e-12):
            return m * p
    return 10.0 * p  # pragma: no cover - the loop always returns


# -- pictures -----------------------------------------------------------------------------------
def picture_size(height: int, width: int) -> tuple[int, int]:
    """(height, width) of a picture on the page: unchanged up to :data:`MAX_PICTURE_WIDTH` wide,
    else shrunk to that width with the aspect ratio kept (height rounded, at least 1)."""
    if width <= MAX_PICTURE_WIDTH:
        return height, width
    return max(1, round(height * MAX_PICTURE_WIDTH / width)), MAX_PICTURE_WIDTH


def _shrink(a: np.ndarray, keep_max: bool = False) -> np.ndarray:
    """``a`` at :func:`picture_size`: area-averaged, or with ``keep_max`` every page pixel the
    largest of the plate pixels it covers (block maxima over k x k blocks, k chosen so the blocks
    fit, then nearest-neighbour enlargement to the exact size, which drops no block)."""
    h, w = a.shape[:2]
    th, tw = picture_size(h, w)
    if (th, tw) == (h, w):
        return a
    if not keep_max:
        return cv2.resize(a, (tw, th), interpolation=cv2.INTER_AREA)
    k = math.ceil(w / tw)
    while math.ceil(h / k) > th:
        k += 1
    bh, bw = math.ceil(h / k), math.ceil(w / k)
    padded = np.zeros((bh * k, bw * k), a.dtype)
    padded[:h, :w] = a
    blocks = padded.reshape(bh, k, bw, k).max(axis=(1, 3))
    return cv2.resize(blocks, (tw, th), interpolation=cv2.INTER_NEAREST)


def _bad_picture(frame: int, kind: str, want: str, arr: np.ndarray) -> ValueError:
    return ValueError(f"pictures[{frame}][{kind!r}]: expected {want}, got an array of shape "
                      f"{arr.shape} and dtype {arr.dtype}; fix the code that made this picture")


def _to_uint8(arr: np.ndarray) -> np.ndarray:
    if arr.dtype == np.uint8:
        return arr
    x = np.nan_to_num(arr.astype(np.float64), nan=0.0, posinf=1.0, neginf=0.0)
    return np.clip(np.rint(x * 255.0), 0, 255).astype(np.uint8)


def _colour_png(arr: Any, frame: int, kind: str) -> np.ndarray:
    a = np.asarray(arr)
    if a.ndim != 3 or a.shape[2] != 3 or a.size == 0 or not (a.dtype == np.uint8 or a.dtype.kind == "f"):
        raise _bad_picture(frame, kind, "an H x W x 3 RGB array (uint8, or float 0..1)", a)
    rgb = _shrink(np.ascontiguousarray(_to_uint8(a)))
    return np.ascontiguousarray(rgb[:, :, ::-1])  # RGB -> BGR for OpenCV


def _grey_plane(arr: Any, frame: int, kind: str, want: str) -> np.ndarray:
    a = np.asarray(arr)
    if a.ndim == 3 and a.shape[2] == 1:
        a = a[:, :, 0]
    if a.ndim != 2 or a.size == 0 or a.dtype.kind not in "uifb":
        raise _bad_picture(frame, kind, want, a)
    return a


def _grey_png(arr: Any, frame: int, kind: str) -> np.ndarray:
    a = _grey_plane(arr, frame, kind, "an H x W array (uint8, or float 0..1)")
    if a.dtype != np.uint8:
        a = _to_uint8(a.astype(np.float64))
    return _shrink(np.ascontiguousarray(a))


def error_scale(maps: Iterable[np.ndarray]) -> float | None:
    """Top of the shared heat-map scale: the largest 99.5th percentile of the finite values of
    ``maps``, rounded up to 1, 2 or 5 times a power of ten; 1.0 when every error is 0; None
    without maps."""
    tops = []
    for m in maps:
        v = np.asarray(m, np.float64)
        v = v[np.isfinite(v)]
        tops.append(float(np.percentile(np.abs(v), _HEAT_PERCENTILE)) if v.size else 0.0)
    if not tops:
        return None
    top = max(tops)
    return _nice_ceil(top) if top > 0 else 1.0


def heat_map(error: np.ndarray, scale: float) -> np.ndarray:
    """BGR uint8 heat map of an H x W error map: |error| / scale through COLORMAP_INFERNO, clipped
    at 1 (NaN drawn as 0), shrunk for the page keeping each block's largest error."""
    x = np.nan_to_num(np.abs(np.asarray(error, np.float64)), nan=0.0, posinf=scale)
    level = np.clip(np.rint(x / scale * 255.0), 0, 255).astype(np.uint8)
    return cv2.applyColorMap(_shrink(np.ascontiguousarray(level), keep_max=True), _HEAT_MAP)


def _heat_colour(fraction: float) -> str:
    """Hex sRGB colour of the heat map at ``fraction`` (0..1) of the scale."""
    v = np.array([[round(min(max(fraction, 0.0), 1.0) * 255)]], np.uint8)
    b, g, r = (int(c) for c in cv2.applyColorMap(v, _HEAT_MAP)[0, 0])
    return f"#{r:02x}{g:02x}{b:02x}"


def _heat_legend(scale: float) -> str:
    stops = "".join(f'<stop offset="{i / 16:.4f}" stop-color="{_heat_colour(i / 16)}"/>' for i in range(17))
    w, h = 320, 16
    ticks = "".join(
        f'<line x1="{10 + f * w:.1f}" y1="{6 + h}" x2="{10 + f * w:.1f}" y2="{10 + h}" stroke="#111"/>'
        f'<text x="{10 + f * w:.1f}" y="{24 + h}" text-anchor="middle">{_e(_fmt(f * scale, ".3g"))}'
        f'{" or more" if f == 1 else ""}</text>' for f in (0.0, 0.5, 1.0))
    return (f'<svg class="heat-legend" role="img" width="{w + 60}" height="{h + 30}" '
            f'viewBox="0 0 {w + 60} {h + 30}" font-size="12" font-family="sans-serif">'
            f'<title>heat scale: 0 to {_e(_fmt(scale, ".3g"))} absolute error</title>'
            f'<defs><linearGradient id="mf-heat">{stops}</linearGradient></defs>'
            f'<rect x="10" y="6" width="{w}" height="{h}" fill="url(#mf-heat)" stroke="#111"/>{ticks}</svg>')


# -- the assessment -----------------------------------------------------------------------------
@dataclass(frozen=True)
class _Frame:
    frame: int
    risk: float | None       # None: no finite risk given
    level: str | None
    fields: Mapping[str, Any]


def _thresholds(assessment: Mapping[str, Any]) -> dict[str, float]:
    th = assessment.get("threshold")
    if not isinstance(th, Mapping):
        return {}
    return {k: float(v) for k, v in th.items() if isinstance(k, str) and _finite(v)}


def level_of(risk: float | None, given: Any, thresholds: Mapping[str, float]) -> str | None:
    """The level a frame is drawn with: the one assess gave, else from the thresholds ('high' at
    or above thresholds['high'], 'watch' at or above thresholds['watch'], else 'low'), else None."""
    if isinstance(given, str) and given:
        return given
    if risk is None or not thresholds:
        return None
    if "high" in thresholds and risk >= thresholds["high"]:
        return "high"
    if "watch" in thresholds and risk >= thresholds["watch"]:
        return "watch"
    return "low"


def _frames(assessment: Mapping[str, Any]) -> list[_Frame]:
    if not isinstance(assessment, Mapping) or "frames" not in assessment:
        raise ValueError("the assessment has no 'frames' (a list of {'frame': int, 'risk': number, ...}); "
                         "fix the code that built the assessment")
    rows = assessment["frames"]
    if not isinstance(rows, Sequence) or isinstance(rows, (str, bytes)):
        raise TypeError("assessment['frames'] must be a list of frame records "
                         "({'frame': int, 'risk': number, ...}); fix the code that built the assessment")
    thresholds = _thresholds(assessment)
    out: list[_Frame] = []
    seen: set[int] = set()
    for i, row in enumerate(rows):
        if not isinstance(row, Mapping) or "frame" not in row or "risk" not in row:
            raise ValueError(f"assessment['frames'][{i}] must be a mapping with 'frame' and 'risk'; "
                             "fix the code that built the assessment")
        f, r = row["frame"], row["risk"]
        if not _is_number(f) or float(f) != int(f):
            raise ValueError(f"assessment['frames'][{i}]['frame'] must be a whole number, not {f!r}")
        if r is not None and not _is_number(r):
            raise ValueError(f"assessment['frames'][{i}]['risk'] must be a number or null, not {r!r}")
        frame = int(f)
        if frame in seen:
            raise ValueError(f"assessment['frames'][{i}]: frame {frame} is listed twice")
        seen.add(frame)
        risk = float(r) if _finite(r) else None
        out.append(_Frame(frame, risk, level_of(risk, row.get("level"), thresholds), dict(row)))
    return sorted(out, key=lambda x: x.frame)


def _by_risk(frames: Iterable[_Frame]) -> list[_Frame]:
    """Decreasing risk, frames without a risk last, ties by frame number."""
    return sorted(frames, key=lambda x: (x.risk is None, -(x.risk or 0.0), x.frame))


def worst_frames(assessment: Mapping[str, Any], picture_frames: Iterable[int] = (),
                 limit: int = WORST_LIMIT) -> tuple[list[int], list[int]]:
    """The frames of the worst-frames table, in decreasing risk, and the frames the summary names
    that the frame list lacks.

    The table holds the frames ``summary['worst']`` names, else the ``limit`` riskiest, and in
    both cases every listed frame that has pictures.
    """
    frames = {f.frame: f for f in _frames(assessment)}
    summary = assessment.get("summary")
    named = summary.get("worst") if isinstance(summary, Mapping) else None
    chosen: set[int] = set()
    unknown: list[int] = []
    if isinstance(named, Sequence) and not isinstance(named, (str, bytes)):
        for f in named:
            if _is_number(f) and float(f) == int(f) and int(f) in frames:
                chosen.add(int(f))
            else:
                unknown.append(f)
    else:
        chosen.update(f.frame for f in _by_risk(frames.values())[:limit] if f.risk is not None)
    chosen.update(int(f) for f in picture_frames if int(f) in frames)
    return [f.frame for f in _by_risk(frames[c] for c in chosen)], unknown


def _colour(level: str | None) -> str:
    return LEVEL_COLOURS.get(level or "", _OTHER_COLOUR)


# -- the risk strip -----------------------------------------------------------------------------
_STRIP_W, _STRIP_H = 960, 260
_STRIP_M = {"left": 64, "right": 96, "top": 14, "bottom": 48}


def strip_svg(assessment: Mapping[str, Any]) -> str:
    """Inline SVG: one ``<rect class="bar">`` per listed output frame, in frame order, its height
    proportional to the risk (0 without one), coloured by level, with the frame in a ``<title>``
    and a link to the frame's row; thresholds as dashed lines; axes labelled."""
    frames = _frames(assessment)
    thresholds = _thresholds(assessment)
    m = _STRIP_M
    pw, ph = _STRIP_W - m["left"] - m["right"], _STRIP_H - m["top"] - m["bottom"]
    risks = [f.risk for f in frames if f.risk is not None]
    top = max([max(risks, default=0.0), *thresholds.values(), 0.0])
    top = top * 1.08 if top > 0 else 1.0
    y0 = m["top"] + ph

    def y(v: float) -> float:
        return y0 - max(v, 0.0) / top * ph

    n = max(len(frames), 1)
    slot = pw / n
    bar_w = slot * 0.8 if slot >= 3 else slot
    parts = [(f'<svg class="strip" role="img" width="{_STRIP_W}" height="{_STRIP_H}" '
              f'viewBox="0 0 {_STRIP_W} {_STRIP_H}" font-family="sans-serif" font-size="12">'),
             "<title>predicted risk of every listed output frame</title>",
             f'<rect x="{m["left"]}" y="{m["top"]}" width="{pw}" height="{ph}" fill="#fafafa" stroke="#999"/>']
    for i, f in enumerate(frames):
        h = 0.0 if f.risk is None else y0 - y(f.risk)
        x = m["left"] + i * slot + (slot - bar_w) / 2
        what = ("no risk value" if f.risk is None else f"risk {f.risk:.3f}") + (f" ({f.level})" if f.level else "")
        parts.append(
            f'<a href="#frame-{f.frame}"><rect class="bar" data-frame="{f.frame}" '
            f'data-risk="{"" if f.risk is None else repr(f.risk)}" x="{x:.3f}" y="{y0 - h:.3f}" '
            f'width="{bar_w:.3f}" height="{h:.3f}" fill="{_colour(f.level)}">'
            f"<title>frame {f.frame}: {_e(what)}</title></rect></a>")
    for name, v in sorted(thresholds.items(), key=lambda kv: kv[1]):
        parts.append(f'<line class="threshold" data-level="{_e(name)}" x1="{m["left"]}" y1="{y(v):.3f}" '
                     f'x2="{m["left"] + pw}" y2="{y(v):.3f}" stroke="{_colour(name)}" stroke-width="2" '
                     f'stroke-dasharray="6 4"/>'
                     f'<text x="{m["left"] + pw + 6}" y="{y(v) + 4:.3f}" fill="#111">{_e(name)} {_e(_fmt(v, ".3g"))}</text>')
    # y axis: 0 and the top, x axis: up to 9 frame numbers spread over the strip
    for v in (0.0, top / 1.08 if risks or thresholds else top):
        parts.append(f'<text x="{m["left"] - 6}" y="{y(v) + 4:.3f}" text-anchor="end">{_e(_fmt(v, ".3g"))}</text>')
    if frames:
        idx = sorted({round(k) for k in np.linspace(0, len(frames) - 1, min(len(frames), 9))})
        for i in idx:
            cx = m["left"] + (i + 0.5) * slot
            parts.append(f'<line x1="{cx:.3f}" y1="{y0}" x2="{cx:.3f}" y2="{y0 + 5}" stroke="#111"/>'
                         f'<text x="{cx:.3f}" y="{y0 + 18}" text-anchor="middle">{frames[i].frame}</text>')
    parts.append(f'<text x="{m["left"] + pw / 2}" y="{_STRIP_H - 8}" text-anchor="middle">output frame</text>'
                 f'<text transform="translate(16 {m["top"] + ph / 2}) rotate(-90)" text-anchor="middle">'
                 "risk (higher is worse)</text></svg>")
    return "".join(parts)


# -- the graph ----------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Box:
    x: float
    y: float
    w: float
    h: float


@dataclass(frozen=True)
class GraphLayout:
    """Where :func:`graph_svg` draws things (SVG user units, y down).

    ``boxes``: node id -> its box. ``column``: node id -> its column (networkx topological
    generation of the graph with cycles condensed). ``links``: (source, target) -> the ports it
    feeds, for every pair linked at least once. ``passes``: (source, target) -> the horizontal
    passes (x left, x right, y) of a link through the columns it skips, each in a slot of its own.
    ``entries``: (source, target) -> the y where the link enters the target's left side (one per
    pair, spread down the side). ``dangling``: links (source, target, port) from unknown nodes.
    """

    boxes: dict[str, _Box]
    column: dict[str, int]
    links: dict[tuple[str, str], list[str]]
    passes: dict[tuple[str, str], list[tuple[float, float, float]]]
    entries: dict[tuple[str, str], float]
    dangling: list[tuple[str, str, str]]


_BOX_H, _COL_GAP, _ROW_GAP, _PAD = 46, 110, 22, 16
_PASS_H = 14        # the slot of a link passing through a column
_ENTRY_STEP = 18    # vertical room per incoming link on a box's left side
_CHAR_W = 7.4       # width of one character of the 12 px label font, roughly (from memory, sans-serif)
_MAX_LABEL = 32


def _short(text: str) -> str:
    return text if len(text) <= _MAX_LABEL else text[:_MAX_LABEL - 1] + "\u2026"


def _node_links(graph_doc: Mapping[str, Any]) -> tuple[dict[str, Mapping[str, Any]], list[tuple[str, str, str]]]:
    if not isinstance(graph_doc, Mapping) or "nodes" not in graph_doc:
        raise ValueError("graph_doc has no 'nodes'; pass the resolved graph document "
                         "({'nodes': {id: {'op', 'params', 'inputs'}}})")
    nodes = graph_doc["nodes"]
    if not isinstance(nodes, Mapping):
        raise TypeError("graph_doc['nodes'] must be a mapping of node id -> {'op', 'params', 'inputs'}; "
                        "pass the resolved graph document")
    links: list[tuple[str, str, str]] = []  # (source, target, port label)
    for nid, spec in nodes.items():
        inputs = spec.get("inputs", {}) if isinstance(spec, Mapping) else {}
        for port, link in (inputs.items() if isinstance(inputs, Mapping) else ()):
            sources = [link] if isinstance(link, str) else list(link) if isinstance(link, Sequence) else [link]
            for i, src in enumerate(sources):
                links.append((str(src), str(nid), str(port) if len(sources) == 1 else f"{port}[{i}]"))
    return {str(k): (v if isinstance(v, Mapping) else {}) for k, v in nodes.items()}, links


def graph_layout(graph_doc: Mapping[str, Any]) -> GraphLayout:
    """Lay the graph out in columns, left to right.

    Columns are networkx's topological generations (a cycle, possible only in an invalid graph,
    is condensed into one place). A link that skips columns gets a slot of its own in each column
    it crosses, so no link is drawn through a box. The order within each column comes from three
    sweeps (left to right, right to left, left to right) placing each item at the mean position
    of its neighbours in the column before, which keeps crossings few.
    """
    nodes, raw = _node_links(graph_doc)
    order = {nid: i for i, nid in enumerate(nodes)}
    merged: dict[tuple[str, str], list[str]] = {}
    for s, t, port in raw:
        if s in nodes:
            merged.setdefault((s, t), []).append(port)
    g = nx.DiGraph()
    g.add_nodes_from(nodes)
    g.add_edges_from(merged)
    cond = nx.condensation(g)
    column: dict[str, int] = {}
    for gen, members in enumerate(nx.topological_generations(cond)):
        for c in members:
            for nid in cond.nodes[c]["members"]:
                column[nid] = gen
    ncols = max(column.values(), default=-1) + 1

    # items of each column: node ids, and (source, target, column) passes of long links
    Item = str | tuple[str, str, int]
    cols: list[list[Item]] = [[n for n in nodes if column[n] == c] for c in range(ncols)]
    chain: dict[tuple[str, str], list[Item]] = {}
    for (s, t) in merged:
        chain[(s, t)] = [s]
        if column[t] > column[s]:
            for c in range(column[s] + 1, column[t]):
                cols[c].append((s, t, c))
                chain[(s, t)].append((s, t, c))
        chain[(s, t)].append(t)
    left: dict[Item, list[Item]] = {}
    right: dict[Item, list[Item]] = {}
    for (s, t), items in chain.items():
        if column[t] > column[s]:
            for a, b in itertools.pairwise(items):
                right.setdefault(a, []).append(b)
                left.setdefault(b, []).append(a)
    pos: dict[Item, float] = {}
    for members in cols:
        for item in members:
            pos[item] = float(order[item]) if isinstance(item, str) else float(order[item[0]]) + 0.5

    def sweep(indices: Iterable[int], side: dict[Item, list[Item]]) -> None:
        for c in indices:
            def key(item: Item) -> tuple[float, float]:
                near = [pos[n] for n in side.get(item, ())]
                return (sum(near) / len(near) if near else pos[item], pos[item])

            cols[c].sort(key=key)
            for r, item in enumerate(cols[c]):
                pos[item] = float(r)

    sweep(range(ncols), left)
    sweep(reversed(range(ncols)), right)
    sweep(range(ncols), left)

    incoming: dict[str, int] = {}
    for (s, t) in merged:
        incoming[t] = incoming.get(t, 0) + 1
    boxes: dict[str, _Box] = {}
    slots: dict[tuple[str, str, int], tuple[float, float, float]] = {}
    x = float(_PAD)
    for members in cols:
        real = [m for m in members if isinstance(m, str)]
        width = max((max(len(_short(n)), len(_short(str(nodes[n].get("op", "?"))))) * _CHAR_W + 20
                     for n in real), default=90.0)
        width = max(width, 90.0)
        y = float(_PAD)
        for item in members:
            if isinstance(item, str):
                h = max(float(_BOX_H), _ENTRY_STEP * incoming.get(item, 0) + 10.0)
                boxes[item] = _Box(x, y, width, h)
                y += h + _ROW_GAP
            else:
                slots[item] = (x, x + width, y + _PASS_H / 2)
                y += _PASS_H + _ROW_GAP / 2
        x += width + _COL_GAP
    passes = {key: [slots[i] for i in items[1:-1]] for key, items in chain.items()}

    entries: dict[tuple[str, str], float] = {}
    for t, b in boxes.items():
        feeding = [key for key in merged if key[1] == t]

        def arrives(key: tuple[str, str]) -> float:  # height the link comes from
            p = passes[key]
            sb = boxes[key[0]]
            return p[-1][2] if p else sb.y + sb.h / 2

        feeding.sort(key=lambda k: (arrives(k), order[k[0]]))
        for i, key in enumerate(feeding):
            entries[key] = b.y + b.h * (i + 1) / (len(feeding) + 1)
    dangling = [link for link in raw if link[0] not in nodes]
    return GraphLayout(boxes, column, merged, passes, entries, dangling)


def _curve(x1: float, y1: float, x2: float, y2: float) -> str:
    """A cubic Bezier from the current point (x1, y1) to (x2, y2), level at both ends."""
    dx = (x2 - x1) / 2
    return f" C{x1 + dx:.1f},{y1:.1f} {x2 - dx:.1f},{y2:.1f} {x2:.1f},{y2:.1f}"


def graph_svg(graph_doc: Mapping[str, Any], highlight: Mapping[str, str] | None = None) -> str:
    """Inline SVG of the graph (:func:`graph_layout`): a box per node (id, then op), a line per
    linked pair from the feeding node to the port it feeds, the port named where the line enters
    its box; ``highlight`` (node id -> role) draws those nodes with a thick outline and a tinted
    fill and names the role in their tooltip."""
    nodes, _ = _node_links(graph_doc)
    lay = graph_layout(graph_doc)
    boxes = lay.boxes
    highlight = dict(highlight or {})
    if not boxes:
        return "<p>The graph has no nodes.</p>"
    width = max(b.x + b.w for b in boxes.values()) + _PAD
    height = max([b.y + b.h for b in boxes.values()] + [y + _PASS_H for p in lay.passes.values()
                                                        for _, _, y in p]) + _PAD + _ROW_GAP
    parts = [(f'<svg class="graph" role="img" width="{width:.0f}" height="{height:.0f}" '
              f'viewBox="0 0 {width:.0f} {height:.0f}" font-family="sans-serif" font-size="12">'),
             "<title>the graph: data flows left to right</title>",
             ('<defs><marker id="mf-arrow" viewBox="0 0 10 10" refX="10" refY="5" markerWidth="7" '
              'markerHeight="7" orient="auto"><path d="M0,0 L10,5 L0,10 z" fill="#333"/></marker></defs>')]
    labels = []
    for (s, t), ports in lay.links.items():
        a, b = boxes[s], boxes[t]
        x1, y1, x2, y2 = a.x + a.w, a.y + a.h / 2, b.x, lay.entries[(s, t)]
        if lay.column[t] <= lay.column[s]:  # within a cycle (an invalid graph): loop around below
            lo = max(a.y + a.h, b.y + b.h) + _ROW_GAP / 2
            d = f"M{x1:.1f},{y1:.1f} C{x1 + 40:.1f},{lo:.1f} {x2 - 40:.1f},{lo:.1f} {x2:.1f},{y2:.1f}"
        else:
            d = f"M{x1:.1f},{y1:.1f}"
            x, y = x1, y1
            for px0, px1, py in lay.passes[(s, t)]:
                d += _curve(x, y, px0, py) + f" L{px1:.1f},{py:.1f}"
                x, y = px1, py
            d += _curve(x, y, x2, y2)
        text = ", ".join(ports)
        parts.append(f'<path class="link" d="{d}" fill="none" stroke="#333" stroke-width="1.4" '
                     f'marker-end="url(#mf-arrow)"><title>{_e(s)} \u2192 {_e(t)}: {_e(text)}</title></path>')
        labels.append(f'<text class="port" x="{x2 - 9:.1f}" y="{y2 - 4:.1f}" text-anchor="end" fill="#111" '
                      f'stroke="#fff" stroke-width="4" paint-order="stroke">{_e(text)}</text>')
    for nid, b in boxes.items():
        op = str(nodes[nid].get("op", "?"))
        role = highlight.get(nid)
        stroke = ' stroke="#111" stroke-width="3.5"' if role else ' stroke="#444" stroke-width="1.2"'
        tip = f"{nid} ({op})" + (f": {role}" if role else "")
        top = b.y + b.h / 2 - 4
        parts.append(f'<g class="node" data-node="{_e(nid)}"><title>{_e(tip)}</title>'
                     f'<rect x="{b.x:.1f}" y="{b.y:.1f}" width="{b.w:.1f}" height="{b.h:.1f}" rx="5" '
                     f'fill="{"#fff4d6" if role else "#ffffff"}"{stroke}/>'
                     f'<text x="{b.x + 10:.1f}" y="{top:.1f}" font-weight="bold" fill="#111">{_e(_short(nid))}</text>'
                     f'<text x="{b.x + 10:.1f}" y="{top + 16:.1f}" fill="#333">{_e(_short(op))}</text></g>')
    parts.extend(labels)  # drawn last, over the boxes and lines
    parts.append("</svg>")
    return "".join(parts)


# -- the page -----------------------------------------------------------------------------------
_CSS = """
body { font-family: sans-serif; margin: 1.5em auto; max-width: 76em; padding: 0 1em; color: #111;
       background: #fff; line-height: 1.4; }
h1 { font-size: 1.5em; margin-bottom: 0.2em; } h2 { font-size: 1.2em; margin-top: 1.8em;
     border-bottom: 2px solid #111; padding-bottom: 0.1em; }
table { border-collapse: collapse; font-size: 0.9em; margin: 0.4em 0; }
th, td { border: 1px solid #888; padding: 0.2em 0.55em; text-align: right; vertical-align: top; }
th { background: #e6e6e6; } .l { text-align: left; }
code, .mono { font-family: monospace; font-size: 0.95em; }
.lv { color: #fff; font-weight: bold; padding: 0 0.4em; border-radius: 3px; }
tr.pics td { text-align: left; background: #f6f6f6; }
.figs { display: flex; flex-wrap: wrap; gap: 0.8em; }
figure { margin: 0; max-width: 340px; } figure img { width: 100%; height: auto; border: 1px solid #444; }
figcaption { font-size: 0.8em; }
.scroll { overflow-x: auto; } .note { font-size: 0.9em; }
.legend span { display: inline-block; margin-right: 1.2em; }
.chip { display: inline-block; width: 0.9em; height: 0.9em; vertical-align: middle; margin-right: 0.3em; }
pre { margin: 0; font-size: 0.85em; white-space: pre-wrap; }
"""


def _level_html(level: str | None) -> str:
    if not level:
        return "-"
    return f'<span class="lv" style="background:{_colour(level)}">{_e(level)}</span>'


def _columns(rows: Sequence[Mapping[str, Any]], known: Mapping[str, tuple[str, str]]) -> list[str]:
    """Known fields present in any row (in their order), then other numeric fields (first seen)."""
    present = [k for k in known if any(k in r for r in rows)]
    extra: list[str] = []
    for r in rows:
        for k, v in r.items():
            if k not in known and k not in extra and (_is_number(v) or v is None) and any(
                    _is_number(rr.get(k)) for rr in rows):
                extra.append(k)
    return present + extra


def _frame_columns(frames: Sequence[_Frame]) -> list[str]:
    """Columns of a frame table; 'level' also when only the thresholds gave the levels."""
    cols = _columns([f.fields for f in frames], _FRAME_FIELDS)
    if "level" not in cols and any(f.level for f in frames):
        cols.insert(cols.index("risk") + 1, "level")
    return cols


def _head(cols: Sequence[str], known: Mapping[str, tuple[str, str]], lead: Sequence[str] = ()) -> str:
    cells = [f"<th>{_e(x)}</th>" for x in lead]
    cells += [f"<th>{_e(known.get(c, (c, ''))[0])}</th>" for c in cols]
    return "<tr>" + "".join(cells) + "</tr>"


def _cells(row: Mapping[str, Any], cols: Sequence[str], known: Mapping[str, tuple[str, str]],
           level: str | None = None) -> str:
    out = []
    for c in cols:
        if c == "level":
            out.append(f"<td class=l>{_level_html(level)}</td>")
        elif c == "frame":
            f = row["frame"]
            out.append(f'<td><a href="#frame-{_e(f)}">{_e(_fmt(f, "d"))}</a></td>')
        else:
            v = row.get(c)
            out.append(f"<td>{_e(_fmt(v, known.get(c, ('', ''))[1]))}</td>")
    return "".join(out)


def _figures(frame: int, files: Mapping[int, Mapping[str, str]], scale: float | None) -> str:
    kinds = files.get(frame, {})
    figs = []
    for kind, caption in PICTURE_KINDS.items():
        if kind in kinds:
            rel = kinds[kind]
            extra = (f" (0 black to {_fmt(scale, '.3g')} or more pale yellow)" if kind == "error" and scale else "")
            figs.append(f'<figure><a href="{_e(rel)}"><img src="{_e(rel)}" alt="{_e(kind)} of frame {frame}">'
                        f"</a><figcaption><b>{_e(kind)}</b>: {_e(caption + extra)}</figcaption></figure>")
    return f'<div class="figs">{"".join(figs)}</div>' if figs else ""


def _kv_table(rows: Iterable[tuple[str, Any]], cls: str = "facts") -> str:
    body = "".join(f"<tr><th class=l>{_e(k)}</th><td class=l>{_e(_fmt(v))}</td></tr>" for k, v in rows)
    return f'<table class="{cls}">{body}</table>' if body else ""


def _params_html(params: Any) -> str:
    if not isinstance(params, Mapping) or not params:
        return "-"
    lines = [f"{k} = {json.dumps(v, ensure_ascii=False, sort_keys=True, default=str)}" for k, v in params.items()]
    return f"<pre>{_e(chr(10).join(lines))}</pre>"


def _inputs_html(inputs: Any) -> str:
    if not isinstance(inputs, Mapping) or not inputs:
        return "-"
    lines = [f"{p} \u2190 {', '.join(map(str, v)) if isinstance(v, (list, tuple)) else v}" for p, v in inputs.items()]
    return f"<pre>{_e(chr(10).join(lines))}</pre>"


_HOW_TO_READ = (
    "Every number here is a prediction made from the shot itself: midframe rebuilt real source "
    "frames from neighbours one step further apart than usual, measured how far each rebuilt frame "
    "was from the real one, and combined that with how much the motion vectors can be trusted and "
    "how much of the picture is hidden or revealed between frames. From these it predicts a risk for "
    "every in-between frame it will build. Higher is worse. No one has looked at the frames yet: "
    "check the frames listed under \u201cWorst frames\u201d first, riskiest at the top, then the "
    "red and amber bars of the strip. A low risk is not a promise; a high one says where to look.")


def page_html(assessment: Mapping[str, Any], graph_doc: Mapping[str, Any],
              files: Mapping[int, Mapping[str, str]], scale: float | None) -> str:
    """The page's HTML text. ``files[frame][kind]`` is the relative path of each picture written
    (only those are shown); ``scale`` is the top of the error heat scale."""
    frames = _frames(assessment)
    by_frame = {f.frame: f for f in frames}
    thresholds = _thresholds(assessment)
    graph = assessment.get("graph") if isinstance(assessment.get("graph"), Mapping) else {}
    gfile = graph.get("file")
    title = f"midframe assess: {gfile}" if gfile else "midframe assess"
    p: list[str] = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
                    '<meta name="viewport" content="width=device-width, initial-scale=1">',
                    f"<title>{_e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>",
                    f"<h1>Risk of the in-between frames{': ' + _e(gfile) if gfile else ''}</h1>"]
    facts: list[tuple[str, Any]] = []
    for key, label in (("file", "graph file"), ("hash", "graph hash")):
        if graph.get(key) is not None:
            facts.append((label, graph[key]))
    vars_ = graph.get("vars")
    if isinstance(vars_, Mapping):
        facts.extend((f"variable {k}", v) for k, v in vars_.items())
    for key, label in (("time_node", "time node"), ("inbetween_node", "in-between node"),
                       ("vectors_node", "vectors node")):
        if assessment.get(key) is not None:
            facts.append((label, assessment[key]))
    for name, v in sorted(thresholds.items(), key=lambda kv: kv[1]):
        facts.append((f"threshold: {name}", v))
    if assessment.get("schema") is not None:
        facts.append(("document", f"{assessment['schema']} version {assessment.get('version', '?')}"))
    p.append(_kv_table(facts))

    p.append('<h2 id="how">How to read this</h2>')
    p.append(f"<p>{_e(_HOW_TO_READ)}</p>")

    summary = assessment.get("summary")
    if isinstance(summary, Mapping) and summary:
        p.append('<h2 id="summary">Summary</h2>')
        rows = []
        for k, v in summary.items():
            if k == "worst" and isinstance(v, Sequence) and not isinstance(v, str):
                links = ", ".join(f'<a href="#frame-{int(f)}">{int(f)}</a>' if _is_number(f) and f in by_frame
                                  else _e(_fmt(f)) for f in v)
                rows.append(f"<tr><th class=l>worst</th><td class=l>{links or '-'}</td></tr>")
            else:
                rows.append(f"<tr><th class=l>{_e(str(k).replace('_', ' '))}</th><td class=l>{_e(_fmt(v))}</td></tr>")
        p.append(f'<table class="summary">{"".join(rows)}</table>')

    p.append('<h2 id="strip">Risk of every output frame</h2>')
    p.append('<div class="scroll">' + strip_svg(assessment) + "</div>")
    rank = {name: i for i, name in enumerate(LEVEL_COLOURS)}
    levels = sorted({f.level for f in frames if f.level}, key=lambda x: (rank.get(x, len(rank)), x))
    legend = "".join(f'<span><i class="chip" style="background:{_colour(lv)}"></i>{_e(lv)}</span>' for lv in levels)
    p.append(f'<p class="legend note">{legend} One bar per frame, in frame order; the height is the '
             "predicted risk; dashed lines are the thresholds. Each bar links to its row below.</p>")

    # worst frames
    worst, unknown = worst_frames(assessment, files.keys())
    cols = _frame_columns([by_frame[f] for f in worst])
    p.append('<h2 id="worst">Worst frames</h2>')
    if worst:
        p.append(f"<p class=note>In order of decreasing risk. {'The heat scale of the error maps:' if scale else ''}</p>")
        if scale:
            p.append(_heat_legend(scale))
        body = []
        for rank, f in enumerate(worst, 1):
            fr = by_frame[f]
            body.append(f'<tr class="worst" data-frame="{f}"><td>{rank}</td>'
                        f"{_cells(fr.fields, cols, _FRAME_FIELDS, fr.level)}</tr>")
            figs = _figures(f, files, scale)
            if figs:
                body.append(f'<tr class="pics"><td></td><td colspan="{len(cols)}">{figs}</td></tr>')
        p.append(f'<div class="scroll"><table class="worst">{_head(cols, _FRAME_FIELDS, ["rank"])}'
                 f"{''.join(body)}</table></div>")
    else:
        named = summary.get("worst") if isinstance(summary, Mapping) else None
        p.append("<p>The assessment names no worst frames.</p>" if isinstance(named, list)
                 else "<p>No frame has a risk value.</p>")
    if unknown:
        p.append(f"<p class=note>The summary also names frames that are not in the frame list: "
                 f"{_e(', '.join(map(str, unknown)))}.</p>")

    # every frame
    p.append('<h2 id="frames">Every frame</h2>')
    cols = _frame_columns(frames)
    body = "".join(f'<tr id="frame-{f.frame}" class="frame" data-frame="{f.frame}">'
                   f"{_cells(f.fields, cols, _FRAME_FIELDS, f.level)}</tr>" for f in frames)
    p.append(f'<div class="scroll"><table class="frames">{_head(cols, _FRAME_FIELDS)}{body}</table></div>')

    # leave-one-out sources
    sources = assessment.get("sources")
    shown = set(worst)
    if isinstance(sources, Sequence) and not isinstance(sources, str) and sources:
        rows = [s for s in sources if isinstance(s, Mapping)]
        p.append('<h2 id="sources">Source frames rebuilt from their neighbours (leave-one-out)</h2>')
        p.append("<p class=note>Each real source frame was rebuilt from the two frames one step "
                 "further away, as if it were an in-between, and compared with itself: PSNR in dB, "
                 "higher is closer.</p>")
        cols = _columns(rows, _SOURCE_FIELDS)
        body = []
        for s in rows:
            f = s.get("frame")
            anchor = f' id="source-{_e(f)}"' if _is_number(f) else ""
            cells = "".join(
                f"<td>{_e(_fmt(s.get(c), _SOURCE_FIELDS.get(c, ('', ''))[1]))}</td>" for c in cols)
            body.append(f'<tr class="source"{anchor}>{cells}</tr>')
            if _is_number(f) and int(f) not in by_frame and int(f) in files:
                body.append(f'<tr class="pics"><td colspan="{len(cols)}">{_figures(int(f), files, scale)}</td></tr>')
                shown.add(int(f))
        p.append(f'<div class="scroll"><table class="sources">{_head(cols, _SOURCE_FIELDS)}{"".join(body)}</table></div>')

    others = [f for f in sorted(files) if f not in shown]
    if others:
        p.append('<h2 id="pictures">More pictures</h2>')
        for f in others:
            p.append(f"<h3>frame {f}</h3>{_figures(f, files, scale)}")

    # the graph
    nodes, _ = _node_links(graph_doc)
    roles = {}
    for key, role in (("time_node", "the time mapping"), ("inbetween_node", "builds the in-betweens"),
                      ("vectors_node", "the motion vectors")):
        nid = assessment.get(key)
        if isinstance(nid, str) and nid in nodes:
            roles[nid] = role if nid not in roles else roles[nid] + "; " + role
    p.append('<h2 id="graph">The graph</h2>')
    p.append('<div class="scroll">' + graph_svg(graph_doc, roles) + "</div>")
    note = "Data flows left to right; each box shows the node id and, below it, its operator; the " \
           "port each link feeds is written on the link."
    if roles:
        note += " Thick outline: " + "; ".join(f"{nid} ({r})" for nid, r in roles.items()) + "."
    p.append(f"<p class=note>{_e(note)}</p>")
    dangling = graph_layout(graph_doc).dangling
    if dangling:
        p.append("<p class=note>Links from nodes that are not in the graph: " + _e(
            "; ".join(f"{t}.{port} \u2190 {s}" for s, t, port in dangling)) + ".</p>")
    body = "".join(
        f'<tr class="node"><td class="l mono">{_e(nid)}</td><td class="l mono">{_e(spec.get("op", "?"))}</td>'
        f'<td class=l>{_inputs_html(spec.get("inputs"))}</td><td class=l>{_params_html(spec.get("params"))}</td>'
        f'<td class=l>{_e(spec.get("doc", "")) or "-"}</td></tr>' for nid, spec in nodes.items())
    p.append('<div class="scroll"><table class="params"><tr><th class=l>node</th><th class=l>op</th>'
             f"<th class=l>inputs</th><th class=l>params</th><th class=l>note</th></tr>{body}</table></div>")
    p.append("<p class=note>Written by midframe. This page is static: no scripts, nothing loaded "
             "from elsewhere.</p>")
    p.append("</body></html>")
    return "\n".join(p) + "\n"


# -- writing ------------------------------------------------------------------------------------
def write_report(folder: Path, assessment: dict, pictures: Mapping[int, Mapping[str, np.ndarray]],
                 graph_doc: dict) -> Path:
    """Write a static report (``index.html`` and ``pictures/*.png``; no scripts, no external
    assets, no server) into ``folder`` and return the path of ``index.html``.

    Parameters
    ----------
    folder : path
        Created (with parents) if missing. Every file is written to a temporary name in its
        folder and moved into place (``os.replace``); pictures first, the page last.
    assessment : dict
        The document ``midframe assess`` writes. Only ``frames`` is required: a list of records
        each with a whole ``frame`` number and a ``risk`` (number, or None when unknown). Every
        other key is shown when present; unknown numeric fields of the frames become columns.
    pictures : mapping
        ``pictures[frame][kind]``, kinds :data:`PICTURE_KINDS`: ``thumb``, ``rebuilt`` and
        ``vectors`` H x W x 3 RGB (uint8, or float 0..1), ``confidence`` H x W (uint8, or float
        0..1), ``error`` H x W float (absolute error). Each is written as PNG at most
        :data:`MAX_PICTURE_WIDTH` wide (:func:`picture_size`).
    graph_doc : dict
        The resolved graph document: ``{"nodes": {id: {"op", "params", "inputs"}}}``; an input
        link is a node id or a list of them.

    Raises
    ------
    ValueError
        A malformed assessment, picture or graph document (the message names the field), before
        any file is written.
    """
    folder = Path(folder)
    pictures = pictures or {}
    _frames(assessment)  # check the document before writing anything
    graph_layout(graph_doc)
    prepared: dict[int, dict[str, np.ndarray]] = {}
    errors: list[np.ndarray] = []
    for frame, kinds in pictures.items():
        if not _is_number(frame) or float(frame) != int(frame):
            raise ValueError(f"pictures: the key {frame!r} is not a frame number")
        f = int(frame)
        for kind, arr in kinds.items():
            if kind not in PICTURE_KINDS:
                raise ValueError(f"pictures[{f}]: unknown kind {kind!r}; known kinds: {', '.join(PICTURE_KINDS)}")
            if kind == "error":
                errors.append(_grey_plane(arr, f, kind, "an H x W float error map"))
    scale = error_scale(errors)
    for frame, kinds in pictures.items():
        f = int(frame)
        for kind in PICTURE_KINDS:
            if kind not in kinds:
                continue
            arr = kinds[kind]
            if kind in _COLOUR_KINDS:
                img = _colour_png(arr, f, kind)
            elif kind == "confidence":
                img = _grey_png(arr, f, kind)
            else:
                assert scale is not None
                img = heat_map(_grey_plane(arr, f, kind, "an H x W float error map"), scale)
            prepared.setdefault(f, {})[kind] = img
    (folder / "pictures").mkdir(parents=True, exist_ok=True)
    files: dict[int, dict[str, str]] = {}
    for f, kinds in prepared.items():
        for kind, img in kinds.items():
            ok, buf = cv2.imencode(".png", img)
            if not ok:
                raise OSError(f"OpenCV could not encode the {kind} picture of frame {f} as PNG")
            rel = f"pictures/frame{f}-{kind}.png"
            _atomic_write_bytes(folder / rel, buf.tobytes())
            files.setdefault(f, {})[kind] = rel
    page = folder / "index.html"
    _atomic_write_bytes(page, page_html(assessment, graph_doc, files, scale).encode("utf-8"))
    return page
