"""``midframe demo OUTDIR``: build the demo scenario, render it through the engine, check it.

Three parts, each rendered by the engine from shipped templates (through
:func:`graphcore.execute.render.render`, as ``midframe run`` would) and measured against the exact
truth of the paper fair (:class:`graphcore.demo.scene.Scene`, our own procedural scene):

1. Claims ``OUTDIR``: creates it, or reuses it when an earlier demo made it (the marker file
   :data:`MARKER`); any other non-empty folder is refused (exit 2), so a user's files are never
   overwritten.
2. The composite. Renders the scene at one camera of the rig and writes the plates as OpenEXR:
   ``plates/fg.%04d.exr`` (premultiplied RGBA foreground, half), ``plates/matte.%04d.exr`` (the
   matte as ``A``, half), ``plates/bg.exr`` (the clean plate, one still, half; the scene's
   backdrop does not move) and the true composite ``truth/comp.%04d.exr`` (float, for comparison
   only: no graph reads it). Copies ``graphs/demo-comp.json`` into ``OUTDIR`` and renders that
   copy: the composite to ``comp/comp.%04d.exr`` (float) and half-size sRGB PNG proxies to
   ``proxy/comp.%04d.png``. Measures it against the truth: max abs error and PSNR on
   sRGB-encoded values (IEC 61966-2-1), the convention of the interpolation protocol of Baker et
   al. (IJCV 2011), against the error half-float plates allow, and against Porter-Duff over
   (Porter and Duff, SIGGRAPH 1984) evaluated here on the stored plates.
3. Slow motion (:mod:`graphcore.demo.slowmo`): a stretch of that composite, as the plate, slowed
   down twice: ``graphs/retime.json`` on the whole plate (before, ``retime/before.%04d.exr``) and
   ``graphs/fg-retime-over.json`` with the matte and clean plate (after,
   ``retime/after.%04d.exr``), against the scene's true in-betweens (``truth/retime.%04d.exr``)
   and a cross-dissolve baseline.
4. A sweep across a rig (:mod:`graphcore.demo.sweep`): five still cameras with exposure, white
   balance, position, aim and roll errors (``rig/cam.%02d.exr``); ``graphs/viewmorph.json`` on the
   raw cameras (before, ``sweep/before.%04d.exr``) and ``graphs/rig-clean.json`` then
   ``graphs/viewmorph.json`` (after, ``clean/cam.%02d.exr``, ``sweep/after.%04d.exr``), against a
   perfect rig seen as the reference camera sees (``truth/sweep.%04d.exr``), plus flicker.
5. Vector pictures (``vectors/*.png``: ``vector-color`` through a small graph written into
   ``OUTDIR``, reusing the retimes' and sweeps' vectors from a disk cache the demo removes at
   the end; true vectors from the scene in the same colour code), ``contact_sheet.png`` (before
   and after), ``index.html`` (static, no scripts, no external assets) and ``summary.json``, and
   prints where to look.

Progress goes to standard error as ``midframe: ...`` lines; the summary to standard output.
The scene has no flashing content.
"""

from __future__ import annotations

import json
import math
import os
import shlex
import shutil
import sys
import time
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np

from graphcore import __version__
from graphcore.errors import GraphErrors, InputError, MidframeError
from graphcore.demo.common import say as _say
from graphcore.demo.common import srgb as _srgb
from graphcore.demo.common import srgb_psnr
from graphcore.demo.common import write_exr_atomic as _write_exr_atomic
from graphcore.image import Image

__all__ = ["run_demo", "DemoSettings", "DEFAULT", "MARKER", "TEMPLATE", "measure", "srgb_psnr",
           "claim_folder", "HALF_UNIT_ROUNDOFF", "half_rounding_bound"]

#: Marker file a demo leaves in its folder; only a folder holding it (or an empty one) is reused.
MARKER = ".midframe-demo"
_MARKER_TEXT = "midframe demo"

#: The demo's own disk cache folder inside OUTDIR, removed when the demo ends.
CACHE = ".cache"

#: The template the demo renders (shipped beside the packages in a source checkout).
TEMPLATE = Path(__file__).resolve().parents[2] / "graphs" / "demo-comp.json"

#: Unit roundoff of OpenEXR's half type (IEEE 754 binary16, 11-bit significand): rounding to
#: nearest moves a normal value by at most this fraction of itself.
HALF_UNIT_ROUNDOFF = 2.0 ** -11


def half_rounding_bound(fg: np.ndarray, bg: np.ndarray) -> np.ndarray:
    """Per-pixel bound on ``|comp - truth|`` (linear) that half-float plates allow.

    The engine computes ``fg + (1 - m) bg`` from plates rounded to half; the truth is the same
    formula on the unrounded values. With unit roundoff ``u = 2**-11`` each plate value is within
    ``u`` of itself relatively, so the fg term moves by at most ``u fg``, the matte's rounding by
    at most ``u m bg`` and the background's by ``u (1 - m) bg``: in all ``u (fg + bg)``. Slack
    (ours): ``2**-20 (fg + bg)`` for rounding the bound on rounded values and for float32
    arithmetic, plus ``2**-22`` absolute for half's subnormals (spacing ``2**-24``).

    Parameters
    ----------
    fg, bg : ndarray, shape (H, W, 3)
        The stored (half) plates' premultiplied R, G, B, linear.

    Returns
    -------
    ndarray, shape (H, W, 3), float64
    """
    total = np.abs(fg.astype(np.float64)) + np.abs(bg.astype(np.float64))
    return (HALF_UNIT_ROUNDOFF + 2.0 ** -20) * total + 2.0 ** -22


@dataclass(frozen=True)
class DemoSettings:
    """The embedded default scenario.

    Attributes
    ----------
    width, height : int
        Plate size in pixels.
    first, count : int
        First frame number and number of frames (film/episodic shows number from 1001; common
        practice).
    seed : int
        Scene texture seed.
    view : int
        Which camera of the scene's rig the plates come from (4: the middle of nine).
    motion : float
        Speed of the scene's action; 2 fits its ~48 frames of action into 24.
    sheet_frames : int
        Rows of the contact sheet (frames spread evenly over the range).
    """

    width: int = 480
    height: int = 270
    first: int = 1001
    count: int = 24
    seed: int = 7
    view: int = 4
    motion: float = 2.0
    sheet_frames: int = 4

    @property
    def frames(self) -> list[int]:
        return list(range(self.first, self.first + self.count))

    @property
    def last(self) -> int:
        return self.first + self.count - 1


DEFAULT = DemoSettings()


# -- the output folder ------------------------------------------------------------------------
def claim_folder(outdir: str) -> Path:
    """Create ``outdir`` or accept it as an earlier demo's folder; refuse anything else.

    Returns the absolute folder, with the marker written (before anything else is, so an
    interrupted demo can be rerun into the same folder).

    Raises
    ------
    InputError
        ``outdir`` is a file, a non-empty folder without the demo's marker, or cannot be created.
    """
    path = Path(outdir).expanduser().absolute()
    fix_other = f"name a new or empty folder (e.g. {shlex.quote(str(path) + '-demo')})"
    if path.exists() and not path.is_dir():
        raise InputError("exists and is not a folder", file=str(path), field="OUTDIR",
                         fix="name a folder that does not exist yet (the demo creates it) or an empty one")
    if path.is_dir():
        try:
            entries = os.listdir(path)
        except OSError as exc:
            raise InputError(f"cannot list the folder: {exc.strerror}", file=str(path), field="OUTDIR",
                             fix="choose a folder you can read and write") from None
        if entries and not _is_demo_folder(path):
            raise InputError(f"the folder is not empty ({len(entries)} entr{'y' if len(entries) == 1 else 'ies'})"
                             " and was not made by `midframe demo`; the demo never writes among "
                             "other files", file=str(path), field="OUTDIR", fix=fix_other)
    try:
        path.mkdir(parents=True, exist_ok=True)
        marker = path / MARKER
        marker.write_text(json.dumps({"made_by": _MARKER_TEXT, "version": __version__}) + "\n")
    except OSError as exc:
        raise InputError(f"cannot create the demo folder: {exc.strerror or exc}", file=str(path),
                         field="OUTDIR", fix="choose a writable location") from None
    return path


def _is_demo_folder(path: Path) -> bool:
    marker = path / MARKER
    if not marker.is_file():
        return False
    try:
        return json.loads(marker.read_text()).get("made_by") == _MARKER_TEXT
    except (OSError, ValueError, AttributeError):
        return False


# -- plates -----------------------------------------------------------------------------------
def _paths(root: Path) -> dict[str, str]:
    """Every file pattern the demo reads or writes, absolute."""
    return {
        "fg": str(root / "plates" / "fg.%04d.exr"),
        "matte": str(root / "plates" / "matte.%04d.exr"),
        "bg": str(root / "plates" / "bg.exr"),
        "truth": str(root / "truth" / "comp.%04d.exr"),
        "dst": str(root / "comp" / "comp.%04d.exr"),
        "proxy": str(root / "proxy" / "comp.%04d.png"),
        "graph": str(root / "demo-comp.json"),
        "sheet": str(root / "contact_sheet.png"),
        "page": str(root / "index.html"),
        "summary": str(root / "summary.json"),
    }


def write_plates(paths: dict[str, str], settings: DemoSettings) -> None:
    """Render the scene at every frame and write fg, matte, bg (one still) and the true comp."""
    from graphcore.demo.scene import Scene

    scene = Scene(settings.width, settings.height, seed=settings.seed, start_frame=settings.first,
                  motion=settings.motion)
    for i, frame in enumerate(settings.frames):
        out = scene.render(frame, settings.view)
        tag = {"midframe.demo": json.dumps({"scene": "paper fair", "seed": settings.seed, "frame": frame,
                                            "view": settings.view, "motion": settings.motion})}
        _write_exr_atomic(Path(paths["fg"] % frame), out["fg"], "half", tag)
        _write_exr_atomic(Path(paths["matte"] % frame), out["matte"], "half", tag)
        _write_exr_atomic(Path(paths["truth"] % frame), out["comp"], "float", tag)
        if i == 0:  # the clean plate does not change with time (scene.py): one still serves all
            _write_exr_atomic(Path(paths["bg"]), out["bg"], "half", tag)


# -- measuring --------------------------------------------------------------------------------
def measure(comp: Image, truth: Image) -> dict[str, float]:
    """Errors of a rendered composite against the true one.

    Parameters
    ----------
    comp, truth : Image
        Linear premultiplied ``R G B A`` of the same size.

    Returns
    -------
    dict
        ``max_abs_srgb`` and ``psnr_srgb_db``: R, G, B encoded with the IEC 61966-2-1 sRGB
        transfer function, not clipped, PSNR with peak 1 (the interpolation protocol's
        convention, Baker et al. 2011); ``mse_srgb`` for pooling; ``max_abs_linear`` over R, G,
        B and A in linear light.
    """
    rgb = ("R", "G", "B")
    a = comp.select(rgb).pixels
    b = truth.select(rgb).pixels
    ea, eb = _srgb(a), _srgb(b)
    diff = np.abs(ea - eb)
    lin = np.abs(comp.select((*rgb, "A")).pixels.astype(np.float64)
                 - truth.select((*rgb, "A")).pixels.astype(np.float64))
    return {"max_abs_srgb": float(diff.max()), "mse_srgb": float(np.mean(diff ** 2)),
            "psnr_srgb_db": srgb_psnr(ea, eb), "max_abs_linear": float(lin.max())}


def _over_reference(fg: Image, matte: Image, bg: Image) -> np.ndarray:
    """Porter and Duff (SIGGRAPH 1984) over, premultiplied: ``fg + (1 - m) * bg``, matte as alpha."""
    m = matte.channel("A")[:, :, None] if "A" in matte.channels else matte.pixels[:, :, :1]
    m = np.clip(m, 0.0, 1.0)
    rgb = fg.select(("R", "G", "B")).pixels + (1.0 - m) * bg.select(("R", "G", "B")).pixels
    alpha = m + (1.0 - m) * bg.channel("A")[:, :, None]
    return np.concatenate([rgb, alpha], axis=2).astype(np.float32)


def measure_all(paths: dict[str, str], frames: Sequence[int]) -> list[dict[str, Any]]:
    """Per-frame errors, read back from the files on disk.

    Besides :func:`measure`'s numbers each row has ``bound_ratio``, the largest ratio of the
    linear R, G, B error to :func:`half_rounding_bound` (at most 1 when the engine is exact up to
    the plates' rounding), and ``max_abs_vs_formula``, the largest difference from Porter-Duff
    over evaluated here on the stored plates (0 when the engine's arithmetic is the formula's).
    """
    from operators.io.exr import read_exr

    rgb = ("R", "G", "B")
    bg = read_exr(paths["bg"])
    rows = []
    for frame in frames:
        comp = read_exr(paths["dst"] % frame)
        truth = read_exr(paths["truth"] % frame)
        fg = read_exr(paths["fg"] % frame)
        row: dict[str, Any] = {"frame": frame, **measure(comp, truth)}
        err = np.abs(comp.select(rgb).pixels.astype(np.float64) - truth.select(rgb).pixels)
        row["bound_ratio"] = float((err / half_rounding_bound(fg.select(rgb).pixels, bg.select(rgb).pixels)).max())
        ref = _over_reference(fg, read_exr(paths["matte"] % frame), bg)
        row["max_abs_vs_formula"] = float(np.abs(comp.select(("R", "G", "B", "A")).pixels - ref).max())
        rows.append(row)
    return rows


def _pool(rows: list[dict[str, Any]]) -> dict[str, Any]:
    mse = float(np.mean([r["mse_srgb"] for r in rows]))
    return {"max_abs_srgb": max(r["max_abs_srgb"] for r in rows),
            "min_psnr_srgb_db": min(r["psnr_srgb_db"] for r in rows),
            "pooled_psnr_srgb_db": math.inf if mse == 0 else 10.0 * math.log10(1.0 / mse),
            "max_abs_linear": max(r["max_abs_linear"] for r in rows),
            "max_abs_vs_formula": max(r["max_abs_vs_formula"] for r in rows),
            "bound_ratio": max(r["bound_ratio"] for r in rows)}


# -- the render -------------------------------------------------------------------------------
def _sets(paths: dict[str, str]) -> list[str]:
    return [f"{k}={paths[k]}" for k in ("fg", "matte", "bg", "dst", "proxy")]


def _command(paths: dict[str, str], jobs: int) -> str:
    words = ["midframe", "run", paths["graph"]]
    for s in _sets(paths):
        words += ["--set", s]
    if jobs > 1:
        words += ["--jobs", str(jobs)]
    return " ".join(shlex.quote(w) for w in words)


def _copy_template(paths: dict[str, str]) -> None:
    from operators.io.write import atomic_write

    if not TEMPLATE.is_file():
        raise MidframeError(f"the demo template {TEMPLATE} is missing from this installation; "
                            "install midframe from a source checkout (pip install -e .)")
    atomic_write(paths["graph"], lambda tmp: shutil.copyfile(TEMPLATE, tmp))


def _render(paths: dict[str, str], jobs: int) -> Any:
    from graphcore.cli.progress import Progress
    from graphcore.execute.render import render

    def loaded(warnings: list) -> None:
        for w in warnings:
            _say(f"warning: {w.describe()}")

    return render(paths["graph"], sets=_sets(paths), jobs=jobs, on_loaded=loaded,
                  on_start=lambda total: Progress(total))


def _fmt_psnr(db: float) -> str:
    return "inf (identical)" if math.isinf(db) else f"{db:.1f} dB"


def _json_safe(value: Any) -> Any:
    """inf -> None (JSON has no infinity); recurse into dicts and lists."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _json_safe(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_json_safe(v) for v in value]
    return value


# -- entry point ------------------------------------------------------------------------------
def run_demo(outdir: str, jobs: int = 1, *, settings: DemoSettings = DEFAULT) -> int:
    """Build the demo scenario in ``outdir``, render it, check it; return the exit status.

    Parameters
    ----------
    outdir : str
        Folder to create (or an earlier demo's folder to reuse).
    jobs : int
        Worker processes for the render (``midframe run --jobs``).
    settings : DemoSettings
        The scenario; the embedded :data:`DEFAULT` unless a caller asks for another.

    Returns
    -------
    int
        0 success; 2 invalid input (``outdir`` unusable, or a frame failed on its input);
        1 an internal failure of a frame.
    """
    try:
        return _run(outdir, jobs, settings)
    except GraphErrors as exc:
        print(exc.describe(), file=sys.stderr)
        return 2
    except InputError as exc:
        print(f"midframe: error: {exc.describe()}", file=sys.stderr)
        return 2


def _run(outdir: str, jobs: int, settings: DemoSettings) -> int:
    from graphcore.cli.describe import graph_dot
    from graphcore.demo.page import contact_sheet_frames, write_contact_sheet, write_page
    from graphcore.registry import default_registry
    from graphcore.schema.upgrade import upgrade
    from operators.io.write import atomic_write

    t_start = time.perf_counter()
    root = claim_folder(outdir)
    paths = _paths(root)
    timings: dict[str, float] = {}

    _say(f"demo: writing {settings.count} frames {settings.first}-{settings.last} of the paper fair "
         f"({settings.width}x{settings.height}, camera {settings.view}) to {root / 'plates'}")
    t = time.perf_counter()
    write_plates(paths, settings)
    timings["plates_s"] = time.perf_counter() - t

    _copy_template(paths)
    command = _command(paths, jobs)
    _say(f"demo: rendering {paths['graph']} with {jobs} job(s)")
    t = time.perf_counter()
    outcome = _render(paths, jobs)
    timings["render_s"] = time.perf_counter() - t
    for w in outcome.render_warnings:
        _say(f"warning: {w}")
    failed = outcome.report.failed
    if failed:
        for r in failed:
            print(f"midframe: error: frame {r.frame} node {r.node_id}: {r.message}", file=sys.stderr)
        _say(f"demo: {len(failed)} of {len(outcome.report.results)} frame(s) failed; nothing measured")
        return outcome.report.exit_code

    _say("demo: measuring the composite against the ground truth")
    t = time.perf_counter()
    rows = measure_all(paths, settings.frames)
    pooled = _pool(rows)
    timings["measure_s"] = time.perf_counter() - t

    from graphcore.demo import slowmo, sweep
    from graphcore.demo.common import FailedFrames
    from graphcore.demo.scene import Scene

    paths.update(slowmo.paths(root))
    paths.update(sweep.paths(root))
    # the vector pictures reuse the retimes' and sweeps' vectors from a disk cache of the demo's
    # own (removed at the end)
    cache = str(root / CACHE)
    t = time.perf_counter()
    try:
        scene = Scene(settings.width, settings.height, seed=settings.seed, start_frame=settings.first,
                      motion=settings.motion)
        retime = slowmo.run(scene, paths, settings.first, settings.view, TEMPLATE.parent, jobs, cache)
        timings["retime_s"] = time.perf_counter() - t
        t = time.perf_counter()
        rig_scene = sweep.make_scene(settings.width, settings.height, settings.seed, settings.first,
                                     settings.motion)
        rig = sweep.run(rig_scene, paths, TEMPLATE.parent, jobs, cache)
        timings["sweep_s"] = time.perf_counter() - t
    except FailedFrames as exc:
        _say(f"demo: frames of {exc.graph} failed; stopped")
        return exc.exit_code
    finally:
        shutil.rmtree(cache, ignore_errors=True)

    t = time.perf_counter()
    sheet_frames = contact_sheet_frames(settings.frames, settings.sheet_frames)
    sheet_size = write_contact_sheet(paths, sheet_frames, retime, rig)
    timings["sheet_s"] = time.perf_counter() - t
    timings["total_s"] = time.perf_counter() - t_start

    summary = {
        "made_by": _MARKER_TEXT, "version": __version__, "jobs": jobs,
        "scenario": {**asdict(settings), "last": settings.last, "scene": "paper fair",
                     "generator": "graphcore.demo.scene.Scene"},
        "frames": settings.frames,
        "files": dict(paths),
        "command": command,
        "errors": {"per_frame": [{k: v for k, v in r.items() if k != "mse_srgb"} for r in rows],
                   **pooled, "within_bound": pooled["bound_ratio"] <= 1.0},
        "retime": retime,
        "sweep": rig,
        "contact_sheet": {"path": paths["sheet"], "size": list(sheet_size), "frames": sheet_frames,
                          "retime_frames": retime["sheet_frames"], "sweep_frames": rig["sheet_frames"]},
        "timings": {k: round(v, 3) for k, v in timings.items()},
    }
    with open(paths["graph"], encoding="utf-8-sig") as fh:
        doc, _ = upgrade(json.load(fh))
    dot = graph_dot(doc, default_registry())
    write_page(paths["page"], summary, dot)
    atomic_write(paths["summary"], lambda tmp: Path(tmp).write_text(
        json.dumps(_json_safe(summary), indent=2) + "\n"))

    ok = summary["errors"]["within_bound"]
    print(f"midframe demo: the paper fair in {timings['total_s']:.1f} s with {jobs} job(s); composited "
          f"{settings.count} frames {settings.first}-{settings.last} ({settings.width}x{settings.height}) "
          f"through {paths['graph']} (render {timings['render_s']:.1f} s)")
    print(f"  composite against the ground truth, sRGB-encoded (IEC 61966-2-1): max abs "
          f"{pooled['max_abs_srgb']:.2e}, PSNR worst frame {_fmt_psnr(pooled['min_psnr_srgb_db'])}, "
          f"all frames {_fmt_psnr(pooled['pooled_psnr_srgb_db'])}; linear max abs "
          f"{pooled['max_abs_linear']:.2e}")
    print(f"  {'within' if ok else 'OUTSIDE'} the half-float rounding bound at every pixel (worst pixel "
          f"at {pooled['bound_ratio']:.3f} of it; the plates are half float, the truth float)")
    print(f"  against Porter-Duff over on the stored plates: max abs {pooled['max_abs_vs_formula']:.2e}"
          + (" (bit-exact)" if pooled["max_abs_vs_formula"] == 0 else ""))
    ri, si = retime["inbetweens"], rig["inbetweens"]
    print(f"  slow motion x{retime['slowdown']} (frames {retime['frames'][0]}-{retime['frames'][-1]}), in-betweens "
          f"against the truth: PSNR {_fmt_psnr(ri['before']['pooled_psnr_srgb_db'])} before (retime.json), "
          f"{_fmt_psnr(ri['after']['pooled_psnr_srgb_db'])} after (fg-retime-over.json), "
          f"{_fmt_psnr(ri['dissolve']['pooled_psnr_srgb_db'])} cross-dissolve")
    print(f"  sweep across {rig['cameras']} imperfect cameras, in-between views against the perfect rig: PSNR "
          f"{_fmt_psnr(si['before']['pooled_psnr_srgb_db'])} before (viewmorph.json), "
          f"{_fmt_psnr(si['after']['pooled_psnr_srgb_db'])} after (rig-clean.json first); flicker "
          f"{rig['flicker']['before']:.4f} before, {rig['flicker']['after']:.4f} after")
    print(f"  look at:    {paths['page']}")
    print(f"  EXR frames: {root / 'comp'} (composite), {root / 'retime'} and {root / 'sweep'} (before and "
          f"after), {root / 'plates'} and {root / 'rig'} (inputs), {root / 'truth'} (truth)")
    print(f"  vectors:    {root / 'vectors'} (pictures)")
    print(f"  proxies:    {root / 'proxy'}   contact sheet: {paths['sheet']}")
    print(f"  rerun:      {command}")
    if not ok:
        _say("demo: the composite is further from the ground truth than half-float rounding explains; "
             "this is a bug in midframe (please report it with summary.json)")
        return 1
    return 0

