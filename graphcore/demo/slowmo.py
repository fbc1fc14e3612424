"""The demo's slow-motion part: a stretch of the plate retimed to half speed, before and after.

The plate is the composite the demo's first part rendered (``comp/comp.%04d.exr``: the paper
fair's performers over the clean plate, locked-off camera). Two shipped templates retime it at
``slowdown`` 2 over the source frames :data:`SOURCE_FIRST` .. :data:`SOURCE_LAST`:

- before: ``graphs/retime.json`` on the whole plate (one set of vectors for everything, so the
  background is dragged along beside the performers);
- after: ``graphs/fg-retime-over.json`` with the plate's matte and the clean plate (the
  performers cut out, retimed alone and laid back over the clean plate).

The truth is the scene rendered at the exact source time of every output frame
(``truth/retime.%04d.exr``, float; the graphs never read it). Each output frame is measured
against it (PSNR on sRGB values and mean absolute error in linear light), beside the
cross-dissolve of the two neighbouring source frames, the baseline the interpolation protocol of
Baker et al. (IJCV 2011) asks for. Whole source frames pass through ``retime.json`` bit for bit;
``fg-retime-over.json`` rebuilds them from the cut-out to float rounding.
"""

from __future__ import annotations

from fractions import Fraction
from pathlib import Path
from typing import Any

import numpy as np

from graphcore.demo.common import (errors, pool_errors, read_rgb, render_graph, say, vectors_graph,
                                   write_exr_atomic, write_json_atomic)

__all__ = ["SLOWDOWN", "SOURCE_FIRST", "SOURCE_LAST", "VECTOR_MAX", "paths", "output_frames", "source_time",
           "sheet_frames", "run"]

#: Half speed: one in-between after every source frame.
SLOWDOWN = 2
#: The stretch of the plate retimed (where the ball, the pinwheel and the streamer are all in
#: view); a short stretch keeps ``midframe demo`` within its two-minute budget.
SOURCE_FIRST, SOURCE_LAST = 1011, 1014
#: Vector length pictured fully saturated, pixels (the fastest layer moves about 11 px a frame).
VECTOR_MAX = 16.0


def paths(root: Path) -> dict[str, str]:
    return {
        "retime_before": str(root / "retime" / "before.%04d.exr"),
        "retime_after": str(root / "retime" / "after.%04d.exr"),
        "retime_truth": str(root / "truth" / "retime.%04d.exr"),
        "retime_vectors": str(root / "vectors" / "plate.%04d.png"),
        "retime_true_vectors": str(root / "vectors" / "plate-true.%04d.png"),
        "retime_vectors_graph": str(root / "vectors-plate.json"),
    }


def output_frames(first: int) -> list[int]:
    """Output frames of the retimed stretch; ``first`` is the plate's first frame (retime.json
    numbers its output from it: output k shows source time first + (k - first) / slowdown)."""
    return list(range(first + (SOURCE_FIRST - first) * SLOWDOWN, first + (SOURCE_LAST - first) * SLOWDOWN + 1))


def source_time(k: int, first: int) -> Fraction:
    return first + Fraction(k - first, SLOWDOWN)


def sheet_frames(first: int) -> list[int]:
    """Two in-between output frames for the contact sheet."""
    inb = [k for k in output_frames(first) if source_time(k, first).denominator != 1]
    return [inb[0], inb[-1]]


def run(scene: Any, p: dict[str, str], first: int, view: int, repo_graphs: Path, jobs: int,
        cache: str | None = None) -> dict[str, Any]:
    """Render the truth, both retimes and the vector pictures; measure; return the record.

    ``scene`` is the demo's :class:`graphcore.demo.scene.Scene`, ``p`` the demo's file patterns
    (``dst``: the composite used as the plate, ``matte``, ``bg``, and :func:`paths`), ``first``
    the plate's first frame, ``view`` its camera, ``cache`` a disk-cache folder shared by the
    renders (the vector pictures reuse retime.json's vectors from it).
    """
    from operators.vectors.color import flow_to_codes

    frames = output_frames(first)
    say(f"demo: slow motion: source frames {SOURCE_FIRST}-{SOURCE_LAST} at slowdown {SLOWDOWN} -> output "
        f"frames {frames[0]}-{frames[-1]}, the true in-betweens to {Path(p['retime_truth']).parent}")
    for k in frames:
        t = source_time(k, first)
        write_exr_atomic(p["retime_truth"] % k, scene.render(t, view)["comp"], "float",
                         {"midframe.demo": f"truth: the scene at source time {t} (frame {k} of the retime)"})
    span = (frames[0], frames[-1])
    say("demo: slow motion before: graphs/retime.json on the whole plate")
    render_graph(str(repo_graphs / "retime.json"), {"src": p["dst"], "dst": p["retime_before"],
                                                    "slowdown": str(SLOWDOWN)}, jobs, span,
                 cache=cache)
    say("demo: slow motion after: graphs/fg-retime-over.json (matte and clean plate)")
    render_graph(str(repo_graphs / "fg-retime-over.json"),
                 {"fg": p["dst"], "matte": p["matte"], "bg": p["bg"], "dst": p["retime_after"],
                  "slowdown": str(SLOWDOWN)}, jobs, span)

    # vector pictures of the source pairs the contact sheet shows: estimated (through the
    # engine; retime.json's vectors, found in the demo's cache) and true (the scene's analytic
    # motion), same colour code and scale
    pairs = sorted({int(source_time(k, first)) for k in sheet_frames(first)})
    write_json_atomic(p["retime_vectors_graph"], vectors_graph("frame", VECTOR_MAX))
    for f in pairs:
        render_graph(p["retime_vectors_graph"], {"src": p["dst"], "dst": p["retime_vectors"]}, 1, (f, f),
                     progress=False, cache=cache)
        true = scene.vectors((f, view), (f + 1, view))
        codes = flow_to_codes(true.channel("fwd.x") / VECTOR_MAX, true.channel("fwd.y") / VECTOR_MAX)
        _write_png(p["retime_true_vectors"] % f, codes)

    say("demo: slow motion: measuring against the true in-betweens")
    rows = []
    for k in frames:
        t = source_time(k, first)
        truth = read_rgb(p["retime_truth"] % k)
        row: dict[str, Any] = {"frame": k, "source_time": str(t), "inbetween": t.denominator != 1}
        before, after = read_rgb(p["retime_before"] % k), read_rgb(p["retime_after"] % k)
        lo, hi = (read_rgb(p["dst"] % f) for f in (int(t), int(t) + (t.denominator != 1)))
        for name, img in (("before", before), ("after", after), ("dissolve", 0.5 * (lo + hi))):
            row[name] = errors(img, truth)
        row["before_vs_plate_max_abs"] = row["after_vs_plate_max_abs"] = None
        if t.denominator == 1:
            plate = read_rgb(p["dst"] % int(t))
            row["before_vs_plate_max_abs"] = float(np.abs(before - plate).max())
            row["after_vs_plate_max_abs"] = float(np.abs(after - plate).max())
        rows.append(row)
    inb = [r for r in rows if r["inbetween"]]
    return {
        "graphs": {"before": "graphs/retime.json", "after": "graphs/fg-retime-over.json"},
        "slowdown": SLOWDOWN, "source_frames": [SOURCE_FIRST, SOURCE_LAST], "frames": frames,
        "sheet_frames": sheet_frames(first), "vector_pairs": pairs, "vector_max_px": VECTOR_MAX,
        "per_frame": rows,
        "inbetweens": {name: pool_errors(r[name] for r in inb) for name in ("before", "after", "dissolve")},
        "whole_frames_max_abs": {
            "before": max(r["before_vs_plate_max_abs"] for r in rows if not r["inbetween"]),
            "after": max(r["after_vs_plate_max_abs"] for r in rows if not r["inbetween"])},
    }


def _write_png(path: str, codes: np.ndarray) -> None:
    import cv2

    from operators.io.write import atomic_write

    Path(path).parent.mkdir(parents=True, exist_ok=True)

    def write(tmp: str) -> None:
        if not cv2.imwrite(tmp, np.ascontiguousarray(codes[:, :, ::-1])):
            raise OSError(f"OpenCV could not write {tmp}")

    atomic_write(path, write)
