"""Pinned overlays: still regions of the source frame copied unwarped into the steadied frame.

Burnt-in telemetry, a timestamp or a logo is drawn by the camera relative to the frame's
edges, not to the scene. Warped with the picture it tilts, jiggles and, near an edge, is
zoomed out of the crop window. A pinned region is instead copied pixel for pixel from the
source frame into the output frame at the same pixel coordinates:

* **Place.** The output frame has the source's size, so the region keeps its place relative
  to the frame's edges, unscaled. Carried through the framing zoom Z about the centre
  (:func:`stabilize.framing.zoom`) it would be enlarged by 1 / (1 − 2·margin) and pushed
  outward, and anything within ``margin`` of an edge (a telemetry strip along the bottom)
  would leave the frame; unscaled it stays whole and as sharp as the source (no
  resampling).
* **Edge.** Hard: the rectangle is copied as it is, no feathering. Inside it the picture is
  the source's, outside the steadied one; a feathered seam would blend the two differently
  moving pictures into a ghosted band, and the regions found have room around the text
  (below).
* **Room.** A found region is the grid cells whose corners stayed still
  (:mod:`stabilize.overlays`); the last glyph of a line or the top of a backing band may
  reach into a neighbouring cell that collected too few corners. Found regions are widened
  by half a grid cell on every side (:data:`PIN_ROOM_CELLS`, our choice); ``ignore`` regions
  are the user's exact rectangles and are pinned as given.
* **Alignment.** Rectangles are clipped to the frame and widened outward to even pixel
  coordinates, so the chroma planes of 4:2:0 video copy exactly the same area.

Only what lies inside a pinned rectangle is kept; the warped copy of an overlay can still
show beside it where the correction moves it less than the rectangle's spare room (a small
margin), and the parts of an overlay with no trackable detail (a plain backing band) are
not found and stay warped: name them with ``ignore`` regions and pin ``all``.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np

from .io.frames import PlanarImage
from .overlays import OverlaySettings

__all__ = ["PIN_ALIGN", "PIN_ROOM_CELLS", "PIN_SOURCES", "pin", "pin_regions", "pinned_list"]

#: Pixel alignment of pinned rectangles (the chroma subsampling of 4:2:0 video).
PIN_ALIGN = 2
#: Room added on every side of a found overlay, in grid cells of
#: :class:`stabilize.overlays.OverlaySettings` (our choice).
PIN_ROOM_CELLS = 0.5
#: The log's ``excluded`` keys each ``pin_overlays`` setting pins.
PIN_SOURCES = {"found": ("static_overlay",), "all": ("static_overlay", "ignore"), "off": ()}


def _aligned(rect: Sequence[Any], width: int, height: int,
             room: tuple[float, float]) -> list[int] | None:
    """(x, y, w, h) widened by ``room`` (x, y) px on every side, clipped to the frame and
    widened to even coordinates; None when empty or not four finite numbers."""
    try:
        x, y, w, h = (float(v) for v in rect)
    except (TypeError, ValueError):
        return None
    if not all(np.isfinite((x, y, w, h))) or w <= 0 or h <= 0:
        return None
    x, y, w, h = x - room[0], y - room[1], w + 2 * room[0], h + 2 * room[1]
    a = PIN_ALIGN
    x0 = max(0, int(np.floor(x / a)) * a)
    y0 = max(0, int(np.floor(y / a)) * a)
    x1 = min(width, int(np.ceil((x + w) / a)) * a)
    y1 = min(height, int(np.ceil((y + h) / a)) * a)
    if x1 <= x0 or y1 <= y0:
        return None
    return [x0, y0, x1 - x0, y1 - y0]


def pin_regions(excluded: Mapping[str, Any] | None, setting: str, width: int,
                height: int) -> dict[str, list[list[int]]]:
    """The rectangles to pin, by where they come from.

    Parameters
    ----------
    excluded : a motion log's ``excluded`` mapping (``static_overlay``: the overlays the
        analysis found, ``ignore``: the user's regions), (x, y, w, h) full-resolution pixels of
        the frame rendered; anything malformed is passed over (a log is data). None for none.
    setting : one of :data:`stabilize.config.PIN_OVERLAYS`.
    width, height : frame size, pixels.

    Returns
    -------
    dict : ``{"static_overlay": [...], "ignore": [...]}``, each a list of [x, y, w, h] ints in
    pixels of the frame (found ones widened by :data:`PIN_ROOM_CELLS`, all clipped to the
    frame, even coordinates, duplicates dropped); a source the setting does not pin is an
    empty list.
    """
    gx, gy = OverlaySettings().grid
    room = {"static_overlay": (PIN_ROOM_CELLS * width / gx, PIN_ROOM_CELLS * height / gy),
            "ignore": (0.0, 0.0)}
    out: dict[str, list[list[int]]] = {"static_overlay": [], "ignore": []}
    found = excluded if isinstance(excluded, Mapping) else {}
    for key in PIN_SOURCES[setting]:
        rects = found.get(key)
        for r in rects if isinstance(rects, list | tuple) else ():
            a = _aligned(r, width, height, room[key])
            if a is not None and a not in out[key]:
                out[key].append(a)
    return out


def pinned_list(regions: Mapping[str, Iterable[Sequence[int]]]) -> list[tuple[int, int, int, int]]:
    """Every rectangle of :func:`pin_regions`'s result (or of a log's ``pinned_overlays``;
    other keys are passed over), once, as (x, y, w, h) tuples."""
    out: list[tuple[int, int, int, int]] = []
    for key in PIN_SOURCES["all"]:
        for r in regions.get(key, ()):
            t = tuple(int(v) for v in r)
            if t not in out:
                out.append(t)  # type: ignore[arg-type]
    return out


def pin(out: np.ndarray | PlanarImage, source: np.ndarray | PlanarImage,
        rects: Sequence[tuple[int, int, int, int]]) -> None:
    """Copy each rectangle of ``source`` into ``out`` at the same place (in place).

    Parameters
    ----------
    out : the output frame, (h, w, 3) uint8 RGB or a planar frame, written into.
    source : the source frame, of the same kind, format and size.
    rects : (x, y, w, h) in luma pixels, inside the frame; for planar frames with chroma
        subsampling, multiples of it (:func:`pin_regions` gives such).
    """
    if not rects:
        return
    if isinstance(out, PlanarImage):
        sub_x, sub_y = out.subsampling
        for k, (dst, src) in enumerate(zip(out.planes, source.planes, strict=True)):
            sx, sy = (1, 1) if k == 0 else (sub_x, sub_y)
            for x, y, w, h in rects:
                ys, xs = slice(y // sy, (y + h) // sy), slice(x // sx, (x + w) // sx)
                dst[ys, xs] = src[ys, xs]
        return
    for x, y, w, h in rects:
        out[y:y + h, x:x + w] = source[y:y + h, x:x + w]
