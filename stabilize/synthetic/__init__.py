"""Procedural synthetic camera-motion clips with exact ground truth (scenes drawn, never filmed).

Why this lives in the runtime package, not under ``tests/``: the ``demo`` command steadies
an invented inspection pass (:mod:`stabilize.demo_scene`), and an installed copy without the
bundled clip draws that scene again from these modules. Tests, benchmarks and the golden
runs use the same code for their ground truth. It is a stage (it imports only
:mod:`stabilize.geometry` of the package) and nothing in the analysis imports it.

Modules, each importing only those above it:

- :mod:`~stabilize.synthetic.camera`: shake and motion specs, camera parameters → ``G_t``.
- :mod:`~stabilize.synthetic.canvas`: drawing primitives, value noise, the sky.
- :mod:`~stabilize.synthetic.painting`: the worlds of each style (truss, solar, field).
- :mod:`~stabilize.synthetic.movers`: moving objects, their textures, tracks and blending.
- :mod:`~stabilize.synthetic.telemetry`: the burnt-in on-screen-display strip.
- :mod:`~stabilize.synthetic.spec`: :class:`SceneSpec`, everything that defines a clip.
- :mod:`~stabilize.synthetic.clip`: :class:`SyntheticClip` (frames and ground truth) and
  :func:`grid_transfer_error`.

A large "world" image is drawn once from a seed, then a virtual camera flies over it: frame
``t`` is ``cv2.warpPerspective(world, G_t, (width, height))`` where ``G_t`` is the world→frame
homography of that frame. Everything that moves the image is generated from continuous time in
seconds, so the same spec sampled at 30 and at 60 fps shows the same camera at equal times.

Coordinate convention (used by the whole package)
-------------------------------------------------
Pixel coordinates are ``(x, y)``: x to the right, y down, origin at the *centre* of the top-left
pixel, so pixel column ``j``, row ``i`` has centre ``(j, i)``. This is OpenCV's convention for
``warpPerspective`` and ``remap``.

``world_to_frame[t]`` (``G_t``) maps world coordinates (pixels of the world canvas at nominal
scale, same convention) to pixel coordinates of frame ``t``.

``inter_frame[t]`` (``H_t``) maps pixel coordinates of frame ``t-1`` to frame ``t``: a scene point
seen at ``p`` in frame ``t-1`` is seen at ``H_t · p`` in frame ``t``. ``H_t = G_t · G_{t-1}^-1``
normalised to ``h33 = 1``; ``H_0`` is the identity; at a scene cut ``H_t`` is all-NaN. Hence
``cv2.warpPerspective(frame[t-1], H_t, (w, h))`` reproduces ``frame[t]`` wherever both frames see
the scene.

Frames are ``uint8`` RGB arrays of shape ``(height, width, 3)``.

Example::

    spec = SceneSpec(style="truss", width=640, height=360, fps=30.0, duration_s=3.0, seed=0,
                     shake=ShakeSpec.drone(), motion=MotionSpec(pan_px_s=40.0),
                     movers=movers_covering(0.05, 640, 360), telemetry=True, noise_sigma=2.0)
    clip = SyntheticClip(spec)
    for t, rgb in clip.frames():
        ...
    gt = clip.ground_truth()        # dict of numpy arrays, ready for np.savez
"""

from .camera import MODELS, MotionSpec, NoiseBand, ShakeSpec, Sinusoid
from .clip import SyntheticClip, grid_transfer_error
from .movers import Mover, movers_covering
from .painting import STYLES, TRUSS_DECK_FRAC
from .spec import HAZE_GREY, SceneSpec

__all__ = [
    "HAZE_GREY",
    "MODELS",
    "STYLES",
    "TRUSS_DECK_FRAC",
    "MotionSpec",
    "Mover",
    "NoiseBand",
    "SceneSpec",
    "ShakeSpec",
    "Sinusoid",
    "SyntheticClip",
    "grid_transfer_error",
    "movers_covering",
]
