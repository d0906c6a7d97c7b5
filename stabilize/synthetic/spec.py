"""The scene spec: everything that defines a synthetic clip, so equal specs give equal clips.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from .camera import MODELS, Model, MotionSpec, ShakeSpec
from .movers import Mover
from .painting import STYLES, Style

__all__ = ["HAZE_GREY", "SceneSpec"]


#: Grey level (0–255) a hazy scene is blended toward (see ``SceneSpec.contrast``).
HAZE_GREY = 170.0


@dataclass(frozen=True)
class SceneSpec:
    """Everything that defines a synthetic clip; equal specs give bit-identical clips.

    ``width``/``height``: frame size, px. ``fps``: frames per second. ``duration_s``: seconds
    (``n_frames = round(duration_s · fps)``). ``model``: which motion components are honoured
    (``translation`` < ``similarity`` < ``affine`` < ``perspective``); components outside the model
    are ignored. In the perspective model translational shake is realised as camera rotation
    (tilt), so the shake itself produces true homographies.
    ``telemetry``: burn a static on-screen-display strip into the bottom of every frame.
    ``noise_sigma``: Gaussian sensor noise, grey levels (applied before the telemetry overlay).
    ``contrast``: haze, 0 < c ≤ 1: the rendered scene (movers included) is blended toward a
    flat grey of :data:`HAZE_GREY` as ``grey + c·(scene − grey)`` before the noise and before
    the telemetry strip is burnt in, so the strip keeps its full contrast (1: no haze).
    ``textureless_s``: ``(start, end)`` seconds during which the camera sees plain sky.
    ``cuts_s``: times (s) of hard scene cuts; shot ``k`` shows ``cut_styles[k-1]`` (default: the
    next style) drawn from a different seed. ``supersample``: render at this integer factor and
    area-downsample (anti-aliasing; exact under the pixel-centre convention).
    ``hfov_deg``: horizontal field of view used for the perspective model's focal length.
    """

    style: Style = "truss"
    width: int = 640
    height: int = 360
    fps: float = 30.0
    duration_s: float = 3.0
    seed: int = 0
    motion: MotionSpec = field(default_factory=MotionSpec)
    shake: ShakeSpec = field(default_factory=ShakeSpec.drone)
    model: Model = "similarity"
    movers: tuple[Mover, ...] = ()
    telemetry: bool = False
    noise_sigma: float = 0.0
    contrast: float = 1.0
    textureless_s: tuple[float, float] | None = None
    cuts_s: tuple[float, ...] = ()
    cut_styles: tuple[str, ...] = ()
    supersample: int = 1
    hfov_deg: float = 60.0

    def __post_init__(self) -> None:
        if self.style not in STYLES or any(s not in STYLES for s in self.cut_styles):
            raise ValueError(f"style must be one of {STYLES}")
        if self.model not in MODELS:
            raise ValueError(f"model must be one of {MODELS}")
        if self.width < 16 or self.height < 16:
            raise ValueError("frame must be at least 16x16 px")
        if not (self.fps > 0 and self.duration_s > 0):
            raise ValueError("fps and duration_s must be positive")
        if self.supersample not in (1, 2, 3, 4):
            raise ValueError("supersample must be 1..4")
        if self.noise_sigma < 0:
            raise ValueError("noise_sigma must be >= 0")
        if not 0.0 < self.contrast <= 1.0:
            raise ValueError("contrast must be in (0, 1]")
        if not 5.0 < self.hfov_deg < 150.0:
            raise ValueError("hfov_deg must be in (5, 150)")

    @property
    def n_frames(self) -> int:
        """Number of frames, ``max(1, round(duration_s · fps))``.

        Returns
        -------
        int : frames.
        """
        return max(1, round(self.duration_s * self.fps))

    @property
    def focal_px(self) -> float:
        """Focal length in pixels implied by ``hfov_deg`` and ``width``.

        Returns
        -------
        float : w / (2 · tan(hfov / 2)), pixels.
        """
        return self.width / (2.0 * math.tan(math.radians(self.hfov_deg) / 2.0))
