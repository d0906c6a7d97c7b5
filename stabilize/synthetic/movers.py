"""Movers: independently moving textured objects in a synthetic clip (outliers to the camera).

A mover's texture is drawn once (:func:`mover_patch`), its placement per frame worked out
once (:func:`mover_track`), and each frame it is warped and blended in
(:func:`paste_mover`). Coordinates are frame pixels (pixel centres, x right, y down).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import cv2
import numpy as np

from .camera import translations
from .canvas import Canvas

__all__ = ["Mover", "mover_patch", "mover_track", "movers_covering", "paste_mover"]

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

    Sizes are chosen so that the summed bounding-box area is ``share · width · height`` pixels²
    (less where a box would be over 0.9 of the frame's width or height, which caps it);
    positions and directions are drawn from ``seed``; speeds are ``speed_px_s`` (px/s).

    Parameters
    ----------
    share : covered share of the frame area, in [0, 0.8).
    width, height : frame size, pixels.
    count : number of movers.
    speed_px_s : speed, pixels per second.
    seed : positions, directions and textures.
    anchor : ``"frame"`` or ``"world"`` (see :class:`Mover`).

    Returns
    -------
    tuple of Mover
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


def mover_patch(m: Mover) -> tuple[np.ndarray, np.ndarray]:
    """The texture of a mover, facing its direction of travel.

    Parameters
    ----------
    m : the mover; its ``seed`` varies the colours and texture.

    Returns
    -------
    (rgb, alpha) : premultiplied float32 RGB (h, w, 3) and alpha (h, w) in [0, 1], of the
    mover's ``size_px`` rounded (at least 4 px).
    """
    w, h = max(4, round(m.size_px[0])), max(4, round(m.size_px[1]))
    rng = np.random.default_rng([m.seed, 77])
    rgb = np.zeros((h, w, 3), np.uint8)
    a = np.zeros((h, w), np.uint8)
    cr, ca = Canvas(rgb, 1), Canvas(a, 1)

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


def mover_track(m: Mover, times_s: np.ndarray, world_to_frame: np.ndarray, g0: np.ndarray,
                width: int, height: int) -> dict:
    """A mover's texture and its placement in every frame.

    Parameters
    ----------
    m : the mover.
    times_s : (n,) frame times, seconds.
    world_to_frame : (n, 3, 3) the clip's ``G_t`` (used by world-anchored movers).
    g0 : (3, 3) the shake-free ``G_0``: ``start_px`` is a point of the shake-free frame 0.
    width, height : frame size, pixels.

    Returns
    -------
    dict : ``rgb``, ``alpha`` (:func:`mover_patch`), ``mats`` (n, 3, 3) patch → frame
    pixels, ``boxes`` (n, 4) x0, y0, x1, y1 of the patch in frame pixels (unclipped).
    """
    rgb, alpha = mover_patch(m)
    ph, pw = alpha.shape
    t = times_s
    if m.anchor == "world":
        c = np.linalg.inv(g0) @ np.array([m.start_px[0], m.start_px[1], 1.0])
        cx = c[0] / c[2] + m.velocity_px_s[0] * t
        cy = c[1] / c[2] + m.velocity_px_s[1] * t
        place = translations(cx - (pw - 1) / 2, cy - (ph - 1) / 2)
        mats = np.asarray(world_to_frame) @ place
    else:
        cx = _bounce(m.start_px[0], m.velocity_px_s[0], t, pw / 2, width - pw / 2)
        cy = _bounce(m.start_px[1], m.velocity_px_s[1], t, ph / 2, height - ph / 2)
        mats = translations(cx - (pw - 1) / 2, cy - (ph - 1) / 2)
    corners = np.array([[-0.5, -0.5, 1], [pw - 0.5, -0.5, 1], [pw - 0.5, ph - 0.5, 1],
                        [-0.5, ph - 0.5, 1]], float).T
    q = mats @ corners
    xy = q[:, :2, :] / q[:, 2:3, :]
    boxes = np.concatenate([xy.min(axis=2), xy.max(axis=2)], axis=1)  # x0, y0, x1, y1
    return {"rgb": rgb, "alpha": alpha, "mats": mats, "boxes": boxes}


def paste_mover(frame: np.ndarray, mask: np.ndarray, mv: dict, t: int, width: int,
                height: int) -> None:
    """Blend a mover into frame ``t`` in place.

    Parameters
    ----------
    frame : (height, width, 3) float32 RGB, written in place.
    mask : (height, width) bool, set where the mover covers the frame (alpha > 0.02).
    mv : from :func:`mover_track`.
    t : frame index.
    width, height : frame size, pixels.
    """
    x0, y0, x1, y1 = mv["boxes"][t]
    ix0, iy0 = max(0, math.floor(x0)), max(0, math.floor(y0))
    ix1, iy1 = min(width, math.ceil(x1) + 1), min(height, math.ceil(y1) + 1)
    if ix1 <= ix0 or iy1 <= iy0:
        return
    m = translations(np.array([-ix0]), np.array([-iy0]))[0] @ mv["mats"][t]
    size = (ix1 - ix0, iy1 - iy0)
    rgb = cv2.warpPerspective(mv["rgb"], m, size, flags=cv2.INTER_LINEAR,
                              borderMode=cv2.BORDER_CONSTANT, borderValue=0)
    a = cv2.warpPerspective(mv["alpha"], m, size, flags=cv2.INTER_LINEAR,
                            borderMode=cv2.BORDER_CONSTANT, borderValue=0)
    roi = frame[iy0:iy1, ix0:ix1]
    roi[:] = roi * (1 - a[..., None]) + rgb
    mask[iy0:iy1, ix0:ix1] |= a > 0.02

