"""The bundled demo clip: an invented drone inspection pass along a steel truss bridge.

The scene is drawn procedurally by :mod:`stabilize.synthetic`: a multirotor flies sideways along the
near truss of a through-truss bridge in gusty wind, a small car drives across the deck and a
worker in a hard hat walks the other way, and the drone's on-screen display burns a telemetry
strip into the bottom of the picture. 640×360 px, 30 fps, 5 s.

Regenerate with::

    python -m stabilize.demo_scene demo_clips/truss_pass.mp4 [--seed 0] [--truth FILE.npz]
"""

from __future__ import annotations

import argparse
import os
from pathlib import Path

import numpy as np

from .io import VideoWriter
from .synthetic import (
    TRUSS_DECK_FRAC,
    MotionSpec,
    Mover,
    SceneSpec,
    ShakeSpec,
    SyntheticClip,
)

__all__ = ["DURATION_S", "FPS", "HEIGHT", "WIDTH", "demo_spec", "main", "write_demo_clip"]

WIDTH, HEIGHT, FPS, DURATION_S = 640, 360, 30.0, 5.0


def demo_spec(seed: int = 0) -> SceneSpec:
    """The :class:`~stabilize.synthetic.SceneSpec` of the demo pass for ``seed``.

    Parameters
    ----------
    seed : the scene's seed.

    Returns
    -------
    SceneSpec
    """
    deck_y = TRUSS_DECK_FRAC * HEIGHT  # deck surface in the shake-free first frame, px
    car = Mover("vehicle", (58.0, 27.0), (-40.0, deck_y - 13.0), (165.0, 0.0), "world", seed)
    worker = Mover("person", (12.0, 30.0), (520.0, deck_y - 14.0), (-22.0, 0.0), "world",
                   seed + 1)
    return SceneSpec(
        style="truss",
        width=WIDTH,
        height=HEIGHT,
        fps=FPS,
        duration_s=DURATION_S,
        seed=seed,
        # A slow sideways pass with a gentle climb and a hint of zoom, as a pilot flies it.
        motion=MotionSpec(pan_px_s=34.0, climb_px_s=3.0, zoom_per_s=0.01),
        shake=ShakeSpec.drone(wind_px=4.0, vibration_px=0.35, drift_px=5.0, roll_deg=0.7,
                              zoom=0.004),
        model="similarity",
        movers=(car, worker),
        telemetry=True,
        noise_sigma=1.2,
        supersample=2,
    )


def write_demo_clip(path: str | os.PathLike, seed: int = 0,
                    truth_path: str | os.PathLike | None = None) -> Path:
    """Render the demo pass into ``path`` (H.264 MP4) frame by frame; returns the path.

    With ``truth_path`` the ground truth of :meth:`SyntheticClip.ground_truth` (inter-frame
    homographies in pixel coordinates, camera path, flags) is saved there with ``np.savez``.

    Parameters
    ----------
    path : the output video file.
    seed : the scene's seed.
    truth_path : an ``.npz`` file for the ground truth, or None.

    Returns
    -------
    Path : ``path``.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    clip = SyntheticClip(demo_spec(seed))
    with VideoWriter(path, WIDTH, HEIGHT, FPS, codec="h264", crf=20, preset="medium") as w:
        for _, rgb in clip.frames():
            w.write(rgb)
    if truth_path is not None:
        np.savez_compressed(truth_path, **clip.ground_truth())
    return path


def main(argv: list[str] | None = None) -> int:
    """Draw the demo clip from the command line (``python -m stabilize.demo_scene``).

    Parameters
    ----------
    argv : the arguments, or None for ``sys.argv[1:]``.

    Returns
    -------
    int : exit status 0.
    """
    ap = argparse.ArgumentParser(prog="python -m stabilize.demo_scene",
                                 description="Draw the demo inspection clip.")
    ap.add_argument("path", help="output video file, e.g. demo_clips/truss_pass.mp4")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--truth", help="also save the ground truth to this .npz file")
    args = ap.parse_args(argv)
    out = write_demo_clip(args.path, seed=args.seed, truth_path=args.truth)
    print(f"wrote {out} ({out.stat().st_size / 1e6:.2f} MB)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
