"""Drawing primitives for synthetic worlds: an anti-aliased canvas, value noise, a sky.

World canvases are drawn in nominal coordinates (pixel centres, x right, y down) onto a grid
``k`` times finer (the clip's supersampling factor); :class:`Canvas` does the mapping, with
OpenCV's sub-pixel drawing (4 fractional bits).
"""

from __future__ import annotations

import cv2
import numpy as np

__all__ = ["Canvas", "draw_sky", "draw_sky_world", "fbm", "smoothstep"]

_SHIFT = 4


class Canvas:
    """Draws onto ``img`` (an array of ``k``× nominal resolution) in nominal pixel
    coordinates; colours are clipped to 0–255."""
    def __init__(self, img: np.ndarray, k: int) -> None:
        self.img, self.k = img, k

    def pt(self, p) -> np.ndarray:
        """Nominal pixel coordinates to OpenCV's fixed-point coordinates on the fine grid.

        Parameters
        ----------
        p : (..., 2) points (x, y), nominal pixels (pixel-centre convention of
            :mod:`stabilize.geometry`).

        Returns
        -------
        (..., 2) int32 fine-grid coordinates ((p + 0.5)·k − 0.5) with 4 fractional bits.
        """
        q = (np.asarray(p, float) + 0.5) * self.k - 0.5
        return np.round(q * (1 << _SHIFT)).astype(np.int32)

    def poly(self, pts, color) -> None:
        """Fill a polygon, anti-aliased.

        Parameters
        ----------
        pts : (m, 2) vertices (x, y), nominal pixels.
        color : fill colour, three values in the canvas's channel order, 0–255 (clipped).
        """
        cv2.fillPoly(self.img, [self.pt(pts).reshape(-1, 1, 2)], _c(color), cv2.LINE_AA, _SHIFT)

    def line(self, p0, p1, color, width: float) -> None:
        """Draw a straight line, anti-aliased.

        Parameters
        ----------
        p0, p1 : (2,) end points (x, y), nominal pixels.
        color : fill colour, three values in the canvas's channel order, 0–255 (clipped).
        width : line width, nominal pixels (at least one fine pixel).
        """
        a, b = self.pt(p0), self.pt(p1)
        cv2.line(self.img, (int(a[0]), int(a[1])), (int(b[0]), int(b[1])), _c(color),
                 max(1, round(width * self.k)), cv2.LINE_AA, _SHIFT)

    def polyline(self, pts, color, width: float) -> None:
        """Draw an open polyline, anti-aliased.

        Parameters
        ----------
        pts : (m, 2) vertices (x, y), nominal pixels.
        color : fill colour, three values in the canvas's channel order, 0–255 (clipped).
        width : line width, nominal pixels (at least one fine pixel).
        """
        cv2.polylines(self.img, [self.pt(pts).reshape(-1, 1, 2)], False, _c(color),
                      max(1, round(width * self.k)), cv2.LINE_AA, _SHIFT)

    def circle(self, c, r: float, color) -> None:
        """Fill a disc, anti-aliased.

        Parameters
        ----------
        c : (2,) centre (x, y), nominal pixels.
        r : radius, nominal pixels.
        color : fill colour, three values in the canvas's channel order, 0–255 (clipped).
        """
        a = self.pt(c)
        cv2.circle(self.img, (int(a[0]), int(a[1])), max(1, round(r * self.k * (1 << _SHIFT))),
                   _c(color), -1, cv2.LINE_AA, _SHIFT)

    def ellipse(self, c, axes, angle_deg: float, color) -> None:
        """Fill an ellipse, anti-aliased.

        Parameters
        ----------
        c : (2,) centre (x, y), nominal pixels.
        axes : (2,) half-axes, nominal pixels.
        angle_deg : rotation of the first axis, degrees (OpenCV's sense: from +x toward +y,
            clockwise on screen since y points down).
        color : fill colour, three values in the canvas's channel order, 0–255 (clipped).
        """
        a = self.pt(c)
        ax = (max(1, round(axes[0] * self.k * (1 << _SHIFT))),
              max(1, round(axes[1] * self.k * (1 << _SHIFT))))
        cv2.ellipse(self.img, (int(a[0]), int(a[1])), ax, float(angle_deg), 0, 360, _c(color), -1,
                    cv2.LINE_AA, _SHIFT)

    def rect(self, x0, y0, x1, y1, color) -> None:
        """Fill an axis-aligned rectangle with corners (x0, y0) and (x1, y1).

        Parameters
        ----------
        x0, y0, x1, y1 : corner coordinates, nominal pixels.
        color : fill colour, three values in the canvas's channel order, 0–255 (clipped).
        """
        self.poly([(x0, y0), (x1, y0), (x1, y1), (x0, y1)], color)

    def beam(self, p0, p1, width: float, color, shade: float = 0.0) -> None:
        """A straight member as a quad, with a lit and a shadowed edge.

        Parameters
        ----------
        p0, p1 : (2,) end points (x, y) of the member's centre line, nominal pixels.
        width : member width, nominal pixels.
        color : fill colour, three values in the canvas's channel order, 0–255 (clipped).
        shade : relative brightening of one edge and darkening of the other, 0 for none
            (edges drawn only when the member is at least 3 fine pixels wide).
        """
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


def fbm(rng: np.random.Generator, hb: int, wb: int, cell_lo: float, cell_hi: float,
         gain: float = 0.55) -> np.ndarray:
    """Fractal value noise in [0, 1], float32 (hb, wb); cells in canvas pixels.

    Parameters
    ----------
    rng : seeded generator.
    hb, wb : canvas size, pixels.
    cell_lo, cell_hi : smallest and largest cell, canvas pixels (octaves halve the cell).
    gain : amplitude factor per octave.

    Returns
    -------
    (hb, wb) float32 in [0, 1].
    """
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


def smoothstep(a: float, b: float, x: np.ndarray) -> np.ndarray:
    """Hermite step from 0 at ``a`` to 1 at ``b`` (3t² − 2t³; common practice).

    Parameters
    ----------
    a, b : where the step starts and ends (units of ``x``; a ≠ b).
    x : values to map, any shape.

    Returns
    -------
    Array of the shape of ``x``, 0 to 1.
    """
    t = np.clip((x - a) / (b - a), 0.0, 1.0)
    return t * t * (3 - 2 * t)


def draw_sky(rng: np.random.Generator, hb: int, wb: int, k: int,
             clouds: bool = True) -> np.ndarray:
    """A blue sky gradient (float32 RGB, (hb, wb, 3), canvas pixels) with fractal clouds, or
    without them a faintly mottled plain sky.

    Parameters
    ----------
    rng : seeded generator.
    hb, wb : canvas size, pixels.
    k : supersampling factor (scales the noise cells).
    clouds : draw clouds.

    Returns
    -------
    (hb, wb, 3) float32 RGB, 0–255.
    """
    y = np.linspace(0.0, 1.0, hb, dtype=np.float32)[:, None, None]
    top, low = np.array([62, 112, 186], np.float32), np.array([186, 208, 232], np.float32)
    img = np.broadcast_to(top * (1 - y) + low * y, (hb, wb, 3)).astype(np.float32)
    if clouds:
        n = fbm(rng, hb, wb, 4 * k, 256 * k, gain=0.6)
        shade = fbm(rng, hb, wb, 16 * k, 128 * k)
        m = smoothstep(0.55, 0.85, n)
        cloud = (214 + 38 * shade)[..., None] * np.array([1.0, 1.0, 1.0], np.float32)
        img = img * (1 - m[..., None]) + cloud * m[..., None]
    else:
        img = img + (fbm(rng, hb, wb, 64 * k, 512 * k)[..., None] - 0.5) * 3.0
    return img


def draw_sky_world(rng, w, h, k, ref, view) -> np.ndarray:
    """A plain sky world (uint8 RGB, (h·k, w·k, 3)); ``ref`` and ``view`` are unused, as
    for the other world drawers.

    Parameters
    ----------
    rng : seeded generator.
    w, h : world size, nominal pixels.
    k : supersampling factor.
    ref, view : unused (the world drawers' common signature).

    Returns
    -------
    (h·k, w·k, 3) uint8 RGB.
    """
    sky = draw_sky(rng, h * k, w * k, k, clouds=False)
    return np.clip(sky, 0, 255).astype(np.uint8, order="C")
