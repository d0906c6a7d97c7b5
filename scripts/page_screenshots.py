"""Screenshots of the report and the batch summary page, at a phone's and a laptop's width.

Runs the demo (:func:`stabilize.jobs.run_demo`) and a batch over the demo clip beside two
clips made to show the page's other rows (a plain grey one whose figures are unreliable, and a
file that is not a video), then shoots the pages in headless Chromium at 390 and 1280 CSS px
wide: the top of each page, and the report's plots. The PNGs are reduced to 128 colours to
keep them small.

Usage::

    python scripts/page_screenshots.py [--out docs/screenshots] [--chromium PATH]
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
WIDTHS = (390, 1280)
HEIGHT = 1500


def _shoot(exe: str, page: Path, out: Path, width: int, top: float, work: Path) -> None:
    """A screenshot ``width`` × :data:`HEIGHT` px of ``page`` from ``top`` px down (a tall
    window, cropped: a headless shot does not scroll to an anchor)."""
    from PIL import Image  # matplotlib's own dependency

    subprocess.run([exe, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                    "--disable-background-networking", "--disable-component-update",
                    f"--user-data-dir={work / ('profile-' + out.stem)}", "--hide-scrollbars",
                    f"--window-size={width},{int(top) + HEIGHT}", f"--screenshot={out}",
                    page.resolve().as_uri()],
                   capture_output=True, text=True, check=True, timeout=120)
    image = Image.open(out).convert("RGB").crop((0, int(top), width, int(top) + HEIGHT))
    image.quantize(128).save(out, optimize=True)
    print(out)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=ROOT / "docs" / "screenshots")
    ap.add_argument("--chromium", default=shutil.which("chromium") or "/usr/bin/chromium")
    args = ap.parse_args()
    sys.path.insert(0, str(ROOT))
    from stabilize.config import Settings
    from stabilize.jobs import run_batch, run_demo
    from tests.browser import measure
    from tests.conftest import noise_frames, write_clip

    args.out.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        run_demo(work / "demo")
        clips = work / "clips"
        (clips / "second_flight").mkdir(parents=True)
        shutil.copy(ROOT / "demo_clips" / "truss_pass.mp4", clips / "truss_pass.mp4")
        frames = [f if i < 25 else np.full_like(f, 128)
                  for i, f in enumerate(noise_frames(60, 320, 180, shift_px=1.0))]
        write_clip(clips / "second_flight" / "fog over the river.mp4", frames, 30.0)
        (clips / "second_flight" / "card_dump.mkv").write_bytes(b"not a video" * 30)
        run_batch(clips, work / "batch", settings=Settings(), workers=1)
        report = work / "demo" / "truss_pass.report.html"
        for width in WIDTHS:
            plots = measure(args.chromium, report, width, work)["sections"]["plots"]
            _shoot(args.chromium, report, args.out / f"report-{width}.png", width, 0, work)
            _shoot(args.chromium, report, args.out / f"report-{width}-plots.png", width,
                   plots, work)
            _shoot(args.chromium, work / "batch" / "summary.html",
                   args.out / f"batch-{width}.png", width, 0, work)


if __name__ == "__main__":
    main()
