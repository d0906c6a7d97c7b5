"""Analysis CPU time per frame and accuracy, side by side for each analysis level.

Run: ``python tests/benchmarks/bench_analysis.py [--levels fast,balanced,thorough]
[--repeat 2] [--frames 240]``

The clip is the 1280×720 one of ``tests/test_tracking_accuracy.py`` (a truss scene with sensor
noise, three moving patches over a fifth of the frame and a burnt-in telemetry strip, H.264 at
CRF 18), drawn once and kept in the system's temporary folder. Its analysis copy (the default
analysis width) is decoded into memory first, so the figures are the analysis alone: CPU
seconds of this process (``time.process_time``) per frame with OpenCV on one thread, and the
median / 95th percentile / largest grid transfer error against the exact motion, pixels. The
machine is shared: repeat and take the lowest time.

Synthetic ground truth only (invented data).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import cv2
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from stabilize.config import ANALYSIS_LEVELS, Settings  # noqa: E402
from stabilize.io import VideoWriter, iter_frames, probe  # noqa: E402
from stabilize.io.decode import analysis_size  # noqa: E402
from stabilize.motion import fit_motion  # noqa: E402
from stabilize.synthetic import (  # noqa: E402
    SceneSpec,
    SyntheticClip,
    grid_transfer_error,
    movers_covering,
)


def accuracy_clip(frames: int) -> tuple[Path, SyntheticClip]:
    """The 720p accuracy clip (drawn and encoded once, then reused)."""
    w, h = 1280, 720
    spec = SceneSpec(style="truss", width=w, height=h, fps=30.0, duration_s=frames / 30.0,
                     seed=4, noise_sigma=2.0, model="similarity",
                     movers=movers_covering(0.2, w, h, count=3, seed=1), telemetry=True)
    clip = SyntheticClip(spec)
    path = Path(tempfile.gettempdir()) / f"stabilize-bench-analysis-{frames}.mp4"
    if not path.exists():
        part = path.with_suffix(".part.mp4")
        with VideoWriter(part, w, h, 30.0, crf=18, preset="medium") as out:
            for _, f in clip.frames():
                out.write(f)
        part.replace(path)
    return path, clip


def run(frames: list, info, size, truth: np.ndarray, level: str) -> tuple[float, np.ndarray]:
    """CPU ms per frame of one analysis at ``level``, and its grid errors (px)."""
    settings = Settings(analysis=level)
    t0 = time.process_time()
    track = fit_motion(iter(frames), full_size=(info.width, info.height), analysis_size=size,
                       settings=settings)
    cpu = time.process_time() - t0
    err = grid_transfer_error(truth, track.matrices[1:], info.width, info.height)
    return 1e3 * cpu / len(frames), err


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--levels", default=",".join(ANALYSIS_LEVELS))
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--frames", type=int, default=240)
    args = ap.parse_args()
    cv2.setNumThreads(1)
    path, clip = accuracy_clip(args.frames)
    info = probe(path)
    size = analysis_size(info, Settings().analysis_width)
    frames = list(iter_frames(path, size=size, gray=True, info=info))
    truth = clip.ground_truth()["inter_frame"][1:]
    print(f"numpy {np.__version__}, OpenCV {cv2.__version__} (1 thread); clip "
          f"{info.width}x{info.height}, {len(frames)} frames, analysis {size[0]}x{size[1]}")
    print(f"{'level':<10}{'ms/frame':>10}{'median px':>11}{'p95 px':>9}{'max px':>9}")
    for level in args.levels.split(","):
        runs = [run(frames, info, size, truth, level) for _ in range(args.repeat)]
        ms, err = min(runs, key=lambda r: r[0])
        print(f"{level:<10}{ms:>10.2f}{np.median(err):>11.4f}{np.percentile(err, 95):>9.4f}"
              f"{err.max():>9.4f}")


if __name__ == "__main__":
    main()
