"""The golden runs: small synthetic clips steadied with every model and every smoother.

The recorded outputs (``tests/golden/data``) pin the tool's behaviour: a change meant to leave
behaviour alone (a restructuring, a rename) must reproduce them byte for byte. A change meant to
alter the analysis or the render regenerates them on purpose::

    python -m tests.golden.cases --write

and says so in its commit message.
"""

from __future__ import annotations

import argparse
import hashlib
import json
from pathlib import Path
from unittest import mock

DATA = Path(__file__).with_name("data")

#: (name, clip, options). Every model and every smoother appears at least once; the clips
#: carry a mover, a cut and a burnt-in strip so the weak-frame and overlay paths run too.
RUNS: tuple[tuple[str, str, dict], ...] = (
    ("translation-gaussian", "truss", dict(model="translation", smoother="gaussian")),
    ("similarity-gaussian", "truss", dict(model="similarity", smoother="gaussian")),
    ("affine-kalman", "truss", dict(model="affine", smoother="kalman")),
    ("homography-l1", "field", dict(model="homography", smoother="l1")),
    ("similarity-l1", "truss", dict(model="similarity", smoother="l1", margin=0.1)),
    ("similarity-lockoff", "field", dict(model="similarity", smoother="lockoff")),
    ("similarity-kalman-fill", "field", dict(model="similarity", smoother="kalman", margin=0.02,
                                             fill="reflect")),
    ("measure-keyframes", "truss", dict(job="measure", keyframe_every=24, workers=1)),
)

#: Summary keys that describe the run rather than the result (wall-clock, versions, paths).
VOLATILE = ("created", "elapsed_s", "version", "path", "outputs", "run")


#: Cores the encoder is told it has during the golden runs (its output depends on them).
ENCODER_CORES = 2


def make_clip(kind: str, dest: Path) -> Path:
    """Write the golden input clip ``kind`` (``truss`` or ``field``) to ``dest``."""
    from stabilize.io import VideoWriter
    from stabilize.synthetic import Mover, SceneSpec, SyntheticClip

    if kind == "truss":
        spec = SceneSpec(style="truss", width=320, height=180, fps=24.0, duration_s=2.5, seed=3,
                         movers=(Mover("vehicle", (60.0, 28.0), (80.0, 120.0), (70.0, 0.0)),),
                         cuts_s=(1.6,))
    else:
        spec = SceneSpec(style="field", width=320, height=180, fps=25.0, duration_s=2.0, seed=5,
                         model="perspective", telemetry=True, noise_sigma=1.0)
    clip = SyntheticClip(spec)
    with VideoWriter(dest, clip.width, clip.height, clip.fps, crf=14, preset="veryfast") as wr:
        for _, frame in clip.frames():
            wr.write(frame)
    return dest


def _scrub(value):
    """The JSON with run-specific values (paths, times, versions) replaced by a marker."""
    if isinstance(value, dict):
        return {k: ("<run>" if k in VOLATILE else _scrub(v)) for k, v in value.items()}
    if isinstance(value, list):
        return [_scrub(v) for v in value]
    return value


def frame_digest(video: Path) -> list[str]:
    """sha256 of each decoded RGB frame of ``video``."""
    import imageio_ffmpeg

    frames = imageio_ffmpeg.read_frames(str(video))
    next(frames)  # the stream's metadata
    return [hashlib.sha256(bytes(f)).hexdigest() for f in frames]


def run_case(name: str, work: Path) -> dict[str, str]:
    """Run one golden case in ``work``; returns its outputs as comparable text."""
    import stabilize

    _, kind, options = next(r for r in RUNS if r[0] == name)
    options = dict(options)
    job = options.pop("job", "steady")
    clip = work / f"{kind}.mp4"
    if not clip.exists():
        make_clip(kind, clip)
    out = work / f"{name}.steady.mp4"
    log_csv = work / f"{name}.motion.csv"
    # The encoder runs one thread per core, and x264's output depends on its thread count:
    # the recorded runs are those of a two-core machine, whatever this one has.
    with mock.patch("stabilize.io.encode.usable_cores", return_value=ENCODER_CORES):
        if job == "measure":
            stabilize.measure(clip, seed=0, **options).save(log_csv)
        else:
            stabilize.steady(clip, out, log_path=log_csv, seed=0, **options)
    summary = json.loads(log_csv.with_suffix(".json").read_text())
    got = {
        "csv": log_csv.read_text(),
        "json": json.dumps(_scrub(summary), indent=1, sort_keys=True) + "\n",
    }
    if job == "steady":
        got["frames"] = "\n".join(frame_digest(out)) + "\n"
    return got


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--write", action="store_true", help="record the goldens anew")
    args = parser.parse_args()
    import tempfile

    DATA.mkdir(exist_ok=True)
    with tempfile.TemporaryDirectory() as tmp:
        for name, _, _ in RUNS:
            got = run_case(name, Path(tmp))
            for part, text in got.items():
                dest = DATA / f"{name}.{part}.txt"
                if args.write:
                    dest.write_text(text)
                elif dest.read_text() != text:
                    print(f"{name}: {part} differs")
    print("written" if args.write else "compared")


if __name__ == "__main__":
    main()
