"""midframe's own motion-vector estimator: a Bayesian MAP estimate solved coarse to fine.

The vector field ``f`` from ``first`` to ``second`` is the maximum a posteriori estimate under

    E(f) = sum_p D_p(f_p) + lambda * sum_{p~q} w_pq * rho(f_p - f_q)

(Konrad & Dubois 1992): ``D`` is a robust likelihood of how well ``second`` at ``p + f_p``
matches ``first`` at ``p`` in brightness, brightness gradient and a soft census signature
(``_likelihood``, features from ``_pyramid``; at the finest levels averaged over adaptive
support windows that follow the first image's edges, ``_support``), and the
second sum is a Markov random field prior (Geman & Geman 1984) with a Charbonnier penalty
``rho`` and edge-aware weights ``w_pq`` (``_prior``). The energy is lowered coarse to fine over
a Gaussian pyramid: an exhaustive search plus ICM over the whole label set at the coarsest level,
then at each finer level ICM over candidate vectors (Besag 1986; ``_icm``) followed by a
continuous, linearised IRLS refinement of the same energy (``_refine``).
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, replace

import cv2
import numpy as np

from . import _pyramid
from ._filters import robust_affine
from ._grid import chunks4, pixel_grid, resize_field, resize_flow
from ._icm import coarse_labels, icm
from ._likelihood import patch_cost
from ._refine import refine
from ._support import Support
from ._upsample import select_upsample
from .consistency import fb_consistency, target_outside

# Upper bound on the coarsest level's cost volume, in float32 entries (~200 MB).
_MAX_VOLUME = 50_000_000


@dataclass(frozen=True)
class Preset:
    """Solver settings of one quality preset (see ``PRESETS``).

    Attributes
    ----------
    work_pixels : int
        The finest level solved in full has at most this many pixels (0: the full size). Finer
        levels get only the ``final_*`` refinement at the full size, from bilinearly enlarged
        vectors, which is what makes ``draft`` fast on large plates.
    lam : float
        Prior weight lambda of the energy above (``prior_strength``).
    brightness : float
        Weight of brightness against its gradients in the matching features (gradient constancy
        tolerates the exposure differences between views, Brox et al. 2004).
    census, census_scale : float
        Weight and softness of the soft census features (``_pyramid.soft_census``, after Zabih
        & Woodfill 1994): the sign of the brightness difference to the pixels 2 px away, blind
        to exposure offsets and telling weak textures apart (0: off). On Motorcycle they took
        the standard preset from 2.10 px / 13.4 % bad-3 to 1.89 px / 10.9 %.
    tau, tau_out : float
        Likelihood truncation, and the likelihood cost of a vector leaving the image.
    patch : int
        Side of the square patch the ICM likelihood is averaged over.
    reach : int
        Brute-force search radius at the coarsest level, in that level's pixels; the pyramid is
        made deep enough that ``search_range`` shrinks to it.
    coarse_sweeps, icm_sweeps : int
        Checkerboard ICM sweeps at the coarsest level (full label set) and per finer level.
    jumps : tuple of int
        Distances, in pixels, of the neighbours whose vectors are proposed (propagation).
    radius : float
        Radius of the random local search, in pixels of the level.
    warps, iters : int
        Refinement warps per level and SOR sweeps per warp.
    final_warps, final_iters : int
        The same at the full size when ``work_pixels`` stops the full solve earlier.
    final_pixels : int
        That final refinement runs at the finest level with at most this many pixels (0: the
        full size); the vectors are then enlarged bilinearly.
    eps_d, eps_s : float
        Charbonnier constants of the data and prior penalties.
    edge_sigma, edge_floor : float
        Edge-aware prior weights ``max(exp(-|dI| / edge_sigma), edge_floor)``.
    median : int
        Median filter side applied after each refinement warp (0: none).
    upsample : {"bilinear", "final", "all"}
        How vectors are enlarged from one level to the next: bilinearly everywhere; by the
        likelihood (``_upsample.select_upsample``: each pixel takes the coarse vector around it
        its 3 x 3 likelihood prefers, so edges do not start blurred) only into the final,
        refinement-only level; or into every level. On Motorcycle (quarter size) 'all' instead of
        'final' took the standard preset from 1.856 px / 10.68 % bad-3 to 1.837 / 10.67 % (through
        ``midframe vectors`` 1.558 / 8.57 % -> 1.529 / 8.47 %), for about the same time (the
        cost is paid back by the four-channel warps, ``_grid.chunks4``); the synthetic known
        motions of ``bench/vectors.py`` kept their errors to the third decimal.
    occluded_weight, occluded_bias, occluded_levels : float, float, int
        The opt-in occlusion field of ``estimate_flow_pair`` (see there; off at weight 1).
    support : int
        Radius of the adaptive support window (``_support.Support``, after Yoon & Kweon
        2006) that replaces the ``patch`` box in the likelihood at the finest levels: window
        pixels count by their colour likeness to the centre in the first image, so a patch
        beside an object edge does not average in the other surface (0: box everywhere).
    support_color, support_space : float
        Colour scale (L1 over the perceptually encoded channels) and spatial scale (pixels) of
        those weights.
    support_levels : int
        How many of the finest levels of the schedule match with them (ICM, likelihood-chosen
        enlargement, and the coarsest search if it is among them).
    work_sweeps : int
        ICM sweeps at the finest fully solved level (``icm_sweeps`` at the coarser ones).
        On Motorcycle (quarter size) the support weights with 3 sweeps there took the standard
        preset from 1.887 px / 10.9 % bad-3 to 1.845 px / 10.7 % (through ``midframe vectors``
        1.759 / 10.4 % -> 1.724 / 10.1 %).
    """

    work_pixels: int
    lam: float
    brightness: float
    tau: float
    tau_out: float
    patch: int
    reach: int
    coarse_sweeps: int
    icm_sweeps: int
    jumps: tuple[int, ...]
    radius: float
    warps: int
    iters: int
    final_warps: int
    final_iters: int
    final_pixels: int
    eps_d: float
    eps_s: float
    edge_sigma: float
    edge_floor: float
    median: int
    upsample: str
    census: float
    census_scale: float
    occluded_weight: float
    occluded_bias: float
    occluded_levels: int
    support: int
    support_color: float
    support_space: float
    support_levels: int
    work_sweeps: int


_STANDARD = Preset(work_pixels=100_000, lam=0.005, brightness=0.5, tau=0.8, tau_out=0.1,
                   patch=5, reach=5, coarse_sweeps=2, icm_sweeps=2, jumps=(1, 3, 9, 27),
                   radius=1.0, warps=3, iters=20, final_warps=2, final_iters=5, final_pixels=400_000, eps_d=0.01,
                   eps_s=0.05, edge_sigma=0.05, edge_floor=0.05, median=5,
                   upsample="all", census=0.08, census_scale=0.03,
                   occluded_weight=1.0, occluded_bias=0.002, occluded_levels=1,
                   support=2, support_color=0.05, support_space=100.0, support_levels=2,
                   work_sweeps=3)

#: Quality presets: ``draft`` solves at most ~40 k pixels and refines once at full size,
#: ``standard`` solves at most ~100 k pixels, ``high`` solves every level in full.
PRESETS: dict[str, Preset] = {
    "draft": replace(_STANDARD, work_pixels=40_000, icm_sweeps=1, work_sweeps=1, support=0,
                     jumps=(1, 4, 16), warps=2, iters=15, final_warps=0, final_iters=0,
                     upsample="bilinear"),
    "standard": _STANDARD,
    "high": replace(_STANDARD, work_pixels=0, icm_sweeps=2, work_sweeps=3, warps=3, iters=25,
                    upsample="all"),
}


def _as_pair(first, second) -> tuple[np.ndarray, np.ndarray]:
    a = np.asarray(first)
    b = np.asarray(second)
    if a.shape != b.shape:
        raise ValueError(f"first and second must have the same shape; got first {a.shape} and "
                         f"second {b.shape}: resize one of them to match the other")
    if a.ndim not in (2, 3) or a.size == 0:
        raise ValueError(f"images must be non-empty (H, W) or (H, W, C) arrays; got shape {a.shape}")
    return _pyramid.sanitize(a), _pyramid.sanitize(b)


def _resolve(quality: str, prior_strength: float | None, overrides: dict) -> Preset:
    if quality not in PRESETS:
        raise ValueError(f"quality must be one of {', '.join(PRESETS)}; got {quality!r}")
    p = PRESETS[quality]
    if prior_strength is not None:
        if not prior_strength >= 0:
            raise ValueError(f"prior_strength must be >= 0; got {prior_strength!r}")
        overrides = dict(overrides, lam=float(prior_strength))
    p = replace(p, **overrides) if overrides else p
    if p.upsample not in ("bilinear", "final", "all"):
        raise ValueError(f"upsample must be 'bilinear', 'final' or 'all'; got {p.upsample!r}")
    return p


def estimate_flow(first: np.ndarray, second: np.ndarray, *, quality: str = "standard",
                  search_range: float | None = None, prior_strength: float | None = None,
                  levels: int | None = None, prefilter: float = 0.0, seed: int = 0,
                  _trace=None, **overrides) -> np.ndarray:
    """Motion vectors from ``first`` to ``second``: a Bayesian MAP estimate, coarse to fine.

    Parameters
    ----------
    first, second : ndarray, shape (H, W, C) or (H, W), float32
        The two images, perceptually encoded (e.g. linear light through the sRGB curve), roughly
        0..1, same shape. C = 3 is read as RGB (matched on Rec.709 luma and its gradients, with
        colour steering the edge-aware prior); any other C is averaged. NaN and infinities are
        read as 0.
    quality : {"draft", "standard", "high"}
        Preset of solver effort (``PRESETS``).
    search_range : float, optional
        Largest vector length to look for, in pixels (default ``max(8, 0.1 * max(H, W))``). Sets
        the pyramid depth unless ``levels`` is given.
    prior_strength : float, optional
        The prior weight lambda of Konrad & Dubois's posterior energy (preset value 0.005 when
        omitted): larger gives smoother vectors, smaller follows the images more closely.
    levels : int, optional
        Pyramid levels (1 = full size only). Fewer are used when the image is too small: every
        level keeps at least 12 pixels on its shorter side. Too few levels for
        ``search_range`` cap the coarsest exhaustive search, so long vectors may be missed.
    prefilter : float
        Gaussian sigma, in pixels, applied to both images first (against grain and noise).
    seed : int
        Seed of the random local search; equal inputs and seed give equal vectors.
    **overrides
        Individual ``Preset`` fields, for experiments.

    Returns
    -------
    ndarray, shape (H, W, 2), float32
        Vector ``(x, y)`` at each pixel of ``first`` to where its content is in ``second``, in
        pixels, x right, y down. Always finite; identical or featureless images give zeros.

    Raises
    ------
    ValueError
        Different shapes (naming both), an empty or non-image array, an unknown ``quality``.

    Notes
    -----
    The posterior energy is ``sum_p D_p(f_p) + lambda * sum_{p~q} w_pq rho(f_p - f_q)``: a
    truncated, patch-averaged likelihood on brightness, its gradients and a soft census
    signature, a Charbonnier MRF prior with
    edge-aware weights. The coarsest level is labelled exhaustively within ``search_range`` and
    cleaned by ICM over the whole label set; each finer level starts from the enlarged coarser
    vectors (enlarged by the likelihood's choice among the coarse vectors around each pixel
    where the preset says so, bilinearly otherwise), runs checkerboard ICM over candidate
    vectors (the neighbours' at several distances, random local offsets) and then refines the
    same energy continuously: warping, linearisation, iteratively reweighted least squares swept
    by red-black SOR, and a 5 x 5 median after each warp. Occluded pixels have no true match;
    the prior fills them from the neighbours they are not separated from by an image edge, which
    is not always the background.

    References
    ----------
    .. [1] J. Konrad and E. Dubois, "Bayesian estimation of motion vector fields", IEEE PAMI
       14(9), 1992. doi:10.1109/34.161348
    .. [2] S. Geman and D. Geman, "Stochastic relaxation, Gibbs distributions, and the Bayesian
       restoration of images", IEEE PAMI 6(6), 1984. doi:10.1109/TPAMI.1984.4767596
    .. [3] J. Besag, "On the statistical analysis of dirty pictures", JRSS B 48(3), 1986.
    .. [4] T. Brox, A. Bruhn, N. Papenberg, J. Weickert, "High accuracy optical flow estimation
       based on a theory for warping", ECCV 2004.
    .. [5] D. Sun, S. Roth, M. J. Black, "Secrets of optical flow estimation and their
       principles", CVPR 2010.
    .. [6] R. Zabih and J. Woodfill, "Non-parametric local transforms for computing visual
       correspondence", ECCV 1994.
    .. [7] K.-J. Yoon and I. S. Kweon, "Adaptive support-weight approach for correspondence
       search", IEEE PAMI 28(4), 2006. doi:10.1109/TPAMI.2006.70

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> a = cv2.GaussianBlur(rng.random((64, 80)).astype(np.float32), (0, 0), 1.5)
    >>> b = np.roll(a, 3, axis=1)          # content moves 3 px right
    >>> f = estimate_flow(a, b)
    >>> bool(abs(np.median(f[..., 0]) - 3) < 0.1)
    True
    """
    p = _resolve(quality, prior_strength, overrides)
    a, b = _prepare(first, second, prefilter)
    plan = _Plan.make(p, a.shape[0], a.shape[1], search_range, levels)
    rng = np.random.default_rng(seed)
    pyr1, pyr2 = _pyramid.images(a, plan.n), _pyramid.images(b, plan.n)
    u = v = None
    for k, warps, iters in plan.schedule:
        f1, f2 = _features(pyr1[k], p, plan.supported(k, p)), _features(pyr2[k], p)
        u, v = _solve_level(p, plan, k, warps, iters, f1, f2, u, v, rng, _trace=_trace)
    return _finish(u, v, plan)


def estimate_flow_pair(first: np.ndarray, second: np.ndarray, *, quality: str = "standard",
                       search_range: float | None = None, prior_strength: float | None = None,
                       levels: int | None = None, prefilter: float = 0.0, seed: int = 0,
                       joint: bool = True, workers: int = 1, _trace=None,
                       **overrides) -> tuple[np.ndarray, np.ndarray]:
    """Forward and backward vectors of a pair, estimated together level by level.

    Parameters
    ----------
    first, second : ndarray, shape (H, W, C) or (H, W), float32
        As for ``estimate_flow``.
    quality, search_range, prior_strength, levels, prefilter, seed, **overrides
        As for ``estimate_flow`` (the same for both directions).
    joint : bool
        Let the two fields check each other between levels (see Notes). It acts only when the
        preset's ``occluded_weight`` is below 1, which no preset sets today (off: measured no
        gain, see Notes); pass ``occluded_weight=0`` to try it.
    workers : int
        1: the two directions are solved one after the other; 2 (or more): side by side in two
        threads, with the same result (numpy and OpenCV release the interpreter lock in their
        array work, so a 2-core machine does about 1.5 times the work per second). Leave it at
        1 where several worker processes already share the cores.

    Returns
    -------
    fwd : ndarray, shape (H, W, 2), float32
        At ``first``'s pixels, pointing to where the content is in ``second``.
    bwd : ndarray, shape (H, W, 2), float32
        At ``second``'s pixels, pointing to where the content is in ``first``.

    Notes
    -----
    Both directions share one pyramid and one set of matching features (and their
    derivatives) per image and level; each direction is then solved as in ``estimate_flow``,
    with the same result as two ``estimate_flow`` calls, in less time.

    With ``joint`` and ``occluded_weight`` < 1, each direction's posterior gets an occlusion
    field, in the spirit of Konrad & Dubois's (1992) MAP estimate with occlusions: after each
    level at most ``occluded_levels`` levels above the full size, a pixel is judged occluded
    where the forward-backward round trip fails (Sundaram et al. 2010's criterion on that
    level's vectors) and its vector stays in the other image. At the next level its likelihood
    weighs ``occluded_weight`` in the ICM, the likelihood-chosen enlargement and the
    refinement, so the edge-aware prior fills it, and every candidate vector pays
    ``occluded_bias`` per pixel of distance to the background motion (the frame's dominant
    motion, a robust affine fit to the consistent vectors: the rule ``vector-smooth``'s fill
    uses, since two-frame vectors alone cannot tell which side of an occlusion is in front).
    On Middlebury 2014 Motorcycle (quarter size, standard) this made the vectors worse, not
    better (bad-3 10.9 % -> 11.2-11.7 % raw, 10.4 % -> 10.5-10.8 % after ``vector-smooth``):
    only ~35 % of the truly occluded pixels fail the round trip (both directions carry the
    foreground vector into the background beside an occluding edge, so the wrong pairs agree),
    and two thirds of the pixels that fail it are visible ones whose partner is wrong.

    References
    ----------
    .. [1] J. Konrad and E. Dubois, "Bayesian estimation of motion vector fields", IEEE PAMI
       14(9), 1992. doi:10.1109/34.161348
    .. [2] N. Sundaram, T. Brox and K. Keutzer, "Dense point trajectories by GPU-accelerated
       large displacement optical flow", ECCV 2010.
    """
    p = _resolve(quality, prior_strength, overrides)
    a, b = _prepare(first, second, prefilter)
    plan = _Plan.make(p, a.shape[0], a.shape[1], search_range, levels)
    if workers < 1:
        raise ValueError(f"workers must be >= 1; got {workers}")
    rng_f, rng_b = np.random.default_rng(seed), np.random.default_rng(seed)
    pyr1, pyr2 = _pyramid.images(a, plan.n), _pyramid.images(b, plan.n)
    uf = vf = ub = vb = None
    occ_f = occ_b = None
    pool = ThreadPoolExecutor(2) if workers > 1 else None

    def both(fn, *args):
        """``fn`` on the two directions' argument tuples, side by side with ``workers``."""
        if pool is None:
            return [fn(*x) for x in args]
        return list(pool.map(lambda x: fn(*x), args))

    try:
        for k, warps, iters in plan.schedule:
            sup = plan.supported(k, p)
            f1, f2 = both(_features, (pyr1[k], p, sup), (pyr2[k], p, sup))
            (uf, vf), (ub, vb) = both(
                lambda ff, fs, u, v, rng, occ, tag: _solve_level(
                    p, plan, k, warps, iters, ff, fs, u, v, rng, occ=occ,
                    _trace=_trace and (lambda *x: _trace(tag, *x))),
                (f1, f2, uf, vf, rng_f, occ_f, "fwd"), (f2, f1, ub, vb, rng_b, occ_b, "bwd"))
            if joint and p.occluded_weight < 1 and k <= p.occluded_levels:
                occ_f = _occlusion(uf, vf, ub, vb)
                occ_b = _occlusion(ub, vb, uf, vf)
    finally:
        if pool is not None:
            pool.shutdown()
    return _finish(uf, vf, plan), _finish(ub, vb, plan)


@dataclass(frozen=True)
class _Plan:
    """Which pyramid levels are solved, and how (from a preset and the image size)."""

    n: int                                  # pyramid levels
    work: int                               # finest level solved in full (ICM + refinement)
    final: int                              # finest level refined at all
    h: int
    w: int
    search_range: float
    schedule: tuple[tuple[int, int, int], ...]   # (level, warps, iters), coarsest first

    @classmethod
    def make(cls, p: Preset, h: int, w: int, search_range: float | None, levels: int | None) -> "_Plan":
        if search_range is None:
            search_range = max(8.0, 0.1 * max(h, w))
        if levels is not None and levels < 1:
            raise ValueError(f"levels must be >= 1; got {levels}")
        n = _pyramid.level_count(h, w, levels, float(search_range), p.reach)
        work = 0
        if p.work_pixels:
            while h * w / 4 ** work > p.work_pixels:
                work += 1
        work = min(work, n - 1)
        final = 0
        if p.final_pixels:
            while h * w / 4 ** final > p.final_pixels:
                final += 1
        final = min(final, work)
        sched = [(k, p.warps, p.iters) for k in range(n - 1, work - 1, -1)]
        if final < work and p.final_warps and p.final_iters:
            sched.append((final, p.final_warps, p.final_iters))
        return cls(n, work, final, h, w, float(search_range), tuple(sched))

    def supported(self, k: int, p: Preset) -> bool:
        """Whether level ``k`` matches with adaptive support weights (the preset's
        ``support_levels`` finest levels of the schedule)."""
        return p.support > 0 and k < self.schedule[-1][0] + p.support_levels


@dataclass(frozen=True)
class _Features:
    """One image's matching features at one level, with their derivatives, each in pieces of
    four channels (``_grid.chunks4``, which OpenCV warps fastest and exactly)."""

    level: _pyramid.Level
    feat: tuple[np.ndarray, ...]
    dx: tuple[np.ndarray, ...]
    dy: tuple[np.ndarray, ...]
    support: Support | None = None

    @property
    def channels(self) -> int:
        return self.level.feat.shape[2]


def _prepare(first, second, prefilter: float) -> tuple[np.ndarray, np.ndarray]:
    a, b = _as_pair(first, second)
    if prefilter > 0:
        a = cv2.GaussianBlur(a, (0, 0), prefilter).reshape(a.shape)
        b = cv2.GaussianBlur(b, (0, 0), prefilter).reshape(b.shape)
    return a, b


def _features(img: np.ndarray, p: Preset, support: bool = False) -> _Features:
    lev = _pyramid.level(img, p.brightness, p.edge_sigma, p.edge_floor, p.census, p.census_scale)
    sup = Support(img, p.support, p.support_color, p.support_space) if support else None
    feat = chunks4(lev.feat)
    grads = [_derivatives(c) for c in feat]
    return _Features(lev, feat, tuple(g[0] for g in grads), tuple(g[1] for g in grads), sup)


def _finish(u: np.ndarray, v: np.ndarray, plan: _Plan) -> np.ndarray:
    # enlarge what a coarser level solved
    out = resize_field(cv2.merge([np.asarray(u, np.float32), np.asarray(v, np.float32)]), plan.h, plan.w)
    with np.errstate(invalid="ignore", over="ignore"):
        if np.isfinite(np.sum(out, dtype=np.float64)):
            return out
    return np.nan_to_num(out, nan=0.0, posinf=0.0, neginf=0.0)


def _occlusion(u, v, ub, vb) -> np.ndarray:
    """Occlusion field (H, W) float32 of ``(u, v)`` against the reverse field ``(ub, vb)`` at one
    level: 1 where Sundaram et al.'s forward-backward criterion fails and the vector stays inside
    the other image (vectors leaving it already get the fixed likelihood ``tau_out``)."""
    fwd = np.dstack([u, v])
    _, occ = fb_consistency(fwd, np.dstack([ub, vb]))
    return occ * (~target_outside(fwd)).astype(np.float32)


def _background(u, v, occ) -> tuple[np.ndarray, np.ndarray]:
    """The dominant motion (robust affine fit to the consistent vectors) at every pixel."""
    h, w = u.shape
    step = max(1, int(math.ceil(math.sqrt(h * w / 20000))))
    ok = occ[::step, ::step] < 0.5
    ys, xs = np.nonzero(ok)
    ys, xs = ys * step, xs * step
    model = robust_affine(xs.astype(np.float64), ys.astype(np.float64),
                          np.stack([u[ys, xs], v[ys, xs]], axis=1).astype(np.float64))
    gx, gy = pixel_grid(h, w)
    ru = (model[0, 0] * gx + model[0, 1] * gy + model[0, 2]).astype(np.float32)
    rv = (model[1, 0] * gx + model[1, 1] * gy + model[1, 2]).astype(np.float32)
    return ru, rv


def _solve_level(p: Preset, plan: _Plan, k: int, warps: int, iters: int, f1: _Features,
                 f2: _Features, u, v, rng, occ=None, _trace=None):
    """One level of the coarse-to-fine MAP solve of the field from ``f1``'s image to ``f2``'s.

    ``occ`` (previous level's occlusion field, or None) lowers the likelihood weight of the
    pixels judged occluded and biases them toward the background motion.
    """
    l1 = f1.level
    lh, lw = l1.shape
    xs, ys = pixel_grid(lh, lw)
    if u is None:
        # Coarsest level: exhaustive search within the (scaled) search range.
        reach = max(1, math.ceil(plan.search_range / 2 ** k))
        while reach > 1 and (2 * reach + 1) ** 2 * lh * lw > _MAX_VOLUME:
            reach -= 1
        u, v = coarse_labels(f1.feat, f2.feat, xs, ys, l1.wx, l1.wy, reach=reach,
                             tau=p.tau, tau_out=p.tau_out, patch=p.patch, lam=p.lam,
                             eps=p.eps_s, sweeps=p.coarse_sweeps, support=f1.support)
        if _trace:
            _trace("coarse", k, u, v)
    else:
        wd = bias = None
        if occ is not None and occ.any():
            ref = _background(u, v, occ)
            occ = cv2.resize(occ, (lw, lh), interpolation=cv2.INTER_NEAREST)
            ref = resize_flow(*ref, lh, lw)
            wd = (1.0 - (1.0 - np.float32(p.occluded_weight)) * occ).astype(np.float32)
            bias = (ref[0], ref[1], (np.float32(p.occluded_bias) * occ).astype(np.float32))

        def cost(cu, cv_, patch):
            c = patch_cost(f1.feat, f2.feat, xs, ys, cu, cv_, p.tau, p.tau_out, patch, f1.support)
            if wd is not None:
                c = c * wd + bias[2] * (np.abs(cu - bias[0]) + np.abs(cv_ - bias[1]))
            return c

        if p.upsample == "all" or (p.upsample == "final" and k < plan.work):
            u, v = select_upsample(u, v, lh, lw, lambda cu, cv_: cost(cu, cv_, 3))
        else:
            u, v = resize_flow(u, v, lh, lw)
        if k >= plan.work and p.icm_sweeps:
            u, v = icm(f1.feat, f2.feat, xs, ys, l1.wx, l1.wy, u, v, rng=rng,
                       sweeps=p.work_sweeps if k == plan.work else p.icm_sweeps, tau=p.tau,
                       tau_out=p.tau_out, patch=p.patch,
                       lam=p.lam, eps=p.eps_s, jumps=p.jumps, radius=p.radius, block=8,
                       data_weight=wd, bias=bias, support=f1.support)
            if _trace:
                _trace("icm", k, u, v)
        if warps and iters:
            u, v = refine(f1.feat, f1.dx, f1.dy, f2.feat, f2.dx, f2.dy, xs, ys, l1.wx, l1.wy,
                          u, v, lam=p.lam, eps_d=p.eps_d, eps_s=p.eps_s, warps=warps,
                          iters=iters, reweight=5, omega=1.8, median=p.median, data_weight=wd,
                          channels=f1.channels)
            if _trace:
                _trace("refine", k, u, v)
        return u, v
    if warps and iters:
        u, v = refine(f1.feat, f1.dx, f1.dy, f2.feat, f2.dx, f2.dy, xs, ys, l1.wx, l1.wy, u, v,
                      lam=p.lam, eps_d=p.eps_d, eps_s=p.eps_s, warps=warps, iters=iters,
                      reweight=5, omega=1.8, median=p.median, channels=f1.channels)
        if _trace:
            _trace("refine", k, u, v)
    return u, v


def _derivatives(f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Central-difference x and y derivatives of every channel of an (H, W, C) array."""
    gx = cv2.Sobel(f, cv2.CV_32F, 1, 0, ksize=1, scale=0.5, borderType=cv2.BORDER_REPLICATE)
    gy = cv2.Sobel(f, cv2.CV_32F, 0, 1, ksize=1, scale=0.5, borderType=cv2.BORDER_REPLICATE)
    return gx.reshape(f.shape), gy.reshape(f.shape)
