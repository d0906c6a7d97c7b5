"""The shake report: its files, its figures, and the page as a real browser shows it."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from stabilize import shake
from stabilize.config import Settings
from stabilize.errors import StabilizeError
from stabilize.geometry import frame_centre, from_similarity
from stabilize.jobs import make_report
from stabilize.jobs.outputs import log_name as report_name
from stabilize.motion_log import MotionLog

from .browser import LAPTOP, PHONE, browser, chromium, measure
from .conftest import noise_frames, write_clip

W, H, FPS = 640, 360, 30.0


def _sine_log(folder: Path, f_hz: float = 3.5, seconds: float = 10.0,
              fov_deg: float | None = 70.0) -> Path:
    """A motion log of a camera panning with sinusoidal shake, written without any video."""
    csv_path, _ = _sine_motion(folder, f_hz, seconds, fov_deg).save(
        folder / "sine pass.motion.csv")
    return csv_path


def _sine_motion(folder: Path, f_hz: float = 3.5, seconds: float = 10.0,
                 fov_deg: float | None = 70.0) -> MotionLog:
    """The log of :func:`_sine_log`, in memory."""
    n = int(FPS * seconds)
    t = np.arange(n) / FPS
    x = 4.0 * np.sin(2 * np.pi * f_hz * t) + 12.0 * t
    y = 2.0 * np.sin(2 * np.pi * f_hz * t + 1.0)
    rot = np.radians(0.2) * np.sin(2 * np.pi * f_hz * t)
    path = from_similarity(np.stack([x, y, rot, 0 * t], axis=1), frame_centre(W, H))
    a = np.linalg.inv(path)  # A_t: frame 0 -> frame t
    h = np.repeat(np.eye(3)[None], n, axis=0)
    h[1:] = a[1:] @ np.linalg.inv(a[:-1])
    h /= h[:, 2:3, 2:3]
    status = np.array(["ok"] * n, dtype=object)
    status[40:46] = "weak"
    status[200] = "failed"
    status = status.astype(str)
    tracked = np.full(n, 200)
    inliers = np.where(status == "ok", 180, 40)
    settings = Settings(fov_deg=fov_deg).to_dict()
    summary = shake.summarise(matrices=h, path=path, status=status, fps=FPS, width=W, height=H,
                              above_hz=1.0, fov_deg=fov_deg)
    log = MotionLog(time_s=t, matrices=h, tracked=tracked, inliers=inliers,
                    inlier_ratio=inliers / tracked, rms_px=np.full(n, 0.3),
                    rounds=np.full(n, 20), status=status,
                    source={"path": str(folder / "not-here.mp4"), "width": W, "height": H,
                            "fps": FPS, "frames": n, "duration_s": seconds},
                    settings=settings, summary=summary)
    return log


@pytest.fixture(scope="module")
def sine_report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    log = _sine_log(folder)
    return log, make_report(log, folder / "out")


def test_report_writes_its_files_with_the_figures(sine_report):
    log, rep = sine_report
    out = log.parent / "out"
    names = sorted(p.name for p in out.iterdir())
    assert names == ["sine pass.fit.png", "sine pass.path.png", "sine pass.report.html",
                     "sine pass.shake.json", "sine pass.spectrum.png"]
    doc = json.loads((out / "sine pass.shake.json").read_text())
    s = doc["summary"]
    assert doc["format"] == "stabilize-shake-report"
    assert doc["settings"]["fov_deg"] == 70.0 and doc["settings"]["shake_above_hz"] == 1.0
    assert s["dominant_hz_x"] == pytest.approx(3.5, abs=0.1)
    assert s["jitter_rms_x_px"] == pytest.approx(4.0 / np.sqrt(2), rel=0.05)
    assert s["jitter_rms_x_deg"] is not None
    assert s["shake_power_x_3_6hz_px2"] > 0.9 * s["jitter_rms_x_px"] ** 2
    assert s["frames_weak"] == 6 and s["frames_failed"] == 1
    assert any("stand-in" in n for n in doc["notes"])
    assert any("half the frame rate" in c for c in doc["cautions"])
    for png in out.glob("*.png"):
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not list(out.glob(".*partial*"))
    assert rep.outputs["html"] == out / "sine pass.report.html"


def test_the_page_is_self_contained(sine_report):
    log, _ = sine_report
    html = (log.parent / "out" / "sine pass.report.html").read_text()
    assert html.count('src="data:image/png;base64,') == 3
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//)""", html)
    assert "<script" not in html and "<link" not in html and "@import" not in html
    assert 'name="viewport"' in html and "@media" in html
    for words in ("Nyquist", "qualified people", "aviation rules", "weak or failed"):
        assert words in html


def test_existing_outputs_are_kept_without_force(sine_report):
    log, _ = sine_report
    out = log.parent / "out"
    before = (out / "sine pass.report.html").stat().st_mtime_ns
    with pytest.raises(StabilizeError, match="already exists.*force"):
        make_report(log, out)
    assert (out / "sine pass.report.html").stat().st_mtime_ns == before
    wide = json.loads((out / "sine pass.shake.json").read_text())["summary"]
    rep = make_report(log.with_suffix(".json"), out, force=True, fov_deg=40.0)
    # A narrower field of view (a longer lens) makes the same pixels a smaller angle.
    ratio = np.tan(np.radians(35.0)) / np.tan(np.radians(20.0))
    assert rep.summary["jitter_rms_x_deg"] == pytest.approx(wide["jitter_rms_x_deg"] / ratio,
                                                            rel=0.01)
    assert rep.summary["jitter_rms_x_px"] == pytest.approx(wide["jitter_rms_x_px"])
    assert rep.settings["fov_deg"] == 40.0
    make_report(log, out, force=True)  # as before, for the other tests


def test_report_names():
    assert report_name(Path("a/flight 2.motion.csv")) == "flight 2"
    assert report_name(Path("flight.motion.json")) == "flight"
    assert report_name(Path("flight.mp4")) == "flight"


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "stabilize", *args], capture_output=True,
                          text=True, timeout=300)


def test_cli_report_of_a_clip_measures_it_first_and_shows_frames(tmp_path):
    clip = write_clip(tmp_path / "pan.mp4", noise_frames(36, 192, 144, shift_px=1.2), 24.0)
    proc = _run("report", str(clip), "--quiet", "--fov-deg", "80")
    assert proc.returncode == 0, proc.stderr
    for name in ("pan.motion.csv", "pan.motion.json", "pan.shake.json", "pan.report.html",
                 "pan.path.png", "pan.spectrum.png", "pan.fit.png", "pan.frames.png"):
        assert (tmp_path / name).is_file(), name
        assert str(tmp_path / name) in proc.stdout
    assert "shake x" in proc.stdout
    doc = json.loads((tmp_path / "pan.shake.json").read_text())
    assert doc["source"]["fps"] == pytest.approx(24.0)
    assert doc["summary"]["nyquist_hz"] == pytest.approx(12.0)
    # The second time the log beside the clip is read; the report itself is not replaced.
    again = _run("report", str(clip), "--quiet")
    assert again.returncode == 2 and "already exists" in again.stderr
    assert len([ln for ln in again.stderr.splitlines() if ln.strip()]) == 1
    other = tmp_path / "elsewhere"
    proc = _run("report", str(clip), "--quiet", "--out", str(other))
    assert proc.returncode == 0, proc.stderr
    assert (other / "pan.report.html").is_file() and not (other / "pan.motion.csv").exists()


def test_cli_report_errors_are_one_line(tmp_path):
    proc = _run("report", str(tmp_path / "missing.motion.csv"))
    assert proc.returncode == 2 and "missing.motion.csv" in proc.stderr
    assert "Traceback" not in proc.stderr
    bad = tmp_path / "bad.motion.csv"
    bad.write_text("frame,time_s\n0,0\n")
    proc = _run("report", str(bad))
    assert proc.returncode == 2 and "bad.motion" in proc.stderr
    assert len([ln for ln in proc.stderr.splitlines() if ln.strip()]) == 1


# ------------------------------------------------------------------ in a browser
def _chromium() -> str:
    return chromium()


def _browser(exe: str, profile: Path, *args: str) -> subprocess.CompletedProcess:
    return browser(exe, profile, *args)


def test_the_page_in_a_real_browser(sine_report, tmp_path):
    exe = _chromium()
    log, rep = sine_report
    url = rep.outputs["html"].resolve().as_uri()
    dom = _browser(exe, tmp_path / "profile-dom", "--dump-dom", url)
    assert dom.returncode == 0, dom.stderr[-2000:]
    text = dom.stdout.replace("&nbsp;", " ").replace("\u00a0", " ")
    s = rep.summary
    assert "Shake report: sine pass" in text
    assert f"{s['jitter_rms_x_px']:.2f} px" in text  # 3 significant digits of 2.83 px
    assert "3.50 Hz" in text  # the dominant frequency, to the spectrum's resolution
    # Each plot twice: for large screens and (in a <source>) for phones.
    assert text.count('<img alt="') == 3 and text.count("<source media=") == 3
    assert "Nyquist" in text and "aviation rules" in text
    shot = tmp_path / "page.png"
    for width, height in ((1200, 3000), (390, 3000)):  # a laptop and a phone
        proc = _browser(exe, tmp_path / f"profile-{width}", f"--window-size={width},{height}",
                        f"--screenshot={shot}", url)
        assert proc.returncode == 0 and shot.is_file(), proc.stderr[-2000:]
        import cv2

        img = cv2.imread(str(shot))
        assert img.shape[:2] == (height, width)
        not_white = np.mean(np.any(img < 235, axis=2))
        colours = len(np.unique(img.reshape(-1, 3), axis=0))
        assert not_white > 0.05, not_white  # text, cards and plots, not a blank page
        assert colours > 500, colours  # the plots' anti-aliased lines, not flat fills
        shot.unlink()


def test_a_static_shot_at_irregular_times_reads_as_such(tmp_path):
    """A locked-off camera (the motion is measurement noise) whose frame times are irregular
    (about 2.3 fps in a container that says 15): no clear peak, steady, real time."""
    rng = np.random.default_rng(4)
    n = 120
    t = np.r_[0.0, np.cumsum(rng.uniform(0.33, 0.73, n - 1))]
    h = np.repeat(np.eye(3)[None], n, axis=0)
    h[1:, :2, 2] = rng.normal(0.0, 0.003, (n - 1, 2))
    status = np.array(["ok"] * n)
    log = MotionLog(time_s=t, matrices=h, tracked=np.full(n, 900), inliers=np.full(n, 800),
                    inlier_ratio=np.full(n, 800 / 900), rms_px=np.full(n, 0.1),
                    rounds=np.full(n, 20), status=status,
                    source={"path": str(tmp_path / "gone.avi"), "width": 320, "height": 240,
                            "fps": 15.0, "frames": n},
                    settings=Settings(shake_above_hz=0.5).to_dict())
    csv_path, _ = log.save(tmp_path / "still.motion.csv")
    rep = make_report(csv_path, tmp_path / "out")
    s = json.loads(rep.outputs["json"].read_text())["summary"]
    assert s["fps"] == pytest.approx((n - 1) / (t[-1] - t[0]))
    assert s["fps_nominal"] == 15.0 and s["timestamps_irregular"] is True
    assert s["nyquist_hz"] == pytest.approx(s["fps"] / 2)
    assert [s[f"dominant_hz_{a}"] for a in ("x", "y", "rot")] == [None, None, None]
    assert s["stability_translation"] == 1.0
    assert s["trust"] == "rough" and "irregular" in s["trust_reasons"][0]
    html = rep.outputs["html"].read_text()
    assert "Verdict: rough" in html and "no clear peak" in html
    assert "irregular (the container says 15.00)" in html


def test_figures_of_a_log_in_memory_equal_those_read_back(tmp_path):
    """The jobs hand the log to the report in memory; the figures are those of the file."""
    from stabilize import read_log
    from stabilize.jobs.report import report_figures

    motion = _sine_motion(tmp_path)
    csv_path, _ = motion.save(tmp_path / "sine pass.motion.csv")
    settings = Settings(fov_deg=40.0, shake_above_hz=0.8)
    in_memory, fps = report_figures(motion, settings)
    again, fps_again = report_figures(read_log(csv_path), settings)
    assert fps == fps_again == pytest.approx(FPS)
    assert json.dumps(in_memory, sort_keys=True) == json.dumps(again, sort_keys=True)
    assert in_memory["fov_deg"] == 40.0 and in_memory["shake_above_hz"] == 0.8


def test_output_names_come_from_one_place(tmp_path):
    from stabilize.jobs.outputs import clip_files, plan_outputs, report_files

    clip = tmp_path / "flight 2.mp4"
    plan = plan_outputs(clip, video_out=None, log_out=None, with_video=True, compare=True)
    assert plan.video == tmp_path / "flight 2.steady.mp4"
    assert plan.log_csv == tmp_path / "flight 2.motion.csv"
    assert plan.log_json == tmp_path / "flight 2.motion.json"
    assert plan.compare == tmp_path / "flight 2.steady.compare.mp4"
    moved = plan_outputs(clip, video_out=tmp_path / "o" / "x.mp4", log_out=None,
                         with_video=True, compare=False)
    # The log is named after the video given (so renders into one folder never collide).
    assert moved.log_csv == tmp_path / "o" / "x.motion.csv" and moved.compare is None
    steady_named = plan_outputs(clip, video_out=tmp_path / "o" / "y.steady.mp4", log_out=None,
                                with_video=True, compare=False)
    assert steady_named.log_csv == tmp_path / "o" / "y.motion.csv"
    with pytest.raises(StabilizeError, match=r"\*\.csv"):
        plan_outputs(clip, video_out=None, log_out=tmp_path / "x.txt", with_video=False,
                     compare=False)
    files = clip_files(tmp_path, "flight 2", with_video=True)
    report = report_files(tmp_path, "flight 2", frames=True, log=True)
    assert files["report"] == report["html"] == tmp_path / "flight 2.report.html"
    assert files["shake_json"] == report["json"] == tmp_path / "flight 2.shake.json"
    assert files["log"] == report["log_csv"] and files["video"] == plan.video
    assert "video" not in clip_files(tmp_path, "flight 2", with_video=False)


def test_the_page_fits_a_phone_and_a_laptop(sine_report, tmp_path):
    """Nothing wider than the screen; the phone gets the narrow plots, the laptop the wide
    ones; the plots' smallest text is at least 9 CSS px tall where it is shown."""
    from stabilize.report_plots import MIN_FONT_PT, NARROW, WIDE

    exe = _chromium()
    _, rep = sine_report
    for width, layout in ((PHONE, NARROW), (LAPTOP, WIDE)):
        m = measure(exe, rep.outputs["html"], width, tmp_path)
        assert m["viewport"] == width
        assert m["scroll_width"] <= width, m["scroll_width"]
        assert m["min_font_px"] >= 11.0, m["min_font_px"]
        assert len(m["images"]) == 3
        for img in m["images"]:
            assert img["variant"] == ("source" if layout is NARROW else "img"), img
            assert img["natural_width"] >= 100 * layout.width_in, img  # 100 dots an inch or more
            assert 0 <= img["left"] and img["right"] <= width, img
            # A figure layout.width_in inches wide is shown img["width"] CSS px wide.
            text_px = MIN_FONT_PT / 72.0 * img["width"] / layout.width_in
            assert text_px >= 9.0, (width, img["alt"], text_px)


# ------------------------------------------------------------------ plots and page, by parts
@pytest.fixture
def drawn(monkeypatch):
    """Every figure the plot functions draw, as matplotlib figures (after drawing)."""
    from stabilize import report_plots

    figures = []
    original = report_plots._png

    def keep(fig, *args):
        data = original(fig, *args)
        figures.append(fig)
        return data

    monkeypatch.setattr(report_plots, "_png", keep)
    return figures


def _draw_every_plot(layout: str) -> None:
    from stabilize import report_plots as rp
    from stabilize.geometry import similarity_readout

    motion = _sine_motion(Path("."))
    raw = similarity_readout(motion.path, motion.centre)
    cuts = motion.status == "cut"
    rp.plot_path(time_s=motion.time_s, raw=raw, smooth=raw * 0.5, cuts=cuts, fps=FPS,
                 above_hz=1.0, layout=layout)
    rp.plot_spectrum(time_s=motion.time_s, raw=raw, cuts=cuts, fps=FPS, above_hz=1.0,
                     resolution_hz=0.2, layout=layout)
    rp.plot_fit(time_s=motion.time_s, tracked=motion.tracked,
                inlier_ratio=motion.inlier_ratio, status=motion.status, layout=layout)
    f = np.linspace(0, 200, 400)
    rp.plot_vibration(freqs_hz=f, amplitude_px=np.abs(np.sin(f)), usable=f > 5,
                      blind_hz=[(26.0, 34.0)], fps=FPS, peak_hz=150.0, peak_px=0.8,
                      false_alarm=1e-4, readout_ms=20.0, layout=layout)
    rng = np.random.default_rng(0)
    frames = {i: rng.integers(0, 255, (90, 160, 3), dtype=np.uint8) for i in (3, 50, 200)}
    assert rp.plot_frames(time_s=motion.time_s, wanted=[3, 50, 200], pairs=(frames, frames),
                          layout=layout) is not None


@pytest.mark.parametrize("layout", ["wide", "narrow"])
def test_every_plot_is_as_wide_as_its_layout_and_no_text_is_smaller_than_the_minimum(
        drawn, layout):
    from matplotlib.text import Text

    from stabilize.report_plots import LAYOUTS, MIN_FONT_PT

    _draw_every_plot(layout)
    assert len(drawn) == 5
    for fig in drawn:
        assert fig.get_figwidth() == pytest.approx(LAYOUTS[layout].width_in)
        texts = [t for t in fig.findobj(Text) if t.get_visible() and t.get_text().strip()]
        assert texts
        small = [(t.get_text(), t.get_fontsize()) for t in texts
                 if t.get_fontsize() < MIN_FONT_PT]
        assert not small, small
    narrow_path = drawn[0]
    if layout == "narrow":  # a phone's plot is taller than it is wide
        assert narrow_path.get_figheight() > 2 * narrow_path.get_figwidth()


def test_the_path_legend_sits_outside_every_panel_and_the_shake_has_units(drawn):
    _draw_every_plot("wide")
    fig = drawn[0]
    renderer = fig.canvas.get_renderer()
    assert all(ax.get_legend() is None for ax in fig.axes)
    assert len(fig.legends) == 1
    box = fig.legends[0].get_window_extent(renderer)
    for ax in fig.axes:
        assert not box.overlaps(ax.get_window_extent(renderer)), ax.get_title()
    titles = [ax.get_title(loc="left") for ax in fig.axes]
    rms = [t for t in titles if "RMS" in t]
    assert len(rms) == 3
    assert all(re.search(r"±RMS [\d.]+ (px|deg)\)", t) for t in rms), rms


def _cells(html: str, section: str) -> list[list[str]]:
    part = re.search(rf'<section id="{section}".*?</section>', html, flags=re.S)
    assert part, section
    return [re.findall(r"<td[^>]*>(.*?)</td>", row, flags=re.S)
            for row in re.findall(r"<tr[^>]*>(.*?)</tr>", part.group(0), flags=re.S)
            if "<td" in row]


def _page(**changes) -> str:
    from stabilize.jobs.report import report_figures
    from stabilize.report_page import render_page

    motion = _sine_motion(Path("."), fov_deg=None)
    settings = Settings(force=True, quiet=True, compare=True, **changes)
    summary, _ = report_figures(motion, settings)
    return render_page(name="x", source=motion.source, summary=summary, notes=[],
                       settings=settings.to_dict(), images={}, log_name=None,
                       tool_version="0")


def test_the_settings_table_shows_what_shapes_the_results_in_plain_words():
    rows = dict(_cells(_page(), "settings"))
    for switch in ("force", "quiet", "compare"):
        assert switch not in rows
    assert rows["ignore"] == "none" and rows["fov_deg"] == "not given"
    assert rows["window_s"] == "1\u00a0s" and rows["shake_above_hz"] == "1\u00a0Hz"
    assert rows["analysis_width"] == "960\u00a0px" and rows["inlier_px"] == "1.5\u00a0px"
    assert rows["model"] == "similarity"
    rows = dict(_cells(_page(ignore=((0, 300, 640, 60),), margin=0.05, analysis_width=0,
                             fov_deg=70.0), "settings"))
    assert rows["ignore"] == "x 0, y 300, 640 × 60 px"
    assert rows["margin"] == "5.00\u00a0%" and rows["analysis_width"] == "full resolution"
    assert rows["fov_deg"] == "70\u00a0deg"
    assert not any(v.startswith(("[", "(")) or v in ("None", "True", "False", "")
                   for v in rows.values()), rows


def test_one_mark_for_a_missing_figure_and_a_unit_on_every_figure():
    from stabilize.report_page import MISSING

    html = _page()  # no field of view: the angle rows are all missing
    every = [c for sec in ("certainty", "shake", "bands", "steadiness")
             for row in _cells(html, sec) for c in row]
    assert not {c for c in every if c.strip() in ("—", "-", "None", "nan", "null", "")}
    shake_rows = _cells(html, "shake")
    angle = [r for r in shake_rows if r[0].startswith(("RMS, angle", "peak-to-peak, angle"))]
    assert len(angle) == 2 and all(c == MISSING for r in angle for c in r[1:])
    units = ("px", "deg", "Hz", "%", "no clear peak", MISSING, "not measurable")
    for row in shake_rows + _cells(html, "bands"):
        for c in row[1:]:
            assert any(u in c for u in units), (row[0], c)
    certainty = dict(r for r in _cells(html, "certainty"))
    assert certainty["median inlier share"].endswith("%")
    assert certainty["median fit residual"].endswith("px")


def test_the_steadied_table_says_whether_the_output_was_checked_and_how():
    """The page says plainly when the written video kept shake or could not be checked,
    and how many of its frame pairs were measured on it or carried from the source."""
    from stabilize.report_page import _steady_section

    base = {"cropping_ratio": 0.9, "distortion": 1.0, "margin": 0.05,
            "frames_correction_eased": 0, "shake_reduction_x": 0.86,
            "shake_reduction_y": 0.91}
    kept = _steady_section(base | {"output_steadier": True, "output_keeps_shake": True,
                                   "output_pairs_measured": 0.98,
                                   "output_pairs_carried": 0.017})
    assert "not steady: it keeps over a tenth of the shake" in kept
    assert "carried from the source</td><td>98.0\u00a0% / 1.70\u00a0%" in kept
    unchecked = _steady_section(base | {"output_steadier": None,
                                        "output_pairs_measured": 0.45,
                                        "output_pairs_carried": 0.0})
    assert "could not be checked" in unchecked
    plain = _steady_section(base | {"output_steadier": True, "output_keeps_shake": False,
                                    "output_pairs_measured": 1.0, "output_pairs_carried": 0.0})
    assert ">yes<" in plain
