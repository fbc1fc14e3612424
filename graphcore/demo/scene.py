"""The paper fair: a procedural 2.5D scene with exact ground truth at any frame and view.

The scene is a stack of flat, fronto-parallel layers (the 2.5D layer model), far to near:

=============  ======  ==========================================================
layer          depth   what moves
=============  ======  ==========================================================
``backdrop``   10.0    nothing (a painted landscape flat: sky, hills, ground)
``ball``        5.5    rolls left to right along the painted ground
``stick``       3.6    nothing (the pinwheel's wooden stick)
``pinwheel``    3.6    four paper blades spinning about the hub
``streamer``    2.4    a wavy paper streamer falling, swaying and tilting
=============  ======  ==========================================================

Every layer is a procedurally textured plane (value noise, stripes, painted strokes; seeded
numpy) placed by a rigid motion that is an analytic function of time. A row of ``cameras``
virtual cameras looks at it; camera ``view`` sits at ``x = baseline * (view - (cameras - 1) / 2)``
scene units, so a layer at depth ``Z`` moves by ``-focal * baseline / Z`` image heights per view
(parallax: nearer layers move more, and the picture moves left as the camera moves right).

Conventions
-----------
- Image coordinates: pixel ``(row i, column j)`` has its centre at ``x = j + 0.5``,
  ``y = i + 0.5`` pixels, x right and y down. Internally positions are in image heights (H
  units) about the image centre, so the scene looks the same at every resolution.
- Angles are radians, positive clockwise on screen (y points down).
- Colour is linear light (palette values are given sRGB-encoded and decoded with the
  IEC 61966-2-1 transfer function), float32, premultiplied by alpha.
- Edges are anti-aliased with analytic coverage: ``clip(0.5 - d / pixel, 0, 1)`` for a signed
  distance ``d`` to the shape's edge (a one-pixel linear ramp), so mattes have soft edges.
- Shutter: instantaneous (no motion blur). Time is in frames; ``motion`` scales every speed.

Viewing caution: with the default rig, neighbouring cameras differ by up to 4.2 % of the image
height (about 2.3 % of a 16:9 frame's width) of parallax on the nearest layer. Shown as a stereo
pair, views more than one camera apart exceed the screen-parallax limits productions commonly
use for comfortable viewing (common practice, no single source); the scene has no flashing.

Ground truth
------------
``Scene.render`` at any ``frame`` and ``view`` (int, float or ``Fraction``) is the true image
there, so it is the reference for in-between frames and views. ``Scene.vectors`` gives the true
vectors of the composite (or the foreground alone) between two samples, from the layers'
analytic motion, with an occlusion mask. Camera-rig imperfections (exposure, white balance,
position jitter, aim, roll) are off by default; they are drawn per camera from a seed and
interpolated linearly between neighbouring cameras for fractional views; ``ideal=True`` renders
the perfect rig.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from fractions import Fraction
from typing import Any, Union

import numpy as np

from graphcore.image import Image
from graphcore.sample import Sample

__all__ = ["Scene", "RigImperfections", "Camera", "Pose", "srgb_to_linear"]

Number = Union[int, float, Fraction]


# -- colour ---------------------------------------------------------------------------------
def srgb_to_linear(value: np.ndarray | float) -> np.ndarray:
    """Decode sRGB-encoded values (0..1) to linear light.

    IEC 61966-2-1: ``v / 12.92`` below 0.04045, else ``((v + 0.055) / 1.055) ** 2.4``.
    """
    v = np.asarray(value, dtype=np.float64)
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4).astype(np.float32)


def _lin(r: float, g: float, b: float) -> np.ndarray:
    """A palette colour given sRGB-encoded, returned linear, shape (3,), float32."""
    return srgb_to_linear(np.array([r, g, b]))


# -- small shape and texture helpers --------------------------------------------------------
def _coverage(sdf: np.ndarray, pix: float) -> np.ndarray:
    """Analytic anti-aliased coverage of the region ``sdf < 0`` (sdf and pix in H units)."""
    return np.clip(0.5 - sdf * (1.0 / pix), 0.0, 1.0)


def _smoothstep(e0: float, e1: float, x: np.ndarray) -> np.ndarray:
    t = np.clip((x - e0) * (1.0 / (e1 - e0)), 0.0, 1.0)
    return t * t * (3.0 - 2.0 * t)


def _mix(a: np.ndarray, b: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``a + (b - a) * w`` with colours (..., 3) and a weight (...)."""
    return a + (b - a) * w[..., None]


def _rot(angle: float) -> np.ndarray:
    c, s = math.cos(angle), math.sin(angle)
    return np.array([[c, -s], [s, c]])


class _ValueNoise:
    """Seeded 2D value noise on a periodic 256 x 256 lattice, smoothstep-interpolated.

    Values lie in 0..1. Evaluated at arbitrary real coordinates, so a texture is defined at any
    sub-pixel position (no baked image, no resampling blur).
    """

    def __init__(self, rng: np.random.Generator, size: int = 256) -> None:
        if size & (size - 1):
            raise ValueError("noise lattice size must be a power of two")
        self.size, self.mask = size, size - 1
        self.flat = rng.random(size * size, dtype=np.float32)

    def __call__(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        x, y = np.broadcast_arrays(np.asarray(x, np.float32), np.asarray(y, np.float32))
        xf, yf = np.floor(x), np.floor(y)
        fx, fy = x - xf, y - yf
        fx *= fx * (3.0 - 2.0 * fx)
        fy *= fy * (3.0 - 2.0 * fy)
        xi = xf.astype(np.intp)
        yi = yf.astype(np.intp)
        xi &= self.mask
        yi &= self.mask
        yi *= self.size  # flat index of the row
        xj = (xi + 1) & self.mask
        yj = (yi + self.size) & (self.size * self.size - 1)
        flat = self.flat
        a, b, c, d = flat.take(yi | xi), flat.take(yi | xj), flat.take(yj | xi), flat.take(yj | xj)
        b -= a
        c -= a
        d -= a
        d -= b
        d -= c  # now a - b - c + d of the four corners
        return a + b * fx + c * fy + d * (fx * fy)

    def fbm(self, x: np.ndarray, y: np.ndarray, octaves: int, salt: float = 0.0) -> np.ndarray:
        """Fractal sum of ``octaves`` octaves (frequency x2, amplitude x0.5), rescaled to 0..1."""
        total = np.zeros(np.shape(x), dtype=np.float32)
        amp, norm, freq = 1.0, 0.0, 1.0
        for o in range(octaves):
            off = 37.17 * (o + 1) + salt
            total += amp * self(x * freq + off, y * freq - off)
            norm += amp
            amp *= 0.5
            freq *= 2.0
        return total * (1.0 / norm)


def _capsule_sdf(x: np.ndarray, y: np.ndarray, cx: float, cy: float, ux: float, uy: float,
                 half_len: float, half_wid: float) -> np.ndarray:
    """Signed distance to a capsule (segment of half-length ``half_len`` along (ux, uy))."""
    dx, dy = x - cx, y - cy
    t = np.clip(dx * ux + dy * uy, -half_len, half_len)
    return np.hypot(dx - t * ux, dy - t * uy) - half_wid


def _convex_sdf(x: np.ndarray, y: np.ndarray, verts: np.ndarray) -> np.ndarray:
    """Signed distance (exact inside and along edges) to a convex polygon, vertices (K, 2)."""
    k = len(verts)
    area2 = sum(verts[i, 0] * verts[(i + 1) % k, 1] - verts[(i + 1) % k, 0] * verts[i, 1]
                for i in range(k))
    orient = 1.0 if area2 > 0 else -1.0
    sdf = None
    for i in range(k):
        (x0, y0), (x1, y1) = verts[i], verts[(i + 1) % k]
        ex, ey = x1 - x0, y1 - y0
        n = math.hypot(ex, ey)
        # outward normal for a polygon whose signed area has sign `orient`
        nx, ny = orient * ey / n, -orient * ex / n
        d = (x - x0) * nx + (y - y0) * ny
        sdf = d if sdf is None else np.maximum(sdf, d)
    return sdf


# -- public records -------------------------------------------------------------------------
@dataclass(frozen=True)
class Pose:
    """A layer's rigid placement at view 0 of the ideal rig: centre (H units) and angle (rad)."""

    x: float
    y: float
    angle: float


@dataclass(frozen=True)
class RigImperfections:
    """How far the virtual cameras stray from an ideal rig (all zero: a perfect rig).

    Each camera (integer view) draws its own values uniformly in ``[-knob, +knob]`` from
    ``seed`` (``None``: derived from the scene seed); fractional views interpolate linearly
    between their two neighbouring cameras (exposure and white balance in stops).

    Parameters
    ----------
    exposure_stops : float
        Exposure offset per camera, in stops (gain ``2 ** stops`` on R, G and B).
    white_balance_stops : float
        Red and blue gain relative to green per camera, in stops.
    position_jitter : float
        Camera position offset in x and y, as a fraction of the camera spacing (``baseline``).
        Moves near layers more than far ones (true parallax, not a 2D shift).
    aim_jitter : float
        Image-plane offset in x and y (camera pan/tilt), as a fraction of the image height.
    roll_jitter_deg : float
        Camera roll about the image centre, degrees.
    seed : int or None
        Seed of the per-camera draws.
    """

    exposure_stops: float = 0.0
    white_balance_stops: float = 0.0
    position_jitter: float = 0.0
    aim_jitter: float = 0.0
    roll_jitter_deg: float = 0.0
    seed: int | None = None


@dataclass(frozen=True)
class Camera:
    """One camera of the rig at a (possibly fractional) view: the truth about it.

    Attributes
    ----------
    view : float
    x, y : float
        Camera position in scene units (x along the rig, y vertical jitter).
    gain : tuple of 3 float
        Linear gain on R, G, B (exposure times white balance).
    shift : tuple of 2 float
        Image-plane aim offset in pixels (x right, y down), applied after roll.
    roll : float
        Roll about the image centre, radians, positive clockwise on screen.
    """

    view: float
    x: float
    y: float
    gain: tuple[float, float, float]
    shift: tuple[float, float]
    roll: float


@dataclass(frozen=True)
class _Layer:
    name: str
    depth: float
    extent: tuple[float, float, float, float] | None  # local (xmin, xmax, ymin, ymax); None: infinite
    pose: Callable[[float], Pose]            # tau (scaled frames since start) -> Pose
    rate: Callable[[float], tuple[float, float, float]]  # d(x, y, angle)/d tau
    shade: Callable[[np.ndarray, np.ndarray, "_ShadeCtx"], tuple[np.ndarray, np.ndarray]]


@dataclass(frozen=True)
class _ShadeCtx:
    """What a shader may know: pixel size and where a local circle lands in its crop."""

    pix: float                                   # one pixel, in H units
    region: Callable[[float, float, float], tuple[slice, slice] | None]
    upright: bool = False                        # local x is constant down each column


# -- the scene ------------------------------------------------------------------------------
class Scene:
    """The paper fair, rendered at any frame and view with exact ground truth.

    Parameters
    ----------
    width, height : int
        Output size in pixels. Content is laid out in image heights, so every size shows the
        same scene (wider frames show more of the backdrop).
    seed : int
        Seeds every texture, the backdrop's brush strokes and the paper colours. The motion does
        not depend on it.
    start_frame : int
        The frame at which the motion starts (``tau = 0``); the ball enters from the left, the
        streamer from the top. About 48 frames of action follow.
    cameras : int
        Cameras in the rig, at views ``0 .. cameras - 1``; the middle one faces the scene centre.
    baseline : float
        Camera spacing, scene units. Parallax of a layer at depth Z is
        ``focal * baseline / Z * height`` pixels per view.
    focal : float
        Focal length in image heights.
    motion : float
        Multiplies every speed (1: ball about 0.021 H per frame, pinwheel 0.11 rad per frame).
    rig : RigImperfections
        Camera-rig imperfections; default none.

    Examples
    --------
    >>> scene = Scene(320, 180, seed=7)
    >>> out = scene.render(Fraction(25, 2), view=Fraction(3, 2))
    >>> out["comp"].channels, out["matte"].channels
    (('R', 'G', 'B', 'A'), ('A',))
    """

    BACKDROP = "backdrop"

    def __init__(self, width: int = 320, height: int = 180, seed: int = 7, *, start_frame: int = 1,
                 cameras: int = 9, baseline: float = 0.1, focal: float = 1.0, motion: float = 1.0,
                 rig: RigImperfections | None = None) -> None:
        for name, val, low in (("width", width, 8), ("height", height, 8), ("cameras", cameras, 1)):
            if not isinstance(val, (int, np.integer)) or isinstance(val, bool) or val < low:
                raise ValueError(f"Scene {name}={val!r}: give an int >= {low}")
        if not (baseline >= 0 and focal > 0 and math.isfinite(baseline) and math.isfinite(focal)):
            raise ValueError(f"Scene baseline={baseline!r}, focal={focal!r}: give baseline >= 0 "
                             "and focal > 0")
        if not math.isfinite(motion):
            raise ValueError(f"Scene motion={motion!r}: give a finite number")
        self.width, self.height, self.seed = int(width), int(height), int(seed)
        self.start_frame = int(start_frame)
        self.cameras, self.baseline, self.focal, self.motion = int(cameras), float(baseline), \
            float(focal), float(motion)
        self.rig = rig or RigImperfections()
        self._pix = 1.0 / self.height

        rng = np.random.default_rng(self.seed)
        self._noise = _ValueNoise(rng)
        self._build_palette(rng)
        self._build_strokes(rng)
        self._build_rig()
        self._layers = self._build_layers()
        self._by_name = {layer.name: layer for layer in self._layers}

    # -- public description ---------------------------------------------------------------
    @property
    def layer_names(self) -> tuple[str, ...]:
        """Layer names, far to near; the first is the backdrop (the clean plate)."""
        return tuple(layer.name for layer in self._layers)

    def depth(self, layer: str) -> float:
        """Depth of ``layer`` in scene units."""
        return self._layer(layer).depth

    def disparity(self, layer: str) -> float:
        """Horizontal image motion of ``layer`` per view of the ideal rig, in pixels (negative:
        the picture moves left as the camera moves right)."""
        return -self.focal * self.baseline / self._layer(layer).depth * self.height

    def pose(self, layer: str, frame: Number) -> Pose:
        """The layer's pose at ``frame``: where an ideal camera at the middle of the rig sees its
        centre (H units about the image centre) and its angle (radians, clockwise)."""
        return self._layer(layer).pose(self._tau(frame))

    def velocity(self, layer: str, frame: Number) -> tuple[float, float, float]:
        """Analytic rate of change of the layer's pose at ``frame``: (x px, y px, angle rad)
        per frame. A point ``q`` of the layer moves at ``(vx, vy) + omega * (-d_y, d_x)`` with
        ``d = q - centre`` in pixels (y down, so positive omega turns clockwise on screen)."""
        dx, dy, da = self._layer(layer).rate(self._tau(frame))
        m = self.motion
        return dx * m * self.height, dy * m * self.height, da * m

    def camera(self, view: Number, *, ideal: bool = False, like: Number | None = None) -> Camera:
        """The camera at ``view`` (interpolated between neighbouring cameras when fractional).

        ``ideal=True``: the perfect rig's camera. ``like=r``: the perfect rig's camera carrying
        camera ``r``'s imperfections instead of its own (its position offset, gains, aim and
        roll), so every view is the ideal one seen the way camera ``r`` sees; ``like=view`` is
        camera ``view`` itself. That is what cleaning a rig up to a reference camera ``r``
        aims for (the reference passes through unchanged, the others are matched to it).
        """
        v = _real(view)
        xc = self.baseline * (v - (self.cameras - 1) / 2.0)
        if ideal:
            return Camera(v, xc, 0.0, (1.0, 1.0, 1.0), (0.0, 0.0), 0.0)
        if like is not None:
            ref = self.camera(like)
            dx = ref.x - self.baseline * (_real(like) - (self.cameras - 1) / 2.0)
            return Camera(v, xc + dx, ref.y, ref.gain, ref.shift, ref.roll)
        lo = min(max(v, 0.0), self.cameras - 1.0)
        i0 = int(math.floor(lo))
        i1 = min(i0 + 1, self.cameras - 1)
        w = lo - i0
        row = (1.0 - w) * self._rig_table[i0] + w * self._rig_table[i1]
        stops, wb_r, wb_b, jx, jy, ax, ay, roll = (float(t) for t in row)
        gain = 2.0 ** stops
        return Camera(v, xc + jx * self.baseline, jy * self.baseline,
                      (gain * 2.0 ** wb_r, gain, gain * 2.0 ** wb_b),
                      (ax * self.height, ay * self.height), roll)

    def __repr__(self) -> str:
        return (f"Scene({self.width}x{self.height}, seed={self.seed}, cameras={self.cameras}, "
                f"start_frame={self.start_frame})")

    # -- rendering ------------------------------------------------------------------------
    def render(self, frame: Number, view: Number = 0, *, ideal: bool = False,
               layers: bool = False, like: Number | None = None) -> dict[str, Any]:
        """Render the true image at ``frame`` and ``view``.

        Parameters
        ----------
        frame, view : int, float or Fraction
            The sample; any real value (fractional ones are the true in-betweens).
        ideal : bool
            Ignore the rig imperfections (a perfect camera at the ideal rig position).
        layers : bool
            Also return every layer on its own.
        like : int, float or Fraction, optional
            Render the perfect rig's camera at ``view`` as camera ``like`` sees (see
            :meth:`camera`): the true picture a rig cleaned up to reference camera ``like``
            should show.

        Returns
        -------
        dict
            ``'fg'``: Image R, G, B, A, shape (H, W, 4), every layer but the backdrop, composited
            near over far, premultiplied. ``'bg'``: Image R, G, B, A, the backdrop alone (the clean
            plate), A = 1. ``'comp'``: Image R, G, B, A, ``fg`` over ``bg`` (Porter-Duff over on
            premultiplied colour, A = 1). ``'matte'``: Image A, shape (H, W, 1), the alpha of
            ``fg``. With ``layers=True`` also ``'layers'``: dict name -> Image R, G, B, A
            (premultiplied, full frame), far to near. Colours include the camera's gain.
        """
        cam = self.camera(view, ideal=ideal, like=like)
        crops = self._render_layers(self._tau(frame), cam)
        H, W = self.height, self.width
        meta = {"demo.scene": "paper-fair", "demo.seed": self.seed, "demo.frame": str(frame),
                "demo.view": str(view), "demo.ideal": bool(ideal)}
        if like is not None:
            meta["demo.like"] = str(like)

        bg = crops[0][2]  # the backdrop covers the whole frame
        fg = np.zeros((H, W, 4), np.float32)
        for _, (ys, xs), rgba in crops[1:]:
            under = fg[ys, xs]
            fg[ys, xs] = rgba + (1.0 - rgba[..., 3:4]) * under
        comp = fg + (1.0 - fg[..., 3:4]) * bg
        rgba_names = ("R", "G", "B", "A")
        out: dict[str, Any] = {
            "fg": Image(fg, rgba_names, meta),
            "bg": Image(bg, rgba_names, meta),
            "comp": Image(comp, rgba_names, meta),
            "matte": Image(np.ascontiguousarray(fg[..., 3:4]), ("A",), meta),
        }
        if layers:
            planes = {layer.name: np.zeros((H, W, 4), np.float32) for layer in self._layers}
            for layer, (ys, xs), rgba in crops:
                planes[layer.name][ys, xs] = rgba
            out["layers"] = {name: Image(full, rgba_names, {**meta, "demo.layer": name})
                             for name, full in planes.items()}
        return out

    def vectors(self, src: Sample | tuple[Number, Number] | Number,
                dst: Sample | tuple[Number, Number] | Number, *, target: str = "comp",
                ideal: bool = False) -> Image:
        """True vectors from sample ``src`` to sample ``dst``, at ``src``'s pixels.

        Each pixel takes the motion of the layer that contributes most to its colour at ``src``
        (``alpha * transmittance`` of the layers in front; ties go to the nearer layer), so at
        soft edges the dominant layer wins.

        Parameters
        ----------
        src, dst : Sample, (frame, view) or frame
            Where the vectors start and end (a bare frame means view 0).
        target : {'comp', 'fg'}
            ``'comp'``: every pixel, backdrop included. ``'fg'``: foreground layers only; pixels
            with no foreground get zero vectors and ``occ`` 0.
        ideal : bool
            Use the perfect rig at both samples.

        Returns
        -------
        Image
            Channels ``fwd.x``, ``fwd.y`` (pixels, x right, y down: where the surface point
            under this pixel at ``src`` is at ``dst``) and ``occ`` (1 where that point is not
            visible at ``dst``: another layer dominates there, or it left the frame; else 0).
        """
        if target not in ("comp", "fg"):
            raise ValueError(f"target={target!r}: give 'comp' or 'fg'")
        (fa, va), (fb, vb) = _as_pair(src), _as_pair(dst)
        cam_a, cam_b = self.camera(va, ideal=ideal), self.camera(vb, ideal=ideal)
        tau_a, tau_b = self._tau(fa), self._tau(fb)
        dom_a = self._dominant(self._render_layers(tau_a, cam_a, shade_colour=False), target)
        dom_b = self._dominant(self._render_layers(tau_b, cam_b, shade_colour=False), target)

        H, W = self.height, self.width
        u = ((np.arange(W, dtype=np.float64) + 0.5 - W / 2.0) / H)[None, :]
        v = ((np.arange(H, dtype=np.float64) + 0.5 - H / 2.0) / H)[:, None]
        fx = np.zeros((H, W), np.float64)
        fy = np.zeros((H, W), np.float64)
        for idx, layer in enumerate(self._layers):
            sel = dom_a == idx
            if not sel.any():
                continue
            A_a, t_a = self._transform(layer, tau_a, cam_a)
            A_b, t_b = self._transform(layer, tau_b, cam_b)
            M = A_b @ A_a.T  # A is a rotation: its inverse is its transpose
            du, dv = u - t_a[0], v - t_a[1]
            bu = M[0, 0] * du + M[0, 1] * dv + t_b[0]
            bv = M[1, 0] * du + M[1, 1] * dv + t_b[1]
            fx = np.where(sel, (bu - u) * H, fx)
            fy = np.where(sel, (bv - v) * H, fy)

        # occlusion: the dominant layer at the landing pixel of dst is another one
        jj = np.floor(np.arange(W)[None, :] + 0.5 + fx).astype(np.int64)
        ii = np.floor(np.arange(H)[:, None] + 0.5 + fy).astype(np.int64)
        inside = (jj >= 0) & (jj < W) & (ii >= 0) & (ii < H)
        landed = dom_b[np.clip(ii, 0, H - 1), np.clip(jj, 0, W - 1)]
        occ = (~inside | (landed != dom_a)) & (dom_a >= 0)
        return Image(np.stack([fx, fy, occ], axis=-1).astype(np.float32), ("fwd.x", "fwd.y", "occ"),
                     {"demo.scene": "paper-fair", "demo.src": f"{fa}@{va}", "demo.dst": f"{fb}@{vb}",
                      "demo.target": target})

    # -- internals: time, rig, transforms -------------------------------------------------
    def _layer(self, name: str) -> _Layer:
        try:
            return self._by_name[name]
        except KeyError:
            raise KeyError(f"no layer {name!r}; layers are {', '.join(self.layer_names)}") from None

    def _tau(self, frame: Number) -> float:
        """Scaled frames since ``start_frame`` (exact for Fractions and ints until the float)."""
        if isinstance(frame, (float, np.floating)):
            rel = float(frame) - self.start_frame
        else:
            rel = _real(Fraction(_exact(frame)) - self.start_frame)
        return rel * self.motion

    def _build_rig(self) -> None:
        r = self.rig
        seed = r.seed if r.seed is not None else self.seed + 1009
        draw = np.random.default_rng(seed).uniform(-1.0, 1.0, size=(self.cameras, 8))
        scale = np.array([r.exposure_stops, r.white_balance_stops, r.white_balance_stops,
                          r.position_jitter, r.position_jitter, r.aim_jitter, r.aim_jitter,
                          math.radians(r.roll_jitter_deg)])
        self._rig_table = draw * scale

    def _transform(self, layer: _Layer, tau: float, cam: Camera) -> tuple[np.ndarray, np.ndarray]:
        """Affine map layer-local -> image (H units about the centre): ``img = A @ l + t``."""
        p = layer.pose(tau)
        k = self.focal / layer.depth
        centre = np.array([p.x - k * cam.x, p.y - k * cam.y])
        R = _rot(cam.roll)
        A = _rot(cam.roll + p.angle)
        t = R @ centre + np.array(cam.shift) / self.height
        return A, t

    def _pixel_box(self, layer: _Layer, A: np.ndarray, t: np.ndarray) -> tuple[slice, slice] | None:
        H, W = self.height, self.width
        if layer.extent is None:
            return slice(0, H), slice(0, W)
        x0, x1, y0, y1 = layer.extent
        corners = np.array([[x0, y0], [x1, y0], [x0, y1], [x1, y1]]).T
        img = A @ corners + t[:, None]
        px = img[0] * H + W / 2.0 - 0.5  # column-index coordinates of pixel centres
        py = img[1] * H + H / 2.0 - 0.5
        c0, c1 = max(int(math.floor(px.min())) - 2, 0), min(int(math.ceil(px.max())) + 3, W)
        r0, r1 = max(int(math.floor(py.min())) - 2, 0), min(int(math.ceil(py.max())) + 3, H)
        if c0 >= c1 or r0 >= r1:
            return None
        return slice(r0, r1), slice(c0, c1)

    def _render_layers(self, tau: float, cam: Camera, shade_colour: bool = True
                       ) -> list[tuple[_Layer, tuple[slice, slice], np.ndarray]]:
        """Each visible layer's premultiplied RGBA crop (camera gain applied), far to near.

        With ``shade_colour=False`` only A is meaningful (dominance maps): the opaque backdrop is
        not shaded at all, the other shaders still run (they return colour and coverage
        together) but their colour is not scaled.
        """
        H, W = self.height, self.width
        gain = np.array(cam.gain, np.float32)
        out = []
        for layer in self._layers:
            A, t = self._transform(layer, tau, cam)
            box = self._pixel_box(layer, A, t)
            if box is None:
                continue
            ys, xs = box
            if not shade_colour and layer.name == self.BACKDROP:
                rgba = np.zeros((ys.stop - ys.start, xs.stop - xs.start, 4), np.float32)
                rgba[..., 3] = 1.0
                out.append((layer, box, rgba))
                continue
            u = ((np.arange(xs.start, xs.stop, dtype=np.float32) + 0.5 - W / 2.0) / H)[None, :]
            v = ((np.arange(ys.start, ys.stop, dtype=np.float32) + 0.5 - H / 2.0) / H)[:, None]
            du, dv = u - np.float32(t[0]), v - np.float32(t[1])
            # l = A^T (img - t)
            lx = (np.float32(A[0, 0]) * du + np.float32(A[1, 0]) * dv).astype(np.float32)
            ly = (np.float32(A[0, 1]) * du + np.float32(A[1, 1]) * dv).astype(np.float32)

            def region(cx: float, cy: float, r: float, _A=A, _t=t, _ys=ys, _xs=xs):
                q = _A @ np.array([cx, cy]) + _t
                qx = q[0] * H + W / 2.0 - 0.5 - _xs.start
                qy = q[1] * H + H / 2.0 - 0.5 - _ys.start
                rp = r * H + 2.0
                c0, c1 = max(int(qx - rp), 0), min(int(qx + rp) + 2, _xs.stop - _xs.start)
                r0, r1 = max(int(qy - rp), 0), min(int(qy + rp) + 2, _ys.stop - _ys.start)
                if c0 >= c1 or r0 >= r1:
                    return None
                return slice(r0, r1), slice(c0, c1)

            upright = A[0, 1] == 0.0 and A[1, 0] == 0.0
            rgb, alpha = layer.shade(lx, ly, _ShadeCtx(self._pix, region, upright))
            rgba = np.empty(lx.shape + (4,), np.float32)
            rgba[..., :3] = rgb * (alpha[..., None] * gain if shade_colour else alpha[..., None])
            rgba[..., 3] = alpha
            out.append((layer, box, rgba))
        return out

    def _dominant(self, crops: list, target: str) -> np.ndarray:
        """Index (into the layer list) of the layer contributing most to each pixel; -1: none."""
        H, W = self.height, self.width
        index = {layer.name: i for i, layer in enumerate(self._layers)}
        trans = np.ones((H, W), np.float32)
        best_w = np.zeros((H, W), np.float32)
        best = np.full((H, W), -1, np.int64)
        for layer, (ys, xs), rgba in reversed(crops):  # near to far
            if target == "fg" and layer.name == self.BACKDROP:
                continue
            a = rgba[..., 3]
            w = a * trans[ys, xs]
            win = w > best_w[ys, xs]
            best_w[ys, xs] = np.where(win, w, best_w[ys, xs])
            best[ys, xs] = np.where(win, index[layer.name], best[ys, xs])
            trans[ys, xs] *= 1.0 - a
        return best

    # -- internals: scene content ---------------------------------------------------------
    def _build_palette(self, rng: np.random.Generator) -> None:
        def jitter(c: np.ndarray, amount: float = 0.06) -> np.ndarray:
            return (c * np.exp(rng.normal(0.0, amount, 3))).astype(np.float32)

        self._sky_top, self._sky_low = _lin(0.42, 0.56, 0.78), _lin(0.94, 0.85, 0.72)
        self._cloud, self._sun = _lin(0.98, 0.96, 0.92), _lin(1.0, 0.84, 0.42)
        self._far_hill, self._near_hill = jitter(_lin(0.45, 0.53, 0.62)), jitter(_lin(0.46, 0.58, 0.30))
        self._ground = jitter(_lin(0.74, 0.56, 0.36))
        self._blades = np.stack([jitter(c, 0.04) for c in (
            _lin(0.86, 0.20, 0.18), _lin(0.96, 0.80, 0.22), _lin(0.20, 0.45, 0.82),
            _lin(0.22, 0.68, 0.36))])
        self._ball_cols = np.stack([jitter(c, 0.04) for c in (
            _lin(0.85, 0.16, 0.14), _lin(0.95, 0.92, 0.84), _lin(0.10, 0.55, 0.60),
            _lin(0.95, 0.92, 0.84), _lin(0.95, 0.55, 0.12), _lin(0.95, 0.92, 0.84))])
        self._streamer_a, self._streamer_b = jitter(_lin(0.80, 0.10, 0.22)), jitter(_lin(0.98, 0.78, 0.28))
        self._wood, self._pin = jitter(_lin(0.62, 0.44, 0.26)), _lin(0.78, 0.78, 0.80)

    def _backdrop_base(self, x: np.ndarray, y: np.ndarray, pix: float,
                       upright: bool = False) -> np.ndarray:
        """The painted flat before brush strokes: straight colour (..., 3).

        ``upright``: ``x`` is constant down each column, so the horizon lines (functions of x
        only) are computed on one row and broadcast.
        """
        nz = self._noise
        xr = x[:1] if upright and x.ndim == 2 else x
        soft = max(1.5 * pix, 0.004)  # painted edges stay soft at every resolution
        t = np.clip((y + 0.6) * (1.0 / 0.65), 0.0, 1.0)
        col = _mix(np.broadcast_to(self._sky_top, x.shape + (3,)), self._sky_low, t)
        clouds = nz.fbm(x * 2.5, y * 7.0, 4, salt=1.0)
        m = _smoothstep(0.52, 0.68, clouds) * np.clip((0.02 - y) * 8.0, 0.0, 1.0)
        col = _mix(col, self._cloud, 0.85 * m)
        sun = np.hypot(x + 0.55, y + 0.30) - 0.065
        col = _mix(col, self._sun, np.clip(0.5 - sun / soft, 0.0, 1.0))
        h1 = 0.02 + 0.04 * np.sin(xr * 2.3 + 1.0) + 0.08 * (nz.fbm(xr * 1.5, 3.7 + 0 * xr, 3, 2.0) - 0.5)
        col = _mix(col, self._far_hill, np.clip(0.5 + (y - h1) / soft, 0.0, 1.0))
        h2 = 0.14 + 0.035 * np.sin(xr * 4.1 + 2.0) + 0.06 * (nz.fbm(xr * 2.0, 9.1 + 0 * xr, 3, 3.0) - 0.5)
        col = _mix(col, self._near_hill, np.clip(0.5 + (y - h2) / soft, 0.0, 1.0))
        h3 = 0.27 + 0.012 * np.sin(xr * 7.0)
        col = _mix(col, self._ground, np.clip(0.5 + (y - h3) / soft, 0.0, 1.0))
        return col

    def _build_strokes(self, rng: np.random.Generator) -> None:
        n = 260
        cx = rng.uniform(-1.35, 1.35, n)
        cy = rng.uniform(-0.62, 0.62, n)
        ang = rng.normal(0.0, 0.3, n) + np.where(cy < 0.0, rng.normal(0.0, 0.4, n), 0.0)
        half_len = rng.uniform(0.03, 0.08, n)
        half_wid = rng.uniform(0.006, 0.014, n)
        base = self._backdrop_base(cx.astype(np.float32), cy.astype(np.float32), 0.004)
        tint = rng.normal(0.0, 0.03, (n, 3)) + rng.normal(0.0, 0.12, (n, 1))  # mostly lightness
        col = base * np.exp(tint).astype(np.float32)
        opacity = rng.uniform(0.3, 0.6, n)
        self._strokes = [(float(cx[i]), float(cy[i]), math.cos(ang[i]), math.sin(ang[i]),
                          float(half_len[i]), float(half_wid[i]), col[i].astype(np.float32),
                          float(opacity[i])) for i in range(n)]

    def _shade_backdrop(self, x: np.ndarray, y: np.ndarray, ctx: _ShadeCtx):
        col = self._backdrop_base(x, y, ctx.pix, ctx.upright)
        soft = max(1.5 * ctx.pix, 0.003)
        for cx, cy, ux, uy, hl, hw, scol, op in self._strokes:
            box = ctx.region(cx, cy, hl + hw)
            if box is None:
                continue
            sub = col[box]
            sdf = _capsule_sdf(x[box], y[box], cx, cy, ux, uy, hl, hw)
            w = np.clip(0.5 - sdf / soft, 0.0, 1.0) * op
            col[box] = sub + (scol - sub) * w[..., None]
        streak = self._noise.fbm(x * 4.0 + 0.3 * y, y * 30.0, 3, salt=5.0)
        canvas = self._noise(x * 90.0, y * 90.0)
        col *= (0.86 + 0.22 * streak + 0.05 * (canvas - 0.5))[..., None]
        return col, np.ones(x.shape, np.float32)

    def _shade_ball(self, x, y, ctx, radius: float = 0.08):
        rho = np.hypot(x, y)
        alpha = _coverage(rho - radius, ctx.pix)
        n = 6
        seg = 2.0 * math.pi / n
        s = (np.arctan2(y, x) + math.pi) / seg
        fl = np.floor(s)
        frac = s - fl
        idx = fl.astype(np.int64) % n
        nb = np.where(frac < 0.5, idx - 1, idx + 1) % n
        dist = rho * np.sin(np.minimum(np.minimum(frac, 1.0 - frac) * seg, math.pi / 2))
        own = np.clip(0.5 + dist / ctx.pix, 0.0, 1.0)
        col = _mix(self._ball_cols[nb], self._ball_cols[idx], own)
        col = _mix(col, self._ball_cols[1], _coverage(rho - 0.26 * radius, ctx.pix))
        # radial shading only: invariant under the ball's rotation, so colour moves with vectors
        shade = 0.35 + 0.65 * np.sqrt(np.clip(1.0 - (rho / radius) ** 2, 0.0, 1.0))
        col = col * (shade * (0.94 + 0.12 * self._noise(x * 60.0 + 11.0, y * 60.0)))[..., None]
        return col, alpha

    def _shade_stick(self, x, y, ctx, half_w: float = 0.009):
        sdf = np.maximum(np.abs(x) - half_w, np.maximum(-y, y - 1.2))
        alpha = _coverage(sdf, ctx.pix)
        grain = self._noise.fbm(x * 120.0, y * 5.0, 2, salt=7.0)
        round_ = 0.75 + 0.25 * np.sqrt(np.clip(1.0 - (x / half_w) ** 2, 0.0, 1.0))
        col = self._wood * ((0.8 + 0.4 * grain) * round_)[..., None]
        return col, alpha

    def _shade_pinwheel(self, x, y, ctx, R: float = 0.17):
        premult = np.zeros(x.shape + (3,), np.float32)
        alpha = np.zeros(x.shape, np.float32)
        fibre = 0.94 + 0.12 * self._noise.fbm(x * 25.0, y * 25.0, 2, salt=3.0)
        for k in range(4):
            a = k * math.pi / 2.0
            P = np.array([R * math.cos(a), R * math.sin(a)])
            Q = 0.58 * R * np.array([math.cos(a + 1.25), math.sin(a + 1.25)])
            cov = _coverage(_convex_sdf(x, y, np.array([[0.0, 0.0], P, Q])), ctx.pix)
            M = 0.5 * (P + Q)  # fold line from the hub to the middle of the outer edge
            side = (M[0] * y - M[1] * x) / math.hypot(*M)
            tone = 0.72 + 0.28 * np.clip(0.5 + side / ctx.pix, 0.0, 1.0)
            premult += self._blades[k] * (cov * tone * fibre)[..., None]
            alpha += cov
        rho = np.hypot(x, y)
        pin = _coverage(rho - 0.02, ctx.pix)
        pin_col = self._pin * (0.6 + 0.4 * np.sqrt(np.clip(1.0 - (rho / 0.02) ** 2, 0, 1)))[..., None]
        premult = premult * (1.0 - pin)[..., None] + pin_col * pin[..., None]
        alpha = np.clip(alpha * (1.0 - pin) + pin, 0.0, 1.0)
        col = premult / np.maximum(alpha, 1e-8)[..., None]
        return col, alpha

    def _shade_streamer(self, x, y, ctx, half_len: float = 0.21, half_w: float = 0.022,
                        amp: float = 0.018, wave: float = 2.0 * math.pi / 0.16):
        centre = amp * np.sin(wave * y)
        slope = amp * wave * np.cos(wave * y)
        across = np.abs(x - centre) / np.sqrt(1.0 + slope * slope) - half_w
        alpha = _coverage(np.maximum(across, np.abs(y) - half_len), ctx.pix)
        stripe = np.sin(y * (2.0 * math.pi / 0.06))
        w = np.clip(0.5 + stripe * (0.06 / (2.0 * math.pi)) / ctx.pix, 0.0, 1.0)
        col = _mix(np.broadcast_to(self._streamer_a, x.shape + (3,)), self._streamer_b, w)
        curl = 0.78 + 0.22 * np.cos(wave * y + 0.6)
        fibre = 0.95 + 0.1 * self._noise(x * 70.0 + 5.0, y * 70.0)
        return col * (curl * fibre)[..., None], alpha

    def _build_layers(self) -> list[_Layer]:
        ball_r = 0.08
        ball_x0, ball_v = -0.62, 0.021
        hub = (0.42, -0.08)
        spin = 0.11
        period = 36.0
        sway, tilt = 0.07, 0.22
        fall = 0.017

        def ball_pose(t: float) -> Pose:
            x = ball_x0 + ball_v * t
            return Pose(x, 0.30, (x - ball_x0) / ball_r)  # rolling without slipping

        def streamer_pose(t: float) -> Pose:
            ph = 2.0 * math.pi * t / period
            return Pose(-0.18 + sway * math.sin(ph), -0.62 + fall * t, tilt * math.cos(ph))

        def streamer_rate(t: float) -> tuple[float, float, float]:
            w = 2.0 * math.pi / period
            ph = w * t
            return sway * w * math.cos(ph), fall, -tilt * w * math.sin(ph)

        still = lambda t: (0.0, 0.0, 0.0)  # noqa: E731
        return [
            _Layer(self.BACKDROP, 10.0, None, lambda t: Pose(0.0, 0.0, 0.0), still,
                   self._shade_backdrop),
            _Layer("ball", 5.5, (-ball_r, ball_r, -ball_r, ball_r), ball_pose,
                   lambda t: (ball_v, 0.0, ball_v / ball_r), self._shade_ball),
            _Layer("stick", 3.6, (-0.01, 0.01, 0.0, 1.2), lambda t: Pose(hub[0], hub[1], 0.0),
                   still, self._shade_stick),
            _Layer("pinwheel", 3.6, (-0.17, 0.17, -0.17, 0.17),
                   lambda t: Pose(hub[0], hub[1], spin * t), lambda t: (0.0, 0.0, spin),
                   self._shade_pinwheel),
            _Layer("streamer", 2.4, (-0.045, 0.045, -0.215, 0.215), streamer_pose, streamer_rate,
                   self._shade_streamer),
        ]


def _exact(value: Number | str) -> Fraction:
    if isinstance(value, bool):
        raise TypeError("a frame or view cannot be a bool")
    return Fraction(value)


def _real(value: Number | str) -> float:
    """A frame or view as a float: floats pass, ints, Fractions and 'a/b' text are exact first."""
    if isinstance(value, (float, np.floating)):
        return float(value)
    return float(_exact(value))


def _as_pair(s: Sample | tuple[Number, Number] | Number) -> tuple[Number, Number]:
    if isinstance(s, Sample):
        return s.frame, s.view
    if isinstance(s, tuple):
        if len(s) != 2:
            raise ValueError(f"a sample is (frame, view); got {s!r}")
        return s[0], s[1]
    return s, 0
