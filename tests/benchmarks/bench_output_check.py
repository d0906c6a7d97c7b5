"""Time the motion check of the render pass (``stabilize.residual``) and print it.

A benchmark, not a test: run it by hand, ``python tests/benchmarks/bench_output_check.py``.
A synthetic truss clip with drone shake is drawn at 1280×720 and encoded with H.264; its
frames are decoded in the render pass's planar YUV, scaled to each size measured, and fed to
a :class:`stabilize.residual.RenderCheck` as source and output, as the render pass does. It
prints the processor time per frame for both streams together (the best of a few rounds,
OpenCV on one thread) and the check's error on the source against the exact motion. The
target is 3 ms per frame at 1080p on a 2-core machine.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import cv2
import numpy as np

from stabilize.geometry import frame_centre, similarity_readout
from stabilize.io import VideoWriter, iter_frames
from stabilize.residual import RenderCheck
from stabilize.synthetic import SceneSpec, SyntheticClip


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=60)
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args()
    cv2.setNumThreads(1)
    fps, w0, h0 = 30.0, 1280, 720
    clip = SyntheticClip(SceneSpec(style="truss", width=w0, height=h0, fps=fps,
                                   duration_s=args.frames / fps, seed=5, noise_sigma=1.0))
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench.mp4"
        with VideoWriter(path, w0, h0, fps, crf=18, preset="veryfast") as wr:
            for _, rgb in clip.frames():
                wr.write(rgb)
        lumas = [f.image.y.copy() for f in iter_frames(path, yuv="yuv420p")]
    exact = similarity_readout(clip.inter_frame, frame_centre(w0, h0))[:, :3]
    for w, h in ((1280, 720), (1920, 1080), (3840, 2160)):
        frames = [y if (w, h) == (w0, h0) else
                  cv2.resize(y, (w, h), interpolation=cv2.INTER_LINEAR) for y in lumas]
        best = float("inf")
        for _ in range(args.rounds):
            check = RenderCheck(len(frames), (w, h))
            c0 = time.process_time()
            for i, y in enumerate(frames):
                check(i, y, y, np.eye(3))
            best = min(best, (time.process_time() - c0) / len(frames))
        err = np.abs(check.source[1:, :2] * (w0 / w) - exact[1:len(frames), :2])
        print(f"{w}x{h}: {1000 * best:.2f} ms of processor time per frame, both streams; "
              f"error on the source (in {w0}-wide pixels) median {np.nanmedian(err):.3f}, "
              f"95th percentile {np.nanpercentile(err, 95):.3f}")


if __name__ == "__main__":
    main()
