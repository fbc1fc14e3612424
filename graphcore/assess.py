"""``midframe assess``: which in-betweens of a render are likely to break, told by the shot itself.

The graph's own in-between chain (everything that feeds its ``retime`` or ``view-path`` node) is run
a second time on the source with every other frame left out: each real source frame ``n`` is rebuilt from ``n - 1`` and
``n + 1`` (leave-one-out, the frame-interpolation protocol of Baker et al., IJCV 92(1), 2011) and
compared with the real one. The rebuild spans twice the motion of a real in-between, so its error
is a stress test of exactly the vectors, occlusions and detail the render meets between ``n - 1`` and
``n + 1``. For an in-between at source time ``n + t`` assess combines, on sRGB-encoded values (0..1):

- ``loo``: the RMS error of the rebuilds of ``n`` and ``n + 1``, whose spans hold it;
- ``disagree``: how much the two warped sides of the real in-between (the ``a`` and ``b`` inputs
  of the in-between ``blend``, built from ``n`` and from ``n + 1``) differ where both see the
  picture (RMS, weighted by both visibilities): where vectors or occlusions are wrong, the two
  sides tell different stories;
- ``unsure``: the share of pixels of the pair ``(n, n + 1)`` whose vectors have a confidence below
  one half from ``n`` forward or from ``n + 1`` back (occlusions, vectors that disagree both ways);

as ``risk = 100 * sqrt((loo^2 + disagree^2) / 2) * 2 min(t, 1 - t) * (1 + unsure)``: a prediction
in percent of full scale, higher is worse. ``2 min(t, 1 - t)`` says an in-between next to a real
frame moves less from it (the blend leans on the nearer side); the form is our own, chosen to rank
frames, not a published model nor a promise of the error.

How the rebuild is made: where the samples along the axis start (a ``read`` of a sequence or of a
rig, a ``rig`` of separate reads: a node with a range whose inputs have none) assess puts its own
``every-other`` node, which shows sample ``first + p + 2 (k - first)`` at ``k`` (``p`` = 0 or 1 picks
the samples kept), so every node of the chain (vectors, smoothing, warps, blend, mattes) runs
unchanged, with its own params, at the fractional sample halfway between two kept ones. Stills (one
file, no range) are left alone. Both graphs share one cache, so with ``--cache`` on the render's
folder the vectors of the real pairs computed here are not computed again by the render.

The same holds across the cameras of a rig: for a ``view-path`` (view morphs, stereo in-betweens) the
in-betweens run along the views, real cameras are rebuilt from the cameras either side, and a camera
stands for a frame throughout.
"""

from __future__ import annotations

import json
import logging
import math
import os
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any, Literal

import cv2
import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from graphcore.cache import Cache, DiskCache, MemoryCache
from graphcore.errors import InputError
from graphcore.evaluate import Evaluator
from graphcore.execute.plan import output_frames
from graphcore.image import Image
from graphcore.registry import FrameRange, Operator, Port, Registry, default_registry
from graphcore.sample import Sample
from graphcore.spec import Graph
from graphcore.validate import load_graph

__all__ = ["LEVELS", "SCHEMA", "Assessment", "assess", "encode_srgb", "risk_of"]

log = logging.getLogger("midframe.assess")

SCHEMA = "midframe.assess"
VERSION = 1
# Risk levels (percent of full scale): our own choice from the demo and carphone runs (the rebuilds
# span twice the motion of a real in-between, so risk runs above the error it predicts), not a
# published threshold.
LEVELS = {"watch": 3.0, "high": 6.0}
_PATH_OPS = ("retime", "view-path")
_VECTOR_CHANNELS = ("fwd.x", "fwd.y")


def encode_srgb(x: np.ndarray) -> np.ndarray:
    """IEC 61966-2-1 sRGB encoding of linear values, clipped to 0..1 first."""
    x = np.clip(np.asarray(x, np.float32), 0.0, 1.0)
    return np.where(x <= 0.0031308, 12.92 * x, 1.055 * np.power(x, 1 / 2.4, dtype=np.float32) - 0.055)


def risk_of(loo: float | None, disagree: float | None, t: float, unsure: float) -> float | None:
    """The risk of an in-between (see the module docstring); a missing ``loo`` or ``disagree``
    leaves the other alone; both missing gives None."""
    parts = [x for x in (loo, disagree) if x is not None]
    if not parts:
        return None
    rms = math.sqrt(sum(x * x for x in parts) / len(parts))
    return 100.0 * rms * 2.0 * min(t, 1.0 - t) * (1.0 + unsure)


@dataclass
class Assessment:
    """What ``assess`` found: ``doc`` is the JSON document (``--json``); ``pictures`` holds, for the
    worst frames, images for the report (frame -> name -> array)."""

    doc: dict[str, Any]
    pictures: dict[int, dict[str, np.ndarray]] = field(default_factory=dict)
    graph: Graph | None = None


# -- finding the parts of the graph ---------------------------------------------------------------
def _path_node(graph: Graph, node: str | None) -> str:
    """The retime or view-path node whose in-betweens are assessed."""
    if node is not None:
        if node not in graph.nodes:
            raise InputError(f"no node '{node}' in the graph", file=graph.file, field="--node",
                             fix=f"name one of: {', '.join(sorted(graph.nodes))}")
        if graph.nodes[node].op not in _PATH_OPS:
            raise InputError(f"node '{node}' is a '{graph.nodes[node].op}' node, not a retime or view-path",
                             file=graph.file, node_id=node, field="--node",
                             fix="name the retime or view-path node whose in-betweens should be assessed")
        return node
    found = sorted(nid for nid, n in graph.nodes.items() if n.op in _PATH_OPS)
    if not found:
        raise InputError("assess needs a graph with a retime or view-path node (the in-betweens are what it "
                         "assesses)", file=graph.file, field="nodes",
                         fix="assess a graph such as graphs/retime.json, graphs/fg-retime-over.json or "
                             "graphs/viewmorph.json")
    if len(found) > 1:
        raise InputError(f"the graph has {len(found)} retime or view-path nodes ({', '.join(found)})",
                         file=graph.file, field="--node", fix="name the one to assess with --node")
    return found[0]


class _StepParams(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    axis: Literal["frame", "view"] = Field(description="The axis every other sample of is kept.")
    first: int = Field(description="The first sample along the axis (kept when parity is 0).")
    last: int = Field(description="The last sample along the axis.")
    parity: int = Field(ge=0, le=1, description="0 keeps first, first + 2, ...; 1 keeps first + 1, first + 3, ...")


def _step_needs(params: _StepParams, sample: Sample) -> dict[str, Sample]:
    pos = sample.frame if params.axis == "frame" else sample.view
    src = params.first + params.parity + 2 * (pos - params.first)
    return {"image": sample.at_frame(src) if params.axis == "frame" else sample.at_view(src)}


def _step_range(axis: str):
    def hook(params: _StepParams, inputs: Mapping[str, FrameRange | None]) -> FrameRange | None:
        if params.axis != axis:
            return inputs.get("image")
        return FrameRange(params.first, params.first + (params.last - params.first - params.parity) // 2)
    return hook


#: assess's own operator (never in a graph file): sample k of its output is sample
#: first + parity + 2 (k - first) of its input along one axis, unchanged.
EVERY_OTHER = Operator(
    name="every-other", version=1, summary="every other sample along one axis (assess's leave-one-out)",
    params=_StepParams, compute=lambda params, inputs, ctx: inputs["image"],
    inputs=(Port("image", "the samples to thin out"),), needs=_step_needs,
    frames=_step_range("frame"), views=_step_range("view"),
    outputs="the input's channels, unchanged")


def _vectors_node(graph: Graph, ev: Evaluator, inbetween: str) -> str | None:
    """The vector node nearest the in-between: the last node upstream that makes fwd.x/fwd.y."""
    ups = graph.upstream(inbetween)       # depth-first from the in-between: nearer nodes first
    for nid in ups:
        outputs = ev.ops[nid].outputs or ""
        if all(c in outputs for c in _VECTOR_CHANNELS):
            return nid
    return None


def _decimated(graph: Graph, ev: Evaluator, inbetween: str, axis: str, span: FrameRange, parity: int,
               registry: Registry) -> Graph | None:
    """The in-between chain of ``graph`` on every other sample of ``span`` along ``axis`` (see
    the module docstring); None when fewer than two samples would be kept."""
    if span.first + (span.last - span.first - parity) // 2 <= span.first:
        return None
    keep = set(graph.upstream(inbetween))
    nodes = {nid: dict(spec) for nid, spec in graph.source["nodes"].items() if nid in keep}
    ranged = ev.frames if axis == "frame" else ev.views
    for nid in sorted(keep):
        # where the samples along the axis start: a node with a range whose inputs have none
        # (a read of a sequence or of a rig, a rig of separate reads); stills are left alone
        if ranged(nid) is None or any(ranged(src) is not None for src in graph.nodes[nid].inputs.values()):
            continue
        new_id = f"{nid}.assess-source"
        while new_id in nodes:
            new_id += "_"
        nodes[new_id] = nodes.pop(nid)
        nodes[nid] = {"op": EVERY_OTHER.name, "inputs": {"image": new_id},
                      "params": {"axis": axis, "first": span.first, "last": span.last, "parity": parity}}
    doc = {"schema": graph.source["schema"], "version": graph.source["version"], "nodes": nodes}
    return load_graph(doc, registry=registry, file=graph.file).graph


def _axis(graph: Graph, path: str, inbetween: str) -> str:
    """The axis the in-betweens run along: the in-between blend's, else time for a retime and
    the cameras for a view-path."""
    node = graph.nodes[inbetween]
    if node.op == "blend" and getattr(node.params, "mode", None) == "inbetween":
        return str(node.params.axis)
    return "frame" if graph.nodes[path].op == "retime" else "view"


def _sides(graph: Graph, inbetween: str) -> tuple[str, str] | None:
    """The two warped sides (ports a and b) of an in-between blend, if it is one."""
    node = graph.nodes[inbetween]
    if node.op != "blend" or getattr(node.params, "mode", None) != "inbetween":
        return None
    if "a" not in node.inputs or "b" not in node.inputs:
        return None
    return node.inputs["a"], node.inputs["b"]


def _rgb(img: Image) -> np.ndarray:
    names = [c for c in ("R", "G", "B") if c in img.channels]
    if not names:
        names = list(img.channels[:1])
    return img.select(tuple(names)).pixels


@dataclass
class _Pair:
    """What the vectors of a real pair (n, n + 1) say."""

    unsure: float = 0.0
    occluded: float = 0.0
    motion: float | None = None
    confidence: np.ndarray | None = None       # forward confidence at n
    vectors: np.ndarray | None = None          # colour-coded forward vectors at n


def _pair(first: Image, second: Image | None) -> _Pair:
    """``first``: the vector image at n (forward toward n + 1); ``second``: at n + 1 (backward
    toward n), if there is one."""
    from operators.vectors.color import flow_to_codes

    fx, fy = first.channel("fwd.x"), first.channel("fwd.y")
    length = np.hypot(fx, fy)
    out = _Pair(motion=float(np.percentile(length, 95)))
    scale = max(float(np.max(length)), 1e-6)                   # the longest vector saturates
    out.vectors = flow_to_codes(fx / scale, fy / scale)
    confs = [first.channel("fwd.conf")] if "fwd.conf" in first.channels else []
    occs = [first.channel("fwd.occ")] if "fwd.occ" in first.channels else []
    if second is not None and "bwd.conf" in second.channels:
        confs.append(second.channel("bwd.conf"))      # at n + 1's pixels: a pixel count all the same
    if second is not None and "bwd.occ" in second.channels:
        occs.append(second.channel("bwd.occ"))
    if confs:
        out.confidence = confs[0] if "fwd.conf" in first.channels else None
        out.unsure = float(np.mean([np.mean(c < 0.5) for c in confs]))
    if occs:
        out.occluded = float(np.mean([np.mean(o > 0.5) for o in occs]))
    return out


def _disagree(a: Image, b: Image) -> float:
    """RMS difference of the two warped sides (sRGB-encoded), weighted by both visibilities."""
    d = encode_srgb(_rgb(a)) - encode_srgb(_rgb(b))
    d2 = np.mean(d.astype(np.float64) ** 2, axis=2)
    if "inbetween.vis" in a.channels and "inbetween.vis" in b.channels:
        w = np.clip(a.channel("inbetween.vis"), 0, 1) * np.clip(b.channel("inbetween.vis"), 0, 1)
        total = float(np.sum(w))
        if total > 1e-6 * w.size:
            return math.sqrt(float(np.sum(w * d2)) / total)
    return math.sqrt(float(np.mean(d2)))


def _shrunk(a: np.ndarray, width: int = 960, keep_max: bool = False) -> np.ndarray:
    """At most ``width`` pixels wide (the report shows less): area average, or block maximum."""
    h, w = a.shape[:2]
    if w <= width:
        return a
    f = math.ceil(w / width)
    if keep_max:
        a = cv2.dilate(a, np.ones((f, f), np.uint8))
        return a[::f, ::f]
    return cv2.resize(a, (w // f, h // f), interpolation=cv2.INTER_AREA)




@dataclass
class _Rebuilt:
    mse: float
    error: np.ndarray          # per-pixel absolute error (sRGB-encoded, mean of channels), shrunk, float16
    rebuilt: np.ndarray        # the rebuild, sRGB-encoded, shrunk, 8-bit (kept for every frame: small)


def assess(source: str | os.PathLike[str] | Mapping[str, Any], *, sets: Iterable[str] = (),
           defaults: str | os.PathLike[str] | None = None, frames: FrameRange | None = None,
           node: str | None = None, cache_dir: str | os.PathLike[str] | None = None,
           memory_bytes: int = 2 << 30, registry: Registry | None = None, file: str | None = None,
           worst: int = 6, on_step: Callable[[str], None] | None = None, jobs: int = 1,
           plugins: Iterable[str] = ()) -> Assessment:
    """Assess every in-between output frame of a retime graph (see the module docstring).

    Parameters
    ----------
    source, sets, defaults, file, registry : as for ``graphcore.execute.render.render``
    frames : output frames to assess (default: every output frame of the render)
    node : the retime node (needed only when the graph has several)
    cache_dir : a disk cache folder (the render's own, to reuse the vectors computed here)
    worst : how many of the riskiest frames get pictures
    on_step : called with a short text before each step (progress; not from ``jobs`` workers)
    jobs : worker processes; each assesses a contiguous run of the in-betweens (the samples at
        the seams are rebuilt twice) and the results are joined (``plugins`` are loaded in each)

    Raises
    ------
    InputError
        A graph without (or with several, and no ``node``) retime nodes, a source of fewer than
        three frames (nothing can be left out), or any invalid graph input.
    """
    registry = registry or default_registry()
    loaded = load_graph(source, sets=sets, defaults=defaults, registry=registry, file=file)
    graph = loaded.graph
    disk = None
    if cache_dir is not None:
        try:
            disk = DiskCache(cache_dir)
        except OSError as exc:
            raise InputError(f"cannot use cache folder: {exc.strerror}", file=os.fspath(cache_dir),
                             field="--cache", fix="name a writable folder") from None
    cache = Cache(MemoryCache(memory_bytes), disk)
    ev = Evaluator(graph, registry, cache)
    timing = _path_node(graph, node)
    inbetween = graph.nodes[timing].inputs.get("image")
    if inbetween is None:
        raise InputError(f"the {graph.nodes[timing].op} node has no input", file=graph.file, node_id=timing,
                         field="inputs.image", fix="connect the in-between node to its 'image' input")
    axis = _axis(graph, timing, inbetween)
    word = "source frames" if axis == "frame" else "cameras"
    span = ev.frames(inbetween) if axis == "frame" else ev.views(inbetween)
    if span is None or span.last - span.first < 2:
        have = "none" if span is None else f"{span.last - span.first + 1} ({span})"
        raise InputError(f"assess needs at least three {word} to leave one out; there are {have}",
                         file=graph.file, node_id=inbetween, field="nodes",
                         fix=f"assess {'a sequence of three frames' if axis == 'frame' else 'a rig of three cameras'} "
                             "or more")
    views = ev.views(timing)
    view0 = Fraction(views.first if views is not None else 0)
    out_range = ev.frames(timing)
    if frames is not None:
        wanted = list(frames)
    elif ev.sinks():
        wanted = output_frames(ev, None)
    else:
        wanted = list(out_range) if out_range is not None else []
    if out_range is not None:
        wanted = [k for k in wanted if out_range.first <= k <= out_range.last]

    def step(text: str) -> None:
        log.debug(text)
        if on_step is not None:
            on_step(text)

    def along(sample: Sample) -> Fraction:
        return sample.frame if axis == "frame" else sample.view

    def at(n: Fraction | int, other: Fraction) -> Sample:
        return Sample(n, other) if axis == "frame" else Sample(other, n)

    # output frame -> the sample it shows; only in-betweens (fractional along the axis) are assessed
    entries: list[dict[str, Any]] = []
    where: dict[int, Sample] = {}
    for k in wanted:
        asked = [r for r in ev.requests(timing, Sample(k, view0)) if r[0] == "image"]
        samples = [s for s in asked[0][2] if s is not None] if asked else []
        if not samples:
            continue
        sample = samples[len(samples) // 2]              # the middle of a shutter: its centre time
        pos = along(sample)
        if pos.denominator == 1:
            continue                                     # a real frame or camera, passed through unchanged
        n = math.floor(pos)
        where[k] = sample
        entry: dict[str, Any] = {"frame": k, "source_time": str(sample.frame)}
        if axis == "view" or sample.view:
            entry["source_view"] = str(sample.view)
        entry.update({"axis": axis, "t": float(pos - n), "pair": [n, n + 1]})
        entries.append(entry)
    # the other coordinate of the real samples around each in-between (a sweep's time, rounded down)
    other = {e["frame"]: Fraction(math.floor(where[e["frame"]].view if axis == "frame" else where[e["frame"]].frame))
             for e in entries}
    if entries:
        log.info("assessing %d in-between(s) of node '%s' along %s: leave-one-out rebuilds of %s",
                 len(entries), timing, "time" if axis == "frame" else "the cameras", word)

    if jobs > 1 and len(entries) >= 2:
        return _in_workers(graph, [e["frame"] for e in entries], jobs=jobs, node=timing, cache_dir=cache_dir,
                           memory_bytes=memory_bytes, worst=worst, plugins=list(plugins))

    # 1. leave-one-out: every real sample that holds an in-between in its span, rebuilt
    decimated: dict[int, Evaluator | None] = {}
    with_step = registry.copy()
    with_step.add(EVERY_OTHER)
    rebuilt: dict[tuple[int, Fraction], _Rebuilt] = {}
    for n, o in sorted({(x, other[e["frame"]]) for e in entries for x in e["pair"] if span.first < x < span.last}):
        parity = (n - span.first - 1) % 2
        if parity not in decimated:
            g = _decimated(graph, ev, inbetween, axis, span, parity, with_step)
            decimated[parity] = None if g is None else Evaluator(g, with_step, cache)
        dev = decimated[parity]
        if dev is None:
            continue
        step(f"rebuilding {word[:-1]} {n} from {n - 1} and {n + 1}")
        got = encode_srgb(_rgb(dev.evaluate(inbetween, at(Fraction(span.first) + Fraction(n - span.first - parity, 2),
                                                           o))))
        real = encode_srgb(_rgb(ev.evaluate(inbetween, at(n, o))))
        diff = got - real
        rebuilt[(n, o)] = _Rebuilt(float(np.mean(diff.astype(np.float64) ** 2)),
                                   _shrunk(np.mean(np.abs(diff), axis=2), keep_max=True).astype(np.float16),
                                   _to8(_shrunk(got)))

    # 2. the vectors of every real pair an in-between is built from
    vec_node = _vectors_node(graph, ev, inbetween)
    pairs: dict[tuple[int, Fraction], _Pair] = {}
    if vec_node is not None:
        for n, o in sorted({(e["pair"][0], other[e["frame"]]) for e in entries}):
            step(f"vectors between {word} {n} and {n + 1}")
            second = ev.evaluate(vec_node, at(n + 1, o)) if n + 1 <= span.last else None
            pairs[(n, o)] = _pair(ev.evaluate(vec_node, at(n, o)), second)

    # 3. the two warped sides of each real in-between, and the risk
    sides = _sides(graph, inbetween)
    for e in entries:
        n, when, o = e["pair"][0], where[e["frame"]], other[e["frame"]]
        disagree = None
        if sides is not None:
            step(f"both sides of output frame {e['frame']}")
            disagree = _disagree(ev.evaluate(sides[0], when), ev.evaluate(sides[1], when))
        around = [rebuilt[(x, o)].mse for x in e["pair"] if (x, o) in rebuilt]
        loo = math.sqrt(sum(around) / len(around)) if around else None
        pair = pairs.get((n, o), _Pair())
        risk = risk_of(loo, disagree, e["t"], pair.unsure)
        e.update({"risk": risk,
                  "level": "unknown" if risk is None else
                  "high" if risk >= LEVELS["high"] else "watch" if risk >= LEVELS["watch"] else "ok",
                  "loo_psnr": None if loo is None else -10.0 * math.log10(max(loo * loo, 1e-12)),
                  "disagree": disagree, "unsure": pair.unsure, "occluded": pair.occluded,
                  "motion": pair.motion})
    ranked = sorted((e for e in entries if e["risk"] is not None), key=lambda e: -e["risk"])
    doc: dict[str, Any] = {
        "schema": SCHEMA, "version": VERSION,
        "graph": {"file": graph.file, "hash": f"sha256:{graph.hash}",
                  "vars": {k: str(v) for k, v in graph.variables.items()}},
        "time_node": timing, "inbetween_node": inbetween, "vectors_node": vec_node, "axis": axis,
        "source_frames" if axis == "frame" else "cameras": [span.first, span.last], "threshold": dict(LEVELS),
        "frames": entries,
        "sources": [{("frame" if axis == "frame" else "camera"): n,
                     **({"at_" + ("view" if axis == "frame" else "frame"): str(o)} if o else {}),
                     "psnr": -10.0 * math.log10(max(r.mse, 1e-12)), "rebuilt_from": [n - 1, n + 1]}
                    for (n, o), r in sorted(rebuilt.items())],
        "summary": {"in_betweens": len(entries),
                    "high": sum(e["level"] == "high" for e in entries),
                    "watch": sum(e["level"] == "watch" for e in entries),
                    "worst": [e["frame"] for e in ranked[:worst]]},
    }
    out = Assessment(doc, graph=graph)
    for e in ranked[:worst]:
        k, n, o = e["frame"], e["pair"][0], other[e["frame"]]
        step(f"pictures of output frame {k}")
        pics: dict[str, np.ndarray] = {"thumb": _to8(_shrunk(encode_srgb(_rgb(ev.evaluate(timing, Sample(k, view0))))))}
        pair = pairs.get((n, o))
        if pair is not None and pair.vectors is not None:
            pics["vectors"] = _shrunk(pair.vectors)
        if pair is not None and pair.confidence is not None:
            pics["confidence"] = _shrunk(np.clip(pair.confidence, 0, 1).astype(np.float32))
        worse = max((rebuilt[(x, o)] for x in e["pair"] if (x, o) in rebuilt), key=lambda r: r.mse, default=None)
        if worse is not None:
            pics["rebuilt"] = worse.rebuilt
            pics["error"] = worse.error.astype(np.float32)
        out.pictures[k] = pics
    return out


def _to8(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x)
    if x.ndim == 2:
        x = x[:, :, None]
    if x.shape[2] == 1:
        x = np.repeat(x, 3, axis=2)
    return np.clip(x[:, :, :3] * 255 + 0.5, 0, 255).astype(np.uint8)


def _chunk_worker(payload: dict[str, Any]) -> tuple[dict[str, Any], dict[int, dict[str, np.ndarray]]]:
    """One worker's share of ``assess(jobs=N)``: OpenCV pinned to its share of the cores."""
    threads = payload["threads"]
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[var] = str(threads)
    cv2.setNumThreads(threads)
    logging.getLogger("midframe.render").setLevel(logging.ERROR)
    registry = Registry.from_entry_points(payload["plugins"])
    found = assess(payload["source"], file=payload["file"], frames=FrameRange(*payload["frames"]),
                   node=payload["node"], cache_dir=payload["cache_dir"], memory_bytes=payload["memory_bytes"],
                   registry=registry, worst=payload["worst"])
    return found.doc, found.pictures


def _in_workers(graph: Graph, frames: list[int], *, jobs: int, node: str, cache_dir: Any, memory_bytes: int,
                worst: int, plugins: list[str]) -> Assessment:
    """``assess`` over contiguous runs of the in-between output ``frames`` in ``jobs`` processes,
    joined: the riskiest frames of the whole are among the riskiest of each run, pictures included."""
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    jobs = min(jobs, len(frames))
    size = -(-len(frames) // jobs)
    runs = [frames[i:i + size] for i in range(0, len(frames), size)]
    base = {"source": dict(graph.source), "file": graph.file, "node": node,
            "cache_dir": None if cache_dir is None else os.fspath(cache_dir),
            "memory_bytes": max(1 << 20, memory_bytes // jobs), "worst": worst, "plugins": plugins,
            "threads": max(1, (os.cpu_count() or 1) // jobs)}
    with ProcessPoolExecutor(max_workers=jobs, mp_context=mp.get_context("forkserver")) as pool:
        parts = list(pool.map(_chunk_worker, [{**base, "frames": (run[0], run[-1])} for run in runs]))
    doc = dict(parts[0][0])
    doc["graph"] = {"file": graph.file, "hash": f"sha256:{graph.hash}",
                    "vars": {k: str(v) for k, v in graph.variables.items()}}
    entries = sorted((e for part, _ in parts for e in part["frames"]), key=lambda e: e["frame"])
    sources: dict[str, dict[str, Any]] = {}
    for part, _ in parts:
        for row in part["sources"]:
            sources.setdefault(json.dumps({k: v for k, v in row.items() if k != "psnr"}, sort_keys=True), row)
    ranked = sorted((e for e in entries if e["risk"] is not None), key=lambda e: -e["risk"])
    doc["frames"] = entries
    doc["sources"] = sorted(sources.values(), key=lambda r: (r.get("frame", r.get("camera")), str(r)))
    doc["summary"] = {"in_betweens": len(entries),
                      "high": sum(e["level"] == "high" for e in entries),
                      "watch": sum(e["level"] == "watch" for e in entries),
                      "worst": [e["frame"] for e in ranked[:worst]]}
    pictures = {k: pics for _, part in parts for k, pics in part.items() if k in doc["summary"]["worst"]}
    return Assessment(doc, pictures, graph)
