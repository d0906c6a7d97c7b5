"""One analysis pass: each frame tracked, checked for cuts, grouped and fitted; recent fits revised.

A pass runs from a (re)start of the analysis: the tracker, overlay evidence, the previous
motion (the prior), the texture reference and the baselines of track history are its own.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field

import cv2
import numpy as np

from . import anchors
from .anchors import BaselineSettings, hull_share
from .brightness import gain_effect
from .config import Settings
from .consensus.metrics import median
from .cuts import (
    CutSettings,
    aligned_correlation,
    collapsed,
    corner_strength,
    grey_histogram,
    histogram_distance,
    is_cut,
    is_textureless,
)
from .frame_fit import corner_shift, fit_frame, refit
from .geometry import rescale
from .motion_models import MotionModel, transfer_error
from .overlays import OverlayFinder
from .row_bands import BandSettings, BandShifts, track_band_shifts
from .still_detail import (
    StillDetail,
    StillDetailSettings,
    StillVotes,
    find_detail,
    find_texture,
    is_plain,
    judge,
    judge_texture,
    on_surround,
    patch_agreement,
    surround_grey,
)
from .track import (
    Pairs,
    Tracker,
    TrackSettings,
    global_shift,
    to_analysis_resolution,
    to_full_resolution,
    track_settings_for,
)
from .track_groups import (
    band_overlay_tracks,
    group_tracks,
    mask_cells,
    object_mask,
    outshone_band,
)

__all__ = ["MINORITY_SHARE", "REVISE_ATTEMPTS", "REVISE_GAIN", "REVISE_PX", "SCENE_HULL",
           "AnalysisPass", "FrameRecord", "PassContext"]

# A weak fit that fewer than this share of the frame's tracked pairs move with is no
# measurement of the camera: most of the picture moved some other way, and nothing on the
# frame says which motion is the camera's (a head turning in a close-up leaves a few
# tracks that agree by chance). Its motion is a stand-in (reason ``foreground``). This
# project's choice, from Megamind.avi's last shot (tests/real): its fits on 7-20 % of the
# tracks jumped 7-19 px while the room behind stayed within 0.6 px.
MINORITY_SHARE = 0.25

# The least share of the frame (the convex hull of their positions) that tracks must cover
# to stand for the scene on their own: what is left once suspect tracks are set aside, the
# tracks proven to be the scene while objects move about (newer ones then wait), the scene's
# tracks a revision refits on. It was 0.1 for the proven tracks: a textured board over the
# middle half of a faint wall (a drawn clip, contrast 0.15) hid every track of the wall but
# a strip along the top edge (hull 0.03), whose faint corners the board's far stronger ones
# kept from being found again; the board's new tracks then outvoted the strip, and the log
# followed the board by 195 px (1.3 px at 0.02, the frames the strip alone carried weak;
# measured, tests/test_motion.py). This project's choice.
SCENE_HULL = 0.02

# A revised fit replaces the first one only when they differ by more than this much at the
# frame's corners (full-resolution pixels): below it the revision is noise, and it was
# fitted on fewer tracks. This project's choice.
REVISE_PX = 0.05


# A board's own corners lie just past the hull of its tracks, where the still-detail check
# looks for detail of the background: this many faint corners there, none of which could be
# judged, are no background detail (this project's choice: a drawn board before a bare wall
# offered one, its bottom-right corner, at every baseline; measured).
OUTLINE_CORNERS = 2

# Tracks that moved with the fit with at most LONE_COMPANY others within LONE_CELLS grid
# cells are detail of the background, not parts of one object: LONE_TRACKS of them
# confirm a fit that a plain picture otherwise could not (a camera moving over a bare wall
# with a board fixed to it: the wall's few marks are tracked and move with the board). This
# project's choice (tests/test_tracking_accuracy.py, the plain-wall pair).
LONE_CELLS, LONE_TRACKS, LONE_COMPANY = 1.0, 2, 3

# ... and each one's patch in the two frames must agree to at least this normalised
# correlation (this project's choice: points of noise on a drawn bare wall that the tracker
# kept agreed to -0.02–0.37, measured; a mark, to about 1).
LONE_AGREEMENT = 0.8

# ... and only when the tracks it keeps fit it with at most this share of the median
# residual they had under the first fit (this project's choice).
REVISE_GAIN = 0.7


# A frame is refitted at most this many times while objects go on moving (cost), by analysis
# level (this project's choice: two instead of eight left the 720p accuracy clip's median
# error unchanged, but a slowly moving foreground on real footage needs all eight, measured).
REVISE_ATTEMPTS = {"fast": 2, "balanced": 8, "thorough": 8}

# Tracks a frame's gain and its effect are read on, at most (evenly picked from the fit's
# support; this project's choice): about 0.15 ms a frame, 0.45 ms where the gain moved.
GAIN_POINTS = 100


@dataclass
class FrameRecord:
    """One frame's outcome: its motion (3, 3) in full-resolution pixels, the diagnostics
    (tracked, inliers, inlier ratio, RMS px, rounds), status and reason; ``gain_shift``
    (2,): how far the picture's change of brightness moved the fit's tracks (dx, dy,
    full-resolution pixels; :mod:`stabilize.brightness`), None where no fit stood."""

    matrix: np.ndarray
    diag: tuple[int, int, float, float, int]
    status: str
    reason: str = ""
    bands: BandShifts | None = None
    gain_shift: np.ndarray | None = None


@dataclass
class _Recent:
    """A recent frame's pairs, kept for a second (from the start of a pass, three) so its
    fit can be revised when tracks it used turn out to have been moving on their own;
    ``blind``: it was fitted before the pass had any baseline to group its tracks by."""

    index: int
    time_s: float
    src: np.ndarray
    dst: np.ndarray
    ids: np.ndarray
    background: np.ndarray
    used: np.ndarray
    record: FrameRecord
    blind: bool = False
    attempts: int = 0
    judged: bool = False
    _cells: np.ndarray | None = field(default=None, repr=False)

    def cells(self, shape: tuple[int, int]) -> np.ndarray:
        """The coarse-mask cell of each track's position in this frame
        (:func:`mask_cells`), worked out once."""
        if self._cells is None:
            self._cells = mask_cells(self.dst, shape)
        return self._cells


@dataclass
class _StillBase:
    """A still-detail baseline: the frame ``index`` (its analysis copy ``image``), where the
    tracks that carried the next fit were in it (k, 2, analysis pixels), the fitted motion
    since (full-resolution pixels; None after a frame with no fit), its faint corners
    (False: not looked for yet; None: too little of the picture away from the tracks),
    whether that picture is plain (None: not looked at yet) and, where it offers no faint
    corner, its texture patches (as the corners)."""

    index: int
    image: np.ndarray
    tracks: np.ndarray
    motion: np.ndarray | None
    detail: StillDetail | None | bool = False
    plain: bool | None = None
    texture: StillDetail | None | bool = False


@dataclass(frozen=True)
class PassContext:
    """What every pass of one analysis shares: the settings, the sizes (full resolution and
    analysis copy, pixels) and the scale between them, the mask of ignored regions, and the
    motion model; ``bands`` asks for each fitted frame's row-band shifts (rolling shutter);
    ``track_settings`` None: those of the settings' analysis level."""

    settings: Settings
    scale: tuple[float, float]
    cuts: CutSettings
    baseline: BaselineSettings
    full_size: tuple[int, int]
    analysis_size: tuple[int, int]
    track_settings: TrackSettings | None
    user_mask: np.ndarray | None
    model: MotionModel
    bands: BandSettings | None = None


class AnalysisPass:
    """The analysis state since its last (re)start: tracks, overlay evidence, the previous
    motion, the texture reference and the baselines. :meth:`begin` takes the first frame;
    :meth:`step` each next one."""

    def __init__(self, ctx: PassContext) -> None:
        self.ctx = ctx
        self.tracker = Tracker(ctx.track_settings or track_settings_for(ctx.settings.analysis),
                               ctx.user_mask)
        self.overlays = OverlayFinder(ctx.analysis_size)
        self.overlays_grew = False
        # Overlay cells were found since the recent frames were fitted (see _overlay_hindsight).
        self.overlays_found = False
        self.prior: np.ndarray | None = None
        self.texture_ref: float | None = None
        self.steps = 0
        self.prev_s = 0.0
        self.started_at = 0
        # Frames from this index on are this pass's own to revise (see _hindsight); up to
        # ``owned_until`` (exclusive) once it has handed over at a keyframe and follows through.
        self.owned_from = 0
        self.owned_until = math.inf
        self.recent: deque[_Recent] = deque()
        self.begin_s = 0.0
        # Baseline slot times (seconds; NaN: not based yet) and the slot to re-base next.
        self.slot_s = [math.nan, math.nan]
        # Per slot, what the still-detail check compares against (None: not based yet).
        self.still_base: list[_StillBase | None] = [None, None]
        # Until this time (s) the camera is held still unless detail moves with the fit.
        self.held_until = -math.inf
        # The held frames since detail was first seen moving with the fit, in a row, with
        # their fitted motion and whether the fit was weak (see _release_pending).
        self.releasing: list[tuple[FrameRecord, np.ndarray, bool]] = []
        # Frames in a row (among those with detail to judge) whose detail contradicted the
        # fit (see StillDetailSettings.start_votes).
        self.contradicted = 0
        # A frame was unconfirmed, and nothing since has confirmed a fit (see step).
        self.doubt = False

    def begin(self, image: np.ndarray, time_s: float, index: int) -> None:
        """Take the first frame (grey analysis copy) of this pass, at ``time_s`` seconds."""
        self.tracker.step(image)
        self.prev_s = time_s
        self.begin_s = time_s
        self.started_at = index
        self.steps = 0

    def _older_slot(self) -> int | None:
        ready = [j for j in (0, 1) if math.isfinite(self.slot_s[j])]
        if not ready:
            return None
        return min(ready, key=lambda j: self.slot_s[j])

    def step(self, image: np.ndarray, time_s: float, index: int) -> FrameRecord:
        """Track the next frame (grey analysis copy, frame ``index`` of the clip at
        ``time_s`` seconds) and fit its motion."""
        ctx = self.ctx
        settings, scale, cuts_cfg = ctx.settings, ctx.scale, ctx.cuts
        base = ctx.baseline
        fw, fh = ctx.full_size
        tracker = self.tracker
        self.steps += 1
        prev_s, self.prev_s = self.prev_s, time_s
        predicted = None if self.prior is None else rescale(self.prior, scale)
        if self.overlays_grew:
            self.overlays_grew = False
            tracker.set_mask(self.overlays.mask(ctx.user_mask))
        if self.overlays_found:
            self.overlays_found = False
            self._overlay_hindsight()
        pairs = tracker.step(image, predicted)
        offered = tracker.live
        strength = None
        if self.steps % 15 == 1:
            strength = corner_strength(image)
            if self.texture_ref is None or not is_textureless(strength, self.texture_ref,
                                                              cuts_cfg):
                self.texture_ref = strength if self.texture_ref is None else (
                    0.8 * self.texture_ref + 0.2 * strength)
        if collapsed(len(pairs), offered, cuts_cfg):
            response = shift = None
            if offered:
                pairs, response, shift = _restart_fast_motion(tracker, pairs)
            if collapsed(len(pairs), offered, cuts_cfg) and is_cut(
                    _frame_distance(tracker, cuts_cfg), response, cuts_cfg,
                    None if shift is None else aligned_correlation(*tracker.frames, shift)):
                tracker.update(None)
                tracker.reset()
                self.prior = None
                self.slot_s = [math.nan, math.nan]
                self.still_base = [None, None]
                self.held_until = -math.inf
                self.releasing = []
                self.contradicted = 0
                self.doubt = False
                return FrameRecord(np.eye(3), (len(pairs), 0, 0.0, 0.0, 0), "cut")
        if len(pairs) < tracker.settings.texture_check_share * tracker.settings.max_corners:
            strength = corner_strength(image) if strength is None else strength
            if is_textureless(strength, self.texture_ref, cuts_cfg):
                tracker.update(None)
                self.prior = None
                return FrameRecord(np.eye(3), (len(pairs), 0, 0.0, 0.0, 0), "failed",
                               "textureless")
        src = to_full_resolution(pairs.src, scale)
        dst = to_full_resolution(pairs.dst, scale)
        memo = anchors.first_seen(pairs.memo, prev_s)
        seed = [settings.seed, index]
        grouping = group_tracks(dst, memo, self._older_slot(), pairs.background,
                                anchors.age_share(memo, time_s, base), model=ctx.model,
                                settings=settings, base=base, seed=seed, frame_size=(fw, fh))
        # Tracks that moved on their own, now or lately, do not speak for the camera.
        suspect = ~anchors.trust(memo, time_s, base)
        if grouping is not None:
            suspect |= grouping.moved
            memo = anchors.prove(memo, grouping.scene)
        if grouping is not None and grouping.split:
            slot = self._older_slot()
            band = band_overlay_tracks(grouping, memo[:, 2 * slot:2 * slot + 2], dst, (fw, fh))
            if outshone_band(image, pairs.dst, band, grouping):
                band = np.zeros_like(band)
            if self.overlays.observe_band(pairs.src[band]):
                self.overlays_grew = self.overlays_found = True
                # This frame's tracks on the overlay are no longer the camera's either.
                suspect |= self.overlays.covers(pairs.src)
        use = ~suspect
        if suspect.any():
            # Objects are about: tracks new to the picture wait until the scene's group
            # takes them in, if enough of the scene is left without them.
            sure = use & anchors.proven(memo)
            if sure.sum() >= base.min_group and hull_share(dst[sure], (fw, fh)) >= SCENE_HULL:
                use = sure
        ambiguous = False
        if suspect.any() and (use.sum() < base.min_group
                              or hull_share(dst[use], (fw, fh)) < SCENE_HULL):
            # What is left is too little to be the scene: camera and object cannot be told
            # apart on this frame.
            ambiguous = grouping is not None and grouping.split
            use = np.ones(len(dst), bool)
        fit = fit_frame(src[use], dst[use], pairs.background[use], model=ctx.model,
                        settings=settings, seed=seed, prior=self.prior, frame_size=(fw, fh))
        support = np.zeros(len(dst), bool)
        support[np.flatnonzero(use)[fit.support]] = True
        # Every pair that moved with the fit, whether the fit could use it or not.
        with_fit = (transfer_error(fit.matrix, src, dst) < settings.inlier_px) if fit.ok \
            else np.zeros(len(src), bool)
        n_in = int(np.count_nonzero(with_fit))
        d = (len(src), n_in, n_in / len(src) if len(src) else 0.0,
             fit.rms_px if fit.ok else 0.0, fit.rounds)
        self._carry(fit.matrix if fit.ok else None)
        held = unconfirmed = judged = False
        if fit.ok and not ambiguous:
            votes = self._still_votes(image, pairs.dst[with_fit])
            cell = max(ctx.analysis_size[0] / tracker.settings.grid[0],
                       ctx.analysis_size[1] / tracker.settings.grid[1])
            # Lone marks confirm the fit only when they moved with it over the grouping's
            # baseline too: while an object stops and turns, a still wall's marks move "with"
            # its fit for a frame or two.
            with_scene = None if grouping is None else grouping.scene[with_fit]
            if with_scene is not None and np.count_nonzero(with_scene) < base.min_group:
                with_scene = None
            surround = self._surround(votes)
            lone = False
            # Counted only where they can decide (the count is quadratic in the tracks).
            if surround == "plain" or (self.doubt and surround in ("unknown", "textured")):
                # ... and only when they are marks at all: on a bare wall the tracker also
                # keeps a few points of noise, which land wherever the predicted motion
                # puts them and so move "with" any fit.
                at = np.flatnonzero(with_fit)
                at = at[lone_tracks(pairs.dst[at], LONE_CELLS * cell, among=with_scene)]
                if len(at) >= LONE_TRACKS:
                    # ... standing on the plain picture itself, not on an object's face.
                    grey = surround_grey(image, pairs.dst[with_fit],
                                         self.overlays.mask(ctx.user_mask),
                                         tracker.settings.grid)
                    if grey is not None:
                        at = at[on_surround(image, pairs.dst[at], grey)]
                if len(at) >= LONE_TRACKS:
                    same = patch_agreement(tracker.frames[0], image, pairs.src[at],
                                           pairs.dst[at])
                    lone = np.count_nonzero(same >= LONE_AGREEMENT) >= LONE_TRACKS
            # A picture that is not plain but offers no corner compared nothing either, nor
            # do lone marks that no baseline has seen moving with the scene (nor, uncounted,
            # those of a frame that nothing else judged).
            judged = (lone and with_scene is not None) or surround in ("plain", "detail")
            # Once a frame is unconfirmed, the frames that nothing can judge (the object
            # covers most of the picture, or stops) stay so until something confirms a fit:
            # detail moving with it, or lone marks. A rest that is not plain but offers no
            # corner confirms nothing: it may be the object's own outline, run past its
            # tracks to the frame's edge (a dark board dotted with highlights, before a bare
            # wall: 6–25 frames at a time then followed the board, measured).
            unconfirmed = not lone and (surround == "plain" or (
                self.doubt and surround in ("unknown", "textured")))
            if lone or (votes is not None and votes.supported):
                self.doubt = False
            elif unconfirmed:
                self.doubt = True
            if votes is not None:
                self.contradicted = self.contradicted + 1 if votes.contradicted else 0
            if votes is not None and votes.contradicted and (
                    self.contradicted >= StillDetailSettings().start_votes
                    or time_s < self.held_until):
                # Faint detail away from the tracks stayed put while the fit moved them: they
                # are on an object before a plain background, and the camera held still over
                # the baseline. So it stays until detail moves with a fit again.
                held = True
                memo = anchors.strike(memo, support, time_s)
                self.held_until = time_s + StillDetailSettings().hold_s
                self._hold_since(self._still_slot())
                self.releasing = []
            elif time_s < self.held_until:
                held = self._release_pending(votes)
                if held and (votes is None or votes.still + votes.moved == 0):
                    # Nothing on this frame can tell (no detail away from the tracks, or
                    # too little motion): the hold goes on. It ends when detail is seen
                    # moving with the fits, or when for hold_s the frames show detail
                    # that neither contradicts nor supports them.
                    self.held_until = time_s + StillDetailSettings().hold_s
        if grouping is not None and grouping.split:
            memo = anchors.strike(memo, grouping.moved, time_s)
            slot = self._older_slot()
            then = memo[grouping.moved, 2 * slot:2 * slot + 2]
            where = np.concatenate([dst[grouping.moved], then[np.isfinite(then[:, 0])]])
            self._hindsight(pairs.ids[grouping.scene], pairs.ids[grouping.moved],
                            object_mask(where, (fw, fh)))
        # Re-base a baseline slot every half baseline: the older one goes.
        half = 0.5 * base.baseline_s
        newest = max((s for s in self.slot_s if math.isfinite(s)), default=-math.inf)
        if time_s - newest >= half or not math.isfinite(newest):
            old = self._older_slot()
            slot = old
            if old is None:
                slot = 0
            elif not math.isfinite(self.slot_s[1 - old]):
                slot = 1 - old
            memo = anchors.rebase(memo, slot, dst)
            self.slot_s[slot] = time_s
            # The still-detail baseline is the frame before, so that this frame's own motion
            # is judged too.
            before = tracker.frames[0]
            self.still_base[slot] = None if before is None or not fit.ok else _StillBase(
                index - 1, before, pairs.src[with_fit], fit.matrix)
        if not fit.ok:
            self.prior = None
            tracker.update(None, memo)
            return FrameRecord(fit.matrix, d, "failed", "no_fit")
        if ambiguous or (fit.weak and n_in < MINORITY_SHARE * len(src) and not held):
            tracker.update(None, memo)
            record = FrameRecord(fit.matrix, d, "weak", "foreground")
            # Kept for revision: an overlay found later may have been the rival group.
            self.recent.append(_Recent(index, time_s, src, dst, pairs.ids, pairs.background,
                                       use, record, grouping is None, judged=judged))
            return record
        if unconfirmed and not held and settings.plain_surround == "hold":
            # Nothing tells a board moved before a bare wall from a structure before a clear
            # sky: the camera is held still, never given the motion of what may be an object
            # (the frames since the baseline too, as for a hold on still detail).
            self.prior = fit.matrix
            tracker.update(None, memo)
            self._hold_since(self._still_slot(), "unconfirmed")
            record = FrameRecord(np.eye(3), d, "weak", "unconfirmed")
            self.recent.append(_Recent(index, time_s, src, dst, pairs.ids, pairs.background,
                                       use, record, grouping is None, judged=judged))
            return record
        if held:
            self.prior = fit.matrix
            tracker.update(None, memo)
            record = FrameRecord(np.eye(3), d, "weak", "held_still")
            self.recent.append(_Recent(index, time_s, src, dst, pairs.ids, pairs.background,
                                       use, record, grouping is None, judged=judged))
            if self.releasing or (votes is not None and votes.supported):
                self.releasing.append((record, fit.matrix, fit.weak or fit.bunched))
            return record
        self.prior = fit.matrix
        tracker.update(support, memo)
        if self.overlays.observe(pairs.src, pairs.dst, rescale(fit.matrix, scale)):
            tracker.set_mask(self.overlays.mask(ctx.user_mask))
            self.overlays_found = True
        if fit.weak or fit.bunched:
            record = FrameRecord(fit.matrix, d, "weak", "few_inliers")
        elif unconfirmed:
            # Told to follow (a tower before a clear sky from a moving drone): the fit
            # stands, and the frame says that nothing confirmed it as the camera's motion.
            record = FrameRecord(fit.matrix, d, "weak", "unconfirmed")
        else:
            record = FrameRecord(fit.matrix, d, "ok")
        record.gain_shift = self._gain_shift(pairs, support)
        if ctx.bands is not None:
            # All pairs near the frame's fit: the grouping above reads rows that a rolling
            # shutter moved apart as objects of their own.
            record.bands = track_band_shifts(src, dst, fit.matrix, fh, settings.inlier_px,
                                             ctx.bands)
        self.recent.append(_Recent(index, time_s, src, dst, pairs.ids, pairs.background,
                                   use, record, grouping is None, judged=judged))
        # The last second's fits are kept for revision; over the first three seconds of a
        # pass, all of them (its first frames have no baseline at all).
        if time_s - self.begin_s > 6.0 * base.baseline_s:
            while self.recent and self.recent[0].time_s < time_s - 2.0 * base.baseline_s:
                self.recent.popleft()
        return record

    def _gain_shift(self, pairs: Pairs, support: np.ndarray) -> np.ndarray | None:
        """How far this frame's change of brightness moved the tracks the fit rests on
        (:func:`stabilize.brightness.gain_effect`, on at most :data:`GAIN_POINTS` of them,
        evenly picked): (2,) dx, dy, full-resolution pixels; None without a previous frame."""
        before, now = self.tracker.frames
        if before is None or now is None:
            return None
        at = np.flatnonzero(support)
        if len(at) > GAIN_POINTS:
            at = at[::-(-len(at) // GAIN_POINTS)]
        effect = gain_effect(before, now, pairs.src[at], pairs.dst[at],
                             self.tracker.window_px)
        sx, sy = self.ctx.scale
        return np.array([effect.shift[0] / sx, effect.shift[1] / sy])

    def _carry(self, matrix: np.ndarray | None) -> None:
        """Chain this frame's fitted motion (None: no fit) onto each still-detail baseline."""
        for b in self.still_base:
            if b is not None:
                b.motion = None if b.motion is None or matrix is None else matrix @ b.motion

    def _still_slot(self) -> _StillBase | None:
        """The older still-detail baseline (the longer stretch of motion), if any."""
        slot = self._older_slot()
        return None if slot is None else self.still_base[slot]

    def _still_votes(self, image: np.ndarray, tracks: np.ndarray) -> StillVotes | None:
        """Whether the faint detail of the older baseline's picture away from its tracks
        (its faint corners or, with none, its faint texture) stayed where it was while the
        fits since then moved the frame (:mod:`stabilize.still_detail`); None when there is
        nothing to judge (no baseline, no detail, or too little motion). ``image`` is this
        frame's analysis copy, ``tracks`` (k, 2) the analysis positions of the tracks that
        carried this frame's fit."""
        b = self._still_slot()
        if b is None or b.motion is None:
            return None
        ctx = self.ctx
        cfg = StillDetailSettings()
        motion = rescale(b.motion, ctx.scale)
        if corner_shift(motion, np.eye(3), ctx.analysis_size) < cfg.min_shift_px:
            return None
        if b.detail is False:
            b.detail = find_detail(b.image, b.tracks, self.overlays.mask(ctx.user_mask),
                                   self.tracker.settings, cfg, self.tracker.floor)
        if b.detail is None or b.detail is False:
            return None
        grid = self.tracker.settings.grid
        if len(b.detail.points):
            return judge(b.detail, image, motion, tracks, grid, cfg)
        # No faint corner: a faint wall textured all over still shows, patch by patch.
        if b.texture is False:
            b.texture = find_texture(b.image, b.tracks, self.overlays.mask(ctx.user_mask),
                                     grid, cfg)
        if b.texture is None or not len(b.texture.points):
            return None
        return judge_texture(b.texture, image, motion, tracks, grid, cfg)

    def _surround(self, votes: StillVotes | None) -> str:
        """What the picture away from the tracks says of this frame's fit: ``"plain"``,
        ``"detail"``, ``"textured"`` or ``"unknown"``. ``votes``: from :meth:`_still_votes`,
        None when there was nothing to judge.

        ``"plain"``: the fit moved the frame since the older baseline (at least
        :attr:`StillDetailSettings.min_shift_px` at its corners) while a fair share of the
        picture lay away from the tracks (:attr:`StillDetailSettings.untracked_share`), and
        that share was plain (:func:`stabilize.still_detail.is_plain`: a bare wall, a clear
        sky) with at most :data:`OUTLINE_CORNERS` faint corners that could be compared
        (others lie beside the tracks now: the object's own outline), none of which could
        be judged. The tracks may then be a large object moving before a still camera as well
        as the scene: nothing on the frame tells which.

        ``"detail"``: faint corners there voted (``votes``); ``"textured"``: that picture is
        no plain one, though it offers no corner (a defocused post or a blurred car is no
        less a part of the picture, and the frames before and after judge it);
        ``"unknown"``: no baseline, too little of the picture away from the tracks, too
        little motion since the baseline, or faint corners none of which could be judged.
        """
        b = self._still_slot()
        if b is None or b.motion is None or not isinstance(b.detail, StillDetail):
            # No baseline, too little of the picture away from the tracks (None), or too
            # little motion to look for detail yet (False).
            return "unknown"
        if votes is not None and votes.still + votes.moved > 0:
            return "detail"
        # Corners the object now covers or borders (its own outline, most often) cannot be
        # compared and are no detail of the rest.
        if (len(b.detail.points) if votes is None else votes.compared) > OUTLINE_CORNERS:
            return "unknown"
        if corner_shift(rescale(b.motion, self.ctx.scale), np.eye(3),
                        self.ctx.analysis_size) < StillDetailSettings().min_shift_px:
            return "unknown"
        if b.plain is None:
            b.plain = is_plain(b.image, b.tracks, self.overlays.mask(self.ctx.user_mask),
                               self.tracker.settings.grid)
        return "plain" if b.plain else "textured"

    def _release_pending(self, votes: StillVotes | None) -> bool:
        """Whether a frame inside a hold stays held, given its still-detail ``votes``.

        The hold ends once detail is seen moving with the fit on
        :attr:`StillDetailSettings.release_votes` frames in a row (frames with nothing to
        judge neither count nor break the run): one frame's two or three corners at the edge
        of an object can move with it by chance. The frames of the run held so far then
        get their fitted motion back."""
        run = self.releasing
        if votes is not None and not votes.supported:
            run.clear()
            return True
        if votes is None or len(run) + 1 < StillDetailSettings().release_votes:
            return True
        for record, matrix, weak in run:
            record.matrix = matrix
            record.status, record.reason = ("weak", "few_inliers") if weak else ("ok", "")
        run.clear()
        self.held_until = -math.inf
        return False

    def _hold_since(self, b: _StillBase | None, reason: str = "held_still") -> None:
        """Hold still the frames after baseline ``b`` still open to revision: the detail
        said the camera did not move over them (weak fits with few inliers too: the same
        tracks carried them). So are the frames just before it that nothing judged (see
        :attr:`_Recent.judged`): an object waved from the first frame moved them before
        the pass had any baseline to judge it by."""
        if b is None:
            return
        start = b.index
        for r in reversed(self.recent):
            if r.index <= b.index and r.judged:
                break
            start = min(start, r.index - 1)
        for r in self.recent:
            if r.index > start and r.index >= self.owned_from and (
                    r.record.status == "ok" or r.record.reason in ("few_inliers",
                                                                   "unconfirmed")):
                r.record.matrix = np.eye(3)
                r.record.status, r.record.reason = "weak", reason

    def _overlay_hindsight(self) -> None:
        """Fit again, without the tracks on overlay cells found since, the recent frames
        (ok, weak for few inliers, or stand-ins for a rival group) whose fits used such
        tracks.

        Before a burnt-in strip is known, the frames' fits may rest on it: over a hazy scene
        it holds most of the strong corners, and the grouping may take it for the scene (its
        tracks are the oldest, and the first fits moved with them) while the real scene is
        suspect. Those frames are refitted on the other tracks: the ones they used, or all
        of them when too few of those are left. A frame that stood in for its motion because
        two groups rivalled (``foreground``) gets the refit when it is not bunched: the
        overlay was the rival (a hazy truss at CRF 23 whose text line was found after 41
        frames: 11 of its 20 stand-ins refitted, and the steadied video kept 0.30 / 0.54 px
        of shake instead of 1.15 / 0.82 px, against 2.2 px in the source; measured
        2026-12-05)."""
        ctx = self.ctx
        fw, fh = ctx.full_size
        settings = ctx.settings
        min_group = ctx.baseline.min_group
        for r in self.recent:
            rec = r.record
            rival = rec.status == "weak" and rec.reason == "foreground"
            if r.index < self.owned_from or not (
                    rec.status == "ok" or rival
                    or (rec.status == "weak" and rec.reason == "few_inliers")):
                continue
            on = self.overlays.covers(to_analysis_resolution(r.src, ctx.scale))
            hit = r.used & on
            if hit.sum() < max(3, 0.05 * r.used.sum()):
                continue
            keep = r.used & ~on
            if keep.sum() < min_group or hull_share(r.dst[keep], (fw, fh)) < 0.1:
                keep = ~on
            if keep.sum() < min_group or hull_share(r.dst[keep], (fw, fh)) < SCENE_HULL:
                continue
            fit = refit(r.src[keep], r.dst[keep], model=ctx.model, settings=settings,
                        seed=[settings.seed, r.index, 3], prior=rec.matrix, frame_size=(fw, fh))
            if not fit.ok or corner_shift(fit.matrix, rec.matrix, (fw, fh)) <= REVISE_PX:
                continue
            if rival and fit.bunched:
                continue    # without the overlay, still no clear scene: the stand-in stays
            # The revision's own support must fit it clearly better than the first fit.
            a, b = r.src[keep][fit.support], r.dst[keep][fit.support]
            if median(transfer_error(fit.matrix, a, b)) > REVISE_GAIN * median(
                    transfer_error(rec.matrix, a, b)):
                continue
            rec.matrix = fit.matrix
            r.used = keep
            n_in = int(np.count_nonzero(
                transfer_error(fit.matrix, r.src, r.dst) < settings.inlier_px))
            rec.diag = (len(r.src), n_in, n_in / len(r.src), fit.rms_px,
                        rec.diag[4] + fit.rounds)
            if rec.status == "weak" and not (fit.weak or fit.bunched):
                # (A frame whose rival group was the overlay now has a scene of its own.)
                rec.status, rec.reason = "ok", ""
            elif rival:
                rec.status, rec.reason = "weak", "few_inliers"   # its fit stands, weak
            elif rec.status == "ok" and fit.bunched:
                rec.status, rec.reason = "weak", "few_inliers"

    def _hindsight(self, scene_ids: np.ndarray, moved_ids: np.ndarray,
                   region: np.ndarray) -> None:
        """Fit again, on the tracks now known to be the scene (``scene_ids``) alone, the
        recent frames that used tracks now found to move on their own, or tracks inside the
        region the moving group covered (``region``, from :func:`object_mask`: tracks on an
        object are lost and found again under new names).

        An object that starts to move drags the first frames' fits a little before its
        motion over the baseline gives it away; those frames are refitted without it.
        """
        ctx = self.ctx
        base = ctx.baseline
        fw, fh = ctx.full_size
        settings = ctx.settings
        attempts = REVISE_ATTEMPTS[settings.analysis]
        # Frames held still are not refitted; unconfirmed ones kept their fit only when told
        # to follow.
        follow = settings.plain_surround == "follow"
        open_ = [r for r in self.recent if r.index >= self.owned_from
                 and (r.record.status == "ok" or (follow and r.record.reason == "unconfirmed"))
                 and r.attempts < attempts and len(r.ids)]
        if not open_:
            return
        # The tracks hit in every open frame at once (one membership test, one mask lookup,
        # one count per frame).
        starts = np.cumsum([0] + [len(r.ids) for r in open_[:-1]])
        used = np.concatenate([r.used for r in open_])
        cells = np.concatenate([r.cells(region.shape) for r in open_])
        hits = used & (np.isin(np.concatenate([r.ids for r in open_]), moved_ids)
                       | (region.ravel()[cells] > 0))
        n_hit = np.add.reduceat(hits, starts)
        # A few tracks more or less hardly move a fit; and a frame is refitted a few times
        # at most while the same object goes on moving.
        due = n_hit >= np.maximum(3, 0.05 * np.add.reduceat(used, starts))
        for i in np.flatnonzero(due).tolist():
            r = open_[i]
            hit = hits[starts[i]:starts[i] + len(r.ids)]
            r.attempts += 1
            keep = r.used & ~hit & np.isin(r.ids, scene_ids)
            if keep.sum() < base.min_group or hull_share(r.dst[keep], (fw, fh)) < SCENE_HULL:
                continue
            fit = refit(r.src[keep], r.dst[keep], model=ctx.model, settings=settings,
                        seed=[settings.seed, r.index, 1], prior=r.record.matrix,
                        frame_size=(fw, fh))
            # A slow object drags a fit by a fraction of the threshold; a faster one was
            # parted from the scene by the frame's own consensus already, unless the frame
            # came before any baseline: then the consensus took whichever group was the
            # larger, and the scene known since may lie anywhere.
            shift = corner_shift(fit.matrix, r.record.matrix, (fw, fh))
            reach = math.inf if r.blind else 2.0 * settings.inlier_px
            if not fit.ok or fit.weak or not REVISE_PX < shift <= reach:
                continue
            # The tracks kept must fit the revision clearly better than the first fit (which
            # a moving object dragged away from them); otherwise what is left is another
            # motion of its own, not the scene.
            before = median(transfer_error(r.record.matrix, r.src[keep], r.dst[keep]))
            after = median(transfer_error(fit.matrix, r.src[keep], r.dst[keep]))
            if after <= REVISE_GAIN * before:
                r.record.matrix = fit.matrix
                r.used = keep
                if fit.bunched:
                    r.record.status, r.record.reason = "weak", "few_inliers"


def lone_tracks(pts: np.ndarray, radius: float, company: int = LONE_COMPANY,
                among: np.ndarray | None = None) -> np.ndarray:
    """Which of the points ``pts`` (k, 2) are lone, a (k,) bool mask: at most ``company``
    other points within ``radius`` (same units, pixels), and farther than half ``radius``
    outside the convex hull of the others (those with more company). A small mark on a
    wall gives a track or a few, a textured object many close together, and the few tracks
    along an object's outline (its corners against a plain wall) are still the object's.
    ``among`` (k,) bool: only these can be lone (all points are still each other's
    company); None: all."""
    d2 = ((pts[:, None, :] - pts[None, :, :]) ** 2).sum(axis=2)
    near = np.count_nonzero(d2 <= radius * radius, axis=1) - 1
    lone = near <= company
    if among is not None:
        lone &= among
    crowded = pts[near > company]
    if lone.any() and len(crowded) >= 3:
        hull = cv2.convexHull(crowded.astype(np.float32).reshape(-1, 1, 2))
        for i in np.flatnonzero(lone):
            p = (float(pts[i, 0]), float(pts[i, 1]))
            lone[i] = cv2.pointPolygonTest(hull, p, True) < -0.5 * radius
    return lone


def _frame_distance(tracker: Tracker, cfg: CutSettings) -> float:
    """Histogram distance between the tracker's previous and current frames (only needed
    when tracking collapsed, so not worked out for every frame)."""
    prev, cur = tracker.frames
    return histogram_distance(grey_histogram(prev, cfg.bins), grey_histogram(cur, cfg.bins))


def _restart_fast_motion(tracker: Tracker, pairs: Pairs
                         ) -> tuple[Pairs, float, tuple[float, float]]:
    """Most tracks were lost: guess the whole-frame shift by phase correlation and track
    again from there, keeping whichever attempt kept more tracks. Also returns the phase
    correlation's peak response (near 0 when the two frames share no picture) and its shift
    (dx, dy), analysis pixels."""
    prev, cur = tracker.frames
    dx, dy, response = global_shift(prev, cur)
    if response < 0.05:
        return pairs, response, (dx, dy)
    guess = np.array([[1.0, 0.0, dx], [0.0, 1.0, dy], [0.0, 0.0, 1.0]])
    again = tracker.retry(guess)
    if len(again) >= len(pairs):
        return again, response, (dx, dy)
    return tracker.retry(None), response, (dx, dy)
