"""Procedural synthetic camera-motion clips with exact ground truth.

A large "world" image is drawn once from a seed, then a virtual camera flies over it: frame
``t`` is ``cv2.warpPerspective(world, G_t, (width, height))`` where ``G_t`` is the world→frame
homography of that frame. Everything that moves the image is generated from continuous time in
seconds, so the same spec sampled at 30 and at 60 fps shows the same camera at equal times.

Coordinate convention (used by the whole package)
-------------------------------------------------
Pixel coordinates are ``(x, y)``: x to the right, y down, origin at the *centre* of the top-left
pixel, so pixel column ``j``, row ``i`` has centre ``(j, i)``. This is OpenCV's convention for
``warpPerspective`` and ``remap``.

``world_to_frame[t]`` (``G_t``) maps world coordinates (pixels of the world canvas at nominal
scale, same convention) to pixel coordinates of frame ``t``.

``inter_frame[t]`` (``H_t``) maps pixel coordinates of frame ``t-1`` to frame ``t``: a scene point
seen at ``p`` in frame ``t-1`` is seen at ``H_t · p`` in frame ``t``. ``H_t = G_t · G_{t-1}^-1``
normalised to ``h33 = 1``; ``H_0`` is the identity; at a scene cut ``H_t`` is all-NaN. Hence
``cv2.warpPerspective(frame[t-1], H_t, (w, h))`` reproduces ``frame[t]`` wherever both frames see
the scene.

Frames are ``uint8`` RGB arrays of shape ``(height, width, 3)``.

Example::

    spec = SceneSpec(style="truss", width=640, height=360, fps=30.0, duration_s=3.0, seed=0,
                     shake=ShakeSpec.drone(), motion=MotionSpec(pan_px_s=40.0),
                     movers=movers_covering(0.05, 640, 360), telemetry=True, noise_sigma=2.0)
    clip = SyntheticClip(spec)
    for t, rgb in clip.frames():
        ...
    gt = clip.ground_truth()        # dict of numpy arrays, ready for np.savez
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Literal

import cv2
import numpy as np

from .geometry import normalise, rescale

__all__ = [
    "HAZE_GREY",
    "MODELS",
    "STYLES",
    "TRUSS_DECK_FRAC",
    "MotionSpec",
    "Mover",
    "NoiseBand",
    "SceneSpec",
    "ShakeSpec",
    "Sinusoid",
    "SyntheticClip",
    "grid_transfer_error",
    "movers_covering",
]

Style = Literal["truss", "solar", "field"]
Model = Literal["translation", "similarity", "affine", "perspective"]
STYLES: tuple[str, ...] = ("truss", "solar", "field")
MODELS: tuple[str, ...] = ("translation", "similarity", "affine", "perspective")

#: In the "truss" world the deck surface (where vehicles drive) lies at this fraction of the
#: height of the initial shake-free view, measured from its top edge.
TRUSS_DECK_FRAC = 0.70

_CHANNELS = ("x_px", "y_px", "roll_deg", "zoom", "shear")
# Sampling rate used to bound the world canvas; independent of the clip's fps so that the world
# (and thus world_to_frame) is identical for every frame rate.
_BOUND_RATE_HZ = 200.0
_MAX_WORLD_PIXELS = 80_000_000


# --------------------------------------------------------------------------------------------
# Specs
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Sinusoid:
    """One sinusoidal shake component; the phase of each channel is drawn from the clip seed.

    Amplitudes (peak): ``x_px``/``y_px`` camera displacement over the world in world pixels
    (≈ apparent image jitter in frame pixels at zoom 1; content moves the opposite way),
    ``roll_deg`` in degrees, ``zoom`` in natural-log zoom units (0.01 ≈ 1 %), ``shear``
    dimensionless (affine model only). ``freq_hz`` in hertz.
    """

    freq_hz: float
    x_px: float = 0.0
    y_px: float = 0.0
    roll_deg: float = 0.0
    zoom: float = 0.0
    shear: float = 0.0


@dataclass(frozen=True)
class NoiseBand:
    """Band-limited random shake between ``low_hz`` and ``high_hz`` (hertz).

    Realised as a sum of ``partials`` sinusoids with seeded random frequencies in the band and
    random phases, evaluated in continuous time (so it does not depend on the frame rate).
    Amplitudes are RMS values in the units of :class:`Sinusoid`.
    """

    low_hz: float
    high_hz: float
    x_px: float = 0.0
    y_px: float = 0.0
    roll_deg: float = 0.0
    zoom: float = 0.0
    shear: float = 0.0
    partials: int = 16


@dataclass(frozen=True)
class ShakeSpec:
    """Unintended camera motion: a sum of sinusoids and noise bands. ``ShakeSpec()`` is still."""

    sinusoids: tuple[Sinusoid, ...] = ()
    bands: tuple[NoiseBand, ...] = ()

    @classmethod
    def drone(
        cls,
        wind_px: float = 3.0,
        vibration_px: float = 0.3,
        drift_px: float = 4.0,
        roll_deg: float = 0.4,
        zoom: float = 0.003,
        shear: float = 0.002,
    ) -> ShakeSpec:
        """A small multirotor in gusty air.

        Wind buffeting 0.5–3 Hz (``wind_px`` RMS, ``roll_deg`` RMS roll, ``zoom`` RMS log-zoom,
        ``shear`` RMS shear), airframe vibration 5–12 Hz (``vibration_px`` RMS) with a rotor
        tone at 9 Hz, and slow gimbal drift 0.02–0.15 Hz (``drift_px`` RMS).
        """
        return cls(
            sinusoids=(Sinusoid(9.0, x_px=0.5 * vibration_px, y_px=0.5 * vibration_px),),
            bands=(
                NoiseBand(0.5, 3.0, x_px=wind_px, y_px=0.8 * wind_px, roll_deg=roll_deg,
                          zoom=zoom, shear=shear),
                NoiseBand(5.0, 12.0, x_px=vibration_px, y_px=vibration_px,
                          roll_deg=0.1 * roll_deg),
                NoiseBand(0.02, 0.15, x_px=drift_px, y_px=0.6 * drift_px,
                          roll_deg=0.5 * roll_deg, partials=4),
            ),
        )

    def scaled(self, factor: float) -> ShakeSpec:
        """The same shake with every amplitude multiplied by ``factor`` (phases unchanged)."""

        def sc(c):
            return type(c)(**{**c.__dict__, **{k: getattr(c, k) * factor for k in _CHANNELS}})

        return ShakeSpec(tuple(sc(s) for s in self.sinusoids), tuple(sc(b) for b in self.bands))


@dataclass(frozen=True)
class MotionSpec:
    """Deliberate (intended) camera motion, in seconds; all rates are per second.

    ``pan_px_s``: camera speed towards +x over the world, world px/s (content moves towards −x).
    ``climb_px_s``: camera speed towards −y (up), world px/s (content moves down).
    ``zoom``: initial frame px per world px; ``zoom_per_s``: natural-log zoom rate (> 0 zooms in).
    ``roll_deg`` / ``roll_deg_s``: rotation of the image content, degrees measured from +x towards
    +y (clockwise on screen), about the frame centre.
    ``shear`` / ``aspect`` (+ rates): affine model only; ``aspect`` is ln(x scale / y scale).
    ``tilt_x_deg`` / ``tilt_y_deg`` (+ rates): perspective model only; out-of-plane rotation of a
    camera over the planar scene; a positive value shifts content at the frame centre towards
    +x / +y by ``f·tan(angle)`` pixels (``f`` from ``SceneSpec.hfov_deg``).
    """

    pan_px_s: float = 40.0
    climb_px_s: float = 0.0
    zoom: float = 1.0
    zoom_per_s: float = 0.0
    roll_deg: float = 0.0
    roll_deg_s: float = 0.0
    shear: float = 0.0
    shear_per_s: float = 0.0
    aspect: float = 0.0
    aspect_per_s: float = 0.0
    tilt_x_deg: float = 0.0
    tilt_y_deg: float = 0.0
    tilt_x_deg_s: float = 0.0
    tilt_y_deg_s: float = 0.0


@dataclass(frozen=True)
class Mover:
    """An independently moving textured object (an outlier to the camera motion).

    ``kind``: ``"vehicle"`` (side view, faces its direction of travel), ``"person"`` or
    ``"box"`` (a generic textured crate) or ``"panel"`` (a board with dense texture, held up
    to the lens). ``size_px``: (width, height) in pixels.
    ``start_px``: centre at t = 0 in pixel coordinates of the shake-free frame 0.
    ``velocity_px_s``: px/s.
    ``anchor="frame"``: moves in frame coordinates, bouncing off the frame edges so the covered
    share of the frame stays constant. ``anchor="world"``: moves in a straight line over the world
    (so it also shakes with the camera), like a car driving along a road.
    ``seed``: texture variation.
    """

    kind: Literal["vehicle", "person", "box", "panel"] = "vehicle"
    size_px: tuple[float, float] = (48.0, 24.0)
    start_px: tuple[float, float] = (100.0, 100.0)
    velocity_px_s: tuple[float, float] = (60.0, 0.0)
    anchor: Literal["frame", "world"] = "frame"
    seed: int = 0


def movers_covering(
    share: float,
    width: int,
    height: int,
    count: int = 2,
    speed_px_s: float = 50.0,
    seed: int = 0,
    anchor: Literal["frame", "world"] = "frame",
) -> tuple[Mover, ...]:
    """``count`` movers (alternately a vehicle and a person) covering ``share`` of the frame area.

    Sizes are chosen so that the summed bounding-box area is ``share · width · height`` pixels²;
    positions and directions are drawn from ``seed``; speeds are ``speed_px_s`` (px/s).
    """
    if not 0.0 <= share < 0.8:
        raise ValueError("share must be in [0, 0.8)")
    rng = np.random.default_rng([seed, 31])
    out = []
    area = share * width * height / max(count, 1)
    for i in range(count):
        kind = "vehicle" if i % 2 == 0 else "person"
        aspect = 2.0 if kind == "vehicle" else 1 / 2.4
        w = min(math.sqrt(area * aspect), 0.9 * width)
        h = min(area / w, 0.9 * height)
        cx = rng.uniform(w / 2, width - w / 2)
        cy = rng.uniform(h / 2, height - h / 2)
        ang = rng.uniform(0, 2 * math.pi)
        if kind == "vehicle":  # cars mostly drive sideways across the view
            ang = rng.choice([0.0, math.pi]) + rng.uniform(-0.3, 0.3)
        out.append(Mover(kind, (float(w), float(h)), (float(cx), float(cy)),
                         (speed_px_s * math.cos(ang), speed_px_s * math.sin(ang)),
                         anchor, seed * 100 + i))
    return tuple(out)


#: Grey level (0–255) a hazy scene is blended toward (see ``SceneSpec.contrast``).
HAZE_GREY = 170.0


@dataclass(frozen=True)
class SceneSpec:
    """Everything that defines a synthetic clip; equal specs give bit-identical clips.

    ``width``/``height``: frame size, px. ``fps``: frames per second. ``duration_s``: seconds
    (``n_frames = round(duration_s · fps)``). ``model``: which motion components are honoured
    (``translation`` < ``similarity`` < ``affine`` < ``perspective``); components outside the model
    are ignored. In the perspective model translational shake is realised as camera rotation
    (tilt), so the shake itself produces true homographies.
    ``telemetry``: burn a static on-screen-display strip into the bottom of every frame.
    ``noise_sigma``: Gaussian sensor noise, grey levels (applied before the telemetry overlay).
    ``contrast``: haze, 0 < c ≤ 1: the rendered scene (movers included) is blended toward a
    flat grey of :data:`HAZE_GREY` as ``grey + c·(scene − grey)`` before the noise and before
    the telemetry strip is burnt in, so the strip keeps its full contrast (1: no haze).
    ``textureless_s``: ``(start, end)`` seconds during which the camera sees plain sky.
    ``cuts_s``: times (s) of hard scene cuts; shot ``k`` shows ``cut_styles[k-1]`` (default: the
    next style) drawn from a different seed. ``supersample``: render at this integer factor and
    area-downsample (anti-aliasing; exact under the pixel-centre convention).
    ``hfov_deg``: horizontal field of view used for the perspective model's focal length.
    """

    style: Style = "truss"
    width: int = 640
    height: int = 360
    fps: float = 30.0
    duration_s: float = 3.0
    seed: int = 0
    motion: MotionSpec = field(default_factory=MotionSpec)
    shake: ShakeSpec = field(default_factory=ShakeSpec.drone)
    model: Model = "similarity"
    movers: tuple[Mover, ...] = ()
    telemetry: bool = False
    noise_sigma: float = 0.0
    contrast: float = 1.0
    textureless_s: tuple[float, float] | None = None
    cuts_s: tuple[float, ...] = ()
    cut_styles: tuple[str, ...] = ()
    supersample: int = 1
    hfov_deg: float = 60.0

    def __post_init__(self) -> None:
        if self.style not in STYLES or any(s not in STYLES for s in self.cut_styles):
            raise ValueError(f"style must be one of {STYLES}")
        if self.model not in MODELS:
            raise ValueError(f"model must be one of {MODELS}")
        if self.width < 16 or self.height < 16:
            raise ValueError("frame must be at least 16x16 px")
        if not (self.fps > 0 and self.duration_s > 0):
            raise ValueError("fps and duration_s must be positive")
        if self.supersample not in (1, 2, 3, 4):
            raise ValueError("supersample must be 1..4")
        if self.noise_sigma < 0:
            raise ValueError("noise_sigma must be >= 0")
        if not 0.0 < self.contrast <= 1.0:
            raise ValueError("contrast must be in (0, 1]")
        if not 5.0 < self.hfov_deg < 150.0:
            raise ValueError("hfov_deg must be in (5, 150)")

    @property
    def n_frames(self) -> int:
        """Number of frames, ``max(1, round(duration_s · fps))``."""
        return max(1, round(self.duration_s * self.fps))

    @property
    def focal_px(self) -> float:
        """Focal length in pixels implied by ``hfov_deg`` and ``width``."""
        return self.width / (2.0 * math.tan(math.radians(self.hfov_deg) / 2.0))


# --------------------------------------------------------------------------------------------
# Geometry
# --------------------------------------------------------------------------------------------


def _stack(n: int) -> np.ndarray:
    return np.tile(np.eye(3), (n, 1, 1))


def _translations(tx: np.ndarray, ty: np.ndarray) -> np.ndarray:
    m = _stack(len(tx))
    m[:, 0, 2], m[:, 1, 2] = tx, ty
    return m


def _matrices(p: dict[str, np.ndarray], w: int, h: int, f: float) -> np.ndarray:
    """World→frame homographies (n,3,3) from camera parameters (see ``_params``)."""
    n = len(p["x"])
    world = _translations(-p["x"], -p["y"])
    z = np.exp(p["log_zoom"])
    zoom = _stack(n)
    zoom[:, 0, 0] = zoom[:, 1, 1] = z
    th = np.radians(p["roll_deg"])
    rot = _stack(n)
    rot[:, 0, 0], rot[:, 0, 1], rot[:, 1, 0], rot[:, 1, 1] = (
        np.cos(th), -np.sin(th), np.sin(th), np.cos(th))
    aff = _stack(n)
    aff[:, 0, 0], aff[:, 1, 1], aff[:, 0, 1] = (
        np.exp(p["aspect"] / 2), np.exp(-p["aspect"] / 2), p["shear"])
    # Rotation of a pinhole camera (K R K^-1, centred coordinates); Ry(a)·Rx(-b) makes a
    # positive tilt shift the centre by +f·tan along x / y.
    a, b = np.radians(p["tilt_x_deg"]), np.radians(p["tilt_y_deg"])
    ry = _stack(n)
    ry[:, 0, 0], ry[:, 0, 2], ry[:, 2, 0], ry[:, 2, 2] = np.cos(a), np.sin(a), -np.sin(a), np.cos(a)
    rx = _stack(n)
    rx[:, 1, 1], rx[:, 1, 2], rx[:, 2, 1], rx[:, 2, 2] = np.cos(b), np.sin(b), -np.sin(b), np.cos(b)
    k = np.diag([f, f, 1.0])
    persp = k @ ry @ rx @ np.linalg.inv(k)
    centre = _translations(np.full(n, (w - 1) / 2.0), np.full(n, (h - 1) / 2.0))
    return normalise(centre @ persp @ aff @ rot @ zoom @ world)


def grid_transfer_error(
    H_true: np.ndarray, H_est: np.ndarray, width: int, height: int, n: int = 10
) -> float | np.ndarray:
    """Mean distance (px) between an n×n grid over the frame mapped by ``H_true`` and ``H_est``.

    The grid spans pixel centres ``x ∈ [0, width-1]``, ``y ∈ [0, height-1]``. Accepts single
    3×3 matrices (returns a float) or broadcastable stacks ``(k,3,3)`` (returns a ``(k,)`` array).
    NaN matrices give NaN.
    """
    a = np.asarray(H_true, float)
    b = np.asarray(H_est, float)
    gx, gy = np.meshgrid(np.linspace(0, width - 1, n), np.linspace(0, height - 1, n))
    pts = np.stack([gx.ravel(), gy.ravel(), np.ones(gx.size)])  # (3, N)
    pa, pb = a @ pts, b @ pts
    d = np.hypot(pa[..., 0, :] / pa[..., 2, :] - pb[..., 0, :] / pb[..., 2, :],
                 pa[..., 1, :] / pa[..., 2, :] - pb[..., 1, :] / pb[..., 2, :])
    e = d.mean(axis=-1)
    return float(e) if e.ndim == 0 else e


# --------------------------------------------------------------------------------------------
# Drawing helpers (world canvases are drawn in nominal coordinates onto a k× grid)
# --------------------------------------------------------------------------------------------

_SHIFT = 4


class _Canvas:
    def __init__(self, img: np.ndarray, k: int) -> None:
        self.img, self.k = img, k

    def pt(self, p) -> np.ndarray:
        q = (np.asarray(p, float) + 0.5) * self.k - 0.5
        return np.round(q * (1 << _SHIFT)).astype(np.int32)

    def poly(self, pts, color) -> None:
        cv2.fillPoly(self.img, [self.pt(pts).reshape(-1, 1, 2)], _c(color), cv2.LINE_AA, _SHIFT)

    def line(self, p0, p1, color, width: float) -> None:
        a, b = self.pt(p0), self.pt(p1)
        cv2.line(self.img, (int(a[0]), int(a[1])), (int(b[0]), int(b[1])), _c(color),
                 max(1, round(width * self.k)), cv2.LINE_AA, _SHIFT)

    def polyline(self, pts, color, width: float) -> None:
        cv2.polylines(self.img, [self.pt(pts).reshape(-1, 1, 2)], False, _c(color),
                      max(1, round(width * self.k)), cv2.LINE_AA, _SHIFT)

    def circle(self, c, r: float, color) -> None:
        a = self.pt(c)
        cv2.circle(self.img, (int(a[0]), int(a[1])), max(1, round(r * self.k * (1 << _SHIFT))),
                   _c(color), -1, cv2.LINE_AA, _SHIFT)

    def ellipse(self, c, axes, angle_deg: float, color) -> None:
        a = self.pt(c)
        ax = (max(1, round(axes[0] * self.k * (1 << _SHIFT))),
              max(1, round(axes[1] * self.k * (1 << _SHIFT))))
        cv2.ellipse(self.img, (int(a[0]), int(a[1])), ax, float(angle_deg), 0, 360, _c(color), -1,
                    cv2.LINE_AA, _SHIFT)

    def rect(self, x0, y0, x1, y1, color) -> None:
        self.poly([(x0, y0), (x1, y0), (x1, y1), (x0, y1)], color)

    def beam(self, p0, p1, width: float, color, shade: float = 0.0) -> None:
        """A straight member as a quad, with a lit and a shadowed edge."""
        p0, p1 = np.asarray(p0, float), np.asarray(p1, float)
        d = p1 - p0
        nrm = np.array([-d[1], d[0]]) / max(np.hypot(*d), 1e-9) * width / 2
        self.poly([p0 + nrm, p1 + nrm, p1 - nrm, p0 - nrm], color)
        if shade and width * self.k >= 3:
            col = np.asarray(color, float)
            edge = max(0.6, 0.15 * width)
            self.line(p0 - nrm * 0.8, p1 - nrm * 0.8, np.clip(col * (1 + shade), 0, 255), edge)
            self.line(p0 + nrm * 0.8, p1 + nrm * 0.8, col * (1 - shade), edge)


def _c(color) -> tuple[float, float, float]:
    return tuple(float(v) for v in np.clip(np.asarray(color, float), 0, 255))


def _fbm(rng: np.random.Generator, hb: int, wb: int, cell_lo: float, cell_hi: float,
         gain: float = 0.55) -> np.ndarray:
    """Fractal value noise in [0, 1], float32 (hb, wb); cells in canvas pixels."""
    acc = np.zeros((hb, wb), np.float32)
    amp, total, cell = 1.0, 0.0, float(cell_hi)
    while cell >= cell_lo:
        g = rng.random((max(2, int(hb / cell) + 2), max(2, int(wb / cell) + 2)), dtype=np.float32)
        acc += amp * cv2.resize(g, (wb, hb), interpolation=cv2.INTER_CUBIC)
        total += amp
        amp *= gain
        cell /= 2.0
    lo, hi = float(acc.min()), float(acc.max())
    return (acc - lo) / max(hi - lo, 1e-6)


def _smoothstep(a: float, b: float, x: np.ndarray) -> np.ndarray:
    t = np.clip((x - a) / (b - a), 0.0, 1.0)
    return t * t * (3 - 2 * t)


def _sky(rng: np.random.Generator, hb: int, wb: int, k: int, clouds: bool = True) -> np.ndarray:
    y = np.linspace(0.0, 1.0, hb, dtype=np.float32)[:, None, None]
    top, low = np.array([62, 112, 186], np.float32), np.array([186, 208, 232], np.float32)
    img = np.broadcast_to(top * (1 - y) + low * y, (hb, wb, 3)).astype(np.float32)
    if clouds:
        n = _fbm(rng, hb, wb, 4 * k, 256 * k, gain=0.6)
        shade = _fbm(rng, hb, wb, 16 * k, 128 * k)
        m = _smoothstep(0.55, 0.85, n)
        cloud = (214 + 38 * shade)[..., None] * np.array([1.0, 1.0, 1.0], np.float32)
        img = img * (1 - m[..., None]) + cloud * m[..., None]
    else:
        img = img + (_fbm(rng, hb, wb, 64 * k, 512 * k)[..., None] - 0.5) * 3.0
    return img


def _draw_sky_world(rng, w, h, k, ref, view) -> np.ndarray:
    sky = _sky(rng, h * k, w * k, k, clouds=False)
    return np.clip(sky, 0, 255).astype(np.uint8, order="C")


def _draw_truss(rng: np.random.Generator, w: int, h: int, k: int, ref, view) -> np.ndarray:
    """Steel through-truss bridge seen from the side against a cloudy sky, river below."""
    hb, wb = h * k, w * k
    vh = view[1]
    top = ref[1] - vh / 2
    y_top, y_bot = top + 0.16 * vh, top + 0.64 * vh
    deck0, deck1 = top + TRUSS_DECK_FRAC * vh, top + 0.78 * vh
    img = _sky(rng, hb, wb, k)
    # River and far bank below the deck.
    rows = (np.arange(hb, dtype=np.float32)[:, None] + 0.5) / k - 0.5
    water = (rows > deck1).astype(np.float32) * np.ones((1, wb), np.float32)
    river = _fbm(rng, hb, wb, 2 * k, 64 * k)
    wcol = np.stack([40 + 40 * river, 70 + 45 * river, 78 + 40 * river], -1)
    img = img * (1 - water[..., None]) + wcol * water[..., None]
    img = np.clip(img, 0, 255).astype(np.uint8, order="C")
    cv = _Canvas(img, k)

    # Distant lattice pylons in the sky.
    for _ in range(max(1, int(w / 500))):
        px, ph = rng.uniform(0, w), rng.uniform(0.35, 0.6) * vh
        base, half = y_bot, rng.uniform(0.04, 0.07) * vh
        col = (120, 135, 150)
        cv.line((px - half, base), (px - 0.2 * half, base - ph), col, 1.2)
        cv.line((px + half, base), (px + 0.2 * half, base - ph), col, 1.2)
        for j in range(1, 9):
            u0, u1 = (j - 1) / 9, j / 9
            xa, xb = half * (1 - 0.8 * u0), half * (1 - 0.8 * u1)
            cv.line((px - xa, base - u0 * ph), (px + xb, base - u1 * ph), col, 0.8)
            cv.line((px + xa, base - u0 * ph), (px - xb, base - u1 * ph), col, 0.8)
        cv.line((px - 2.2 * half, base - 0.85 * ph), (px + 2.2 * half, base - 0.85 * ph), col, 1.0)

    # Panel points with irregular spacing so the lattice is not periodic.
    xs = [-rng.uniform(0, 0.2) * vh]
    while xs[-1] < w + 0.2 * vh:
        xs.append(xs[-1] + rng.uniform(0.15, 0.27) * vh)
    chord, vert, diag = 0.036 * vh, 0.02 * vh, 0.017 * vh
    steel = np.array([96, 108, 104], float)
    far = steel * 0.62

    # Far truss (seen through the near one): thinner, darker, offset.
    off = np.array([0.05 * vh, -0.035 * vh])
    for x0, x1 in zip(xs[:-1], xs[1:], strict=False):
        cv.beam(np.array((x0, y_bot)) + off, np.array((x1, y_top)) + off, 0.6 * diag, far)
        cv.beam(np.array((x0, y_top)) + off, np.array((x0, y_bot)) + off, 0.6 * vert, far)
    cv.beam(np.array((xs[0], y_top)) + off, np.array((xs[-1], y_top)) + off, 0.6 * chord, far)

    # Deck slab, expansion joints, railing.
    cv.rect(-2, deck0, w + 2, deck1, (150, 146, 138))
    x = 0.0
    while x < w:
        x += rng.uniform(0.3, 0.9) * vh
        cv.line((x, deck0), (x, deck1), (88, 84, 80), 1.0)
    for _ in range(int(w / 12)):
        cx, cy = rng.uniform(0, w), rng.uniform(deck0, deck1)
        cv.ellipse((cx, cy), (rng.uniform(1, 6), rng.uniform(0.6, 2)), rng.uniform(-20, 20),
                   np.array((150, 146, 138)) * rng.uniform(0.75, 1.15))
    cv.rect(-2, deck1 - 0.012 * vh, w + 2, deck1, (92, 88, 84))
    rail = deck0 - 0.05 * vh
    cv.beam((-2, rail), (w + 2, rail), 0.008 * vh, (170, 170, 160))
    x = rng.uniform(0, 8)
    while x < w:
        cv.line((x, rail), (x, deck0), (140, 140, 132), max(0.8, 0.005 * vh))
        x += rng.uniform(0.025, 0.05) * vh
    # Lamp posts at irregular spacing.
    x = rng.uniform(0, 0.5) * vh
    while x < w:
        cv.beam((x, deck0), (x, deck0 - 0.32 * vh), 0.007 * vh, (60, 62, 64))
        cv.beam((x, deck0 - 0.32 * vh), (x + 0.05 * vh, deck0 - 0.31 * vh), 0.006 * vh,
                (60, 62, 64))
        cv.ellipse((x + 0.05 * vh, deck0 - 0.305 * vh), (0.012 * vh, 0.005 * vh), 0,
                   (230, 226, 200))
        x += rng.uniform(0.6, 1.4) * vh

    # Near truss: chords, verticals, diagonals with per-panel variation.
    for x0, x1 in zip(xs[:-1], xs[1:], strict=False):
        col = steel * rng.uniform(0.9, 1.1)
        pattern = rng.choice(["/", "\\", "x", "/", "\\"])
        if pattern in ("/", "x"):
            cv.beam((x0, y_bot), (x1, y_top), diag, col, shade=0.3)
        if pattern in ("\\", "x"):
            cv.beam((x0, y_top), (x1, y_bot), diag * (0.7 if pattern == "x" else 1), col, 0.3)
        cv.beam((x0, y_top), (x0, y_bot), vert * rng.uniform(0.8, 1.3), col, shade=0.3)
        if rng.random() < 0.3:  # sway bracing knee
            cv.beam((x0, y_top + 0.12 * vh), (x0 + 0.08 * vh, y_top), 0.5 * vert, col, 0.3)
    cv.beam((xs[0], y_top), (xs[-1], y_top), chord, steel * 1.05, shade=0.35)
    cv.beam((xs[0], y_bot), (xs[-1], y_bot), chord * 1.15, steel, shade=0.35)

    # Gusset plates with bolt patterns, rust and streaks at every joint.
    for x0 in xs:
        for yj in (y_top, y_bot):
            gw, gh = rng.uniform(0.06, 0.1) * vh, rng.uniform(0.07, 0.11) * vh
            sgn = 1 if yj == y_top else -1
            pts = [(x0 - gw / 2, yj - sgn * chord / 2), (x0 + gw / 2, yj - sgn * chord / 2),
                   (x0 + gw * rng.uniform(0.2, 0.45), yj + sgn * gh),
                   (x0 - gw * rng.uniform(0.2, 0.45), yj + sgn * gh)]
            cv.poly(pts, steel * rng.uniform(1.05, 1.25))
            nb = rng.integers(3, 9)
            for _ in range(nb):
                bx = x0 + rng.uniform(-0.35, 0.35) * gw
                by = yj + sgn * rng.uniform(0.0, 0.8) * gh
                cv.circle((bx, by), max(0.7, 0.006 * vh), (52, 54, 52))
                cv.circle((bx - 0.3, by - 0.3), max(0.4, 0.003 * vh), (190, 190, 182))
            for _ in range(rng.integers(0, 3)):
                rx, ry = x0 + rng.uniform(-0.3, 0.3) * gw, yj + sgn * rng.uniform(0, 0.8) * gh
                axes = (rng.uniform(0.006, 0.02) * vh, rng.uniform(0.004, 0.014) * vh)
                rust = (rng.uniform(120, 160), rng.uniform(62, 84), 40)
                cv.ellipse((rx, ry), axes, rng.uniform(0, 180), rust)
                if rng.random() < 0.5:
                    cv.line((rx, ry), (rx + rng.uniform(-1, 1), ry + rng.uniform(0.03, 0.09) * vh),
                            (110, 70, 44), 0.8)
    # Rivet rows along the chords.
    for yc in (y_top, y_bot):
        x = rng.uniform(0, 6)
        while x < w:
            cv.circle((x, yc + rng.uniform(-0.3, 0.3) * chord), max(0.6, 0.004 * vh), (60, 64, 62))
            x += rng.uniform(0.015, 0.05) * vh
    # A few inspection-relevant defects: flaking paint and a hanging cable.
    for _ in range(max(2, int(w / 150))):
        rx, ry = rng.uniform(0, w), rng.choice([y_top, y_bot]) + rng.uniform(-0.5, 0.5) * chord
        cv.ellipse((rx, ry), (rng.uniform(0.01, 0.025) * vh, rng.uniform(0.004, 0.012) * vh),
                   rng.uniform(-15, 15), (150, 86, 48))
    cx0 = rng.uniform(0, w)
    t = np.linspace(0, 1, 24)
    cv.polyline(np.stack([cx0 + t * 0.6 * vh, y_bot + 0.02 * vh + 0.04 * vh * np.sin(np.pi * t)],
                         -1), (30, 30, 30), max(0.8, 0.004 * vh))
    return img


def _draw_solar(rng: np.random.Generator, w: int, h: int, k: int, ref, view) -> np.ndarray:
    """Rows of solar modules on gravel, seen from above, slightly rotated to the frame."""
    hb, wb = h * k, w * k
    vh = view[1]
    n1 = _fbm(rng, hb, wb, 2 * k, 128 * k)
    n2 = _fbm(rng, hb, wb, 1 * k, 8 * k)
    base = np.stack([128 + 40 * n1 + 30 * n2, 120 + 36 * n1 + 28 * n2, 106 + 30 * n1 + 26 * n2],
                    -1)
    img = np.clip(base, 0, 255).astype(np.uint8, order="C")
    cv = _Canvas(img, k)
    # Gravel stones, drawn with shadows for corner-rich texture.
    ns = int(w * h / 45)
    cxy = rng.uniform(0, 1, (ns, 2)) * (w, h)
    rad = rng.uniform(0.6, 2.2, ns) * max(1.0, vh / 360)
    tone = rng.uniform(0.55, 1.35, ns)
    for (cx, cy), r, g in zip(cxy, rad, tone, strict=True):
        cv.circle((cx + 0.5 * r, cy + 0.5 * r), r, (60, 56, 50))
        cv.circle((cx, cy), r, np.array((150, 144, 134)) * g)

    ang = math.radians(rng.uniform(-7, 7))
    rot = np.array([[math.cos(ang), -math.sin(ang)], [math.sin(ang), math.cos(ang)]])
    centre = np.array([w / 2, h / 2])

    def tr(pts):
        return (np.asarray(pts, float) - centre) @ rot.T + centre

    pw, ph = 0.075 * vh, 0.125 * vh  # portrait module, two per row height
    gap_row = rng.uniform(0.5, 0.8) * 2 * ph
    diag = math.hypot(w, h)
    y = -diag / 2 + h / 2 - rng.uniform(0, gap_row)
    while y < h / 2 + diag / 2:
        x = -diag / 2 + w / 2 - rng.uniform(0, 3 * pw)
        # Row shadow on the gravel (sun from the upper left).
        cv.poly(tr([(x, y + 2 * ph), (w / 2 + diag / 2, y + 2 * ph),
                    (w / 2 + diag / 2, y + 2.25 * ph), (x, y + 2.25 * ph)]), (70, 66, 60))
        while x < w / 2 + diag / 2:
            if rng.random() < 0.04:  # missing module: torque tube visible
                cv.poly(tr([(x, y + 0.95 * ph), (x + pw, y + 0.95 * ph), (x + pw, y + 1.05 * ph),
                            (x, y + 1.05 * ph)]), (160, 160, 160))
                x += pw * 1.02
                continue
            for r in range(2):
                y0 = y + r * ph
                body = np.array((28, 44, 92)) * rng.uniform(0.8, 1.25)
                cv.poly(tr([(x, y0), (x + pw, y0), (x + pw, y0 + ph), (x, y0 + ph)]),
                        (196, 198, 202))
                b = 0.05 * pw
                cv.poly(tr([(x + b, y0 + b), (x + pw - b, y0 + b), (x + pw - b, y0 + ph - b),
                            (x + b, y0 + ph - b)]), body)
                # Glare: a lighter wedge with random extent.
                g0 = rng.uniform(0, 1)
                cv.poly(tr([(x + b, y0 + b), (x + b + g0 * (pw - 2 * b), y0 + b),
                            (x + b, y0 + b + g0 * (ph - 2 * b))]),
                        body * rng.uniform(1.1, 1.5))
                cell_c = body * 1.9 + 20
                for i in range(1, 6):
                    xx = x + b + i * (pw - 2 * b) / 6
                    cv.line(tr([(xx, y0 + b)])[0], tr([(xx, y0 + ph - b)])[0], cell_c, 0.45)
                for i in range(1, 10):
                    yy = y0 + b + i * (ph - 2 * b) / 10
                    cv.line(tr([(x + b, yy)])[0], tr([(x + pw - b, yy)])[0], cell_c, 0.45)
                for _ in range(rng.poisson(0.8)):  # soiling and droppings
                    sx, sy = x + rng.uniform(b, pw - b), y0 + rng.uniform(b, ph - b)
                    cv.ellipse(tr([(sx, sy)])[0], (rng.uniform(0.5, 2.5), rng.uniform(0.5, 1.8)),
                               rng.uniform(0, 180), (rng.uniform(150, 240),) * 3)
                if rng.random() < 0.06:  # cracked cell
                    cx, cy = x + rng.uniform(b, pw - b), y0 + rng.uniform(b, ph - b)
                    for _ in range(3):
                        cv.line(tr([(cx, cy)])[0], tr([(cx + rng.uniform(-4, 4),
                                                        cy + rng.uniform(-4, 4))])[0],
                                (200, 205, 215), 0.5)
            x += pw * rng.uniform(1.02, 1.06)
        # Cable tray along the gap.
        yy = y + 2 * ph + 0.45 * gap_row + rng.uniform(-2, 2)
        cv.line(tr([(-diag, yy)])[0], tr([(w + diag, yy)])[0], (70, 70, 74), 0.012 * vh)
        y += 2 * ph + gap_row
    return img


def _draw_field(rng: np.random.Generator, w: int, h: int, k: int, ref, view) -> np.ndarray:
    """A meadow with dirt patches, tyre ruts, rocks, bushes and flowers, seen from above."""
    hb, wb = h * k, w * k
    vh = view[1]
    n1 = _fbm(rng, hb, wb, 2 * k, 256 * k)
    n2 = _fbm(rng, hb, wb, 1 * k, 6 * k)
    dirt = _smoothstep(0.6, 0.75, _fbm(rng, hb, wb, 8 * k, 256 * k))
    grass = np.stack([70 + 60 * n1 + 30 * n2, 100 + 50 * n1 + 35 * n2, 40 + 20 * n1 + 20 * n2], -1)
    img = grass
    soil = np.stack([120 + 30 * n2, 94 + 26 * n2, 66 + 20 * n2], -1)
    img = img * (1 - dirt[..., None]) + soil * dirt[..., None]
    img = np.clip(img, 0, 255).astype(np.uint8, order="C")
    cv = _Canvas(img, k)
    scale = max(1.0, vh / 360)
    # Tyre ruts: two parallel wavy tracks.
    for _ in range(max(1, int(h / 400))):
        xx = np.linspace(-20, w + 20, 80)
        y0, a = rng.uniform(0.1, 0.9) * h, rng.uniform(10, 60)
        f, ph = rng.uniform(1, 3), rng.uniform(0, 6.3)
        yy = y0 + a * np.sin(f * xx / w * 2 * np.pi + ph)
        for o in (-0.035 * vh, 0.035 * vh):
            cv.polyline(np.stack([xx, yy + o], -1), (96, 76, 56), 0.02 * vh)
    # Flowers and tufts.
    for _ in range(int(w * h / 350)):
        c = rng.choice([(235, 225, 70), (240, 240, 235), (200, 90, 160), (40, 70, 25)])
        cv.circle(rng.uniform(0, 1, 2) * (w, h), rng.uniform(0.5, 1.3) * scale, c)
    # Bushes: clusters of dark blobs.
    for _ in range(int(w * h / 9000)):
        bx, by = rng.uniform(0, w), rng.uniform(0, h)
        for _ in range(rng.integers(4, 12)):
            r = rng.uniform(3, 9) * scale
            px, py = bx + rng.normal(0, 6 * scale), by + rng.normal(0, 6 * scale)
            cv.circle((px + 0.4 * r, py + 0.4 * r), r, (30, 42, 20))
            cv.circle((px, py), r, np.array((46, 82, 34)) * rng.uniform(0.8, 1.3))
    # Rocks: irregular polygons with shadow and lit facet.
    for _ in range(int(w * h / 1400)):
        cx, cy = rng.uniform(0, w), rng.uniform(0, h)
        r = rng.lognormal(1.0, 0.5) * scale
        nv = rng.integers(5, 10)
        ang = np.sort(rng.uniform(0, 2 * np.pi, nv))
        rr = r * rng.uniform(0.6, 1.0, nv)
        pts = np.stack([cx + rr * np.cos(ang), cy + rr * np.sin(ang)], -1)
        tone = rng.uniform(0.7, 1.3)
        cv.poly(pts + 0.35 * r, (40, 42, 34))
        cv.poly(pts, np.array((140, 136, 128)) * tone)
        cv.poly(0.55 * pts + 0.45 * np.array([cx - 0.3 * r, cy - 0.3 * r]),
                np.array((180, 176, 168)) * tone)
    return img


_DRAWERS = {"truss": _draw_truss, "solar": _draw_solar, "field": _draw_field}


# --------------------------------------------------------------------------------------------
# Movers
# --------------------------------------------------------------------------------------------


def _mover_patch(m: Mover) -> tuple[np.ndarray, np.ndarray]:
    """Premultiplied float32 RGB (h,w,3) and alpha (h,w) for a mover, facing +x."""
    w, h = max(4, round(m.size_px[0])), max(4, round(m.size_px[1]))
    rng = np.random.default_rng([m.seed, 77])
    rgb = np.zeros((h, w, 3), np.uint8)
    a = np.zeros((h, w), np.uint8)
    cr, ca = _Canvas(rgb, 1), _Canvas(a, 1)

    def both(method, *args, color, **kw):
        getattr(cr, method)(*args, color=color, **kw)
        getattr(ca, method)(*args, color=(255, 255, 255), **kw)

    if m.kind == "vehicle":
        body = rng.choice([(200, 30, 30), (230, 200, 40), (240, 240, 240), (30, 80, 170),
                           (40, 140, 70), (220, 110, 20)])
        both("poly", [(0.02 * w, 0.40 * h), (0.98 * w, 0.40 * h), (0.98 * w, 0.82 * h),
                      (0.02 * w, 0.82 * h)], color=body)
        both("poly", [(0.08 * w, 0.40 * h), (0.18 * w, 0.04 * h), (0.66 * w, 0.04 * h),
                      (0.80 * w, 0.40 * h)], color=body)
        cr.poly([(0.20 * w, 0.10 * h), (0.40 * w, 0.10 * h), (0.40 * w, 0.38 * h),
                 (0.13 * w, 0.38 * h)], (50, 70, 90))
        cr.poly([(0.44 * w, 0.10 * h), (0.64 * w, 0.10 * h), (0.76 * w, 0.38 * h),
                 (0.44 * w, 0.38 * h)], (60, 84, 104))
        cr.line((0.42 * w, 0.42 * h), (0.42 * w, 0.78 * h), np.asarray(body) * 0.6, 1)
        cr.rect(0.02 * w, 0.55 * h, 0.98 * w, 0.6 * h, np.asarray(body) * 0.7)
        cr.rect(0.92 * w, 0.45 * h, 0.98 * w, 0.55 * h, (255, 250, 200))
        cr.rect(0.02 * w, 0.45 * h, 0.06 * w, 0.55 * h, (200, 20, 20))
        for wx in (0.22, 0.78):
            both("circle", (wx * w, 0.8 * h), 0.19 * h, color=(24, 24, 24))
            cr.circle((wx * w, 0.8 * h), 0.08 * h, (170, 170, 170))
    elif m.kind == "person":
        shirt = rng.choice([(220, 60, 40), (250, 160, 20), (40, 90, 200), (230, 230, 50)])
        both("ellipse", (0.5 * w, 0.45 * h), (0.32 * w, 0.24 * h), 0, color=shirt)
        both("circle", (0.5 * w, 0.13 * h), min(0.22 * w, 0.11 * h), color=(200, 160, 130))
        cr.ellipse((0.5 * w, 0.08 * h), (0.2 * w, 0.05 * h), 0, (250, 250, 250))  # hard hat
        for lx in (0.38, 0.62):
            both("line", (0.5 * w, 0.66 * h), (lx * w, 0.98 * h), width=0.18 * w,
                 color=(40, 44, 60))
        both("line", (0.22 * w, 0.3 * h), (0.1 * w, 0.62 * h), width=0.12 * w, color=shirt)
        both("line", (0.78 * w, 0.3 * h), (0.9 * w, 0.62 * h), width=0.12 * w, color=shirt)
        cr.rect(0.3 * w, 0.42 * h, 0.7 * w, 0.47 * h, (230, 230, 230))  # reflective band
    elif m.kind == "panel":
        # A richly textured board held up to the lens: more corners than most backgrounds,
        # the hardest case for a consensus that only counts inliers.
        noise = rng.uniform(0, 255, (max(2, h // 6), max(2, w // 6), 3)).astype(np.float32)
        rgb[:] = np.clip(cv2.resize(noise, (w, h), interpolation=cv2.INTER_CUBIC), 0, 255)
        a[:] = 255
        for _ in range(40):
            cr.circle(rng.uniform(0, 1, 2) * (w, h), rng.uniform(0.01, 0.05) * min(w, h),
                      rng.uniform(0, 255, 3))
    else:
        base = rng.uniform(60, 200, 3)
        both("rect", 0, 0, w - 1, h - 1, color=base)
        for _ in range(12):
            cr.line(rng.uniform(0, 1, 2) * (w, h), rng.uniform(0, 1, 2) * (w, h),
                    rng.uniform(0, 255, 3), 1)
    if m.velocity_px_s[0] < 0:
        rgb, a = rgb[:, ::-1].copy(), a[:, ::-1].copy()
    alpha = a.astype(np.float32) / 255.0
    return rgb.astype(np.float32) * alpha[..., None], alpha


def _bounce(p0: float, v: float, t: np.ndarray, lo: float, hi: float) -> np.ndarray:
    span = hi - lo
    if span <= 0:
        return np.full_like(t, (lo + hi) / 2)
    u = np.mod(np.clip(p0, lo, hi) - lo + v * t, 2 * span)
    return lo + np.where(u <= span, u, 2 * span - u)


# --------------------------------------------------------------------------------------------
# Clip
# --------------------------------------------------------------------------------------------


class SyntheticClip:
    """A synthetic clip with exact ground truth. Frames are rendered on demand (streaming).

    All per-frame arrays below are read-only numpy arrays indexed by frame number ``t``:

    ``times_s`` (n,): frame time ``t / fps`` in seconds.
    ``world_to_frame`` (n,3,3): ``G_t``, world → frame pixel coordinates.
    ``smooth_world_to_frame`` (n,3,3): the same camera without shake.
    ``inter_frame`` (n,3,3): ``H_t`` (frame t−1 → frame t), identity at 0, NaN at cuts.
    ``cut``, ``textureless``, ``observable`` (n,) bool: see :meth:`ground_truth`.
    """

    def __init__(self, spec: SceneSpec) -> None:
        self.spec = spec
        self.width, self.height, self.fps = spec.width, spec.height, float(spec.fps)
        self.n_frames = spec.n_frames
        self._f = spec.focal_px
        self._build_shake_tables()

        t = np.arange(self.n_frames) / self.fps
        grid = np.linspace(0.0, spec.duration_s, max(2, math.ceil(spec.duration_s * _BOUND_RATE_HZ)
                                                       + 1))
        self._offset, self.world_size = self._world_bounds(grid)
        self.times_s = t
        self._path = self._params(t, shake=True)
        self._smooth = self._params(t, shake=False)
        g = self._world_matrices(self._path)
        gs = self._world_matrices(self._smooth)

        shot = np.searchsorted(np.sort(np.asarray(spec.cuts_s, float)), t, side="right")
        cut = np.zeros(self.n_frames, bool)
        cut[1:] = shot[1:] != shot[:-1]
        tl = np.zeros(self.n_frames, bool)
        if spec.textureless_s is not None:
            t0, t1 = spec.textureless_s
            tl = (t >= t0) & (t < t1)
        obs = np.ones(self.n_frames, bool)
        obs[0] = False
        obs &= ~cut & ~tl
        obs[1:] &= ~tl[:-1]

        h = np.empty_like(g)
        h[0] = np.eye(3)
        h[1:] = normalise(g[1:] @ np.linalg.inv(g[:-1]))
        h[cut] = np.nan
        self.shot, self.cut, self.textureless, self.observable = shot, cut, tl, obs
        self.world_to_frame, self.smooth_world_to_frame, self.inter_frame = g, gs, h
        for arr in (t, g, gs, h, shot, cut, tl, obs):
            arr.setflags(write=False)

        self._worlds: dict[int, np.ndarray] = {}
        self._sky_world: np.ndarray | None = None
        self._movers = [self._prepare_mover(m, gs[0]) for m in spec.movers]
        self._telemetry = self._prepare_telemetry() if spec.telemetry else None

    # -- camera ------------------------------------------------------------------------------

    def _build_shake_tables(self) -> None:
        rng = np.random.default_rng([self.spec.seed, 1])
        self._sines = []  # (channel, amplitude, freq, phase) arrays
        for comp in self.spec.shake.sinusoids:
            for ch in _CHANNELS:
                self._sines.append((ch, np.array([getattr(comp, ch)]), np.array([comp.freq_hz]),
                                    rng.uniform(0, 2 * np.pi, 1)))
        for band in self.spec.shake.bands:
            n = max(1, band.partials)
            for ch in _CHANNELS:
                # Always draw, so changing one amplitude leaves the other channels' phases alone.
                f = rng.uniform(band.low_hz, band.high_hz, n)
                ph = rng.uniform(0, 2 * np.pi, n)
                amp = np.full(n, getattr(band, ch) * math.sqrt(2.0 / n))
                self._sines.append((ch, amp, f, ph))

    def _shake(self, t: np.ndarray) -> dict[str, np.ndarray]:
        out = {ch: np.zeros_like(t) for ch in _CHANNELS}
        for ch, amp, f, ph in self._sines:
            out[ch] = out[ch] + (amp * np.sin(2 * np.pi * f * t[:, None] + ph)).sum(axis=1)
        return out

    def _params(self, t: np.ndarray, shake: bool) -> dict[str, np.ndarray]:
        """Camera parameters in path coordinates (the shake-free camera starts at x = y = 0)."""
        m, model = self.spec.motion, self.spec.model
        p = {
            "x": m.pan_px_s * t,
            "y": -m.climb_px_s * t,
            "roll_deg": m.roll_deg + m.roll_deg_s * t,
            "log_zoom": math.log(m.zoom) + m.zoom_per_s * t,
            "shear": m.shear + m.shear_per_s * t,
            "aspect": m.aspect + m.aspect_per_s * t,
            "tilt_x_deg": m.tilt_x_deg + m.tilt_x_deg_s * t,
            "tilt_y_deg": m.tilt_y_deg + m.tilt_y_deg_s * t,
        }
        if shake:
            s = self._shake(t)
            p["roll_deg"] = p["roll_deg"] + s["roll_deg"]
            p["log_zoom"] = p["log_zoom"] + s["zoom"]
            p["shear"] = p["shear"] + s["shear"]
            if model == "perspective":
                # Real airframe shake is mostly rotation: turn the displacement into tilt that
                # moves the content at the centre by the same amount.
                z = np.exp(p["log_zoom"])
                p["tilt_x_deg"] = p["tilt_x_deg"] + np.degrees(np.arctan(-s["x_px"] * z / self._f))
                p["tilt_y_deg"] = p["tilt_y_deg"] + np.degrees(np.arctan(-s["y_px"] * z / self._f))
            else:
                p["x"] = p["x"] + s["x_px"]
                p["y"] = p["y"] + s["y_px"]
        zero = np.zeros_like(t)
        if model == "translation":
            p["roll_deg"] = p["log_zoom"] = zero
        if model in ("translation", "similarity"):
            p["shear"] = p["aspect"] = zero
        if model != "perspective":
            p["tilt_x_deg"] = p["tilt_y_deg"] = zero
        return p

    def _world_matrices(self, p: dict[str, np.ndarray], offset=None) -> np.ndarray:
        ox, oy = self._offset if offset is None else offset
        q = {**p, "x": p["x"] + ox, "y": p["y"] + oy}
        return _matrices(q, self.width, self.height, self._f)

    def _world_bounds(self, grid: np.ndarray) -> tuple[tuple[float, float], tuple[int, int]]:
        w, h = self.width, self.height
        corners = np.array([[-0.5, -0.5, 1], [w - 0.5, -0.5, 1], [w - 0.5, h - 0.5, 1],
                            [-0.5, h - 0.5, 1]], float).T
        pts = []
        for shake in (True, False):
            g = self._world_matrices(self._params(grid, shake), offset=(0.0, 0.0))
            q = np.linalg.inv(g) @ corners
            if np.any(q[:, 2, :] <= 1e-6 * np.abs(q[:, :2, :]).max()):
                raise ValueError("camera tilt too large: the view reaches the horizon")
            pts.append((q[:, :2, :] / q[:, 2:3, :]).transpose(0, 2, 1).reshape(-1, 2))
        pts = np.concatenate(pts)
        margin = 24.0
        lo = np.floor(pts.min(axis=0) - margin)
        hi = np.ceil(pts.max(axis=0) + margin)
        size = (int(hi[0] - lo[0]), int(hi[1] - lo[1]))
        if size[0] * size[1] * self.spec.supersample ** 2 > _MAX_WORLD_PIXELS:
            raise ValueError(f"camera covers too much ground (world {size[0]}x{size[1]} px); "
                             "shorten the clip or slow the motion")
        return (float(-lo[0]), float(-lo[1])), size

    # -- worlds ------------------------------------------------------------------------------

    def _style_of_shot(self, shot: int) -> str:
        if shot == 0:
            return self.spec.style
        if shot - 1 < len(self.spec.cut_styles):
            return self.spec.cut_styles[shot - 1]
        return STYLES[(STYLES.index(self.spec.style) + shot) % len(STYLES)]

    def world_image(self, shot: int = 0) -> np.ndarray:
        """The world canvas of a shot, uint8 RGB at ``supersample``× nominal resolution."""
        if shot not in self._worlds:
            w, h = self.world_size
            rng = np.random.default_rng([self.spec.seed, 1000 + shot])
            z0 = self.spec.motion.zoom
            view = (self.width / z0, self.height / z0)
            img = _DRAWERS[self._style_of_shot(shot)](rng, w, h, self.spec.supersample,
                                                      self._offset, view)
            k = self.spec.supersample
            # Soften sub-pixel detail so bilinear sampling does not alias.
            self._worlds[shot] = cv2.GaussianBlur(img, (0, 0), 0.7 * k)
        return self._worlds[shot]

    def set_world(self, image: np.ndarray, shot: int = 0) -> None:
        """Use ``image`` (uint8 RGB, ``supersample``× the nominal ``world_size``) as a shot's world.

        For example a photograph of the ground instead of a drawn canvas; the ground truth is
        unchanged because it depends only on the camera.
        """
        k = self.spec.supersample
        want = (self.world_size[1] * k, self.world_size[0] * k, 3)
        if image.shape != want or image.dtype != np.uint8:
            raise ValueError(f"world image must be uint8 with shape {want}")
        self._worlds[shot] = np.ascontiguousarray(image)

    def _sky(self) -> np.ndarray:
        if self._sky_world is None:
            w, h = self.world_size
            rng = np.random.default_rng([self.spec.seed, 999])
            self._sky_world = _draw_sky_world(rng, w, h, self.spec.supersample, None, None)
        return self._sky_world

    # -- overlays ----------------------------------------------------------------------------

    def _prepare_mover(self, m: Mover, g0: np.ndarray) -> dict:
        rgb, alpha = _mover_patch(m)
        ph, pw = alpha.shape
        t = self.times_s
        if m.anchor == "world":
            c = np.linalg.inv(g0) @ np.array([m.start_px[0], m.start_px[1], 1.0])
            cx = c[0] / c[2] + m.velocity_px_s[0] * t
            cy = c[1] / c[2] + m.velocity_px_s[1] * t
            place = _translations(cx - (pw - 1) / 2, cy - (ph - 1) / 2)
            mats = np.asarray(self.world_to_frame) @ place
        else:
            cx = _bounce(m.start_px[0], m.velocity_px_s[0], t, pw / 2, self.width - pw / 2)
            cy = _bounce(m.start_px[1], m.velocity_px_s[1], t, ph / 2, self.height - ph / 2)
            mats = _translations(cx - (pw - 1) / 2, cy - (ph - 1) / 2)
        corners = np.array([[-0.5, -0.5, 1], [pw - 0.5, -0.5, 1], [pw - 0.5, ph - 0.5, 1],
                            [-0.5, ph - 0.5, 1]], float).T
        q = mats @ corners
        xy = q[:, :2, :] / q[:, 2:3, :]
        boxes = np.concatenate([xy.min(axis=2), xy.max(axis=2)], axis=1)  # x0, y0, x1, y1
        return {"rgb": rgb, "alpha": alpha, "mats": mats, "boxes": boxes}

    def _paste_mover(self, frame: np.ndarray, mask: np.ndarray, mv: dict, t: int) -> None:
        x0, y0, x1, y1 = mv["boxes"][t]
        ix0, iy0 = max(0, math.floor(x0)), max(0, math.floor(y0))
        ix1, iy1 = min(self.width, math.ceil(x1) + 1), min(self.height, math.ceil(y1) + 1)
        if ix1 <= ix0 or iy1 <= iy0:
            return
        m = _translations(np.array([-ix0]), np.array([-iy0]))[0] @ mv["mats"][t]
        size = (ix1 - ix0, iy1 - iy0)
        rgb = cv2.warpPerspective(mv["rgb"], m, size, flags=cv2.INTER_LINEAR,
                                  borderMode=cv2.BORDER_CONSTANT, borderValue=0)
        a = cv2.warpPerspective(mv["alpha"], m, size, flags=cv2.INTER_LINEAR,
                                borderMode=cv2.BORDER_CONSTANT, borderValue=0)
        roi = frame[iy0:iy1, ix0:ix1]
        roi[:] = roi * (1 - a[..., None]) + rgb
        mask[iy0:iy1, ix0:ix1] |= a > 0.02

    def _prepare_telemetry(self) -> dict:
        h, w = self.height, self.width
        sh = max(14, round(0.065 * h))
        font = cv2.FONT_HERSHEY_SIMPLEX
        sample = self._telemetry_text(0)
        (tw, th), _ = cv2.getTextSize(sample, font, 1.0, 1)
        scale = min(0.55 * sh / th, 0.96 * w / tw)
        return {"y0": h - sh, "font": font, "scale": scale,
                "org": (round(0.02 * w), h - sh + round((sh + th * scale) / 2))}

    def _telemetry_text(self, t: int) -> str:
        # Invented flight readouts derived from the true deliberate motion, so digits change.
        m = self.spec.motion
        time_s = t / self.fps
        alt = 48.0 / math.exp(self._smooth["log_zoom"][t]) + 0.4 * math.sin(0.7 * time_s)
        gs = 0.05 * math.hypot(m.pan_px_s, m.climb_px_s) + 0.05 * math.sin(1.3 * time_s)
        hdg = (math.degrees(math.atan2(m.pan_px_s, m.climb_px_s)) + 360.0) % 360.0
        mins, secs = divmod(734.0 + time_s, 60.0)
        return (f"ALT {alt:5.1f}m  GS {gs:4.1f}m/s  HDG {hdg:03.0f}  "
                f"BAT {87 - 0.05 * time_s:4.1f}%  T+{int(mins):02d}:{secs:05.2f}")

    def _draw_telemetry(self, frame: np.ndarray, mask: np.ndarray, t: int) -> None:
        tel = self._telemetry
        frame[tel["y0"]:] = (18, 20, 22)
        cv2.putText(frame, self._telemetry_text(t), tel["org"], tel["font"], tel["scale"],
                    (235, 235, 225), 1, cv2.LINE_AA)
        mask[tel["y0"]:] = True

    # -- rendering ---------------------------------------------------------------------------

    def frame(self, t: int, return_mask: bool = False):
        """Render frame ``t`` as uint8 RGB (h, w, 3).

        With ``return_mask=True`` returns ``(rgb, mask)`` where ``mask`` (h, w) bool marks pixels
        that do not follow the camera motion (movers and the telemetry strip).
        """
        if not 0 <= t < self.n_frames:
            raise IndexError(f"frame {t} out of range 0..{self.n_frames - 1}")
        k, w, h = self.spec.supersample, self.width, self.height
        world = self._sky() if self.textureless[t] else self.world_image(int(self.shot[t]))
        g = self.world_to_frame[t]
        if k > 1:
            g = rescale(g, (k, k), normalised=False)
        img = cv2.warpPerspective(world, g, (w * k, h * k), flags=cv2.INTER_LINEAR,
                                  borderMode=cv2.BORDER_REPLICATE)
        if k > 1:
            img = cv2.resize(img, (w, h), interpolation=cv2.INTER_AREA)
        mask = np.zeros((h, w), bool)
        if self._movers and not self.textureless[t]:
            f = img.astype(np.float32)
            for mv in self._movers:
                self._paste_mover(f, mask, mv, t)
            img = f
        if self.spec.contrast < 1.0:
            img = HAZE_GREY + self.spec.contrast * (img.astype(np.float32) - HAZE_GREY)
        if self.spec.noise_sigma > 0:
            rng = np.random.default_rng([self.spec.seed, 2, t])
            img = img + rng.standard_normal((h, w, 3), dtype=np.float32) * self.spec.noise_sigma
        if img.dtype != np.uint8:
            img = np.clip(np.rint(img), 0, 255).astype(np.uint8, order="C")
        if self._telemetry is not None:
            self._draw_telemetry(img, mask, t)
        return (img, mask) if return_mask else img

    def frames(self) -> Iterator[tuple[int, np.ndarray]]:
        """Yield ``(t, rgb)`` for every frame in order, rendering one at a time."""
        for t in range(self.n_frames):
            yield t, self.frame(t)

    def __len__(self) -> int:
        return self.n_frames

    # -- ground truth ------------------------------------------------------------------------

    def camera_path(self, smooth: bool = False) -> dict[str, np.ndarray]:
        """Per-frame camera parameters (n,) in world coordinates.

        ``x_px``, ``y_px``: world point imaged at the frame centre (before perspective tilt);
        ``roll_deg``; ``zoom`` (frame px per world px); ``shear``; ``aspect`` (ln ratio);
        ``tilt_x_deg``, ``tilt_y_deg``. ``smooth=True``: deliberate motion only.
        """
        p = self._smooth if smooth else self._path
        return {
            "x_px": p["x"] + self._offset[0],
            "y_px": p["y"] + self._offset[1],
            "roll_deg": p["roll_deg"].copy(),
            "zoom": np.exp(p["log_zoom"]),
            "shear": p["shear"].copy(),
            "aspect": p["aspect"].copy(),
            "tilt_x_deg": p["tilt_x_deg"].copy(),
            "tilt_y_deg": p["tilt_y_deg"].copy(),
        }

    def ground_truth(self) -> dict[str, np.ndarray]:
        """All ground truth as a flat dict of numpy arrays (``np.savez``-ready).

        ``inter_frame`` (n,3,3): ``H_t``, frame t−1 → t pixels, NaN at cuts.
        ``world_to_frame`` / ``smooth_world_to_frame`` (n,3,3): with / without shake.
        ``shake_correction`` (n,3,3): ``G_smooth · G^-1``, maps each shaky frame onto the shake-free
        camera (the ideal stabilising warp). ``times_s`` (n,).
        ``cam_*`` / ``smooth_*``: :meth:`camera_path` keys with those prefixes.
        ``cut`` (n,) bool: frame starts a new shot (H undefined). ``textureless`` (n,) bool: frame
        shows plain sky (H is the true camera motion but cannot be seen). ``observable`` (n,) bool:
        frames t−1 and t show the same textured scene, so H_t is recoverable from the pixels.
        ``shot`` (n,) int. ``mover_boxes`` (n, k, 4): x0, y0, x1, y1 frame px (unclipped).
        ``telemetry_box`` (4,): x0, y0, x1, y1 of the overlay strip (pixel-centre bounds), or NaN.
        """
        gt: dict[str, np.ndarray] = {
            "times_s": np.array(self.times_s),
            "inter_frame": np.array(self.inter_frame),
            "world_to_frame": np.array(self.world_to_frame),
            "smooth_world_to_frame": np.array(self.smooth_world_to_frame),
            "shake_correction": normalise(self.smooth_world_to_frame
                                           @ np.linalg.inv(self.world_to_frame)),
            "cut": np.array(self.cut),
            "textureless": np.array(self.textureless),
            "observable": np.array(self.observable),
            "shot": np.array(self.shot),
            "mover_boxes": (np.stack([m["boxes"] for m in self._movers], axis=1)
                            if self._movers else np.zeros((self.n_frames, 0, 4))),
            "telemetry_box": (np.array([0, self._telemetry["y0"], self.width - 1,
                                        self.height - 1], float)
                              if self._telemetry else np.full(4, np.nan)),
        }
        for prefix, smooth in (("cam_", False), ("smooth_", True)):
            for key, val in self.camera_path(smooth).items():
                gt[prefix + key] = val
        return gt
