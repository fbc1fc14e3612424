"""What the demo shows: a contact-sheet PNG and a static HTML page.

The contact sheet has one row per chosen frame and five columns, all read back from the files
the demo wrote:

=====================  ==========================================================================
column                 shows
=====================  ==========================================================================
fg                     the premultiplied foreground over a grey checkerboard (so its matte shows)
matte                  the matte, its values as grey levels (0 black, 1 white; no transfer curve)
bg                     the clean background plate
comp                   the composite the engine rendered
|comp - truth| x10     absolute difference of the sRGB-encoded composite and truth, times 10,
                       the largest in each block of pixels a thumbnail pixel covers
=====================  ==========================================================================

Colour columns are sRGB-encoded (IEC 61966-2-1) 8-bit, downsampled in linear light by area
averaging. The page is plain HTML with inline CSS: no scripts, no external assets; the contact
sheet and the files are linked by relative paths, so the folder can be moved or copied whole.
"""

from __future__ import annotations

import html
import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import cv2
import numpy as np

__all__ = ["COLUMNS", "THUMB_MAX_WIDTH", "MARGIN", "HEADER", "LABEL_WIDTH", "thumb_factor",
           "sheet_size", "contact_sheet_frames", "contact_sheet", "write_contact_sheet", "page_html",
           "write_page"]

#: Column titles of the contact sheet, left to right.
COLUMNS = ("fg", "matte", "bg", "comp", "|comp - truth| x10")
#: Thumbnails are the plate shrunk by the smallest whole factor that makes them at most this wide.
THUMB_MAX_WIDTH = 240
MARGIN = 8
HEADER = 26
LABEL_WIDTH = 56
_BACK = (32, 32, 32)      # BGR, sheet background
_TEXT = (235, 235, 235)
_FONT = cv2.FONT_HERSHEY_SIMPLEX
_ERROR_GAIN = 10.0
_CHECKER = (0.12, 0.22)   # linear grey levels of the checkerboard behind fg
_CHECK_PX = 8


def thumb_factor(width: int) -> int:
    """Whole shrink factor from plate width to thumbnail width (at most THUMB_MAX_WIDTH)."""
    return max(1, math.ceil(width / THUMB_MAX_WIDTH))


def sheet_size(rows: int, thumb_w: int, thumb_h: int) -> tuple[int, int]:
    """(width, height) of a contact sheet with ``rows`` rows of thumbnails ``thumb_w`` x ``thumb_h``."""
    cols = len(COLUMNS)
    return (LABEL_WIDTH + cols * thumb_w + cols * MARGIN,
            HEADER + rows * thumb_h + rows * MARGIN)


def contact_sheet_frames(frames: Sequence[int], count: int) -> list[int]:
    """``count`` frames spread evenly over ``frames``, first and last included."""
    frames = list(frames)
    if count >= len(frames):
        return frames
    idx = np.round(np.linspace(0, len(frames) - 1, count)).astype(int)
    return [frames[i] for i in sorted(set(idx.tolist()))]


# -- thumbnails -------------------------------------------------------------------------------
def _srgb8(linear_rgb: np.ndarray) -> np.ndarray:
    from operators.io.transfer import encode

    enc = encode("srgb", np.asarray(linear_rgb, np.float32))
    return np.clip(np.rint(enc * 255.0), 0, 255).astype(np.uint8)


def _shrink(planes: np.ndarray, k: int) -> np.ndarray:
    h, w = planes.shape[:2]
    out = cv2.resize(np.ascontiguousarray(planes, np.float32), (w // k, h // k), interpolation=cv2.INTER_AREA)
    return out.reshape(h // k, w // k, -1)


def _block_max(plane: np.ndarray, k: int) -> np.ndarray:
    h, w = plane.shape[:2]
    th, tw = h // k, w // k
    cut = plane[:th * k, :tw * k]
    return cut.reshape(th, k, tw, k, -1).max(axis=(1, 3))


def _checker(h: int, w: int) -> np.ndarray:
    yy, xx = np.mgrid[0:h, 0:w]
    on = ((yy // _CHECK_PX + xx // _CHECK_PX) % 2).astype(bool)
    return np.where(on, _CHECKER[1], _CHECKER[0]).astype(np.float32)[:, :, None]


def _panels(fg: np.ndarray, matte: np.ndarray, bg: np.ndarray, comp: np.ndarray, truth: np.ndarray,
            k: int) -> list[np.ndarray]:
    """The five thumbnails (BGR uint8) of one frame; inputs (H, W, 4) RGBA or (H, W, 1) linear."""
    from operators.io.transfer import encode

    fg_t = _shrink(fg, k)
    rgb = fg_t[:, :, :3] + (1.0 - fg_t[:, :, 3:4]) * _checker(*fg_t.shape[:2])
    m = _shrink(matte, k)[:, :, 0]
    grey = np.clip(np.rint(m * 255.0), 0, 255).astype(np.uint8)
    err = np.abs(encode("srgb", comp[:, :, :3].astype(np.float64)) -
                 encode("srgb", truth[:, :, :3].astype(np.float64))) * _ERROR_GAIN
    err8 = np.clip(np.rint(_block_max(err, k) * 255.0), 0, 255).astype(np.uint8)
    rgb_panels = [_srgb8(rgb), np.repeat(grey[:, :, None], 3, axis=2), _srgb8(_shrink(bg, k)[:, :, :3]),
                  _srgb8(_shrink(comp, k)[:, :, :3]), err8]
    return [np.ascontiguousarray(p[:, :, ::-1]) for p in rgb_panels]  # RGB -> BGR for OpenCV


def _put(sheet: np.ndarray, text: str, x: int, y: int, scale: float = 0.45) -> None:
    cv2.putText(sheet, text, (x, y), _FONT, scale, _TEXT, 1, cv2.LINE_AA)


def contact_sheet(rows: Sequence[tuple[int, Sequence[np.ndarray]]], thumb_w: int, thumb_h: int) -> np.ndarray:
    """Lay out thumbnails: ``rows`` of (frame, five BGR uint8 panels) -> BGR uint8 sheet."""
    w, h = sheet_size(len(rows), thumb_w, thumb_h)
    sheet = np.empty((h, w, 3), np.uint8)
    sheet[:] = _BACK
    for c, title in enumerate(COLUMNS):
        _put(sheet, title, LABEL_WIDTH + c * (thumb_w + MARGIN), HEADER - 9)
    for r, (frame, panels) in enumerate(rows):
        y = HEADER + r * (thumb_h + MARGIN)
        _put(sheet, str(frame), 6, y + thumb_h // 2 + 5, 0.5)
        for c, panel in enumerate(panels):
            x = LABEL_WIDTH + c * (thumb_w + MARGIN)
            sheet[y:y + thumb_h, x:x + thumb_w] = panel[:thumb_h, :thumb_w]
    return sheet


def write_contact_sheet(paths: Mapping[str, str], frames: Sequence[int]) -> tuple[int, int]:
    """Read fg, matte, bg, comp and truth of ``frames`` from disk and write the sheet PNG.

    ``paths`` holds the demo's patterns (``fg matte truth dst`` with ``%04d``, ``bg`` a still,
    ``sheet`` the PNG to write). Returns the sheet's (width, height).
    """
    from operators.io.exr import read_exr
    from operators.io.write import atomic_write

    bg = read_exr(paths["bg"]).select(("R", "G", "B", "A")).pixels
    k = thumb_factor(bg.shape[1])
    thumb_w, thumb_h = bg.shape[1] // k, bg.shape[0] // k
    rows = []
    for frame in frames:
        def load(key: str, channels: tuple[str, ...] = ("R", "G", "B", "A")) -> np.ndarray:
            return read_exr(paths[key] % frame).select(channels).pixels

        rows.append((frame, _panels(load("fg"), load("matte", ("A",)), bg, load("dst"), load("truth"), k)))
    sheet = contact_sheet(rows, thumb_w, thumb_h)

    def write(tmp: str) -> None:
        if not cv2.imwrite(tmp, sheet):
            raise OSError(f"OpenCV could not write {tmp}")

    atomic_write(paths["sheet"], write)
    return sheet.shape[1], sheet.shape[0]


# -- the page ---------------------------------------------------------------------------------
_CSS = """
body { font-family: sans-serif; margin: 2em auto; max-width: 72em; padding: 0 1em; color: #222; }
h1 { font-size: 1.5em; } h2 { font-size: 1.15em; margin-top: 1.6em; }
pre { background: #f3f3f3; padding: 0.8em; overflow-x: auto; font-size: 0.85em; }
table { border-collapse: collapse; font-size: 0.9em; }
th, td { border: 1px solid #bbb; padding: 0.2em 0.6em; text-align: right; }
th { background: #eee; } td.l, th.l { text-align: left; }
img { max-width: 100%; height: auto; border: 1px solid #888; }
.ok { color: #175c17; } .bad { color: #a01010; font-weight: bold; }
"""


def _num(value: Any, fmt: str) -> str:
    if value is None:
        return "-"
    if isinstance(value, float) and math.isinf(value):
        return "inf"
    return format(value, fmt)


def _rel(root: str, path: str) -> str:
    return os.path.relpath(path, root).replace(os.sep, "/")


def page_html(summary: Mapping[str, Any], dot: str) -> str:
    """The page's HTML text from the demo's summary record and the graph's DOT text."""
    e = html.escape
    files = summary["files"]
    root = os.path.dirname(files["page"])
    sc = summary["scenario"]
    err = summary["errors"]
    ok = err["within_bound"]
    rows = "\n".join(
        f"<tr><td>{r['frame']}</td><td>{_num(r['max_abs_srgb'], '.2e')}</td>"
        f"<td>{_num(r['psnr_srgb_db'], '.1f')}</td><td>{_num(r['max_abs_linear'], '.2e')}</td>"
        f"<td>{_num(r['bound_ratio'], '.3f')}</td>"
        f"<td>{_num(r['max_abs_vs_formula'], '.2e')}</td></tr>" for r in err["per_frame"])

    def link(key: str, what: str) -> str:
        rel = _rel(root, files[key])
        folder = os.path.dirname(rel) or "."
        return (f"<tr><td class=l>{e(what)}</td><td class=l><a href=\"{e(folder)}/\">{e(folder)}/</a>"
                f"</td><td class=l><code>{e(os.path.basename(rel))}</code></td></tr>")

    sheet = summary["contact_sheet"]
    t = summary["timings"]
    parts = [
        "<!DOCTYPE html>", "<html lang=\"en\">", "<head>", "<meta charset=\"utf-8\">",
        "<title>midframe demo: the paper fair, composited</title>", f"<style>{_CSS}</style>", "</head>",
        "<body>",
        "<h1>midframe demo: the paper fair, composited</h1>",
        f"<p>A procedural scene of our own (a rolling ball, a spinning paper pinwheel and a falling "
        f"paper streamer in front of a painted backdrop), rendered by "
        f"<code>{e(sc['generator'])}</code> at {sc['width']}&times;{sc['height']}, frames "
        f"{sc['first']}&ndash;{sc['last']}, camera {sc['view']}. Its foreground, matte and clean "
        f"background plate were written as half-float OpenEXR and composited by midframe's engine "
        f"through the graph below (Porter-Duff over with a separate matte); the scene's own "
        f"composite, written as float EXR, is the ground truth it is measured against.</p>",
        "<h2>Contact sheet</h2>",
        f"<p><img src=\"{e(_rel(root, sheet['path']))}\" width=\"{sheet['size'][0]}\" "
        f"height=\"{sheet['size'][1]}\" alt=\"contact sheet: fg, matte, bg, comp and the error, "
        f"frames {e(', '.join(map(str, sheet['frames'])))}\"></p>",
        "<p>Columns: the foreground over a grey checkerboard; the matte (grey levels); the clean "
        "plate; the rendered composite; the absolute difference of the sRGB-encoded composite and "
        "truth, times 10 (black: no difference an 8-bit display can show). Colour is sRGB-encoded "
        "(IEC 61966-2-1).</p>",
        "<h2>Error against the ground truth</h2>",
        f"<p class=\"{'ok' if ok else 'bad'}\">Every pixel is {'within' if ok else 'NOT within'} the "
        f"error that rounding the plates to half float allows (worst pixel at "
        f"{_num(err['bound_ratio'], '.3f')} of that bound). Largest error "
        f"{_num(err['max_abs_srgb'], '.2e')} in sRGB-encoded value (0..1); worst-frame PSNR "
        f"{_num(err['min_psnr_srgb_db'], '.1f')} dB, all frames pooled "
        f"{_num(err['pooled_psnr_srgb_db'], '.1f')} dB. Against Porter-Duff over computed directly "
        f"on the stored plates the largest difference is {_num(err['max_abs_vs_formula'], '.2e')} "
        f"(linear).</p>",
        "<p>PSNR is on sRGB-encoded R, G, B with peak 1, not clipped (the convention of the "
        "frame-interpolation protocol of Baker et al., IJCV 2011). The plates are half float, the "
        "truth float, so a perfect engine differs from the truth by the plates' rounding: at most "
        "2<sup>-11</sup> &times; (fg + bg) per pixel in linear light (half's unit roundoff; "
        "the matte's rounding error multiplies the background, so dark pixels over a bright "
        "plate show the largest sRGB error).</p>",
        "<table><tr><th>frame</th><th>max abs (sRGB)</th><th>PSNR (dB)</th>"
        "<th>max abs (linear, RGBA)</th><th>of half bound</th><th>max abs vs over formula</th></tr>",
        rows, "</table>",
        "<h2>The graph</h2>",
        f"<p>The template <code>{e(_rel(root, files['graph']))}</code> (DOT text; draw it with "
        f"<code>midframe graph {e(_rel(root, files['graph']))} --format svg --out graph.svg</code> "
        f"where Graphviz is installed):</p>",
        f"<pre>{e(dot)}</pre>",
        "<p>To render it again exactly as the demo did:</p>",
        f"<pre>{e(summary['command'])}</pre>",
        "<h2>Files</h2>",
        "<table><tr><th class=l>what</th><th class=l>folder</th><th class=l>files</th></tr>",
        link("fg", "foreground plate, premultiplied RGBA, half"),
        link("matte", "matte (A), half"),
        link("bg", "clean background plate (one still), half"),
        link("truth", "true composite, float (never read by the graph)"),
        link("dst", "rendered composite, float"),
        link("proxy", "half-size proxies, sRGB 8-bit PNG"),
        link("graph", "the graph rendered"),
        link("summary", "every number on this page, as JSON"),
        "</table>",
        f"<p>Timings: plates {t['plates_s']:.2f} s, render {t['render_s']:.2f} s with "
        f"{summary['jobs']} job(s), measuring {t['measure_s']:.2f} s, total {t['total_s']:.2f} s. "
        f"midframe {e(summary['version'])}. This folder is marked as a demo folder "
        f"(<code>.midframe-demo</code>), so <code>midframe demo</code> may write here again; it "
        f"refuses any other non-empty folder.</p>",
        "</body>", "</html>", ""]
    return "\n".join(parts)


def write_page(path: str, summary: Mapping[str, Any], dot: str) -> None:
    """Write ``page_html(summary, dot)`` to ``path`` atomically."""
    from operators.io.write import atomic_write

    text = page_html(summary, dot)
    atomic_write(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
