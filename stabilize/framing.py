"""Framing: the margin, the crop window and the per-frame correction transforms.

The output frame t is ``warpPerspective(source_t, C_t)`` with

    C_t = Z · S_t⁻¹ · P_t

where P_t is the raw path, S_t the smoothed path (see :mod:`stabilize.steady_path`) and Z a
zoom about the frame centre by k = 1 / (1 − 2·margin), which hides the borders the correction
moves in. The margin is a budget: where a frame's correction would still uncover output pixels, the
smoothed path is pulled toward the raw one for that stretch until the crop window fits.
"""

from __future__ import annotations

import numpy as np

from .camera_path import blend
from .geometry import apply, frame_centre, frame_corners
from .smoothers.gaussian import gaussian_smooth

__all__ = [
    "MIN_DISTORTION", "choose_margin", "corrections", "covered", "distortion", "fit_to_margin",
    "needed_margin", "stabilising_warps", "zoom",
]

#: Smallest σ_min / σ_max of its 2×2 part a correction may have before it is eased: a bound on
#: the shear and perspective stretch it adds (similarity corrections always have 1). Our choice.
MIN_DISTORTION = 0.9


def zoom(margin: float, width: int, height: int) -> np.ndarray:
    """Zoom about the frame centre that crops ``margin`` of the width and height per side.

    Parameters
    ----------
    margin : share of the width and of the height cropped on each side, 0 ≤ margin < 0.5.
    width, height : frame size, pixels.

    Returns
    -------
    (3, 3) Z, a zoom by k = 1 / (1 − 2·margin) about the frame centre
    (:func:`stabilize.geometry.frame_centre`), pixels to pixels.
    """
    k = 1.0 / (1.0 - 2.0 * margin)
    cx, cy = frame_centre(width, height)
    return np.array([[k, 0.0, cx * (1 - k)], [0.0, k, cy * (1 - k)], [0.0, 0.0, 1.0]])


def stabilising_warps(p: np.ndarray, s: np.ndarray) -> np.ndarray:
    """D_t = S_t⁻¹ · P_t: source frame t to the virtual camera, before the zoom.

    Parameters
    ----------
    p : (n, 3, 3) raw path P_t, pixels (conventions of :mod:`stabilize.motion_log`).
    s : (n, 3, 3) smoothed path S_t, pixels.

    Returns
    -------
    (n, 3, 3) D_t, normalised so m33 = 1.
    """
    d = np.linalg.solve(s, p)
    return d / d[:, 2:3, 2:3]


def corrections(p: np.ndarray, s: np.ndarray, margin: float, width: int,
                height: int) -> np.ndarray:
    """C_t = Z · S_t⁻¹ · P_t for every frame.

    Parameters
    ----------
    p : (n, 3, 3) raw path P_t, pixels.
    s : (n, 3, 3) smoothed path S_t, pixels.
    margin : crop share per side for the zoom Z (:func:`zoom`).
    width, height : frame size, pixels.

    Returns
    -------
    (n, 3, 3) corrections C_t, source pixels to output pixels, m33 = 1.
    """
    c = zoom(margin, width, height) @ stabilising_warps(p, s)
    return c / c[:, 2:3, 2:3]


def covered(c: np.ndarray, width: int, height: int, tol_px: float = 1e-6) -> np.ndarray:
    """Per frame, whether every output pixel of ``warpPerspective(src, C_t)`` samples inside
    the source frame (its corners map inside [0, w−1] × [0, h−1]; the window is convex).

    Parameters
    ----------
    c : (n, 3, 3) corrections C_t, source pixels to output pixels.
    width, height : frame size, pixels (pixel-centre convention of :mod:`stabilize.geometry`).
    tol_px : slack allowed outside the source frame, pixels.

    Returns
    -------
    (n,) bool, True where the output corners map inside the source (and in front of the
    camera: positive homogeneous w).
    """
    inv = np.linalg.inv(c)
    q = apply(inv, frame_corners(width, height))
    x, y = q[..., 0], q[..., 1]
    inside = ((x >= -tol_px) & (x <= width - 1 + tol_px)
              & (y >= -tol_px) & (y <= height - 1 + tol_px))
    positive = (inv[:, 2, :2] @ frame_corners(width, height).T + inv[:, 2:3, 2]) > 0
    return inside.all(axis=1) & positive.all(axis=1)


def needed_margin(d: np.ndarray, width: int, height: int, cap: float) -> np.ndarray:
    """Per frame, the smallest margin (≤ ``cap``) whose zoom hides every moved-in border.

    Frames that need more than ``cap`` get ``cap`` + a small excess marker (cap + 1e-3).

    Parameters
    ----------
    d : (n, 3, 3) stabilising warps D_t (:func:`stabilising_warps`), pixels.
    width, height : frame size, pixels.
    cap : largest margin considered (share per side).

    Returns
    -------
    (n,) margins (share per side): 0 where D_t alone leaves no border, otherwise found by
    bisection to within cap / 2³⁰.
    """
    lo = np.zeros(len(d))
    hi = np.full(len(d), cap)
    ok_hi = covered(zoom(cap, width, height) @ d, width, height)
    for _ in range(30):
        mid = 0.5 * (lo + hi)
        zooms = np.stack([zoom(m, width, height) for m in mid])
        ok = covered(zooms @ d, width, height)
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    ok0 = covered(d, width, height)
    return np.where(ok0, 0.0, np.where(ok_hi, hi, cap + 1e-3))


def choose_margin(p: np.ndarray, s: np.ndarray, width: int, height: int, cap: float) -> float:
    """The automatic margin: the smallest constant margin, up to ``cap``, that leaves no
    uncovered pixel with this smoothed path (``cap`` when even that is not enough).

    Parameters
    ----------
    p : (n, 3, 3) raw path P_t, pixels.
    s : (n, 3, 3) smoothed path S_t, pixels.
    width, height : frame size, pixels.
    cap : largest margin allowed (share per side).

    Returns
    -------
    float : the margin (share per side), 0 to ``cap``.
    """
    need = needed_margin(stabilising_warps(p, s), width, height, cap)
    return float(min(cap, need.max(initial=0.0)))


def distortion(c: np.ndarray) -> np.ndarray:
    """Per frame, σ_min / σ_max of the 2×2 part of C_t (1 = no anisotropic stretch), after
    Liu, Yuan, Tan and Sun, "Bundled camera paths for video stabilization", SIGGRAPH 2013.

    Parameters
    ----------
    c : (n, 3, 3) corrections C_t.

    Returns
    -------
    (n,) ratio of the smaller to the larger singular value, 0 to 1.
    """
    sv = np.linalg.svd(c[:, :2, :2], compute_uv=False)
    return sv[:, 1] / sv[:, 0]


def fit_to_margin(
    p: np.ndarray, s: np.ndarray, margin: float, *, model: str, width: int, height: int,
    fps: float, window_s: float, toward: np.ndarray | None = None,
    min_distortion: float = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Pull S toward P (or toward ``toward``) where the crop window at ``margin`` would leave
    the source frame, or where the correction would stretch the picture more than
    ``min_distortion`` allows (σ_min / σ_max of its 2×2 part; 0 = no limit).

    The share is found per frame by bisection, then eased in time so the pull does not jerk.
    With the default target P, every frame can be made to fit (share 0 is no correction).

    Parameters
    ----------
    p : (n, 3, 3) raw path P_t, pixels (conventions of :mod:`stabilize.motion_log`).
    s : (n, 3, 3) smoothed path S_t, pixels.
    margin : crop share per side (:func:`zoom`).
    model : motion model; fixes the parameterisation of the blend
        (:func:`stabilize.camera_path.blend`).
    width, height : frame size, pixels.
    fps : frame rate, Hz.
    window_s : smoothing window, s; sets how far the easing reaches (a running minimum over
        half of it, then a Gaussian smoothing).
    toward : (n, 3, 3) path to pull toward instead of P; None for P.
    min_distortion : smallest σ_min / σ_max allowed (:func:`distortion`); 0 = no limit.

    Returns
    -------
    path : (n, 3, 3) the adjusted smoothed path (``s`` itself when every frame already fits).
    share : (n,) the per-frame share of S kept (1 = all, 0 = ``toward``).
    """
    n = len(p)
    z = zoom(margin, width, height)
    target = p if toward is None else toward

    def fits(alpha: np.ndarray) -> np.ndarray:
        sa = blend(target, s, alpha, model, width, height)
        c = z @ stabilising_warps(p, sa)
        ok = covered(c, width, height)
        if min_distortion > 0.0:
            ok &= distortion(c) >= min_distortion
        return ok

    alpha = np.ones(n)
    bad = ~fits(alpha)
    if not bad.any():
        return s, alpha
    lo, hi = np.zeros(n), np.ones(n)
    for _ in range(25):
        mid = 0.5 * (lo + hi)
        ok = fits(np.where(bad, mid, 1.0))
        lo = np.where(bad & ok, mid, lo)
        hi = np.where(bad & ~ok, mid, hi)
    alpha = np.where(bad, lo, 1.0)
    # Ease: a running minimum over half a window, then a light smoothing that can only lower
    # the share further where it matters (verified and repaired below).
    half = max(1, int(round(0.25 * window_s * fps)))
    padded = np.pad(alpha, half, mode="edge")
    windows = np.lib.stride_tricks.sliding_window_view(padded, 2 * half + 1)
    eased = gaussian_smooth(windows.min(axis=1)[:, None], fps, 0.5 * window_s)[:, 0]
    eased = np.clip(np.minimum(eased, 1.0), 0.0, 1.0)
    still_bad = ~fits(eased)
    if still_bad.any():
        eased = np.where(still_bad, np.minimum(eased, alpha), eased)
        eased = np.where(~fits(eased), 0.0, eased)
    return blend(target, s, eased, model, width, height), eased
