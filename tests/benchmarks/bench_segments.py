"""Segment-parallel measure on a long generated clip: one worker against several.

    python tests/benchmarks/bench_segments.py [--frames 1200] [--width 960 --height 540]
                                              [--workers 2]

A worker is one core (OpenCV single-threaded in it, see :mod:`stabilize.segments`). The
script draws a synthetic drone clip (exact camera motion, sensor noise, H.264), then times in
one run, each in a fresh process so start-up is counted as users meet it:

* ``measure --workers 1``: one single-threaded worker, the issue's reference;
* ``measure --workers N``: the clip split into keyframe segments over N worker processes;
* ``measure`` with no workers: one pass, its tracking spread over the cores by OpenCV threads.

It prints the times, the ratios, and whether the logs are byte-identical (they must be).

The machine may be shared, and its speed drifts by 10–30 % over minutes (seen here): a ratio of
two runs minutes apart says little. So the commands run in ``--rounds`` rounds, one after
another within a round and in turn-about order from round to round, and the speed-up is read
per round (the two runs of a round see the same machine) and reported as the median over the
rounds, with the lowest and highest beside it.
"""

from __future__ import annotations

import argparse
import statistics
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
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args()
    n = args.workers
    commands = {"one": ["--workers", "1"], "many": ["--workers", str(n)], "default": []}
    times: dict[str, list[float]] = {k: [] for k in commands}
    same = True
    with tempfile.TemporaryDirectory() as tmp:
        clip = Path(tmp) / "long.mp4"
        make_clip(clip, args.width, args.height, args.frames)
        reference = None
        for r in range(args.rounds):
            order = list(commands) if r % 2 == 0 else list(reversed(commands))
            for k in order:
                log = Path(tmp) / f"{k}.motion.csv"
                times[k].append(timed([str(clip), *commands[k], "--log", str(log)]))
                text = log.read_text()
                reference = text if reference is None else reference
                same &= text == reference
            print(f"round {r + 1}: 1 worker {times['one'][-1]:.2f} s, {n} workers "
                  f"{times['many'][-1]:.2f} s, threaded pass {times['default'][-1]:.2f} s",
                  flush=True)
    speed_up = [a / b for a, b in zip(times["one"], times["many"], strict=True)]
    over_threaded = [a / b for a, b in zip(times["default"], times["many"], strict=True)]
    print(f"clip: {args.frames} frames of {args.width}x{args.height}, {args.rounds} rounds")
    print(f"{n} workers over 1 worker:        median {statistics.median(speed_up):.2f}x "
          f"(lowest {min(speed_up):.2f}x, highest {max(speed_up):.2f}x)")
    print(f"{n} workers over threaded pass:   median {statistics.median(over_threaded):.2f}x "
          f"(lowest {min(over_threaded):.2f}x, highest {max(over_threaded):.2f}x)")
    print(f"same log (every run, byte for byte): {same}")
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
