"""Segment-parallel measure: one worker against two on a long generated clip.

    python tests/benchmarks/bench_segments.py [--frames 1200] [--workers 2]

Prints both wall times, their ratio, and whether the two logs are the same (they must be).
The machine may be shared: run it more than once and read the ratio with that in mind.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=1200)
    ap.add_argument("--width", type=int, default=384)
    ap.add_argument("--height", type=int, default=216)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
    from stabilize.pipeline import measure
    from tests.conftest import noise_frames, write_clip

    with tempfile.TemporaryDirectory() as tmp:
        clip = write_clip(Path(tmp) / "long.mp4",
                          noise_frames(args.frames, args.width, args.height, shift_px=0.7),
                          30.0)
        t0 = time.perf_counter()
        one = measure(clip, workers=1)
        t_one = time.perf_counter() - t0
        t0 = time.perf_counter()
        many = measure(clip, workers=args.workers)
        t_many = time.perf_counter() - t0
    same = one.to_csv() == many.to_csv()
    diff = float(np.abs(one.matrices - many.matrices).max())
    print(f"clip: {args.frames} frames of {args.width}x{args.height}")
    print(f"1 worker:  {t_one:.2f} s")
    print(f"{args.workers} workers: {t_many:.2f} s")
    print(f"speed-up:  {t_one / t_many:.2f}x")
    print(f"same log:  {same} (largest matrix difference {diff:.3g})")
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
