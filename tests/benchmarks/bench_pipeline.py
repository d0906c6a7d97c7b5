"""Whole-job speed and memory against the floors set by video decoding and encoding.

Run as ``python tests/benchmarks/bench_pipeline.py [--width 1920 --height 1080 --frames 240]``.
It draws a synthetic clip, then times in one run:

* F_dec: the bundled ffmpeg decoding the clip to nothing;
* F_py:  iterating its frames into Python (full-size RGB), the floor for any analysis;
* F_tx:  an ffmpeg transcode with the encoder settings ``steady`` uses;
* the tool's ``measure`` (against F_py) and ``steady`` (against F_tx), as ratios;
* with ``--margin M`` (a fixed margin), ``steady`` from two decoding passes and from one
  (:mod:`stabilize.jobs.single_decode`, its memory budget raised by ``--hold-mib`` so that
  it engages at any size), side by side;
* with ``--longer K``, ``steady`` again on a clip K times longer (peak memory must not grow
  with the clip);

and the peak memory (resident set, the tool's process tree summed) and processor time of each
job. Figures are ratios to floors measured in the same run, because this machine is shared
and noisy.
"""

from __future__ import annotations

import argparse
import compileall
import os
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import psutil

import stabilize
from stabilize.io import VideoWriter, iter_frames
from stabilize.io.process import ffmpeg_exe
from stabilize.synthetic import SceneSpec, SyntheticClip

_CPU: dict[str, float] = {}


def peak_rss_mib(cmd: list[str]) -> tuple[float, float]:
    """Run ``cmd``; return (seconds, peak RSS of its process tree in MiB). The tree's
    processor time (s, children included) is left in ``_CPU["last"]``."""
    start = time.perf_counter()
    before = os.times()
    proc = psutil.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    peak = 0.0
    done = threading.Event()

    def sample() -> None:
        nonlocal peak
        while not done.is_set():
            try:
                procs = [proc, *proc.children(recursive=True)]
                rss = sum(p.memory_info().rss for p in procs if p.is_running())
                peak = max(peak, rss / 2**20)
            except psutil.Error:
                pass
            time.sleep(0.02)

    t = threading.Thread(target=sample, daemon=True)
    t.start()
    rc = proc.wait()
    done.set()
    t.join()
    if rc != 0:
        raise SystemExit(f"command failed ({rc}): {' '.join(cmd)}")
    after = os.times()
    _CPU["last"] = (after.children_user - before.children_user
                    + after.children_system - before.children_system)
    return time.perf_counter() - start, peak


def tool(preamble: str = "") -> list[str]:
    """The command line of the tool, with Python statements run first (module settings)."""
    code = f"import sys; {preamble + '; ' if preamble else ''}from stabilize.cli import main; " \
           "sys.exit(main())"
    return [sys.executable, "-c", code]


def make_clip(path: Path, width: int, height: int, frames: int) -> None:
    spec = SceneSpec(style="truss", width=width, height=height, fps=30.0,
                     duration_s=frames / 30.0, seed=1, noise_sigma=1.0)
    clip = SyntheticClip(spec)
    with VideoWriter(path, width, height, 30.0, crf=20, preset="veryfast") as w:
        for _, f in clip.frames():
            w.write(f)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--width", type=int, default=1920)
    ap.add_argument("--height", type=int, default=1080)
    ap.add_argument("--frames", type=int, default=240)
    ap.add_argument("--preset", default="veryfast")
    ap.add_argument("--crf", type=int, default=20)
    ap.add_argument("--margin", type=float, default=None,
                    help="also run steady at this fixed margin, from one and from two passes")
    ap.add_argument("--hold-mib", type=float, default=2048.0,
                    help="memory budget of the single pass's held frames, MiB")
    ap.add_argument("--longer", type=int, default=0,
                    help="also run steady on a clip this many times longer")
    ap.add_argument("--skip-measure", action="store_true")
    args = ap.parse_args()
    # The tool's modules byte-compiled first, as an installed package has them (pip compiles
    # on install, and a first run writes them): where PYTHONDONTWRITEBYTECODE is set, as on
    # the project's own machine, every run would otherwise compile all of them again,
    # about 0.1 s of the fixed start-up (measured).
    compileall.compile_dir(str(Path(stabilize.__file__).parent), quiet=1)
    with tempfile.TemporaryDirectory() as tmp:
        clip = Path(tmp) / "bench.mp4"
        make_clip(clip, args.width, args.height, args.frames)
        ff = ffmpeg_exe()
        f_dec, m_dec = peak_rss_mib([ff, "-v", "error", "-i", str(clip), "-f", "null", "-"])
        t0, c0 = time.perf_counter(), os.times()
        n = sum(1 for _ in iter_frames(clip))
        f_py = time.perf_counter() - t0
        c1 = os.times()
        cpu_py = sum(c1[:4]) - sum(c0[:4])
        f_tx, m_tx = peak_rss_mib([ff, "-v", "error", "-y", "-i", str(clip), "-c:v", "libx264",
                                   "-preset", args.preset, "-crf", str(args.crf), "-pix_fmt",
                                   "yuv420p", str(Path(tmp) / "tx.mp4")])
        cpu_tx = _CPU["last"]
        rows = []

        def job(label: str, cmd: list[str], floor: float, floor_name: str) -> None:
            # The processor-time ratio holds better than the wall-clock one on a busy machine.
            t, m = peak_rss_mib(cmd)
            cpu = _CPU["last"]
            floor_cpu = cpu_py if floor_name == "F_py" else cpu_tx
            rows.append(f"{label:<22} {t:7.2f} s  {t / floor:5.2f} x {floor_name}  "
                        f"cpu {cpu:7.2f} s  {cpu / floor_cpu:5.2f} x  peak {m:7.1f} MiB")

        steady = ["steady", str(clip), "--quiet", "--force", "--preset", args.preset,
                  "--crf", str(args.crf), "-o", str(Path(tmp) / "s.mp4")]
        if not args.skip_measure:
            job("measure", [*tool(), "measure", str(clip), "--quiet", "--force", "--log",
                            str(Path(tmp) / "m.motion.csv")], f_py, "F_py")
        job("steady", [*tool(), *steady], f_tx, "F_tx")
        if args.margin is not None:
            fixed = [*steady, "--margin", str(args.margin)]
            job("steady fixed, 2 pass", [*tool("import stabilize.jobs.rendering as r; "
                                               "r.SINGLE_DECODE = False"), *fixed],
                f_tx, "F_tx")
            job("steady fixed, 1 pass", [*tool("import stabilize.jobs.single_decode as s; "
                                               f"s.HOLD_BUDGET_MIB = {args.hold_mib}"),
                                         *fixed], f_tx, "F_tx")
        if args.longer > 1:
            long_clip = Path(tmp) / "long.mp4"
            make_clip(long_clip, args.width, args.height, args.frames * args.longer)
            t, m = peak_rss_mib([*tool(), "steady", str(long_clip), "--quiet", "--force",
                                 "--preset", args.preset, "--crf", str(args.crf), "-o",
                                 str(Path(tmp) / "l.mp4")])
            rows.append(f"steady x{args.longer} longer    {t:7.2f} s  peak {m:7.1f} MiB")
    print(f"clip: {args.width}x{args.height}, {n} frames")
    print(f"F_dec  {f_dec:7.2f} s   peak {m_dec:7.1f} MiB")
    print(f"F_py   {f_py:7.2f} s   cpu {cpu_py:7.2f} s")
    print(f"F_tx   {f_tx:7.2f} s   cpu {cpu_tx:7.2f} s   peak {m_tx:7.1f} MiB")
    for row in rows:
        print(row)


if __name__ == "__main__":
    main()
