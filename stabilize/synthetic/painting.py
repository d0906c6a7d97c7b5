"""Scene painting: the procedurally drawn worlds a synthetic camera flies over, one per style.

``truss`` (a steel through-truss bridge from the side, sky and river), ``solar`` (rows of
solar panels from above) and ``field`` (a field with tracks and rocks from above). Each is
drawn once per shot from a seeded generator at ``k``× nominal resolution.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np

from .canvas import Canvas, draw_sky, fbm, smoothstep

__all__ = ["STYLES", "TRUSS_DECK_FRAC", "draw_world"]

Style = Literal["truss", "solar", "field"]
STYLES: tuple[str, ...] = ("truss", "solar", "field")

#: In the "truss" world the deck surface (where vehicles drive) lies at this fraction of the
#: height of the initial shake-free view, measured from its top edge.
TRUSS_DECK_FRAC = 0.70


def _draw_truss(rng: np.random.Generator, w: int, h: int, k: int, ref, view) -> np.ndarray:
    """Steel through-truss bridge seen from the side against a cloudy sky, river below."""
    hb, wb = h * k, w * k
    vh = view[1]
    top = ref[1] - vh / 2
    y_top, y_bot = top + 0.16 * vh, top + 0.64 * vh
    deck0, deck1 = top + TRUSS_DECK_FRAC * vh, top + 0.78 * vh
    img = draw_sky(rng, hb, wb, k)
    # River and far bank below the deck.
    rows = (np.arange(hb, dtype=np.float32)[:, None] + 0.5) / k - 0.5
    water = (rows > deck1).astype(np.float32) * np.ones((1, wb), np.float32)
    river = fbm(rng, hb, wb, 2 * k, 64 * k)
    wcol = np.stack([40 + 40 * river, 70 + 45 * river, 78 + 40 * river], -1)
    img = img * (1 - water[..., None]) + wcol * water[..., None]
    img = np.clip(img, 0, 255).astype(np.uint8, order="C")
    cv = Canvas(img, k)

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
    n1 = fbm(rng, hb, wb, 2 * k, 128 * k)
    n2 = fbm(rng, hb, wb, 1 * k, 8 * k)
    base = np.stack([128 + 40 * n1 + 30 * n2, 120 + 36 * n1 + 28 * n2, 106 + 30 * n1 + 26 * n2],
                    -1)
    img = np.clip(base, 0, 255).astype(np.uint8, order="C")
    cv = Canvas(img, k)
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
    n1 = fbm(rng, hb, wb, 2 * k, 256 * k)
    n2 = fbm(rng, hb, wb, 1 * k, 6 * k)
    dirt = smoothstep(0.6, 0.75, fbm(rng, hb, wb, 8 * k, 256 * k))
    grass = np.stack([70 + 60 * n1 + 30 * n2, 100 + 50 * n1 + 35 * n2, 40 + 20 * n1 + 20 * n2], -1)
    img = grass
    soil = np.stack([120 + 30 * n2, 94 + 26 * n2, 66 + 20 * n2], -1)
    img = img * (1 - dirt[..., None]) + soil * dirt[..., None]
    img = np.clip(img, 0, 255).astype(np.uint8, order="C")
    cv = Canvas(img, k)
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


def draw_world(style: str, rng: np.random.Generator, w: int, h: int, k: int,
               ref: tuple[float, float], view: tuple[float, float]) -> np.ndarray:
    """Draw the world of one style.

    Parameters
    ----------
    style : one of :data:`STYLES`.
    rng : the shot's seeded generator.
    w, h : world size, nominal pixels.
    k : supersampling factor; the canvas is (h·k, w·k).
    ref : world coordinates (px) of the shake-free camera's start (the world offset).
    view : (width, height) of the initial view in world pixels.

    Returns
    -------
    (h·k, w·k, 3) uint8 RGB.
    """
    return _DRAWERS[style](rng, w, h, k, ref, view)

