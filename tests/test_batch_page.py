"""The batch summary page: doubtful clips marked, units on the figures, and on a phone and a
laptop in a real browser nothing off-screen."""

from __future__ import annotations

import re
from pathlib import Path

from stabilize.jobs.batch import ClipResult
from stabilize.jobs.batch_page import summary_html

from .browser import LAPTOP, PHONE, chromium, measure, screenshot


def _result(out: Path, name: str, trust: str | None, reasons: list[str],
            status: str = "done", x: float = 3.7) -> ClipResult:
    summary = {"frames": 150, "frames_weak": 2, "frames_failed": 0, "jitter_rms_x_px": x,
               "jitter_rms_y_px": 2.7, "jitter_rms_rot_deg": 0.54, "dominant_hz_x": 5.77,
               "dominant_hz_y": None}
    if trust is not None:
        summary |= {"trust": trust, "trust_reasons": reasons}
    outputs = {k: str(out / "flights" / f"{name}{suffix}") for k, suffix in
               (("report", ".report.html"), ("video", ".steady.mp4"),
                ("log", ".motion.csv"))}
    return ClipResult(f"flights/{name}.mp4", status, summary=summary, outputs=outputs)


def _results(out: Path) -> list[ClipResult]:
    return [
        _result(out, "north pier, morning pass with a long name", "sound", []),
        _result(out, "deck underside", "rough", ["18% of frames were weak or failed."]),
        _result(out, "fog over the river", "unreliable",
                ["57% of frames had too little texture to measure."], x=4.8e-5),
        ClipResult("flights/card_dump_with_a_very_long_name_0001.mkv", "failed",
                   error="/media/card/flights/card_dump_with_a_very_long_name_0001.mkv: not a "
                         "video file ffmpeg can read"),
    ]


def _rows(page: str) -> dict[str, str]:
    """Each row's HTML by its clip cell's text."""
    rows = re.findall(r'<tr class="([^"]*)">(.*?)</tr>', page, flags=re.S)
    return {re.search(r'class="clip">(.*?)</td>', body).group(1): cls for cls, body in rows}


def test_clips_whose_figures_are_doubtful_are_marked_and_listed(tmp_path):
    page = summary_html(_results(tmp_path), tmp_path)
    classes = _rows(page)
    assert classes["flights/deck underside.mp4"] == "done doubt-rough"
    assert classes["flights/fog over the river.mp4"] == "done doubt-unreliable"
    assert "doubt" not in classes["flights/north pier, morning pass with a long name.mp4"]
    listed = re.search(r'<div class="notes">(.*?)</div>', page, flags=re.S).group(1)
    assert "2 of 4 clips" in listed
    assert "deck underside" in listed and "fog over the river" in listed
    assert "north pier" not in listed
    assert "too little texture" in listed and "18% of frames" in listed
    assert '<span class="badge unreliable">unreliable</span>' in page
    assert '<span class="badge sound">sound</span>' in page
    # Only the failed clip's verdict is missing, marked like every other missing figure.
    assert "—" not in re.sub(r"<p>.*?</p>", "", page, flags=re.S)


def test_every_figure_has_its_unit(tmp_path):
    page = summary_html(_results(tmp_path), tmp_path)
    cells = re.findall(r'<td data-label="([^"]*)"[^>]*>(.*?)</td>', page, flags=re.S)
    shake = [(k, v) for k, v in cells if k.startswith(("shake", "dominant"))]
    assert len(shake) == 16
    for label, value in shake:
        unit = "deg" if "rotation" in label else "Hz" if "dominant" in label else "px"
        parts = [p.strip() for p in value.split(" / ")]
        assert all(p in ("n/a", "no clear peak") or p.endswith(unit) for p in parts), \
            (label, value)
    assert ("shake x (RMS)", "4.80e-05\u00a0px") in cells


def test_the_page_in_a_browser_keeps_every_link_on_screen(tmp_path):
    exe = chromium()
    page = tmp_path / "summary.html"
    page.write_text(summary_html(_results(tmp_path), tmp_path))
    for width in (PHONE, LAPTOP):
        m = measure(exe, page, width, tmp_path)
        assert m["viewport"] == width
        assert m["scroll_width"] <= width, (width, m["scroll_width"])
        assert len(m["links"]) == 9
        for link in m["links"]:
            assert 0 <= link["left"] and link["right"] <= width, (width, link)
        assert m["min_font_px"] >= 11.0
    shot = screenshot(exe, page, tmp_path / "phone.png", PHONE, 1600)
    import cv2

    assert cv2.imread(str(shot)).shape[:2] == (1600, PHONE)
