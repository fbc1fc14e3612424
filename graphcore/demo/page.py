"""What the demo shows: a contact-sheet PNG and a static HTML page.

The contact sheet has three sections, all read back from the files the demo wrote.

The composite, one row per chosen frame of the plate:

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

The slow motion and the sweep, one row per chosen in-between frame or view
(:data:`RETIME_COLUMNS`, :data:`SWEEP_COLUMNS`): the truth, before, after, the two errors against
the truth (as above), and two vector pictures (``vector-color``'s Baker et al. 2011 colour code:
estimated and true vectors of the plate; vectors of the raw and of the cleaned rig).

Colour columns are sRGB-encoded (IEC 61966-2-1) 8-bit, downsampled in linear light by area
averaging. The page is plain HTML with inline CSS: no scripts, no external assets; the contact
sheet, the vector pictures and the files are linked by relative paths, so the folder can be moved
or copied whole.
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

__all__ = ["COLUMNS", "RETIME_COLUMNS", "SWEEP_COLUMNS", "THUMB_MAX_WIDTH", "MARGIN", "HEADER", "TITLE",
           "LABEL_WIDTH", "thumb_factor", "sheet_size", "panel_origin", "contact_sheet_frames", "contact_sheet", "write_contact_sheet", "page_html",
           "write_page"]

#: Column titles of the contact sheet, left to right.
COLUMNS = ("fg", "matte", "bg", "comp", "|comp - truth| x10")
#: Column titles of the slow-motion section.
RETIME_COLUMNS = ("truth", "before: retime", "after: fg-retime-over", "|before - truth| x10",
                  "|after - truth| x10", "vectors (estimated)", "vectors (true)")
#: Column titles of the sweep section.
SWEEP_COLUMNS = ("truth: perfect rig", "before: raw cameras", "after: rig-clean", "|before - truth| x10",
                 "|after - truth| x10", "vectors: raw rig", "vectors: cleaned rig")
#: Thumbnails are the plate shrunk by the smallest whole factor that makes them at most this wide.
THUMB_MAX_WIDTH = 240
MARGIN = 8
HEADER = 26
TITLE = 26
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


def sheet_size(sections: Sequence[tuple[int, int]], thumb_w: int, thumb_h: int) -> tuple[int, int]:
    """(width, height) of a contact sheet whose sections have (columns, rows) of thumbnails
    ``thumb_w`` x ``thumb_h``."""
    cols = max(c for c, _ in sections)
    return (LABEL_WIDTH + cols * thumb_w + cols * MARGIN,
            sum(TITLE + HEADER + r * (thumb_h + MARGIN) for _, r in sections))


def panel_origin(sections: Sequence[tuple[int, int]], section: int, row: int, column: int, thumb_w: int,
                 thumb_h: int) -> tuple[int, int]:
    """(x, y) of the top-left pixel of a thumbnail on the sheet."""
    y = sum(TITLE + HEADER + r * (thumb_h + MARGIN) for _, r in sections[:section])
    return (LABEL_WIDTH + column * (thumb_w + MARGIN), y + TITLE + HEADER + row * (thumb_h + MARGIN))


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


def contact_sheet(sections: Sequence[tuple[str, Sequence[str], Sequence[tuple[str, Sequence[np.ndarray]]]]],
                  thumb_w: int, thumb_h: int) -> np.ndarray:
    """Lay out thumbnails: ``sections`` of (title, column titles, rows of (label, BGR uint8
    panels)) -> BGR uint8 sheet."""
    shape = [(len(cols), len(rows)) for _, cols, rows in sections]
    w, h = sheet_size(shape, thumb_w, thumb_h)
    sheet = np.empty((h, w, 3), np.uint8)
    sheet[:] = _BACK
    for si, (title, columns, rows) in enumerate(sections):
        x0, y0 = panel_origin(shape, si, 0, 0, thumb_w, thumb_h)
        _put(sheet, title, 6, y0 - HEADER - 8, 0.55)
        for c, name in enumerate(columns):
            _put(sheet, name, LABEL_WIDTH + c * (thumb_w + MARGIN), y0 - 9, 0.42)
        for r, (label, panels) in enumerate(rows):
            for c, panel in enumerate(panels):
                x, y = panel_origin(shape, si, r, c, thumb_w, thumb_h)
                sheet[y:y + thumb_h, x:x + thumb_w] = panel[:thumb_h, :thumb_w]
            _put(sheet, label, 4, y0 + r * (thumb_h + MARGIN) + thumb_h // 2 + 5, 0.42)
    return sheet


def _err_panel(got: np.ndarray, truth: np.ndarray, k: int) -> np.ndarray:
    from operators.io.transfer import encode

    err = np.abs(encode("srgb", got[:, :, :3].astype(np.float64)) -
                 encode("srgb", truth[:, :, :3].astype(np.float64))) * _ERROR_GAIN
    err8 = np.clip(np.rint(_block_max(err, k) * 255.0), 0, 255).astype(np.uint8)
    return np.ascontiguousarray(err8[:, :, ::-1])


def _colour_panel(rgb: np.ndarray, k: int) -> np.ndarray:
    return np.ascontiguousarray(_srgb8(_shrink(rgb[:, :, :3], k)[:, :, :3])[:, :, ::-1])


def _png_panel(path: str, k: int) -> np.ndarray:
    img = cv2.imread(path, cv2.IMREAD_COLOR)
    if img is None:
        raise OSError(f"cannot read {path}")
    h, w = img.shape[:2]
    return cv2.resize(img, (w // k, h // k), interpolation=cv2.INTER_AREA)


def _before_after_rows(keys: Mapping[str, str], frames: Sequence[int], labels: Sequence[str],
                       vectors: Sequence[tuple[str, str]], k: int) -> list[tuple[str, list[np.ndarray]]]:
    from operators.io.exr import read_exr

    rows = []
    for frame, label, (vec_a, vec_b) in zip(frames, labels, vectors):
        def load(key: str) -> np.ndarray:
            return read_exr(keys[key] % frame).select(("R", "G", "B")).pixels

        truth, before, after = load("truth"), load("before"), load("after")
        rows.append((label, [_colour_panel(truth, k), _colour_panel(before, k), _colour_panel(after, k),
                             _err_panel(before, truth, k), _err_panel(after, truth, k),
                             _png_panel(vec_a, k), _png_panel(vec_b, k)]))
    return rows


def write_contact_sheet(paths: Mapping[str, str], frames: Sequence[int], retime: Mapping[str, Any],
                        sweep: Mapping[str, Any]) -> tuple[int, int]:
    """Read the demo's files and write the sheet PNG: three sections, all read back from disk.

    The composite (``frames`` of the plate: fg, matte, bg, comp, error); the slow motion (the
    in-between frames ``retime['sheet_frames']``: truth, before, after, both errors, estimated and
    true vectors of the source pair); the sweep (the in-between views ``sweep['sheet_frames']``:
    truth, before, after, both errors, vectors of the raw and of the cleaned camera pair).
    ``paths`` holds the demo's file patterns. Returns the sheet's (width, height).
    """
    from operators.io.exr import read_exr
    from operators.io.write import atomic_write

    bg = read_exr(paths["bg"]).select(("R", "G", "B", "A")).pixels
    k = thumb_factor(bg.shape[1])
    thumb_w, thumb_h = bg.shape[1] // k, bg.shape[0] // k
    comp_rows = []
    for frame in frames:
        def load(key: str, channels: tuple[str, ...] = ("R", "G", "B", "A")) -> np.ndarray:
            return read_exr(paths[key] % frame).select(channels).pixels

        comp_rows.append((str(frame), _panels(load("fg"), load("matte", ("A",)), bg, load("dst"),
                                              load("truth"), k)))
    rt_times = [r["source_time"] for f in retime["sheet_frames"] for r in retime["per_frame"] if r["frame"] == f]
    retime_rows = _before_after_rows(
        {"truth": paths["retime_truth"], "before": paths["retime_before"], "after": paths["retime_after"]},
        retime["sheet_frames"], [str(f) for f in retime["sheet_frames"]],
        [(paths["retime_vectors"] % int(_fraction(t)), paths["retime_true_vectors"] % int(_fraction(t)))
         for t in rt_times], k)
    views = [r["view"] for f in sweep["sheet_frames"] for r in sweep["per_frame"] if r["frame"] == f]
    sweep_rows = _before_after_rows(
        {"truth": paths["sweep_truth"], "before": paths["sweep_before"], "after": paths["sweep_after"]},
        sweep["sheet_frames"], [f"v{v:g}" for v in views],
        [(paths["rig_vectors"] % int(v), paths["clean_vectors"] % int(v)) for v in views], k)
    sheet = contact_sheet([
        ("composite: fg over the clean plate (frames of the plate)", COLUMNS, comp_rows),
        (f"slow motion x{retime['slowdown']}: in-between frames, before and after", RETIME_COLUMNS, retime_rows),
        ("sweep across the rig: in-between views (v = camera), before and after", SWEEP_COLUMNS, sweep_rows),
    ], thumb_w, thumb_h)

    def write(tmp: str) -> None:
        if not cv2.imwrite(tmp, sheet):
            raise OSError(f"OpenCV could not write {tmp}")

    atomic_write(paths["sheet"], write)
    return sheet.shape[1], sheet.shape[0]


def _fraction(text: str) -> float:
    from fractions import Fraction

    return float(Fraction(text))


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
.figs { display: flex; flex-wrap: wrap; gap: 1em; } figure { margin: 0; max-width: 30em; }
figcaption { font-size: 0.85em; }
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
        "<title>midframe demo: the paper fair</title>", f"<style>{_CSS}</style>", "</head>",
        "<body>",
        "<h1>midframe demo: the paper fair</h1>",
        "<p>Three things midframe does, each measured against the exact truth our own scene generator "
        "renders: a composite (<a href=\"#composite\">below</a>), a <a href=\"#slowmo\">slow-motion "
        "retime</a> and a <a href=\"#sweep\">sweep across a rig of cameras</a>, each before and after "
        "the fix midframe ships for it. The scene has no flashing content; retimed and synthesised "
        "sequences in general can flicker where vectors fail (see the README's cautions).</p>",
        "<h2 id=\"composite\">The composite</h2>",
        f"<p>A procedural scene of our own (a rolling ball, a spinning paper pinwheel and a falling "
        f"paper streamer in front of a painted backdrop), rendered by "
        f"<code>{e(sc['generator'])}</code> at {sc['width']}&times;{sc['height']}, frames "
        f"{sc['first']}&ndash;{sc['last']}, camera {sc['view']}. Its foreground, matte and clean "
        f"background plate were written as half-float OpenEXR and composited by midframe's engine "
        f"through the graph below (Porter-Duff over with a separate matte); the scene's own "
        f"composite, written as float EXR, is the ground truth it is measured against.</p>",
        "<h2>Contact sheet</h2>",
        f"<p><img src=\"{e(_rel(root, sheet['path']))}\" width=\"{sheet['size'][0]}\" "
        f"height=\"{sheet['size'][1]}\" alt=\"contact sheet: the composite (frames "
        f"{e(', '.join(map(str, sheet['frames'])))}), the slow motion and the sweep, before and after\"></p>",
        "<p>Three sections, all read back from the files written. Composite columns: the foreground over a grey checkerboard; the matte (grey levels); the clean "
        "plate; the rendered composite; the absolute difference of the sRGB-encoded composite and "
        "truth, times 10 (black: no difference an 8-bit display can show). Slow-motion and sweep "
        "columns: the truth, before, after, both errors against the truth (times 10, the same way), "
        "and two vector pictures (the Baker et al. 2011 colour code: hue is direction, saturation "
        "length, white is still; the wheel in the corner is the legend). Colour is sRGB-encoded "
        "(IEC 61966-2-1).</p>",
        "<h2>The composite against the ground truth</h2>",
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
        *_retime_section(summary, root),
        *_sweep_section(summary, root),
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
        link("graph", "the composite's graph"),
        link("retime_before", "slow motion before (retime.json), float"),
        link("retime_after", "slow motion after (fg-retime-over.json), float"),
        link("retime_truth", "the true slow motion, float (never read by a graph)"),
        link("rig", "the rig's raw cameras, half"),
        link("clean", "the cleaned cameras (rig-clean.json), half"),
        link("sweep_before", "sweep before (viewmorph.json on the raw cameras)"),
        link("sweep_after", "sweep after (viewmorph.json on the cleaned cameras)"),
        link("sweep_truth", "the perfect rig's views, float (never read by a graph)"),
        link("retime_vectors", "vector pictures, sRGB PNG"),
        link("retime_vectors_graph", "the graph that pictures a plate's vectors"),
        link("rig_vectors_graph", "the graph that pictures a rig's vectors"),
        link("summary", "every number on this page, as JSON"),
        "</table>",
        f"<p>Timings: plates {t['plates_s']:.2f} s, composite {t['render_s']:.2f} s with "
        f"{summary['jobs']} job(s), measuring {t['measure_s']:.2f} s, slow motion {t['retime_s']:.2f} s, "
        f"sweep {t['sweep_s']:.2f} s, total {t['total_s']:.2f} s. "
        f"midframe {e(summary['version'])}. This folder is marked as a demo folder "
        f"(<code>.midframe-demo</code>), so <code>midframe demo</code> may write here again; it "
        f"refuses any other non-empty folder.</p>",
        "</body>", "</html>", ""]
    return "\n".join(parts)


def _db(value: Any) -> str:
    return _num(value, ".1f")


def _figure(root: str, path: str, caption: str) -> str:
    e = html.escape
    return (f"<figure><img src=\"{e(_rel(root, path))}\" alt=\"{e(caption)}\">"
            f"<figcaption>{e(caption)}</figcaption></figure>")


def _retime_section(summary: Mapping[str, Any], root: str) -> list[str]:
    e = html.escape
    r = summary["retime"]
    files = summary["files"]
    inb = r["inbetweens"]
    rows = "\n".join(
        f"<tr><td>{x['frame']}</td><td>{e(x['source_time'])}</td><td>{'in-between' if x['inbetween'] else 'source'}"
        f"</td><td>{_db(x['before']['psnr_srgb_db'])}</td><td>{_db(x['after']['psnr_srgb_db'])}</td>"
        f"<td>{_db(x['dissolve']['psnr_srgb_db'])}</td><td>{_num(x['before']['mean_abs_linear'], '.4f')}</td>"
        f"<td>{_num(x['after']['mean_abs_linear'], '.4f')}</td></tr>" for x in r["per_frame"])
    figs = "".join(
        _figure(root, files["retime_vectors"] % f, f"vectors estimated from frame {f} to {f + 1} (retime.json's)")
        + _figure(root, files["retime_true_vectors"] % f, f"true vectors from frame {f} to {f + 1}")
        for f in r["vector_pairs"])
    return [
        "<h2 id=\"slowmo\">Slow motion: before and after</h2>",
        f"<p>The composite above is the plate. Source frames {r['source_frames'][0]}&ndash;"
        f"{r['source_frames'][1]} were slowed down {r['slowdown']} times (output frames "
        f"{r['frames'][0]}&ndash;{r['frames'][-1]}: one in-between after each source frame). "
        f"<b>Before</b>: <code>graphs/retime.json</code> on the whole plate, one set of vectors for "
        f"everything. <b>After</b>: <code>graphs/fg-retime-over.json</code> with the plate's matte and "
        f"clean plate: the performers cut out, retimed alone and laid back over the clean plate. The "
        f"truth is the scene rendered at each output frame's exact source time.</p>",
        f"<p class=\"ok\">In-betweens, all pooled: PSNR {_db(inb['before']['pooled_psnr_srgb_db'])} dB "
        f"before, {_db(inb['after']['pooled_psnr_srgb_db'])} dB after, "
        f"{_db(inb['dissolve']['pooled_psnr_srgb_db'])} dB for a cross-dissolve of the neighbouring "
        f"frames (the baseline); mean absolute error (linear) {_num(inb['before']['mean_abs_linear'], '.4f')}"
        f" before, {_num(inb['after']['mean_abs_linear'], '.4f')} after. Whole source frames: largest "
        f"difference from the plate {_num(r['whole_frames_max_abs']['before'], '.1e')} before, "
        f"{_num(r['whole_frames_max_abs']['after'], '.1e')} after.</p>",
        "<table><tr><th>output frame</th><th>source time</th><th></th><th>PSNR before (dB)</th>"
        "<th>PSNR after (dB)</th><th>PSNR dissolve (dB)</th><th>mean abs before</th>"
        "<th>mean abs after</th></tr>", rows, "</table>",
        f"<h3>Vector pictures</h3><p>Vectors to the next frame, {r['vector_max_px']:g} px fully "
        f"saturated.</p>", f"<div class=\"figs\">{figs}</div>",
    ]


def _sweep_section(summary: Mapping[str, Any], root: str) -> list[str]:
    w = summary["sweep"]
    files = summary["files"]
    inb, cams, fl = w["inbetweens"], w["cameras_err"], w["flicker"]
    rig = w["rig"]
    rows = "\n".join(
        f"<tr><td>{x['frame']}</td><td>{x['view']:g}</td><td>{'camera' if x['camera'] else 'in-between'}</td>"
        f"<td>{_db(x['before']['psnr_srgb_db'])}</td><td>{_db(x['after']['psnr_srgb_db'])}</td>"
        f"<td>{_num(x['before']['mean_abs_linear'], '.4f')}</td><td>{_num(x['after']['mean_abs_linear'], '.4f')}"
        f"</td></tr>" for x in w["per_frame"])
    figs = "".join(
        _figure(root, files["rig_vectors"] % j, f"vectors from raw camera {j} to {j + 1}")
        + _figure(root, files["clean_vectors"] % j, f"vectors from cleaned camera {j} to {j + 1}")
        for j in w["vector_pairs"])
    return [
        "<h2 id=\"sweep\">Sweep across the rig: before and after</h2>",
        f"<p>{w['cameras']} still cameras photograph frame {w['moment']}, each with its own error: "
        f"exposure up to &plusmn;{rig['exposure_stops']:g} stops, white balance &plusmn;"
        f"{rig['white_balance_stops']:g} stops, position &plusmn;{100 * rig['position_jitter']:g} % of the "
        f"camera spacing, aim &plusmn;{100 * rig['aim_jitter']:g} % of the image height, roll &plusmn;"
        f"{rig['roll_jitter_deg']:g}&deg;. A sweep with {w['between']} in-between views after each camera. "
        f"<b>Before</b>: <code>graphs/viewmorph.json</code> on the raw cameras. <b>After</b>: "
        f"<code>graphs/rig-clean.json</code> (align-views and color-match to camera {w['reference']}, which "
        f"passes through unchanged), then <code>graphs/viewmorph.json</code>.</p>",
        f"<p>The truth is what a perfect rig would have shot at every view, seen the way camera "
        f"{w['reference']} sees (its colour, aim, roll and position offset): the best a clean-up to that "
        f"camera can reach. The raw sweep is measured against the same picture, so its error counts "
        f"the flicker and shake the clean-up removes. Errors cover the central {100 * w['region']:g} % "
        f"of the frame (align-views leaves an empty border). Position errors are true parallax that no "
        f"2D transform removes, so some error remains after clean-up.</p>",
        f"<p class=\"ok\">In-between views, pooled: PSNR {_db(inb['before']['pooled_psnr_srgb_db'])} dB "
        f"before, {_db(inb['after']['pooled_psnr_srgb_db'])} dB after (worst view "
        f"{_db(inb['before']['min_psnr_srgb_db'])} and {_db(inb['after']['min_psnr_srgb_db'])} dB); the "
        f"cameras themselves {_db(cams['before']['pooled_psnr_srgb_db'])} dB before, "
        f"{_db(cams['after']['pooled_psnr_srgb_db'])} dB after. Flicker (mean jump of the log mean colour "
        f"between neighbouring output frames, our own measure): {_num(fl['before'], '.4f')} before, "
        f"{_num(fl['after'], '.4f')} after, {_num(fl['truth'], '.4f')} in the truth itself.</p>",
        "<table><tr><th>output frame</th><th>camera</th><th></th><th>PSNR before (dB)</th>"
        "<th>PSNR after (dB)</th><th>mean abs before</th><th>mean abs after</th></tr>", rows, "</table>",
        f"<h3>Vector pictures</h3><p>Vectors to the next camera, {w['vector_max_px']:g} px fully "
        f"saturated: on the raw rig the cameras' aim and roll errors add to the parallax.</p>",
        f"<div class=\"figs\">{figs}</div>",
    ]


def write_page(path: str, summary: Mapping[str, Any], dot: str) -> None:
    """Write ``page_html(summary, dot)`` to ``path`` atomically."""
    from operators.io.write import atomic_write

    text = page_html(summary, dot)
    atomic_write(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
