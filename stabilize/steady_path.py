"""The steady camera path: smooth the raw path, settle the margin, plan the corrections C_t.

A stage over arrays: it takes the inter-frame transforms, the scene cuts, the frame rate, the
time scale and the margin budget, and returns a new :class:`CorrectionPlan`. Conventions are
those of :mod:`stabilize.motion_log`; the smoothers work segment by segment between cuts.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import framing
from .camera_path import decode, encode
from .config import SMOOTHERS
from .geometry import frame_centre, similarity_readout
from .raw_path import accumulate, segments
from .smoothers.gaussian import gaussian_kernel, gaussian_smooth
from .smoothers.kalman import kalman_smooth
from .smoothers.lockoff import lockoff_path

__all__ = [
    "SMOOTHERS", "CorrectionPlan", "FixedLagPlanner", "fill_missing", "look_ahead_frames",
    "plan_corrections", "plan_path", "smooth_path", "unchanged_plan",
]

_log = logging.getLogger("stabilize")


def smooth_path(
    p: np.ndarray,
    *,
    fps: float,
    window_s: float,
    model: str,
    width: int,
    height: int,
    cuts: np.ndarray | None = None,
    smoother: str = "gaussian",
    margin: float | None = None,
) -> np.ndarray:
    """Smoothed camera path S_t (n, 3, 3) of a raw path P_t, segment by segment between cuts.

    Parameters
    ----------
    p : (n, 3, 3) raw path (:func:`stabilize.raw_path.accumulate`).
    fps : frames per second. window_s : smoothing time scale, seconds.
    model : motion model; fixes the parameterisation (:func:`stabilize.camera_path.encode`).
    width, height : frame size, pixels.
    cuts : (n,) bool, frames that start a new shot; every shot is smoothed on its own.
    smoother : ``gaussian`` (zero-phase Gaussian, σ = window_s / 2), ``kalman``
        (constant-velocity Kalman filter + RTS pass), ``l1`` (L1-optimal path with the
        framing constraint; needs ``margin``) or ``lockoff`` (one held pose per shot; with a
        ``margin`` it eases toward a heavy smoothing where the margin cannot hold it).
    margin : crop budget, fraction per side, for the smoothers that respect it in their own
        solve (``l1``, ``lockoff``); the others ignore it (:func:`stabilize.framing.fit_to_margin`
        applies the budget to every smoother afterwards).

    Returns
    -------
    (n, 3, 3) S_t.
    """
    if smoother not in SMOOTHERS:
        raise ValueError(f"unknown smoother {smoother!r}")
    if smoother == "l1" and margin is None:
        raise ValueError("the l1 smoother needs a margin")
    n = len(p)
    cuts = np.zeros(n, bool) if cuts is None else np.asarray(cuts, bool)
    out = np.empty_like(p)
    for seg in segments(cuts):
        ps = p[seg]
        if smoother == "lockoff":
            out[seg] = lockoff_path(ps, fps=fps, window_s=window_s, margin=margin, model=model,
                                    width=width, height=height)
            continue
        q = encode(ps, model, width, height)
        if smoother == "kalman":
            qs = kalman_smooth(q, fps, window_s)
        elif smoother == "l1":
            # lazy: SciPy's optimiser, which a run with another smoother should not pay for.
            from .smoothers.l1 import l1_smooth

            qs = l1_smooth(q, ps, fps=fps, window_s=window_s, margin=float(margin),
                           model=model, width=width, height=height)
            if qs is None:
                _log.warning("l1: the linear programme could not be solved for frames %d-%d; "
                             "used the Gaussian path there", seg.start, seg.stop - 1)
                qs = gaussian_smooth(q, fps, window_s)
        else:
            qs = gaussian_smooth(q, fps, window_s)
        out[seg] = decode(qs, model, width, height)
    return out


@dataclass(frozen=True)
class CorrectionPlan:
    """The steady path of a clip and the corrections that take each source frame to it.

    Attributes
    ----------
    corrections : (n, 3, 3) C_t, source frame t to output frame t (pixels).
    smooth_values : (n, 4) the smoothed path S_t read as a similarity about the frame centre
        (x, y in pixels, degrees, scale).
    margin : the margin used, fraction cut from each side; None when the clip is passed
        through unchanged.
    frames_eased : frames whose correction was eased to fit the margin; None when passed
        through.
    """

    corrections: np.ndarray
    smooth_values: np.ndarray
    margin: float | None = None
    frames_eased: int | None = None

    def figures(self) -> dict[str, Any]:
        """The plan's keys of the log's summary: ``margin``, ``frames_correction_eased``."""
        if self.margin is None:
            return {}
        return {"margin": self.margin, "frames_correction_eased": self.frames_eased}


def plan_corrections(matrices: np.ndarray, cuts: np.ndarray, *, fps: float, window_s: float,
                     model: str, smoother: str, margin: str | float, width: int, height: int,
                     auto_cap: float, missing: np.ndarray | None = None) -> CorrectionPlan:
    """Smooth the path, settle the margin, and plan S_t and C_t.

    ``margin="auto"`` takes the smallest constant margin, up to ``auto_cap``, that the
    smoother's unconstrained path needs: its own path for ``gaussian``, ``kalman`` and
    ``lockoff`` (the held pose), and the Gaussian path at the same time scale for ``l1``
    (whose path, being constrained by the margin, would otherwise fit any margin by doing
    nothing). The budget is then enforced on every smoother by :func:`framing.fit_to_margin`.

    Parameters
    ----------
    matrices : (n, 3, 3) inter-frame transforms H_t (pixels).
    cuts : (n,) bool, frames that start a new shot.
    fps : real frame rate, frames per second. window_s : smoothing time scale, seconds.
    model, smoother : motion model and smoother names.
    margin : ``"auto"`` or the fraction cut from each side.
    width, height : frame size, pixels.
    auto_cap : the largest margin ``"auto"`` may choose.
    missing : (n,) int, frames missing right before each frame (a recorder that dropped
        them; :func:`stabilize.shake.missing_before`), or None. The path is smoothed with
        those frames put back (on a straight line between their neighbours), so the
        smoothing runs in real time across a gap; their rows are then dropped.

    Returns
    -------
    CorrectionPlan
    """
    return plan_path(accumulate(matrices, cuts), cuts, fps=fps, window_s=window_s, model=model,
                     smoother=smoother, margin=margin, width=width, height=height,
                     auto_cap=auto_cap, missing=missing)


def fill_missing(p: np.ndarray, cuts: np.ndarray, missing: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The raw path with the frames missing before each frame put back.

    Parameters
    ----------
    p : (n, 3, 3) raw path P_t. cuts : (n,) bool, frames that start a new shot.
    missing : (n,) int, frames missing right before each frame.

    Returns
    -------
    (p, cuts, real) : the path with m frames inserted before each frame t that misses m
    (P at a share j / (m + 1) of the way from P_{t−1} to P_t, entry by entry, normalised to
    h33 = 1; none before a cut or the first frame), their cut flags (False), and which rows
    are the clip's own frames ((n + inserted,) bool).
    """
    parts, flags, real = [], [], []
    for t in range(len(p)):
        m = int(missing[t]) if t > 0 and not cuts[t] else 0
        for j in range(1, m + 1):
            q = p[t - 1] + (j / (m + 1)) * (p[t] - p[t - 1])
            parts.append(q / q[2, 2])
            flags.append(False)
            real.append(False)
        parts.append(p[t])
        flags.append(bool(cuts[t]))
        real.append(True)
    return np.array(parts), np.array(flags, bool), np.array(real, bool)


def plan_path(p: np.ndarray, cuts: np.ndarray, *, fps: float, window_s: float, model: str,
              smoother: str, margin: str | float, width: int, height: int,
              auto_cap: float, missing: np.ndarray | None = None) -> CorrectionPlan:
    """:func:`plan_corrections` from the raw path P_t (:func:`stabilize.raw_path.accumulate`)
    instead of the inter-frame transforms; the other parameters are the same."""
    real = None
    if missing is not None and np.any(np.asarray(missing) > 0):
        p, cuts, real = fill_missing(p, cuts, np.asarray(missing))
    w, h = width, height
    common = dict(fps=fps, window_s=window_s, model=model, width=w, height=h, cuts=cuts)
    s = None
    if margin == "auto":
        reference = "gaussian" if smoother == "l1" else smoother
        s_ref = smooth_path(p, smoother=reference, margin=None, **common)
        margin = framing.choose_margin(p, s_ref, w, h, auto_cap)
        _log.info("margin: auto chose %.4f (%.1f%% cut from each side)", margin, 100.0 * margin)
        if smoother in ("gaussian", "kalman"):
            s = s_ref
    else:
        margin = float(margin)
    if s is None:
        s = smooth_path(p, smoother=smoother, margin=margin, **common)
    s, kept = framing.fit_to_margin(p, s, margin, model=model, width=w, height=h,
                                    fps=fps, window_s=window_s,
                                    min_distortion=framing.MIN_DISTORTION)
    corrections = framing.corrections(p, s, margin, w, h)
    smooth_values = similarity_readout(s, frame_centre(w, h))
    if real is not None:
        corrections, smooth_values, kept = corrections[real], smooth_values[real], kept[real]
    eased = int(np.count_nonzero(kept < 1.0))
    if eased:
        _log.warning("margin %.3f too small for the full correction in %d frames; the "
                     "correction was eased there", margin, eased)
    return CorrectionPlan(corrections=corrections, smooth_values=smooth_values,
                          margin=margin, frames_eased=eased)


def look_ahead_frames(smoother: str, margin: str | float, fps: float,
                      window_s: float) -> int | None:
    """Frames of look-ahead after which a frame's correction no longer changes, or None when
    the smoother needs the whole path.

    For ``gaussian`` with a fixed margin, the correction of frame t depends on the raw path
    within the Gaussian's radius (3σ, σ = window_s / 2) and, where the margin binds, on the
    easing of :func:`stabilize.framing.fit_to_margin` (a running minimum over a quarter window
    each side, then a Gaussian of σ = window_s / 4). Planned on the frames up to t + L only
    (L the value returned), frame t's correction is then bit for bit the whole clip's, as
    long as the margin binds nowhere in the clip: where it binds anywhere, every frame's path
    is blended (share ≈ 1 included), which a plan made before seeing that frame cannot know.
    ``kalman`` (the Rauch–Tung–Striebel pass runs back from the clip's end), ``l1``,
    ``lockoff`` and ``margin="auto"`` need the whole path: None.

    Parameters
    ----------
    smoother : smoother name. margin : ``"auto"`` or the fraction cut from each side.
    fps : frames per second. window_s : smoothing time scale, seconds.

    Returns
    -------
    L in frames, or None.
    """
    if smoother != "gaussian" or margin == "auto":
        return None
    radius = len(gaussian_kernel(0.5 * window_s * fps)) // 2
    half = max(1, int(round(0.25 * window_s * fps)))
    ease = len(gaussian_kernel(0.25 * window_s * fps)) // 2
    return radius + 2 * half + ease


class FixedLagPlanner:
    """The Gaussian plan at a fixed margin, made while frames arrive: each frame's correction
    as soon as the frames :func:`look_ahead_frames` past it are known.

    :meth:`extend` appends inter-frame transforms (and cut flags) in order; the raw path is
    chained as :func:`stabilize.raw_path.accumulate` chains it. :meth:`plan` returns the
    corrections of the frames from ``first`` on that no later frame changes, planned on a
    window reaching ``2 L`` frames back. They equal the whole clip's bit for bit as long as
    the margin binds nowhere (see :func:`look_ahead_frames`); :attr:`eased` says whether it
    bound somewhere in a window planned so far.

    Parameters
    ----------
    fps, window_s, model, margin, width, height : as for :func:`plan_corrections`.
    """

    def __init__(self, *, fps: float, window_s: float, model: str, margin: float, width: int,
                 height: int) -> None:
        self.lag = look_ahead_frames("gaussian", margin, fps, window_s)
        self._common = dict(fps=fps, window_s=window_s, model=model, smoother="gaussian",
                            margin=float(margin), width=width, height=height, auto_cap=0.0)
        # Only the frames a later window can reach are kept: _paths[0] is frame _base.
        self._base = 0
        self._paths: list[np.ndarray] = []
        self._cuts: list[bool] = []
        self._p = np.eye(3)
        self.eased = False

    @property
    def frames(self) -> int:
        """Frames known so far."""
        return self._base + len(self._paths)

    def extend(self, matrices: np.ndarray, cuts: np.ndarray) -> None:
        """Append inter-frame transforms (k, 3, 3) H_t and their cut flags (k,) bool."""
        inverses = np.linalg.inv(matrices)
        for inv, cut in zip(inverses, cuts, strict=True):
            if self.frames == 0 or cut:
                p = np.eye(3)
            else:
                p = self._p @ inv
                p = p / p[2, 2]
            self._p = p
            self._paths.append(p)
            self._cuts.append(bool(cut))

    def plan(self, first: int, final: bool = False) -> np.ndarray:
        """Corrections (k, 3, 3) C_t of frames ``first`` … ``first + k − 1``: those settled by
        the frames known (all of them when ``final``, the clip having ended)."""
        n = self.frames
        ready = n if final else n - self.lag
        if ready <= first:
            return np.empty((0, 3, 3))
        a = max(self._base, first - 2 * self.lag)
        lo = a - self._base
        plan = plan_path(np.array(self._paths[lo:]), np.array(self._cuts[lo:]), **self._common)
        self.eased = self.eased or bool(plan.frames_eased)
        # Later windows start at ready - 2 L or after.
        drop = max(0, ready - 2 * self.lag - self._base)
        del self._paths[:drop], self._cuts[:drop]
        self._base += drop
        return plan.corrections[first - a:ready - a]


def unchanged_plan(matrices: np.ndarray, cuts: np.ndarray, width: int,
                   height: int) -> CorrectionPlan:
    """The plan of a clip passed through unchanged (too short or small to steady): identity
    corrections, and the raw path as the smoothed one.

    Parameters
    ----------
    matrices : (n, 3, 3) inter-frame transforms. cuts : (n,) bool.
    width, height : frame size, pixels.
    """
    n = len(matrices)
    return CorrectionPlan(
        corrections=np.repeat(np.eye(3)[None], n, axis=0),
        smooth_values=similarity_readout(accumulate(matrices, cuts), frame_centre(width, height)))
