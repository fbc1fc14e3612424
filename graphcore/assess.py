"""``midframe assess``: which in-betweens of a render are likely to break, told by the shot itself.

The graph's own in-between chain (everything that feeds its ``retime`` node) is run a second time on
the source with every other frame left out: each real source frame ``n`` is rebuilt from ``n - 1`` and
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

How the rebuild is made: each ``read`` node with a frame range under the in-between gets a
``retime`` in ``curve`` mode in front of it that shows source frame ``first + p + 2 (k - first)`` at
frame ``k`` (``p`` = 0 or 1 picks the frames kept), so every node of the chain (vectors, smoothing,
warps, blend, mattes) runs unchanged, with its own params, at the fractional sample halfway between
two kept frames. Stills (one file, no frame range) are left alone. Both graphs share one cache, so
with ``--cache`` on the render's folder the vectors of the real pairs computed here are not computed
again by the render.
"""

from __future__ import annotations

import logging
import math
import os
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

import cv2
import numpy as np

from graphcore.cache import Cache, DiskCache, MemoryCache
from graphcore.errors import InputError
from graphcore.evaluate import Evaluator
from graphcore.execute.plan import output_frames
from graphcore.image import Image
from graphcore.registry import FrameRange, Registry, default_registry
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
_TIME_OPS = ("retime",)
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
def _time_node(graph: Graph, node: str | None) -> str:
    if node is not None:
        if node not in graph.nodes:
            raise InputError(f"no node '{node}' in the graph", file=graph.file, field="--node",
                             fix=f"name one of: {', '.join(sorted(graph.nodes))}")
        if graph.nodes[node].op not in _TIME_OPS:
            raise InputError(f"node '{node}' is a '{graph.nodes[node].op}' node, not a retime",
                             file=graph.file, node_id=node, field="--node",
                             fix="name the retime node whose in-betweens should be assessed")
        return node
    found = sorted(nid for nid, n in graph.nodes.items() if n.op in _TIME_OPS)
    if not found:
        raise InputError("assess needs a graph with a retime node (the in-betweens are what it assesses)",
                         file=graph.file, field="nodes",
                         fix="assess a retime graph such as graphs/retime.json or graphs/fg-retime-over.json")
    if len(found) > 1:
        raise InputError(f"the graph has {len(found)} retime nodes ({', '.join(found)})", file=graph.file,
                         field="--node", fix="name the one to assess with --node")
    return found[0]


def _vectors_node(graph: Graph, ev: Evaluator, inbetween: str) -> str | None:
    """The vector node nearest the in-between: the last node upstream that makes fwd.x/fwd.y."""
    ups = graph.upstream(inbetween)       # depth-first from the in-between: nearer nodes first
    for nid in ups:
        outputs = ev.ops[nid].outputs or ""
        if all(c in outputs for c in _VECTOR_CHANNELS):
            return nid
    return None


def _decimated(graph: Graph, ev: Evaluator, inbetween: str, parity: int, registry: Registry) -> Graph | None:
    """The in-between chain of ``graph`` on every other source frame (see the module docstring);
    None when some plate is too short to keep two frames."""
    keep = set(graph.upstream(inbetween))
    nodes = {nid: dict(spec) for nid, spec in graph.source["nodes"].items() if nid in keep}
    for nid in sorted(keep):
        if graph.nodes[nid].op != "read":
            continue
        rng = ev.frames(nid)
        if rng is None:
            continue                                     # a still: the same at every frame
        last_out = rng.first + (rng.last - rng.first - parity) // 2
        if last_out <= rng.first:
            return None
        new_id = f"{nid}.assess-source"
        while new_id in nodes:
            new_id += "_"
        nodes[new_id] = nodes.pop(nid)
        nodes[nid] = {"op": "retime", "inputs": {"image": new_id},
                      "params": {"mode": "curve", "first": rng.first, "last": rng.last,
                                 "keys": [[rng.first, rng.first + parity],
                                          [last_out, rng.first + parity + 2 * (last_out - rng.first)]]}}
    doc = {"schema": graph.source["schema"], "version": graph.source["version"], "nodes": nodes}
    return load_graph(doc, registry=registry, file=graph.file).graph


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
    error: np.ndarray          # per-pixel absolute error (sRGB-encoded, mean of channels), shrunk
    rebuilt: np.ndarray        # the rebuild, sRGB-encoded, shrunk


def assess(source: str | os.PathLike[str] | Mapping[str, Any], *, sets: Iterable[str] = (),
           defaults: str | os.PathLike[str] | None = None, frames: FrameRange | None = None,
           node: str | None = None, cache_dir: str | os.PathLike[str] | None = None,
           memory_bytes: int = 2 << 30, registry: Registry | None = None, file: str | None = None,
           worst: int = 6, on_step: Callable[[str], None] | None = None) -> Assessment:
    """Assess every in-between output frame of a retime graph (see the module docstring).

    Parameters
    ----------
    source, sets, defaults, file, registry : as for ``graphcore.execute.render.render``
    frames : output frames to assess (default: every output frame of the render)
    node : the retime node (needed only when the graph has several)
    cache_dir : a disk cache folder (the render's own, to reuse the vectors computed here)
    worst : how many of the riskiest frames get pictures
    on_step : called with a short text before each step (progress)

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
    timing = _time_node(graph, node)
    inbetween = graph.nodes[timing].inputs.get("image")
    if inbetween is None:
        raise InputError("the retime node has no input", file=graph.file, node_id=timing,
                         field="inputs.image", fix="connect the in-between node to its 'image' input")
    src = ev.frames(inbetween)
    if src is None or src.last - src.first < 2:
        have = "no frame range" if src is None else f"frames {src}"
        raise InputError(f"assess needs at least three source frames to leave one out; the source has {have}",
                         file=graph.file, node_id=inbetween, field="nodes",
                         fix="assess a sequence of three frames or more")
    views = ev.views(timing)
    view = Fraction(views.first if views is not None else 0)
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

    # output frame -> the source time it shows; only in-betweens are assessed
    entries: list[dict[str, Any]] = []
    for k in wanted:
        asked = [r for r in ev.requests(timing, Sample(k, view)) if r[0] == "image"]
        samples = [s for s in asked[0][2] if s is not None] if asked else []
        if not samples:
            continue
        when = samples[len(samples) // 2].frame          # the middle of a shutter: its centre time
        if when.denominator == 1:
            continue                                     # a real frame, passed through unchanged
        n = math.floor(when)
        entries.append({"frame": k, "source_time": str(when), "t": float(when - n), "pair": [n, n + 1]})

    # 1. leave-one-out: every source frame that holds an in-between in its span, rebuilt
    decimated: dict[int, Evaluator | None] = {}
    rebuilt: dict[int, _Rebuilt] = {}
    for n in sorted({x for e in entries for x in e["pair"] if src.first < x < src.last}):
        parity = (n - src.first - 1) % 2
        if parity not in decimated:
            g = _decimated(graph, ev, inbetween, parity, registry)
            decimated[parity] = None if g is None else Evaluator(g, registry, cache)
        dev = decimated[parity]
        if dev is None:
            continue
        step(f"rebuilding source frame {n} from {n - 1} and {n + 1}")
        got = encode_srgb(_rgb(dev.evaluate(inbetween, Sample(Fraction(src.first) + Fraction(n - src.first - parity, 2),
                                                                 view))))
        real = encode_srgb(_rgb(ev.evaluate(inbetween, Sample(n, view))))
        diff = got - real
        rebuilt[n] = _Rebuilt(float(np.mean(diff.astype(np.float64) ** 2)),
                              _shrunk(np.mean(np.abs(diff), axis=2), keep_max=True), _shrunk(got))

    # 2. the vectors of every real pair an in-between is built from
    vec_node = _vectors_node(graph, ev, inbetween)
    pairs: dict[int, _Pair] = {}
    if vec_node is not None:
        for n in sorted({e["pair"][0] for e in entries}):
            step(f"vectors between source frames {n} and {n + 1}")
            second = ev.evaluate(vec_node, Sample(n + 1, view)) if n + 1 <= src.last else None
            pairs[n] = _pair(ev.evaluate(vec_node, Sample(n, view)), second)

    # 3. the two warped sides of each real in-between, and the risk
    sides = _sides(graph, inbetween)
    for e in entries:
        n, when = e["pair"][0], Sample(Fraction(e["source_time"]), view)
        disagree = None
        if sides is not None:
            step(f"both sides of output frame {e['frame']}")
            disagree = _disagree(ev.evaluate(sides[0], when), ev.evaluate(sides[1], when))
        around = [rebuilt[x].mse for x in e["pair"] if x in rebuilt]
        loo = math.sqrt(sum(around) / len(around)) if around else None
        pair = pairs.get(n, _Pair())
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
        "time_node": timing, "inbetween_node": inbetween, "vectors_node": vec_node,
        "source_frames": [src.first, src.last], "threshold": dict(LEVELS),
        "frames": entries,
        "sources": [{"frame": n, "psnr": -10.0 * math.log10(max(r.mse, 1e-12)), "rebuilt_from": [n - 1, n + 1]}
                    for n, r in sorted(rebuilt.items())],
        "summary": {"in_betweens": len(entries),
                    "high": sum(e["level"] == "high" for e in entries),
                    "watch": sum(e["level"] == "watch" for e in entries),
                    "worst": [e["frame"] for e in ranked[:worst]]},
    }
    out = Assessment(doc, graph=graph)
    for e in ranked[:worst]:
        k, n = e["frame"], e["pair"][0]
        step(f"pictures of output frame {k}")
        pics: dict[str, np.ndarray] = {"thumb": _to8(_shrunk(encode_srgb(_rgb(ev.evaluate(timing, Sample(k, view))))))}
        pair = pairs.get(n)
        if pair is not None and pair.vectors is not None:
            pics["vectors"] = _shrunk(pair.vectors)
        if pair is not None and pair.confidence is not None:
            pics["confidence"] = _shrunk(np.clip(pair.confidence, 0, 1).astype(np.float32))
        worse = max((rebuilt[x] for x in e["pair"] if x in rebuilt), key=lambda r: r.mse, default=None)
        if worse is not None:
            pics["rebuilt"] = _to8(worse.rebuilt)
            pics["error"] = worse.error
        out.pictures[k] = pics
    return out


def _to8(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x)
    if x.ndim == 2:
        x = x[:, :, None]
    if x.shape[2] == 1:
        x = np.repeat(x, 3, axis=2)
    return np.clip(x[:, :, :3] * 255 + 0.5, 0, 255).astype(np.uint8)
