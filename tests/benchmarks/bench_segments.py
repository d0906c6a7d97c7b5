"""Segment-parallel measure on a long generated clip: one worker against several.

    python tests/benchmarks/bench_segments.py [--frames 1200] [--width 960 --height 540]
                                              [--workers 2]

A worker is one core (OpenCV single-threaded in it, see :mod:`stabilize.segments`). The
script draws a synthetic drone clip (exact camera motion, sensor noise, H.264), then times in
one run, each in a fresh process so start-up is counted as users meet it:

* ``measure --workers 1``: one single-threaded worker, the issue's reference;
* ``measure --workers N``: the clip split into keyframe segments over N worker processes;
* ``measure`` with no workers: one pass, its tracking spread over the cores by OpenCV threads.

It prints the times, the ratios, and whether the three logs are byte-identical (they must be).
The machine may be shared: run it more than once and read the ratio with that in mind.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from bench_pipeline import make_clip  # the same synthetic drone clip, at any size


def timed(args: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "stabilize", "measure", *args, "--quiet",
                    "--force"], check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - t0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=1200)
    ap.add_argument("--width", type=int, default=960)
    ap.add_argument("--height", type=int, default=540)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        clip = Path(tmp) / "long.mp4"
        make_clip(clip, args.width, args.height, args.frames)
        logs = {k: Path(tmp) / f"{k}.motion.csv" for k in ("one", "many", "default")}
        t_one = timed([str(clip), "--workers", "1", "--log", str(logs["one"])])
        t_many = timed([str(clip), "--workers", str(args.workers), "--log",
                        str(logs["many"])])
        t_default = timed([str(clip), "--log", str(logs["default"])])
        text = {k: p.read_text() for k, p in logs.items()}
    same = text["one"] == text["many"] == text["default"]
    n = args.workers
    print(f"clip: {args.frames} frames of {args.width}x{args.height}")
    print(f"1 worker:            {t_one:6.2f} s")
    print(f"{n} workers:           {t_many:6.2f} s   speed-up {t_one / t_many:.2f}x over 1 worker")
    print(f"one threaded pass:   {t_default:6.2f} s   {n} workers are "
          f"{t_default / t_many:.2f}x faster than it")
    print(f"same log (all three, byte for byte): {same}")
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
