"""Whether faint detail away from the tracks stayed put while the fit says the camera moved.

The tracks may all lie on one object: a textured board waved before a plain wall holds every
strong corner of the picture, and a fit to the tracks is the board's motion. Nothing among the
tracks tells that from a textured tower before a plain sky. What does is the picture away
from them: a near wall has faint detail of its own (a mark, a nail, a stain) too weak for the
tracker's frame-wide corner rule, and that detail stays exactly where it was while the board
moves. Smooth gradients (a plain sky, a lit wall) offer no such detail and never vote.

At each baseline (:mod:`stabilize.anchors`; here the frame before it, so that the baseline
frame's own motion is judged too) the faint corners away from the hull of the tracks that
moved with the fit are picked out: corner strength above the picture's noise, both
eigenvalues large, no more contrast than the tracks' typical texture (burnt-in text
outshines the scene, and stays put too), away from overlays and ignored regions. Later
frames compare each one's patch where it was (a still camera) and where the fitted motion
since the baseline puts it.
A corner votes only when one place matches and the other clearly does not, and neither
place is now beside the tracks (an object in front may cover it). When corners stayed put
and clearly outnumber those that moved, the fit is contradicted: the tracks are on an
object in front of a still camera (:mod:`stabilize.motion_pass` then holds the camera still).

A wall can be textured all over and still offer no such corner: a faint, fine-grained
surface (rendered plaster, weathered concrete, a low-contrast print) whose corners lie
at the noise of the corner rule and are each as likely noise as detail. Taken a patch at a
time it is no less plain to see: when the picture away from the tracks offers no faint
corner, patches of a band-passed copy on a regular lattice there (:func:`find_texture`)
vote the same way, where that texture is far fainter than the tracks' own (a face as
faint as the tracks' would have been tracked; patches near the noise are what an encoder
leaves unchanged from frame to frame, and stay put whatever the camera did).

When the picture away from the tracks has no such detail and is plain (:func:`is_plain`),
nothing tells the board from a tower before a clear sky; :mod:`stabilize.motion_pass` then
marks the frame ``unconfirmed``.

What it cannot tell: detail at a great distance (clouds, far hills) also stays put while a
camera *translates* past a near structure, and dirt on the lens never moves at all; either
can make a moving camera's frames read as held still (status ``weak``, so the figures say
so).

Points are in analysis-frame pixels (x right, y down, pixel centres at integers); motions are
3×3 transforms of analysis pixels, from the baseline frame to the current one.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import cv2
import numpy as np

from .track import TrackSettings, corner_strength, strength_map

__all__ = ["StillDetail", "StillDetailSettings", "StillVotes", "band_pass", "find_detail",
           "find_texture", "is_plain", "judge", "judge_texture", "on_surround",
           "patch_agreement", "patch_contrast", "spread_maxima", "surround_grey"]


# Points of a mark's ring that may fall outside the plain picture's grey range (a speck
# of noise or a neighbouring mark's blur); this project's choice.
RING_SLACK = 1


@dataclass(frozen=True)
class StillDetailSettings:
    """``max_corners``: most faint corners kept per baseline; ``spacing_frac``: their least
    spacing, a share of the frame width; ``half``: half-size of the compared patch, pixels
    (a 9×9 patch); ``untracked_share``: the check runs only when at least this share of the
    frame lies away from the tracks; ``min_shift_px``: ... and the fitted motion since the
    baseline moves the frame's corners at least this far (analysis pixels);
    ``match_share``, ``match_grey``, ``ratio``, ``margin``: a corner votes *still* when its
    patch now matches the baseline's where it was (mean absolute difference at most
    ``match_share`` of the patch's standard deviation plus ``match_grey`` grey levels) and
    differs where the fit puts it, by ``ratio`` times and ``margin`` grey levels more and by
    at least half the patch's standard deviation (and *moved* the other way round);
    ``min_votes``: fewest *still* votes that contradict a fit, and they must be at least
    ``ratio`` times the *moved* votes; ``start_votes``: a hold starts only when that happens
    on this many frames in a row (frames with nothing to judge neither count nor break the
    run: one faint corner of a drawn flat pattern, shaken by a moving camera, once voted it
    still and held 63 frames, measured); ``hold_s``: after a contradiction the camera is held
    still this long (seconds) unless detail is seen moving with a fit on ``release_votes``
    frames in a row; ``plain_blur_px``, ``plain_grey_per_px``: the picture away from the
    tracks is plain when, on a copy blurred by a Gaussian of that sigma (pixels), 99 % of
    its pixels change by less than that many grey levels per pixel (:func:`is_plain`).
    This project's own values, tried on drawn walls and on the real clips of
    ``tests/real`` (common practice, no source). ``surface_grey``: a lone mark stands on
    the plain picture away from the tracks when the grey levels of a ring around it, twice
    ``half`` out, lie within that picture's own range widened by this many grey levels
    (:func:`on_surround`).

    Texture patches (:func:`find_texture`), where no faint corner is found:
    ``texture_half`` half-size of a patch (a 17×17 patch) and ``texture_step`` the lattice
    spacing, analysis pixels; ``texture_wide_px``: the band-pass copy is the picture
    blurred by ``plain_blur_px`` less the picture blurred by this sigma (pixels), which
    takes out lighting gradients and lens shading (they stay put in the frame whatever the
    camera does); ``texture_min_std``: a patch votes only with at least this standard
    deviation there, grey levels; ``texture_faint``: ... and at most 1/this of the tracks'
    typical one; ``texture_isotropy``: ... and texture in two directions, the smaller
    eigenvalue of its gradient structure tensor over the patch at least this share of the
    larger (the tracker's own ``min_isotropy`` for corners): the faint fringe that the
    band-pass leaves beside a long straight edge looks the same wherever along itself the
    edge has slid, so an object sliding along its own edge left those patches "still"
    while a shaking camera moved everything else (a drawn flat pattern: 79 of 120 frames
    held still, the path 4.5 px off at the median; such fringes measured 0.00–0.09, a
    faint wall's patches 0.29 at the tenth percentile); ``texture_votes``: fewest *still*
    patches that contradict a fit. This
    project's choices, tried on drawn walls and hazy scenes (tests/test_still_detail.py,
    tests/test_motion.py) and checked to leave the logs of the real clips of
    ``tests/real`` unchanged: a faint wall of a sixth of a board's contrast (band-passed
    standard deviation 1.2–2.1 grey levels) votes; a hazy truss after H.264 (1.1–1.3, the
    encoder's own unchanged blocks among it) held every frame still at a ratio of 1 and
    none at 4 (measured)."""

    max_corners: int = 60
    spacing_frac: float = 1.0 / 64.0
    half: int = 4
    untracked_share: float = 0.25
    min_shift_px: float = 2.0
    match_share: float = 0.25
    match_grey: float = 1.0
    ratio: float = 2.0
    margin: float = 2.0
    min_votes: int = 1
    start_votes: int = 2
    hold_s: float = 3.0
    release_votes: int = 3
    plain_blur_px: float = 1.5
    plain_grey_per_px: float = 1.0
    surface_grey: float = 3.0
    texture_half: int = 8
    texture_step: int = 16
    texture_wide_px: float = 6.0
    texture_min_std: float = 1.0
    texture_faint: float = 4.0
    texture_isotropy: float = 0.2
    texture_votes: int = 3


@dataclass(frozen=True)
class StillDetail:
    """The faint corners of a baseline frame: ``points`` (k, 2) integer positions, analysis
    pixels, and ``patches`` (k, 2·half+1, 2·half+1) float32 grey levels around them."""

    points: np.ndarray
    patches: np.ndarray


@dataclass(frozen=True)
class StillVotes:
    """How many faint corners stayed put (``still``) and how many moved with the fit
    (``moved``); ``contradicted``: the still ones clearly outnumber the moved ones;
    ``supported``: at least two moved, and they clearly outnumber the still ones;
    ``compared``: the corners that could be compared at all (both places inside the frame
    and neither beside the tracks), voting or not."""

    still: int
    moved: int
    contradicted: bool
    supported: bool = False
    compared: int = 0


def find_detail(gray: np.ndarray, tracks: np.ndarray, usable: np.ndarray | None,
                track_settings: TrackSettings,
                settings: StillDetailSettings = StillDetailSettings(),
                floor: float | None = None) -> StillDetail | None:
    """The faint corners of ``gray`` away from the hull of ``tracks`` (grown by half a grid
    cell).

    Parameters
    ----------
    gray : (h, w) uint8 analysis frame.
    tracks : (k, 2) positions of the tracks that moved with the fit, analysis pixels.
    usable : (h, w) uint8 mask, 0 where overlays or ignored regions are; None: all usable.
    track_settings : the tracker's grid, block size, noise floor, least strength and least
        isotropy (:class:`stabilize.track.TrackSettings`), so that a faint corner is held to
        the same standard as a tracked one, but judged against the strongest corner away
        from the tracks rather than the frame's.
    settings : this check's settings.
    floor : the least corner strength above the picture's noise, when known (the tracker's
        at its last detection, :attr:`stabilize.track.Tracker.floor`); None: worked out from
        the whole of ``gray``. Given it, corner strength is worked out only on the tiles of
        the picture away from the tracks.

    Returns
    -------
    StillDetail, or None when too little of the frame lies away from the tracks. When
    enough of it does but it has no such corner (a plain wall, a clear sky), a StillDetail
    with no points: nothing there can confirm or contradict the fit.
    """
    h, w = gray.shape
    mask = (~_beside(tracks, (w, h), track_settings.grid)).astype(np.uint8)
    if np.count_nonzero(mask) < settings.untracked_share * mask.size:
        return None
    if usable is not None:
        mask[usable == 0] = 0
    m = settings.half + 1
    mask[:m], mask[-m:], mask[:, :m], mask[:, -m:] = 0, 0, 0, 0
    half = settings.half
    none = StillDetail(np.empty((0, 2), np.int64), np.empty((0, 2 * half + 1, 2 * half + 1),
                                                            np.float32))
    if not mask.any():
        return none
    if floor is None:
        strength, floor = corner_strength(gray, track_settings)
    else:
        strength = strength_map(gray, track_settings.block_size, mask)
    strength[mask == 0] = 0.0
    pts = spread_maxima(strength, floor, max(3.0, settings.spacing_frac * w),
                        settings.max_corners)
    if not len(pts):
        return none
    # A corner, not a point on an edge: the smaller eigenvalue a fair share of the larger.
    isotropic = _isotropy(gray, pts, track_settings.block_size) >= track_settings.min_isotropy
    pts = pts[isotropic]
    if not len(pts):
        return none
    img = gray.astype(np.float32)
    patches = _patches(img, pts, settings.half)
    # Faint detail only: no stronger than the typical texture of the tracks. Burnt-in text
    # and symbols, drawn to be read over any scene, outshine it and stay put as well.
    if len(tracks):
        typical = float(np.median(_patches(img, tracks, settings.half).std(axis=(1, 2))))
        faint = patches.std(axis=(1, 2)) <= typical
        pts, patches = pts[faint], patches[faint]
    if not len(pts):
        return none
    return StillDetail(pts, patches)


def band_pass(gray: np.ndarray, settings: StillDetailSettings = StillDetailSettings()
              ) -> np.ndarray:
    """``gray`` (h, w) blurred by a Gaussian of ``plain_blur_px`` less ``gray`` blurred by
    one of ``texture_wide_px``: (h, w) float32 grey levels about 0, the picture's fine
    texture with the sensor noise and the slow shading taken out."""
    f = gray.astype(np.float32)
    return (cv2.GaussianBlur(f, (0, 0), settings.plain_blur_px)
            - cv2.GaussianBlur(f, (0, 0), settings.texture_wide_px))


def find_texture(gray: np.ndarray, tracks: np.ndarray, usable: np.ndarray | None,
                 grid: tuple[int, int],
                 settings: StillDetailSettings = StillDetailSettings()) -> StillDetail | None:
    """Patches of faint texture wholly away from the hull of ``tracks`` (as in
    :func:`find_detail`) on a lattice of ``texture_step`` pixels, from the band-passed copy
    (:func:`band_pass`).

    Parameters
    ----------
    gray : (h, w) uint8 analysis frame.
    tracks : (k, 2) positions of the tracks that moved with the fit, analysis pixels.
    usable : (h, w) uint8 mask, 0 where overlays or ignored regions are; None: all usable.
    grid : the tracker's grid (columns, rows).
    settings : this check's settings (the ``texture_*`` values).

    Returns
    -------
    StillDetail of the patches whose standard deviation is at least ``texture_min_std``
    and at most 1/``texture_faint`` of the tracks' median one (patches of the same copy),
    textured in two directions (``texture_isotropy``); None when too little of the frame
    lies away from the tracks (as :func:`find_detail`).
    """
    h, w = gray.shape
    away = ~_beside(tracks, (w, h), grid)
    if np.count_nonzero(away) < settings.untracked_share * away.size:
        return None
    if usable is not None:
        away &= usable > 0
    half = settings.texture_half
    # Whole patches away from the tracks: none takes in an edge of the object's own face.
    away = cv2.erode(away.astype(np.uint8), np.ones((2 * half + 1, 2 * half + 1), np.uint8)
                     ) > 0
    m = half + 1
    ys, xs = np.mgrid[m:h - m:settings.texture_step, m:w - m:settings.texture_step]
    pts = np.stack([xs.ravel(), ys.ravel()], axis=1)
    pts = pts[away[pts[:, 1], pts[:, 0]]]
    g = band_pass(gray, settings)
    patches = _patches(g, pts, half)
    spread = patches.std(axis=(1, 2))
    keep = spread >= settings.texture_min_std
    if len(tracks):
        typical = float(np.median(_patches(g, tracks, half).std(axis=(1, 2))))
        keep &= settings.texture_faint * spread <= typical
    else:
        keep[:] = False
    if keep.any():
        keep[keep] = _isotropy(g, pts[keep], 2 * half + 1) >= settings.texture_isotropy
    return StillDetail(pts[keep].astype(np.int64), patches[keep])


def judge_texture(texture: StillDetail, gray: np.ndarray, motion: np.ndarray,
                  tracks: np.ndarray, grid: tuple[int, int],
                  settings: StillDetailSettings = StillDetailSettings()) -> StillVotes:
    """:func:`judge` for texture patches (:func:`find_texture`): each patch is compared on
    the band-passed copy of ``gray`` (the frame now, (h, w) uint8) where it was and where
    ``motion`` (3, 3, analysis pixels, baseline to now) puts it, and ``texture_votes``
    still patches are the fewest that contradict the fit. ``compared`` is 0: patches are no
    corners, and the count of compared corners tells an object's own outline, not this."""
    cfg = replace(settings, half=settings.texture_half, min_votes=settings.texture_votes)
    return replace(judge(texture, band_pass(gray, settings), motion, tracks, grid, cfg),
                   compared=0)


def is_plain(gray: np.ndarray, tracks: np.ndarray, usable: np.ndarray | None,
             grid: tuple[int, int],
             settings: StillDetailSettings = StillDetailSettings()) -> bool:
    """Whether the picture away from the hull of ``tracks`` (grown by half a ``grid`` cell,
    as in :func:`find_detail`) is plain: a bare wall or a clear sky, not a defocused post or
    a blurred car, which offer no corner either but are no less a part of the picture.

    Parameters
    ----------
    gray : (h, w) uint8 analysis frame.
    tracks : (k, 2) positions of the tracks that moved with the fit, analysis pixels.
    usable : (h, w) uint8 mask, 0 where overlays or ignored regions are; None: all usable.
    grid : the tracker's grid (columns, rows).
    settings : this check's settings (``plain_blur_px``, ``plain_grey_per_px``).

    Returns
    -------
    True when the 99th percentile of the gradient magnitude (Sobel, grey levels per pixel)
    of a blurred copy, over the pixels away from the tracks, is at most
    ``plain_grey_per_px`` (a drawn wall of a soft gradient under noise of 1.5 grey levels:
    0.4–0.5; the defocused foreground of a real street shot: 2.6; measured); False when
    no pixel lies away from the tracks.
    """
    rest = _rest(gray, tracks, usable, grid, settings)
    if rest is None:
        return False
    away, g = rest
    # The 3×3 Sobel kernel weighs a one-pixel step by 8 (its central row 2, both sides).
    gx = cv2.Sobel(g, cv2.CV_32F, 1, 0, ksize=3)
    gy = cv2.Sobel(g, cv2.CV_32F, 0, 1, ksize=3)
    mag = np.hypot(gx[away], gy[away]) / 8.0
    return bool(np.percentile(mag, 99) <= settings.plain_grey_per_px)


def surround_grey(gray: np.ndarray, tracks: np.ndarray, usable: np.ndarray | None,
                  grid: tuple[int, int],
                  settings: StillDetailSettings = StillDetailSettings()
                  ) -> tuple[float, float] | None:
    """The range of grey levels of the picture away from the hull of ``tracks`` (as in
    :func:`is_plain`, on the same blurred copy): Tukey's inner fences, the quartiles
    widened by 1.5 times their distance (J. W. Tukey, Exploratory Data Analysis, 1977;
    from memory), grey levels; None when no pixel lies away from the tracks.

    A plain wall's range spans its lighting gradient (the fences take in the whole of an
    even spread of levels); an object's plain face of another shade lies outside it, even
    when part of that face lies away from the tracks too: with percentiles (5th and 95th)
    the margin of a dark board past its sparse highlights stretched a bare wall's range
    from 142–167 down to 40 on a drawn clip (measured)."""
    rest = _rest(gray, tracks, usable, grid, settings)
    if rest is None:
        return None
    away, g = rest
    q1, q3 = np.percentile(g[away], [25.0, 75.0])
    return float(q1 - 1.5 * (q3 - q1)), float(q3 + 1.5 * (q3 - q1))


def on_surround(gray: np.ndarray, pts: np.ndarray, grey: tuple[float, float],
                settings: StillDetailSettings = StillDetailSettings()) -> np.ndarray:
    """Which marks ``pts`` (k, 2, analysis pixels) stand on the plain picture whose grey
    range is ``grey`` (:func:`surround_grey`): (k,) bool, True when the grey levels of 16
    points on a circle of radius 2·``half`` around the mark (blurred copy, as there) lie
    within that range widened by ``surface_grey``, all but :data:`RING_SLACK` of them.

    A mark of a bare wall is ringed by the wall all round. A bright spot on a dark object is
    ringed by the object's face, which is no part of the wall even when it is plain too, and
    an object's corner against the wall partly so: either speaks for the object's motion,
    not for the wall's (a drawn dark board dotted with highlights, waved before a still
    camera and a bare wall, otherwise confirmed its own motion as the camera's by its dots
    and its corners, 40–120 px, measured). Points whose ring leaves the frame are judged on
    the part inside."""
    if not len(pts):
        return np.zeros(0, bool)
    h, w = gray.shape
    g = cv2.GaussianBlur(gray.astype(np.float32), (0, 0), settings.plain_blur_px)
    a = np.linspace(0.0, 2.0 * np.pi, 16, endpoint=False)
    r = 2.0 * settings.half
    xs = np.rint(pts[:, 0:1] + r * np.cos(a)).astype(int)
    ys = np.rint(pts[:, 1:2] + r * np.sin(a)).astype(int)
    inside = (xs >= 0) & (xs < w) & (ys >= 0) & (ys < h)
    ring = g[np.clip(ys, 0, h - 1), np.clip(xs, 0, w - 1)]
    lo, hi = grey
    fits = (ring >= lo - settings.surface_grey) & (ring <= hi + settings.surface_grey)
    n_in = np.count_nonzero(inside, axis=1)
    return (n_in > 0) & (np.count_nonzero(fits & inside, axis=1) >= n_in - RING_SLACK)


def judge(detail: StillDetail, gray: np.ndarray, motion: np.ndarray, tracks: np.ndarray,
          grid: tuple[int, int],
          settings: StillDetailSettings = StillDetailSettings()) -> StillVotes:
    """Compare each faint corner's patch now where it was and where ``motion`` puts it.

    Parameters
    ----------
    detail : the baseline frame's faint corners (:func:`find_detail`).
    gray : (h, w) uint8 analysis frame now.
    motion : (3, 3) the fitted motion from the baseline frame to now, analysis pixels.
    tracks : (k, 2) positions now of the tracks that carried the fit, analysis pixels.
    grid : the tracker's grid (columns, rows).
    settings : this check's settings.

    Returns
    -------
    StillVotes. Corners the motion puts outside the frame, or where they were or where the
    motion puts them is now beside the tracks (an object in front may cover it), do not vote.
    """
    h, w = gray.shape
    p = detail.points.astype(np.float64)
    q = cv2.perspectiveTransform(p.reshape(-1, 1, 2), np.asarray(motion, np.float64)
                                 ).reshape(-1, 2)
    m = settings.half + 1
    inside = (q[:, 0] >= m) & (q[:, 0] <= w - 1 - m) & (q[:, 1] >= m) & (q[:, 1] <= h - 1 - m)
    covered = _beside_cells(tracks, (w, h), grid)
    inside &= ~_beside_at(covered, p, (w, h)) & ~_beside_at(covered, q, (w, h))
    if not inside.any():
        return StillVotes(0, 0, False, False)
    base = detail.patches[inside]
    now = gray.astype(np.float32)
    at_rest = _patches(now, p[inside], settings.half)
    carried = _patches(now, q[inside], settings.half)
    e_still = np.abs(at_rest - base).mean(axis=(1, 2))
    e_moved = np.abs(carried - base).mean(axis=(1, 2))
    # A patch found again matches to within a share of its own contrast; the other place
    # must differ clearly, by the ratio and margin and by half that contrast.
    contrast = base.std(axis=(1, 2))
    close = settings.match_share * contrast + settings.match_grey
    clear = 0.5 * contrast

    def votes(found: np.ndarray, other: np.ndarray) -> int:
        return int(np.count_nonzero((found <= close) & (other >= clear)
                                    & (other > settings.ratio * found + settings.margin)))

    still, moved = votes(e_still, e_moved), votes(e_moved, e_still)
    return StillVotes(still, moved,
                      still >= settings.min_votes and still >= settings.ratio * moved,
                      moved >= 2 and moved >= settings.ratio * max(still, 1),
                      int(np.count_nonzero(inside)))


def patch_agreement(before: np.ndarray, now: np.ndarray, src: np.ndarray, dst: np.ndarray,
                    half: int = StillDetailSettings.half) -> np.ndarray:
    """How well each point's patch agrees between two frames: (k,) normalised correlation
    (Pearson's r over the pixels) of the (2·half+1)² patch of ``before`` (h, w) uint8 at
    ``src`` (k, 2) and that of ``now`` at ``dst`` (k, 2), analysis pixels, bilinear.
    About 1 for a mark found again; near 0 for a point of noise on a plain wall, whose
    grain is drawn afresh each frame; 0 where either patch is flat."""
    a = _patches(before.astype(np.float32), src, half)
    b = _patches(now.astype(np.float32), dst, half)
    a = a - a.mean(axis=(1, 2), keepdims=True)
    b = b - b.mean(axis=(1, 2), keepdims=True)
    norm = np.sqrt((a * a).sum(axis=(1, 2)) * (b * b).sum(axis=(1, 2)))
    return np.where(norm > 1e-6, (a * b).sum(axis=(1, 2)) / np.maximum(norm, 1e-6), 0.0)


def patch_contrast(gray: np.ndarray, pts: np.ndarray, half: int = StillDetailSettings.half
                   ) -> np.ndarray:
    """The standard deviation (grey levels) of the (2·half+1)² patch of ``gray`` (h, w)
    around each point (k, 2), analysis pixels, bilinear: (k,)."""
    return _patches(gray.astype(np.float32), pts, half).std(axis=(1, 2))


def spread_maxima(strength: np.ndarray, floor: float, spacing: float, count: int
                  ) -> np.ndarray:
    """Up to ``count`` strong points of ``strength`` (h, w) at least about ``spacing``
    pixels apart, strongest first: (k, 2) int64 positions (x, y), pixel centres.

    The strongest pixel of each square cell of side ``spacing``/√2 (two pixels of one cell are
    closer than ``spacing``) is a candidate when it reaches ``floor`` (> 0); a candidate is
    kept when no stronger candidate lies closer than ``spacing`` (ties: the earlier cell in
    row-major order wins). This is one pass of non-maximum suppression over cells: it works
    on a corner-strength map already at hand, where OpenCV's ``goodFeaturesToTrack`` would
    work the map out again and then thin its candidates one by one (a candidate whose only
    stronger neighbour was itself suppressed is dropped here, kept there).
    """
    h, w = strength.shape
    c = max(1, int(spacing / np.sqrt(2.0)))
    ch, cw = -(-h // c), -(-w // c)
    pad = np.zeros((ch * c, cw * c), np.float32)
    pad[:h, :w] = strength
    blocks = pad.reshape(ch, c, cw, c).transpose(0, 2, 1, 3).reshape(ch, cw, c * c)
    arg = blocks.argmax(axis=2)
    val = np.take_along_axis(blocks, arg[..., None], axis=2)[..., 0].astype(np.float64)
    val[val < max(floor, np.finfo(np.float32).tiny)] = 0.0
    ys = (np.arange(ch)[:, None] * c + arg // c).astype(np.float64)
    xs = (np.arange(cw)[None, :] * c + arg % c).astype(np.float64)
    cand = np.flatnonzero(val > 0)
    r = int(np.ceil(spacing / c))
    # Padded by r cells so that every neighbour of a candidate is an index of the padded grid.
    vp, xp, yp = (np.pad(a, r).reshape(-1) for a in (val, xs, ys))
    at = (cand // cw + r) * (cw + 2 * r) + cand % cw + r
    v, x, y = vp[at], xp[at], yp[at]
    keep = np.ones(len(cand), bool)
    for dy in range(-r, r + 1):
        for dx in range(-r, r + 1):
            if dx == 0 and dy == 0:
                continue
            nb = at + dy * (cw + 2 * r) + dx
            nv = vp[nb]
            near = (xp[nb] - x) ** 2 + (yp[nb] - y) ** 2 < spacing * spacing
            # The earlier cell in row-major order wins a tie.
            stronger = (nv > v) | ((nv == v) & ((dy < 0) | ((dy == 0) & (dx < 0))))
            keep &= ~(near & stronger & (nv > 0))
    sel = cand[keep]
    sel = sel[np.argsort(-val.reshape(-1)[sel], kind="stable")][:count]
    return np.stack([xs.reshape(-1)[sel], ys.reshape(-1)[sel]], axis=1).astype(np.int64)


#: Cell size (analysis pixels) of the coarse mask of where the tracks are.
_CELL = 4


def _rest(gray: np.ndarray, tracks: np.ndarray, usable: np.ndarray | None,
          grid: tuple[int, int], settings: StillDetailSettings
          ) -> tuple[np.ndarray, np.ndarray] | None:
    """The picture away from the hull of ``tracks`` (:func:`_beside`) and usable: its mask
    (h, w) bool and the frame ``gray`` blurred by ``plain_blur_px`` (h, w) float32; None
    when no pixel lies there."""
    h, w = gray.shape
    away = ~_beside(tracks, (w, h), grid)
    if usable is not None:
        away &= usable > 0
    if not away.any():
        return None
    return away, cv2.GaussianBlur(gray.astype(np.float32), (0, 0), settings.plain_blur_px)


def _beside(tracks: np.ndarray, size: tuple[int, int], grid: tuple[int, int]) -> np.ndarray:
    """(h, w) bool of a ``size`` = (width, height) frame: inside the convex hull of
    ``tracks`` (k, 2) grown by half a ``grid`` cell, worked out on cells of :data:`_CELL`
    pixels (:func:`_beside_cells`). The picture between an object's tracks and just past its
    outermost ones is the object's own."""
    w, h = size
    coarse = _beside_cells(tracks, size, grid)
    full = cv2.resize(coarse, (coarse.shape[1] * _CELL, coarse.shape[0] * _CELL),
                      interpolation=cv2.INTER_NEAREST)
    return full[:h, :w] > 0


def _beside_cells(tracks: np.ndarray, size: tuple[int, int], grid: tuple[int, int]
                  ) -> np.ndarray:
    """The mask of :func:`_beside` on its cells: (⌈h/_CELL⌉, ⌈w/_CELL⌉) uint8, 1 inside."""
    w, h = size
    cw, ch = -(-w // _CELL), -(-h // _CELL)
    coarse = np.zeros((ch, cw), np.uint8)
    if len(tracks) >= 3:
        hull = cv2.convexHull(np.rint(tracks / _CELL).astype(np.int32).reshape(-1, 1, 2))
        cv2.fillConvexPoly(coarse, hull, 1)
        r = int(np.ceil(0.5 * max(w / grid[0], h / grid[1]) / _CELL))
        coarse = cv2.dilate(coarse, cv2.getStructuringElement(cv2.MORPH_ELLIPSE,
                                                              (2 * r + 1,) * 2))
    return coarse


def _beside_at(cells: np.ndarray, pts: np.ndarray, size: tuple[int, int]) -> np.ndarray:
    """(k,) bool: the mask of :func:`_beside` (given as its ``cells``) at the nearest pixel
    of each point (k, 2) of a ``size`` = (width, height) frame."""
    w, h = size
    xi = np.clip(np.rint(pts[:, 0]).astype(int), 0, w - 1) // _CELL
    yi = np.clip(np.rint(pts[:, 1]).astype(int), 0, h - 1) // _CELL
    return cells[yi, xi] > 0


def _patches(img: np.ndarray, pts: np.ndarray, half: int) -> np.ndarray:
    """(k, 2·half+1, 2·half+1) float32 patches of ``img`` (h, w) float32 centred on ``pts``
    (k, 2), bilinear (one remap for all of them)."""
    off = np.arange(-half, half + 1, dtype=np.float32)
    size = len(off)
    pts = pts.astype(np.float32)
    mx = (pts[:, 0, None, None] + off[None, None, :]).repeat(size, axis=1)
    my = (pts[:, 1, None, None] + off[None, :, None]).repeat(size, axis=2)
    out = cv2.remap(img, mx.reshape(-1, size), my.reshape(-1, size), cv2.INTER_LINEAR,
                    borderMode=cv2.BORDER_REPLICATE)
    return out.reshape(len(pts), size, size)


def _isotropy(gray: np.ndarray, pts: np.ndarray, block: int) -> np.ndarray:
    """Smaller over larger eigenvalue of the gradient structure tensor (central
    differences) summed over a ``block``×``block`` window at each integer point (k, 2); 0
    where flat (Shi and Tomasi, "Good features to track", CVPR 1994, the eigenvalues of
    their matrix Z)."""
    r = block // 2 + 1
    h, w = gray.shape
    x0 = np.clip(pts[:, 0] - r - 1, 0, w - 1)
    y0 = np.clip(pts[:, 1] - r - 1, 0, h - 1)
    side = 2 * r + 3
    ys = np.clip(y0[:, None] + np.arange(side)[None, :], 0, h - 1)
    xs = np.clip(x0[:, None] + np.arange(side)[None, :], 0, w - 1)
    win = gray[ys[:, :, None], xs[:, None, :]].astype(np.float32)
    gx = 0.5 * (win[:, 1:-1, 2:] - win[:, 1:-1, :-2])
    gy = 0.5 * (win[:, 2:, 1:-1] - win[:, :-2, 1:-1])
    c = slice(1, 1 + block)
    gx, gy = gx[:, c, c], gy[:, c, c]
    a, b, d = (gx * gx).sum((1, 2)), (gx * gy).sum((1, 2)), (gy * gy).sum((1, 2))
    tr, det = a + d, a * d - b * b
    disc = np.sqrt(np.maximum(0.25 * tr * tr - det, 0.0))
    big, small = 0.5 * tr + disc, 0.5 * tr - disc
    return np.where(big > 1e-9, small / np.maximum(big, 1e-9), 0.0)
