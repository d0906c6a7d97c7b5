"""Per-frame motion of a stream of frames: tracking plus consensus -> inter-frame transforms.

Every transform is in full-resolution pixels (the analysis copy's points are mapped back before
fitting, so ``inlier_px`` is a full-resolution distance). What video offers beyond one frame is
used: the previous frame's motion predicts where tracks go and is scored first; tracks are
grouped by how they moved over the last half second, so an object that moves on its own,
however slowly, is told from the scene (the group that spreads over the frame with the older
tracks) and left out, and the last second's fits are redone without it once it gives itself
away (:mod:`stabilize.anchors`); each track's history of moving with the camera decides
between rival fits; static overlays are found and left out; scene cuts restart the path.
Frames with no trustworthy fit get a stand-in interpolated from their neighbours and status
``failed``; frames where camera and object cannot be told apart get one too, with status
``weak`` and reason ``foreground``. So they never throw the path.

The stages: :mod:`stabilize.motion_pass` (one pass, frame by frame), :mod:`stabilize.frame_fit`
(one frame's fit), :mod:`stabilize.track_groups` (scene against objects),
:mod:`stabilize.motion_track` (the record, reasons and stand-ins).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable

import numpy as np

from .anchors import BaselineSettings
from .config import Settings
from .cuts import CutSettings
from .io import Frame
from .motion_models import model_named
from .motion_pass import AnalysisPass, FrameRecord, PassContext
from .motion_track import MotionTrack, anchor_frames, fill_failed, stand_ins
from .prefetch import read_ahead
from .row_bands import BandSettings
from .track import TrackSettings, ignore_mask

__all__ = ["MIN_SIDE_PX", "fit_motion", "follow_through_frames", "measurable", "warm_up_frames"]

MIN_SIDE_PX = 24


def measurable(width: int, height: int) -> bool:
    """Whether frames of this size carry enough picture to track at all.

    Parameters
    ----------
    width, height : frame size, pixels.

    Returns
    -------
    bool : True when the shorter side is at least :data:`MIN_SIDE_PX` pixels.
    """
    return min(width, height) >= MIN_SIDE_PX


def warm_up_frames(keyframe_every: int) -> int:
    """Frames a fresh analysis runs before a keyframe so that it takes over there with
    tracks that have a history (about a sixteenth of the interval: 0.6 s of a 10-s one).

    Parameters
    ----------
    keyframe_every : keyframe interval, frames.

    Returns
    -------
    int : warm-up length, frames (at least 2).
    """
    return max(2, keyframe_every // 16)


def follow_through_frames(keyframe_every: int) -> int:
    """Frames the analysis that hands over at a keyframe runs on past it, only to revise its
    own last frames (before the keyframe) with what the next frames show: as many as the
    lead-in (:func:`warm_up_frames`).

    A pass revises its recent frames when later frames give a fit away: faint detail that
    stayed put while the tracks moved (a hold reaches back to its baseline and the unjudged
    frames before it), tracks found moving on their own, an overlay found. Without the
    follow-through, the frames just before each keyframe could never be revised: on
    ``Megamind.avi`` (24 fps, a keyframe at frame 240) a hold that the detail starts at
    frame 245 left frames 226-239 following a turning head, 8.1 px from the room behind it
    against 1.9 px with no keyframes at all (measured).

    Parameters
    ----------
    keyframe_every : keyframe interval, frames.

    Returns
    -------
    int : follow-through length, frames.
    """
    return warm_up_frames(keyframe_every)


def fit_motion(
    frames: Iterable[Frame],
    *,
    full_size: tuple[int, int],
    analysis_size: tuple[int, int],
    settings: Settings,
    on_frame: Callable[[int], None] | None = None,
    track_settings: TrackSettings | None = None,
    cut_settings: CutSettings | None = None,
    first_index: int = 0,
    keyframe_every: int | None = None,
    on_settled: Callable[[int, list[FrameRecord], Callable[[], dict]], None] | None = None,
) -> MotionTrack:
    """Fit the inter-frame motion of a stream of grey analysis frames.

    Parameters
    ----------
    frames : grey frames of the analysis copy, in order, with their timestamps.
    full_size, analysis_size : (width, height) of the source and of the analysis copy, pixels.
    settings : model, consensus threshold (full-resolution pixels), confidence, rounds, seed,
        ignored regions.
    on_frame : called with 1 after each frame (progress).
    track_settings : feature-tracking settings; None for the defaults.
    cut_settings : scene-cut detection settings; None for the defaults.
    first_index : index in the clip of the first frame given; per-frame seeds are
        ``[seed, first_index + t]``, so a segment of a clip draws what a single pass draws.
    keyframe_every : restart every ``keyframe_every`` frames of the clip (at indices that are
        multiples of it): tracks, track history, overlay evidence, the prior and the texture
        reference start afresh, exactly as if a new analysis began :func:`warm_up_frames`
        frames before the frame before the keyframe (a second analysis runs alongside over
        those frames, and takes over at the keyframe). The analysis that hands over runs on
        for :func:`follow_through_frames` frames past the keyframe, its records of them
        dropped, so that what they show can still revise its frames before the keyframe. A
        segment that starts that many frames before a keyframe and reads that many past its
        end then reproduces a single pass exactly (see :mod:`stabilize.segments`). None:
        never restart.

    Returns
    -------
    MotionTrack : per-frame arrays (n frames), full-resolution pixels; with a rolling shutter
    asked for (``settings.readout_ms`` not 0), each fitted frame's row-band shifts too.
    """
    fw, fh = full_size
    aw, ah = analysis_size
    scale = (aw / fw, ah / fh)
    user_mask = ignore_mask(analysis_size, settings.ignore, scale)
    ctx = PassContext(settings=settings, scale=scale, cuts=cut_settings or CutSettings(),
                   baseline=BaselineSettings(), full_size=full_size,
                   analysis_size=analysis_size, track_settings=track_settings,
                   user_mask=user_mask, model=model_named(settings.model),
                   bands=BandSettings() if settings.readout_ms != 0 else None)
    can_track = measurable(fw, fh) and measurable(aw, ah)
    warm = warm_up_frames(keyframe_every) if keyframe_every else 0
    follow = follow_through_frames(keyframe_every) if keyframe_every else 0
    main = AnalysisPass(ctx)
    shadow: AnalysisPass | None = None
    # The analysis that handed over at the last keyframe, while it follows through, and the
    # first frame it no longer steps.
    ending: AnalysisPass | None = None
    ending_until = 0
    times: list[float] = []
    records: list[FrameRecord] = []
    overlay_regions: list[list[int]] = []
    last: np.ndarray | None = None
    # Decoding keeps a few frames ahead while this frame is tracked and fitted.
    for frame in read_ahead(frames):
        t = len(times)
        g = first_index + t
        if keyframe_every and t > 0 and can_track:
            if (g + warm) % keyframe_every == 0 and main.started_at != g - 1:
                shadow = AnalysisPass(ctx)
                shadow.begin(last, times[-1], g - 1)
            if g % keyframe_every == 0 and main.started_at != g - warm - 1:
                overlay_regions += main.overlays.regions(scale)
                previous = main
                previous.owned_until = g
                if shadow is None:
                    shadow = AnalysisPass(ctx)
                    shadow.begin(last, times[-1], g - 1)
                main, shadow = shadow, None
                ending, ending_until = previous, g + follow
            if g % keyframe_every == 0:
                main.owned_from = g
            if ending is not None and g >= ending_until:
                ending = None
        times.append(frame.time_s)
        if not can_track or t == 0:
            if can_track:
                main.begin(frame.image, frame.time_s, g)
            # Frame 0 has nothing before it: its identity is no measurement ("first").
            records.append(FrameRecord(np.eye(3), (0, 0, 0.0, 0.0, 0),
                                   "first" if can_track else "failed",
                                   "" if can_track else "unmeasurable"))
        else:
            records.append(main.step(frame.image, frame.time_s, g))
            if shadow is not None:
                shadow.step(frame.image, frame.time_s, g)
            if ending is not None:
                # Its own record of this frame is dropped; only its revisions of the frames
                # before the keyframe (its records are those in ``records``) count.
                ending.step(frame.image, frame.time_s, g)
        last = frame.image
        if on_frame:
            on_frame(1)
        if on_settled:
            pending = [r.index for p in (main, ending) if p is not None
                       for r in p.recent if p.owned_from <= r.index < p.owned_until]
            on_settled(min(pending, default=first_index + len(records)) - first_index, records,
                       lambda m=main, o=overlay_regions: _excluded(
                           settings, o + m.overlays.regions(scale)))
    n = len(times)
    d = np.array([r.diag for r in records], dtype=np.float64).reshape(n, 5)
    why = np.array([r.reason for r in records], dtype="<U12")
    status = np.array([r.status for r in records], dtype="<U6")
    track = MotionTrack(
        time_s=np.array(times, dtype=np.float64),
        matrices=np.array([r.matrix for r in records], dtype=np.float64).reshape(n, 3, 3),
        tracked=d[:, 0].astype(int), inliers=d[:, 1].astype(int), inlier_ratio=d[:, 2],
        rms_px=d[:, 3], rounds=d[:, 4].astype(int), status=status,
        excluded=_excluded(settings, overlay_regions + main.overlays.regions(scale)),
        reason=why,
    )
    track.matrices = fill_failed(track.matrices, track.status, full_size,
                                 stand_in=stand_ins(track.status, why),
                                 anchor=anchor_frames(track.status, why))
    if ctx.bands is not None:
        track.band_shift_px, track.band_support = _band_arrays(records, ctx.bands.n_bands)
    track.gain_shift_px = np.array([np.zeros(2) if r.gain_shift is None else r.gain_shift
                                    for r in records], dtype=np.float64).reshape(n, 2)
    return track


def _band_arrays(records: list[FrameRecord], n_bands: int) -> tuple[np.ndarray, np.ndarray]:
    """Row-band shifts (n, n_bands, 2) px and support (n, n_bands) of the frames' records
    (NaN shifts and 0 support where a frame has none)."""
    shift = np.full((len(records), n_bands, 2), np.nan)
    support = np.zeros((len(records), n_bands))
    for t, r in enumerate(records):
        if r.bands is not None:
            shift[t] = r.bands.shift_px
            support[t] = r.bands.support
    return shift, support


def _excluded(settings: Settings, overlays: list[list[int]]) -> dict[str, list]:
    """The track's ``excluded``: the ignored regions and the static overlays found."""
    return {"ignore": [list(r) for r in settings.ignore],
            "static_overlay": _unique_regions(overlays)}


def _unique_regions(regions: list[list[int]]) -> list[list[int]]:
    out: list[list[int]] = []
    for r in regions:
        if r not in out:
            out.append(r)
    return out
