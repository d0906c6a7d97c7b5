"""The demo clip's README quotes the shake the report shows: its figures are worked out here
again from the clip's exact motion, the report's way, and from a run of the demo."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from stabilize import shake
from stabilize.geometry import frame_centre, similarity_readout
from stabilize.raw_path import accumulate

ROOT = Path(__file__).resolve().parent.parent
README = ROOT / "demo_clips" / "README.md"
TRUTH = ROOT / "demo_clips" / "truss_pass.truth.npz"


def _quoted() -> dict[str, float]:
    """The figures the README quotes, by what they are."""
    text = " ".join(README.read_text().split())
    report = re.search(r"report's way .*?is \*\*([\d.]+) px RMS in x, ([\d.]+) px in y and "
                       r"([\d.]+)° in roll\*\*, strongest at ([\d.]+) Hz, ([\d.]+) Hz and "
                       r"([\d.]+) Hz", text)
    whole = re.search(r"slow part included\) is larger: ([\d.]+) px RMS in x, ([\d.]+) px in "
                      r"y and ([\d.]+)° in roll", text)
    assert report and whole, "the README no longer quotes the demo's shake"
    keys = ("x", "y", "rot", "hz_x", "hz_y", "hz_rot")
    out = {k: float(v) for k, v in zip(keys, report.groups(), strict=True)}
    out |= {f"whole_{k}": float(v) for k, v in zip(("x", "y", "rot"), whole.groups(),
                                                  strict=True)}
    return out


def _truth_figures() -> dict[str, float]:
    d = np.load(TRUTH)
    cuts = d["cut"]
    path = similarity_readout(accumulate(d["inter_frame"], cuts), frame_centre(640, 360))
    f = shake.path_figures(path, cuts, fps=30.0, above_hz=1.0, width=640, fov_deg=None)
    rms = {a: float(np.sqrt(np.mean((d[f"cam_{a}"] - d[f"smooth_{a}"]) ** 2)))
           for a in ("x_px", "y_px", "roll_deg")}
    return {"x": f["jitter_rms_x_px"], "y": f["jitter_rms_y_px"], "rot": f["jitter_rms_rot_deg"],
            "hz_x": f["dominant_hz_x"], "hz_y": f["dominant_hz_y"],
            "hz_rot": f["dominant_hz_rot"], "whole_x": rms["x_px"], "whole_y": rms["y_px"],
            "whole_rot": rms["roll_deg"]}


def _digits(quoted: float) -> float:
    """Half a unit of the last digit a figure was quoted to (3 significant digits)."""
    return 0.5 * 10 ** (np.floor(np.log10(abs(quoted))) - 2)


def test_the_readme_quotes_the_figures_of_the_exact_motion():
    quoted, truth = _quoted(), _truth_figures()
    for key, value in quoted.items():
        # Frequencies to the spectrum's 0.2 Hz resolution (one decimal), the rest to 3 digits.
        tol = 0.05 if key.startswith("hz_") else _digits(value)
        assert abs(value - truth[key]) <= tol + 1e-9, (key, value, truth[key])


@pytest.mark.slow
def test_the_demo_report_measures_what_the_readme_quotes(tmp_path):
    from stabilize.jobs import run_demo

    _, report = run_demo(tmp_path / "demo", quiet=True)
    s, quoted = report.summary, _quoted()
    for axis, key in (("x", "jitter_rms_x_px"), ("y", "jitter_rms_y_px"),
                      ("rot", "jitter_rms_rot_deg")):
        assert s[key] == pytest.approx(quoted[axis], rel=0.01), key
    html = report.outputs["html"].read_text()
    for axis in ("x", "y"):
        assert f"{quoted[axis]:.3g}\u00a0px" in html
    assert html.count("<source media=") == 4  # every plot, the frames too, for phones


@pytest.mark.slow
def test_the_demo_report_reads_on_a_phone(tmp_path):
    from stabilize.jobs import run_demo
    from stabilize.report_plots import MIN_FONT_PT, NARROW

    from .browser import PHONE, chromium, measure

    exe = chromium()
    _, report = run_demo(tmp_path / "demo", quiet=True)
    m = measure(exe, report.outputs["html"], PHONE, tmp_path)
    assert m["scroll_width"] <= PHONE and len(m["images"]) == 4
    for img in m["images"]:
        assert img["variant"] == "source" and img["right"] <= PHONE, img
        assert MIN_FONT_PT / 72.0 * img["width"] / NARROW.width_in >= 9.0, img
