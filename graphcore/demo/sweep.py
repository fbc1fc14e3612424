"""The demo's sweep part: a rig of imperfect still cameras at one moment, before and after clean-up.

Five cameras of the paper fair (:data:`CAMERAS`) photograph one moment (:data:`MOMENT`), each with
its own exposure, white balance, position, aim and roll error (:data:`RIG`, drawn from a seed),
written as half-float stills ``rig/cam.%02d.exr``. Two renders sweep across them with
:data:`BETWEEN` in-between views after each camera:

- before: ``graphs/viewmorph.json`` on the raw cameras;
- after: ``graphs/rig-clean.json`` (align-views, then color-match to the middle camera, which
  passes through unchanged) into ``clean/cam.%02d.exr``, then ``graphs/viewmorph.json`` on those.

The truth (``truth/sweep.%04d.exr``) is what a perfect rig would have shot at every output view,
seen the way the reference camera sees: its colour gains, its aim, its roll and its position
offset (``Scene.render(..., like=reference)``). Cleaning up to the reference can at best reach
that; the raw sweep is measured against the same picture. What each number means:

- error against the truth (PSNR on sRGB values, mean absolute error in linear light) over the
  central 80 % of the frame: align-views shifts and turns the other cameras, which leaves an empty
  border there, and the rig's truth has none, so the border is left out of every number (the
  same region for before and after). Position errors are true parallax that no 2D transform
  removes, so after clean-up some error remains by design;
- flicker: how much the overall colour jumps between neighbouring output frames (mean of
  ``|log mean colour(k + 1) - log mean colour(k)|`` over the central 60 %, our own measure),
  before, after, and of the truth itself (what the moving view alone changes).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from graphcore.demo.common import (central, errors, flicker, pool_errors, read_rgb, render_graph, say,
                                   vectors_graph, write_exr_atomic, write_json_atomic)
from graphcore.demo.scene import RigImperfections

__all__ = ["CAMERAS", "REFERENCE", "BETWEEN", "MOMENT", "RIG", "REGION", "VECTOR_MAX", "make_scene", "paths",
           "output_frames", "output_view", "sheet_frames", "run"]

CAMERAS = 5
#: The reference camera of rig-clean.json (its default: the middle one), numbered 1..N.
REFERENCE = 3
BETWEEN = 3
#: The moment the rig photographs (a frame of the plate's numbering).
MOMENT = 1013
#: Exposure up to +-0.3 stops, white balance +-0.15 stops, position +-5 % of the camera spacing,
#: aim +-2 % of the image height, roll +-1.5 degrees, per camera.
RIG = RigImperfections(exposure_stops=0.3, white_balance_stops=0.15, position_jitter=0.05, aim_jitter=0.02,
                       roll_jitter_deg=1.5, seed=3)
#: Share of rows and columns measured (centred): align-views leaves an empty border.
REGION = 0.8
VECTOR_MAX = 16.0


def make_scene(width: int, height: int, seed: int, first: int, motion: float) -> Any:
    from graphcore.demo.scene import Scene

    return Scene(width, height, seed=seed, start_frame=first, cameras=CAMERAS, motion=motion, rig=RIG)


def paths(root: Path) -> dict[str, str]:
    return {
        "rig": str(root / "rig" / "cam.%02d.exr"),
        "clean": str(root / "clean" / "cam.%02d.exr"),
        "sweep_before": str(root / "sweep" / "before.%04d.exr"),
        "sweep_after": str(root / "sweep" / "after.%04d.exr"),
        "sweep_truth": str(root / "truth" / "sweep.%04d.exr"),
        "rig_vectors": str(root / "vectors" / "rig.%02d.png"),
        "clean_vectors": str(root / "vectors" / "clean.%02d.png"),
        "rig_vectors_graph": str(root / "vectors-rig.json"),
    }


def output_frames() -> list[int]:
    return list(range(1, 1 + (CAMERAS - 1) * (BETWEEN + 1) + 1))


def output_view(k: int) -> float:
    """The camera (1..N, fractional between cameras) output frame k of viewmorph.json shows."""
    return 1 + (k - 1) / (BETWEEN + 1)


def sheet_frames() -> list[int]:
    """Two in-between views for the contact sheet: half-way between cameras 2 and 3 and 4 and 5."""
    return [1 + (BETWEEN + 1) + (BETWEEN + 1) // 2, 1 + 3 * (BETWEEN + 1) + (BETWEEN + 1) // 2]


def run(scene: Any, p: dict[str, str], repo_graphs: Path, jobs: int,
        cache: str | None = None) -> dict[str, Any]:
    """Write the rig and the truth, render both sweeps and the vector pictures, measure."""
    tag = {"midframe.demo": f"the paper fair at frame {MOMENT}, a rig of {CAMERAS} imperfect cameras"}
    say(f"demo: sweep: {CAMERAS} imperfect cameras at frame {MOMENT} to {Path(p['rig']).parent}")
    for j in range(1, CAMERAS + 1):
        write_exr_atomic(p["rig"] % j, scene.render(MOMENT, j - 1)["comp"], "half", tag)
    frames = output_frames()
    for k in frames:
        v = output_view(k) - 1  # the scene numbers cameras from 0
        write_exr_atomic(p["sweep_truth"] % k, scene.render(MOMENT, v, like=REFERENCE - 1)["comp"], "float",
                         {"midframe.demo": f"truth: a perfect rig at camera {v + 1:g}, seen as camera "
                                           f"{REFERENCE} sees"})
    graphs = str(repo_graphs / "viewmorph.json")
    say("demo: sweep before: graphs/viewmorph.json on the raw cameras")
    render_graph(graphs, {"src": p["rig"], "dst": p["sweep_before"], "between": str(BETWEEN)}, jobs, cache=cache)
    say("demo: sweep after: graphs/rig-clean.json, then graphs/viewmorph.json on the cleaned cameras")
    render_graph(str(repo_graphs / "rig-clean.json"), {"src": p["rig"], "dst": p["clean"]}, jobs)
    render_graph(graphs, {"src": p["clean"], "dst": p["sweep_after"], "between": str(BETWEEN)}, jobs, cache=cache)

    pairs = sorted({int(output_view(k)) for k in sheet_frames()})
    write_json_atomic(p["rig_vectors_graph"], vectors_graph("view", VECTOR_MAX))
    for j in pairs:
        for key, src in (("rig_vectors", p["rig"]), ("clean_vectors", p["clean"])):
            render_graph(p["rig_vectors_graph"], {"src": src, "dst": p[key]}, 1, (j, j), progress=False,
                         cache=cache)

    say("demo: sweep: measuring against the perfect rig")
    truth = {k: read_rgb(p["sweep_truth"] % k) for k in frames}
    before = {k: read_rgb(p["sweep_before"] % k) for k in frames}
    after = {k: read_rgb(p["sweep_after"] % k) for k in frames}
    region = central(truth[1].shape, REGION)
    rows = []
    for k in frames:
        view = output_view(k)
        rows.append({"frame": k, "view": view, "camera": float(view).is_integer(),
                     "before": errors(before[k], truth[k], region), "after": errors(after[k], truth[k], region)})
    ref_k = 1 + (REFERENCE - 1) * (BETWEEN + 1)
    inb = [r for r in rows if not r["camera"]]
    return {
        "graphs": {"before": ["graphs/viewmorph.json"], "after": ["graphs/rig-clean.json", "graphs/viewmorph.json"]},
        "cameras": CAMERAS, "reference": REFERENCE, "between": BETWEEN, "moment": MOMENT,
        "rig": {k: getattr(RIG, k) for k in ("exposure_stops", "white_balance_stops", "position_jitter",
                                             "aim_jitter", "roll_jitter_deg", "seed")},
        "region": REGION, "frames": frames, "sheet_frames": sheet_frames(), "vector_pairs": pairs,
        "vector_max_px": VECTOR_MAX, "per_frame": rows,
        "inbetweens": {name: pool_errors(r[name] for r in inb) for name in ("before", "after")},
        "cameras_err": {name: pool_errors(r[name] for r in rows if r["camera"]) for name in ("before", "after")},
        "flicker": {"before": flicker([before[k] for k in frames]), "after": flicker([after[k] for k in frames]),
                    "truth": flicker([truth[k] for k in frames])},
        "reference_frame": ref_k,
        "reference_max_abs": {"before": float(np.abs(before[ref_k] - truth[ref_k]).max()),
                              "after": float(np.abs(after[ref_k] - truth[ref_k]).max())},
    }
