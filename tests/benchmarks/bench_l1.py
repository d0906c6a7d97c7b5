"""Time the L1-optimal smoother on a 5-minute log (9000 frames at 30 fps) and print it.

A benchmark, not a test: run it by hand, ``python tests/benchmarks/bench_l1.py``. The camera
path is a synthetic drone flight (``stabilize.synthetic``: a slow pan, wind buffeting, airframe
vibration and gimbal drift) at 1920×1080; the clip itself is never rendered. The target is
under 30 s on a 2-core machine for the smoothing and the margin check together.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from stabilize import framing
from stabilize.config import AUTO_MARGIN_CAP
from stabilize.geometry import frame_centre, similarity_readout
from stabilize.raw_path import accumulate
from stabilize.shake import shake_component
from stabilize.steady_path import plan_corrections, smooth_path
from stabilize.synthetic import MotionSpec, SceneSpec, ShakeSpec, SyntheticClip


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=9000)
    ap.add_argument("--fps", type=float, default=30.0)
    ap.add_argument("--margin", type=float, default=0.1)
    args = ap.parse_args()
    w, h, fps = 1920, 1080, args.fps
    clip = SyntheticClip(SceneSpec(width=w, height=h, fps=fps, duration_s=args.frames / fps,
                                   seed=0, motion=MotionSpec(pan_px_s=20.0),
                                   shake=ShakeSpec.drone()))
    matrices = np.array(clip.inter_frame)
    p = accumulate(matrices)

    t0 = time.perf_counter()
    s = smooth_path(p, fps=fps, window_s=1.0, model="similarity", width=w, height=h,
                    smoother="l1", margin=args.margin)
    t_smooth = time.perf_counter() - t0

    n = len(matrices)
    t0 = time.perf_counter()
    plan = plan_corrections(matrices, np.zeros(n, bool), fps=fps, window_s=1.0,
                            model="similarity", smoother="l1", margin=args.margin, width=w,
                            height=h, auto_cap=AUTO_MARGIN_CAP)
    t_plan = time.perf_counter() - t0

    uncovered = int(np.count_nonzero(~framing.covered(plan.corrections, w, h)))
    raw_ok = int(np.count_nonzero(framing.covered(framing.corrections(p, s, args.margin, w, h),
                                                  w, h)))
    path_x = plan.smooth_values[:, 0]
    raw_x = similarity_readout(p, frame_centre(w, h))[:, 0]
    shake_in = np.std(shake_component(raw_x, fps, 1.0))
    shake_out = np.std(shake_component(path_x, fps, 1.0))
    print(f"l1 smoother, {n} frames at {fps:g} fps ({n / fps:.0f} s), {w}x{h}, "
          f"margin {args.margin}")
    print(f"  smooth_path(l1):          {t_smooth:6.2f} s  (LP result covers {raw_ok}/{n} frames)")
    print(f"  plan_corrections (total): {t_plan:6.2f} s  uncovered frames: {uncovered}, "
          f"eased: {plan.frames_eased}")
    print(f"  residual shake x: {100 * shake_out / shake_in:.2f} % of the input's")
    print("  target: under 30 s")


if __name__ == "__main__":
    main()
