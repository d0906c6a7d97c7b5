"""Synthetic clips: frames rendered on demand from a scene spec, with their exact ground truth.

Frame ``t`` is ``cv2.warpPerspective(world, G_t, (width, height))`` with the world drawn by
:mod:`~stabilize.synthetic.painting`, ``G_t`` from :mod:`~stabilize.synthetic.camera`,
movers and the telemetry strip blended in afterwards. Conventions in
:mod:`stabilize.synthetic`.
"""

from __future__ import annotations

import math
from collections.abc import Iterator

import cv2
import numpy as np

from ..geometry import normalise, rescale
from .camera import camera_params, shake_offsets, shake_tables, world_to_frame_matrices
from .canvas import draw_sky_world
from .movers import mover_track, paste_mover
from .painting import STYLES, draw_world
from .spec import HAZE_GREY, SceneSpec
from .telemetry import draw_telemetry, telemetry_layout, telemetry_text

__all__ = ["SyntheticClip", "grid_transfer_error"]

# Sampling rate used to bound the world canvas; independent of the clip's fps so that the world
# (and thus world_to_frame) is identical for every frame rate.
_BOUND_RATE_HZ = 200.0


_MAX_WORLD_PIXELS = 80_000_000


def grid_transfer_error(
    H_true: np.ndarray, H_est: np.ndarray, width: int, height: int, n: int = 10
) -> float | np.ndarray:
    """Mean distance (px) between an n×n grid over the frame mapped by ``H_true`` and ``H_est``.

    The grid spans pixel centres ``x ∈ [0, width-1]``, ``y ∈ [0, height-1]``. Accepts single
    3×3 matrices (returns a float) or broadcastable stacks ``(k,3,3)`` (returns a ``(k,)`` array).
    NaN matrices give NaN.

    Parameters
    ----------
    H_true, H_est : (3, 3) or (k, 3, 3) homographies, frame pixels.
    width, height : frame size, pixels.
    n : grid points per side.

    Returns
    -------
    float or (k,) array : mean distance, pixels.
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
        self._sines = shake_tables(spec.shake, spec.seed)

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
        self._movers = [mover_track(m, t, g, gs[0], self.width, self.height)
                        for m in spec.movers]
        self._telemetry = (telemetry_layout(self.width, self.height, self._telemetry_text(0))
                           if spec.telemetry else None)

    # -- camera ------------------------------------------------------------------------------

    def _params(self, t: np.ndarray, shake: bool) -> dict[str, np.ndarray]:
        """Camera parameters in path coordinates (the shake-free camera starts at x = y = 0)."""
        return camera_params(self.spec.motion, self.spec.model, t,
                             shake_offsets(self._sines, t) if shake else None, self._f)

    def _world_matrices(self, p: dict[str, np.ndarray], offset=None) -> np.ndarray:
        ox, oy = self._offset if offset is None else offset
        q = {**p, "x": p["x"] + ox, "y": p["y"] + oy}
        return world_to_frame_matrices(q, self.width, self.height, self._f)

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
        """The world canvas of a shot, uint8 RGB at ``supersample``× nominal resolution.

        Drawn on first use (seeded by the clip seed and the shot) and kept.

        Parameters
        ----------
        shot : shot index, 0 for the first.

        Returns
        -------
        (H·k, W·k, 3) uint8 RGB, (W, H) = ``world_size`` in nominal world pixels and
        k = ``supersample``.
        """
        if shot not in self._worlds:
            w, h = self.world_size
            rng = np.random.default_rng([self.spec.seed, 1000 + shot])
            z0 = self.spec.motion.zoom
            view = (self.width / z0, self.height / z0)
            img = draw_world(self._style_of_shot(shot), rng, w, h, self.spec.supersample,
                             self._offset, view)
            k = self.spec.supersample
            # Soften sub-pixel detail so bilinear sampling does not alias.
            self._worlds[shot] = cv2.GaussianBlur(img, (0, 0), 0.7 * k)
        return self._worlds[shot]

    def set_world(self, image: np.ndarray, shot: int = 0) -> None:
        """Use ``image`` (uint8 RGB, ``supersample``× the nominal ``world_size``) as a shot's world.

        For example a photograph of the ground instead of a drawn canvas; the ground truth is
        unchanged because it depends only on the camera.

        Parameters
        ----------
        image : (H·k, W·k, 3) uint8 RGB, (W, H) = ``world_size`` and k = ``supersample``.
        shot : shot index, 0 for the first.

        Raises
        ------
        ValueError
            When the shape or dtype is not as above.
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
            self._sky_world = draw_sky_world(rng, w, h, self.spec.supersample, None, None)
        return self._sky_world

    # -- overlays ----------------------------------------------------------------------------

    def _telemetry_text(self, t: int) -> str:
        return telemetry_text(self.spec.motion, t, self.fps, self._smooth["log_zoom"][t])

    # -- rendering ---------------------------------------------------------------------------

    def frame(self, t: int, return_mask: bool = False):
        """Render frame ``t`` as uint8 RGB (h, w, 3).

        With ``return_mask=True`` returns ``(rgb, mask)`` where ``mask`` (h, w) bool marks pixels
        that do not follow the camera motion (movers and the telemetry strip).

        Parameters
        ----------
        t : frame index, 0 to ``n_frames`` − 1.
        return_mask : also return the mask.

        Returns
        -------
        rgb : (h, w, 3) uint8 RGB, frame pixels (convention of :mod:`stabilize.geometry`).
        mask : (h, w) bool, only with ``return_mask``.

        Raises
        ------
        IndexError
            For ``t`` out of range.
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
                paste_mover(f, mask, mv, t, self.width, self.height)
            img = f
        if self.spec.contrast < 1.0:
            img = HAZE_GREY + self.spec.contrast * (img.astype(np.float32) - HAZE_GREY)
        if self.spec.noise_sigma > 0:
            rng = np.random.default_rng([self.spec.seed, 2, t])
            img = img + rng.standard_normal((h, w, 3), dtype=np.float32) * self.spec.noise_sigma
        if img.dtype != np.uint8:
            img = np.clip(np.rint(img), 0, 255).astype(np.uint8, order="C")
        if self._telemetry is not None:
            draw_telemetry(img, mask, self._telemetry, self._telemetry_text(t))
        return (img, mask) if return_mask else img

    def frames(self) -> Iterator[tuple[int, np.ndarray]]:
        """Yield ``(t, rgb)`` for every frame in order, rendering one at a time.

        Yields
        ------
        (int, (h, w, 3) uint8) : frame index and RGB frame (:meth:`frame`).
        """
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

        Parameters
        ----------
        smooth : the deliberate motion only (no shake).

        Returns
        -------
        dict : the keys above, each (n,) float (new arrays).
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

        Returns
        -------
        dict : name -> array, as listed above (copies).
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
