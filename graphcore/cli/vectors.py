"""``midframe vectors FIRST SECOND --out OUT.exr``: motion vectors for one pair of images.

Reads both images (any format ``read`` takes), estimates vectors both ways with ``flow-estimate``'s
code, checks and cleans them with ``vector-smooth``'s code (forward-backward consistency, occluded
vectors, the losers of many-to-one conflicts of the mapping and the pixels beside motion edges
refilled, occluded ones from the background side, which side is told apart by the image's edges
(``fill_occluded``'s rule ``"auto"``), a 7 x 7 weighted median, edge-aware smoothing; ``--raw``
skips this), and writes one float EXR at the inputs' resolution with channels
``fwd.x fwd.y`` (at FIRST's pixels, toward SECOND), ``bwd.x bwd.y`` (at SECOND's pixels, toward
FIRST), ``conf`` (confidence of fwd, 0..1), ``bwd.conf``, ``fwd.occ``, ``bwd.occ``, in pixels,
x right, y down. The file is written atomically and carries a ``midframe.provenance`` record.
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import sys
import time
from concurrent.futures import ThreadPoolExecutor


from graphcore import __version__
from graphcore.errors import InputError, OpError
from graphcore.image import Image

__all__ = ["add_parser", "cmd_vectors", "pair_vectors"]

log = logging.getLogger("midframe")


def add_parser(sub) -> None:
    p = sub.add_parser("vectors", help="motion vectors for one pair of images, written as EXR")
    p.add_argument("first", help="the first image (vectors fwd start at its pixels)")
    p.add_argument("second", help="the second image")
    p.add_argument("--out", required=True, metavar="OUT.exr", help="EXR file to write")
    p.add_argument("--quality", choices=("draft", "standard", "high"), default="standard")
    p.add_argument("--engine", choices=("midframe", "dis"), default="midframe",
                   help="midframe (our estimator, default) or dis (OpenCV, fast preview / baseline)")
    p.add_argument("--search-range", type=float, default=None, metavar="PX",
                   help="largest displacement to search for, in pixels")
    p.add_argument("--prefilter", type=float, default=0.0, metavar="SIGMA",
                   help="Gaussian blur (pixels) against grain before matching")
    p.add_argument("--raw", action="store_true", help="skip the consistency check and cleanup")


def pair_vectors(first: Image, second: Image, *, quality: str = "standard", engine: str = "midframe",
                 search_range: float | None = None, prefilter: float = 0.0, raw: bool = False) -> Image:
    """Vectors both ways between two images, as one Image (channels as in the module docstring)."""
    from operators.vectors.consistency import fb_consistency
    from operators.vectors.flow import FlowParams, match_channels, estimate_pair, perceptual
    from operators.vectors.smooth import SUSPECT_JUMP, smooth_direction

    params = FlowParams(engine=engine, quality=quality, search_range=search_range, prefilter=prefilter)
    channels = match_channels(first, None)
    match_channels(second, channels)
    a, b = perceptual(first, channels), perceptual(second, channels)
    if engine == "midframe" and min(a.shape[:2]) >= 2:
        # both directions in one solve: shared pyramids and features
        from operators.vectors.estimate import estimate_flow_pair

        fwd, bwd = estimate_flow_pair(a, b, quality=quality, search_range=search_range, prefilter=prefilter,
                                      workers=2)
    else:
        fwd = estimate_pair(a, b, params)
        bwd = estimate_pair(b, a, params)
    if raw:
        conf_f, occ_f = fb_consistency(fwd, bwd)
        conf_b, occ_b = fb_consistency(bwd, fwd)
    else:
        # background side chosen per image from the image's edges; both sides of motion edges and
        # the losers of many-to-one conflicts refilled
        # a 7 x 7 weighted median (vector-smooth's default is 5 x 5): on Motorcycle 1.503 -> 1.488 px,
        # on the demo scene's visible pixels 0.149 -> 0.147 px
        options = dict(fill_rule="auto", suspect_jump=SUSPECT_JUMP, median_radius=3)
        with ThreadPoolExecutor(2) as pool:      # one pair: both directions side by side
            (fwd2, conf_f, occ_f), (bwd2, conf_b, occ_b) = pool.map(
                lambda job: smooth_direction(*job[:3], other=job[3], **options),
                [(fwd, bwd, a, b), (bwd, fwd, b, a)])
        fwd, bwd = fwd2, bwd2
    planes = {"fwd.x": fwd[..., 0], "fwd.y": fwd[..., 1], "bwd.x": bwd[..., 0], "bwd.y": bwd[..., 1],
              "conf": conf_f, "bwd.conf": conf_b, "fwd.occ": occ_f, "bwd.occ": occ_b}
    return Image.from_planes(planes)


def cmd_vectors(args: argparse.Namespace) -> int:
    from operators.io._common import write_failure_fix
    from operators.io.exr import PROVENANCE_ATTRIBUTE, write_exr
    from operators.io.read import read_finite
    from operators.io.write import atomic_write

    out = os.path.abspath(args.out)
    if not out.lower().endswith(".exr"):
        raise InputError("the output must be an EXR file", file=args.out, field="--out",
                         fix="name the output something.exr")
    for src in (args.first, args.second):
        if os.path.exists(src) and os.path.exists(out) and os.path.samefile(src, out):
            raise InputError("the output is one of the inputs", file=args.out, field="--out",
                             fix="write the vectors to a new file: midframe never replaces a source image")
    t0 = time.perf_counter()
    (first, warn_first), (second, warn_second) = read_finite(args.first), read_finite(args.second)
    for warning in (warn_first, warn_second):     # as the read operator does: 0 instead, and say so
        if warning:
            log.warning("%s", warning)
    if first.size != second.size:
        raise InputError(f"the images differ in size: {args.first} is {first.width}x{first.height}, "
                         f"{args.second} is {second.width}x{second.height}", file=args.second,
                         field="SECOND", fix="resize one to the other's size first (a `resize` node)")
    image = pair_vectors(first, second, quality=args.quality, engine=args.engine,
                         search_range=args.search_range, prefilter=args.prefilter, raw=args.raw)
    record = {"tool": "midframe", "tool_version": __version__, "command": "vectors",
              "sources": [os.path.realpath(args.first), os.path.realpath(args.second)],
              "params": {"quality": args.quality, "engine": args.engine, "search_range": args.search_range,
                         "prefilter": args.prefilter, "raw": args.raw}}
    try:
        os.makedirs(os.path.dirname(out) or ".", exist_ok=True)
        atomic_write(out, lambda tmp: write_exr(tmp, image, default_pixel_type="float", compression="zip",
                                                attributes={PROVENANCE_ATTRIBUTE: json.dumps(record, sort_keys=True)}))
    except OpError as e:
        e.file, e.field = args.out, "--out"      # name the output, not its temporary file
        raise
    except OSError as e:
        raise InputError(f"cannot write the file: {e.strerror or e}", file=args.out, field="--out",
                         fix=write_failure_fix(out, code=e.errno or 0)) from None
    seconds = time.perf_counter() - t0
    conf = image.channel("conf")
    print(f"midframe: vectors {first.width}x{first.height} written to {args.out} in {seconds:.2f} s; "
          f"confident (conf > 0.5): {100 * float((conf > 0.5).mean()):.1f} % of FIRST's pixels",
          file=sys.stderr)
    return 0
