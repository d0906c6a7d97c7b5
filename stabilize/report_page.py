"""HTML pages: the shake report and the look every page of ours shares (CSS, page frame, tables).

A page is one self-contained file (inline CSS, images as data URIs, no scripts, no fonts or
anything else fetched from the network), laid out to read on a phone.
"""

from __future__ import annotations

import base64
import math
from collections.abc import Callable
from html import escape
from pathlib import PurePath
from typing import Any
from urllib.parse import quote

from . import shake

__all__ = [
    "CAUTIONS", "MISSING", "NARROW_SCREEN", "PAGE_CSS", "RUN_SWITCHES", "dominant_text",
    "fmt_sig", "html_page", "hz_text", "html_table", "relative_href", "render_page", "setting_text",
]

#: The one mark of every page for a figure that is not known (not measured, not applicable).
MISSING = "n/a"

#: The widest screen that gets the plots' narrow layout (a CSS media condition).
NARROW_SCREEN = "(max-width: 40rem)"

#: Settings that change how a run behaves but none of its results: left out of the page.
RUN_SWITCHES = frozenset({"force", "quiet", "debug", "compare", "workers", "scheduler"})

#: Cautions shown on every report page, in plain words (from the README's Cautions section).
CAUTIONS: tuple[str, ...] = (
    "Steadied footage is altered footage: every frame is shifted, rotated, scaled and cropped, "
    "and smoothing can hide real motion (a slowly swaying structure) or invent apparent motion "
    "at the edges. Check anything important in the original footage.",
    "This report is an aid for reviewing video. It is not a substitute for inspection by "
    "qualified people, and not a calibrated measurement of the structure or the aircraft.",
    "Shake figures describe the camera as the frames sample it. Vibration faster than half "
    "the frame rate (propellers, motors: often tens to hundreds of hertz) cannot be measured "
    "from video; it shows up at a false lower frequency or only as blur.",
    "Figures in degrees are only as right as the field of view (setting fov_deg) given.",
    "Frames marked weak or failed were measured poorly or not at all; the more of them, the "
    "less certain every figure here.",
    "Flying is governed by local aviation rules. Nothing here changes what you may fly, "
    "where, or how close to a structure.",
)

PAGE_CSS = """
:root { --ink: #24323f; --muted: #5f6b76; --line: #dde2e6; --paper: #f6f7f4;
        --card: #ffffff; --accent: #1f6f8b; --warm: #e07b39; --warn-bg: #fff6e0;
        --warn-line: #f2c14e; }
* { box-sizing: border-box; }
html { -webkit-text-size-adjust: 100%; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font: 16px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial,
             sans-serif; }
main { max-width: 62rem; margin: 0 auto; padding: 1rem; }
header { border-bottom: 3px solid var(--accent); margin-bottom: 1rem; }
h1 { font-size: 1.6rem; margin: 0.5rem 0 0.25rem; }
h2 { font-size: 1.2rem; margin: 1.75rem 0 0.5rem; color: var(--accent); }
p.sub { margin: 0 0 0.75rem; color: var(--muted); }
.cards { display: grid; grid-template-columns: repeat(auto-fit, minmax(10.5rem, 1fr));
         gap: 0.6rem; }
.card { background: var(--card); border: 1px solid var(--line); border-radius: 8px;
        padding: 0.6rem 0.8rem; }
.card .label { font-size: 0.8rem; color: var(--muted); }
.card .value { font-size: 1.35rem; font-weight: 650; font-variant-numeric: tabular-nums; }
.card .more { font-size: 0.85rem; color: var(--muted); }
.scroll { overflow-x: auto; background: var(--card); border: 1px solid var(--line);
          border-radius: 8px; }
table { border-collapse: collapse; width: 100%; font-variant-numeric: tabular-nums; }
th, td { padding: 0.4rem 0.7rem; text-align: right; border-bottom: 1px solid var(--line);
         white-space: nowrap; }
th:first-child, td:first-child { text-align: left; white-space: normal; }
thead th { background: #eef3f5; font-weight: 600; }
tbody tr:last-child td { border-bottom: none; }
.notes { background: var(--warn-bg); border-left: 4px solid var(--warn-line);
         padding: 0.5rem 1rem; border-radius: 4px; }
.notes li, .cautions li { margin: 0.3rem 0; }
.verdict { border-left: 6px solid #8cc084; background: var(--card); padding: 0.4rem 1rem;
           border-radius: 4px; margin: 0.5rem 0 1rem; }
.verdict p { margin: 0.3rem 0; }
.verdict-rough { border-left-color: var(--warn-line); background: var(--warn-bg); }
.verdict-unreliable { border-left-color: #c8453b; background: #fbe9e7; }
tr.failed td { background: #fbe9e7; }
.why { font-size: 0.8rem; color: var(--muted); white-space: normal; }
.trust-rough { color: #8a6100; font-weight: 600; }
.trust-unreliable { color: #b3261e; font-weight: 600; }
figure { margin: 1rem 0; background: var(--card); border: 1px solid var(--line);
         border-radius: 8px; padding: 0.5rem; }
figure picture { display: block; }
figure img { display: block; width: 100%; height: auto; }
figcaption { font-size: 0.9rem; color: var(--muted); padding: 0.4rem 0.2rem 0; }
footer { margin: 2rem 0 1rem; font-size: 0.85rem; color: var(--muted); }
code { font-size: 0.9em; }
@media (max-width: 30rem) {
  body { font-size: 15px; }
  main { padding: 0.6rem; }
  table { font-size: 0.8rem; }
  th, td { padding: 0.3rem 0.35rem; white-space: normal; }
  .card .value { font-size: 1.2rem; }
}
"""

_PLOT_CAPTIONS = {
    "path_plot": "Camera path against time (where each frame's centre lies relative to the "
                 "first frame) and, under each, its shake: the path minus its slow part.",
    "spectrum_plot": "Shake spectrum (Welch power spectral density) per axis; up to three "
                     "peaks that clearly stand out of the spectrum's background are "
                     "labelled (noise and slow drift have none). The grey range lies below "
                     "the shake cut-off; thin lines mark the band edges.",
    "fit_plot": "Per-frame motion fit: the share of tracked points that agree with the fitted "
                "motion, and each frame's status.",
    "vibration_plot": "Vibration above the frame rate, measured from the rolling shutter's "
                      "row bands: the camera's vibration amplitude implied at each frequency. "
                      "Grey ranges near multiples of the frame rate are blind (a vibration "
                      "there looks the same in every frame); a peak is marked only when it "
                      "passes the significance test.",
    "frames_plot": "A few frames where the shake moved the picture furthest, as shot and (when "
                   "the steadied video was found) steadied. The thin white grid sits at the "
                   "same place in both.",
}


def fmt_sig(v: Any, digits: int = 3) -> str:
    """A figure to ``digits`` significant digits (no false precision); :data:`MISSING` when
    unknown."""
    if v is None or isinstance(v, bool) or not isinstance(v, int | float):
        return MISSING
    if not math.isfinite(v):
        return MISSING
    if v == 0:
        return "0"
    mag = math.floor(math.log10(abs(v)))
    if mag >= 6 or mag < -4:
        return f"{v:.{digits - 1}e}"
    return f"{v:.{max(0, digits - 1 - mag)}f}"


def _with(v: Any, unit: str, digits: int = 3) -> str:
    text = fmt_sig(v, digits)
    # A no-break space keeps a figure and its unit together when a narrow screen wraps.
    return text if text == MISSING else f"{text}\u00a0{unit}"


def hz_text(v: Any, resolution_hz: Any) -> str:
    """A frequency with as many decimals as the spectrum resolves (half a bin), with its
    unit: 5.77 Hz at a resolution of 0.2 Hz reads ``5.8 Hz``; :data:`MISSING` when unknown.

    Parameters
    ----------
    v : the frequency, Hz. resolution_hz : the spectrum's bin spacing, Hz (None: 0.1 Hz).
    """
    if not isinstance(v, int | float) or not math.isfinite(v):
        return MISSING
    res = resolution_hz if isinstance(resolution_hz, int | float) and resolution_hz > 0 else 0.1
    decimals = min(3, max(0, math.ceil(-math.log10(res / 2.0))))
    return f"{v:.{decimals}f}\u00a0Hz"


def dominant_text(s: dict[str, Any], axis: str, fmt: Callable[[Any], str],
                  suffix: str = "") -> str:
    """The dominant shake frequency of one axis (``x``, ``y``, ``rot``) of a summary, written
    by ``fmt``, or "no clear peak" when the shake was measured but no peak stood out of its
    spectrum's background."""
    v = s.get(f"dominant_hz_{axis}{suffix}")
    unit = shake.axis_unit(axis)
    if v is None and s.get(f"jitter_rms_{axis}_{unit}{suffix}") is not None:
        return "no clear peak"
    return fmt(v)


def _dominant(s: dict[str, Any], axis: str) -> str:
    return dominant_text(s, axis, lambda v: hz_text(v, s.get("spectrum_resolution_hz")))


def _share(count: Any, total: Any) -> str:
    if not isinstance(count, int) or not isinstance(total, int) or total <= 0:
        return MISSING
    return f"{count} ({100.0 * count / total:.1f}\u00a0%)"


def _percent(v: Any, digits: int = 3) -> str:
    """A share (0–1) as a percentage."""
    if v is None or isinstance(v, bool) or not isinstance(v, int | float) or \
            not math.isfinite(v):
        return MISSING
    return _with(100.0 * v, "%", digits)


def _table(head: list[str], rows: list[list[str]]) -> str:
    return html_table(head, [[escape(c) for c in r] for r in rows])


def html_table(head: list[str], rows: list[list[str]],
               row_classes: list[str] | None = None) -> str:
    """A table that scrolls sideways on a narrow screen.

    Parameters
    ----------
    head : column titles (plain text). rows : cells as HTML (escape text before).
    row_classes : a CSS class per row ('' for none), or None.
    """
    th = "".join(f"<th>{escape(h)}</th>" for h in head)
    classes = row_classes or [""] * len(rows)
    body = "".join((f'<tr class="{escape(k)}">' if k else "<tr>")
                   + "".join(f"<td>{c}</td>" for c in r) + "</tr>"
                   for r, k in zip(rows, classes, strict=True))
    return f'<div class="scroll"><table><thead><tr>{th}</tr></thead><tbody>{body}</tbody>' \
           f"</table></div>"


def relative_href(path: str) -> str:
    """A link target for a page: a relative path, each part percent-encoded, led by ``./``.

    A file name is data: ``javascript:alert(1).mp4`` becomes ``./javascript%3Aalert%281%29.mp4``,
    which no browser reads as a scheme. The result still needs HTML escaping (it has none of
    ``&<>"'`` left, so escaping leaves it as it is).

    Parameters
    ----------
    path : a path relative to the page's folder.

    Returns
    -------
    The ``href`` value; "" for an empty or absolute path (no link).
    """
    p = PurePath(path)
    if not path or p.is_absolute() or p.anchor:
        return ""
    return "./" + "/".join(quote(part, safe="") for part in p.parts)


def html_page(*, title: str, header: str, body: str, footer: str, extra_css: str = "") -> str:
    """One self-contained page in the shared look.

    Parameters
    ----------
    title : the page title (plain text). header, body, footer : HTML of the header (under the
        heading ``title``), the sections and the footer.
    extra_css : the page's own CSS, after :data:`PAGE_CSS`.
    """
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy"
 content="default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none';
 form-action 'none'">
<title>{escape(title)}</title>
<style>{PAGE_CSS}{extra_css}</style>
</head>
<body>
<main>
<header>
<h1>{escape(title)}</h1>
{header}
</header>
{body}
<footer>{footer}</footer>
</main>
</body>
</html>
"""


def _card(label: str, value: str, more: str = "") -> str:
    extra = f'<div class="more">{escape(more)}</div>' if more else ""
    return (f'<div class="card"><div class="label">{escape(label)}</div>'
            f'<div class="value">{escape(value)}</div>{extra}</div>')


def _band_label(lo: float, hi: float | None, nyquist: float) -> str:
    if hi is None or hi >= nyquist:
        return f"{lo:g} Hz to Nyquist ({nyquist:g} Hz)"
    return f"{lo:g}–{hi:g} Hz"


def _figures_section(s: dict[str, Any]) -> str:
    rows = [
        ["RMS", _with(s.get("jitter_rms_x_px"), "px"), _with(s.get("jitter_rms_y_px"), "px"),
         _with(s.get("jitter_rms_rot_deg"), "deg")],
        ["RMS, angle", _with(s.get("jitter_rms_x_deg"), "deg"),
         _with(s.get("jitter_rms_y_deg"), "deg"), MISSING],
        ["peak-to-peak", _with(s.get("jitter_p2p_x_px"), "px"),
         _with(s.get("jitter_p2p_y_px"), "px"), _with(s.get("jitter_p2p_rot_deg"), "deg")],
        ["peak-to-peak, angle", _with(s.get("jitter_p2p_x_deg"), "deg"),
         _with(s.get("jitter_p2p_y_deg"), "deg"), MISSING],
        ["dominant", _dominant(s, "x"), _dominant(s, "y"), _dominant(s, "rot")],
    ]
    if s.get("jitter_rms_x_px_out") is not None or s.get("jitter_rms_rot_deg_out") is not None:
        rows.append(["RMS after steadying (measured on the written video)",
                     _with(s.get("jitter_rms_x_px_out"), "px"),
                     _with(s.get("jitter_rms_y_px_out"), "px"),
                     _with(s.get("jitter_rms_rot_deg_out"), "deg")])
    return _table(["shake", "x", "y", "rotation"], rows)


def _bands_section(s: dict[str, Any]) -> str:
    nyquist = float(s.get("nyquist_hz") or 0.0)
    totals = {}
    for axis in shake.AXES:
        vals = [s.get(shake.band_key(axis, lo, hi)) for lo, hi in shake.SHAKE_BANDS_HZ]
        totals[axis] = sum(v for v in vals if isinstance(v, int | float)) or None
    rows = []
    for lo, hi in shake.SHAKE_BANDS_HZ:
        if lo >= nyquist:
            rows.append([f"{lo:g} Hz and up", "not measurable", "not measurable",
                         "not measurable"])
            continue
        row = [_band_label(lo, hi, nyquist)]
        for axis in shake.AXES:
            v = s.get(shake.band_key(axis, lo, hi))
            unit = shake.axis_unit(axis) + "²"
            share = ("" if not totals[axis] or v is None
                     else f" ({100.0 * v / totals[axis]:.0f}\u00a0%)")
            row.append(_with(v, unit, 2) + share)
        rows.append(row)
    return _table(["band", "x", "y", "rotation"], rows)


def _steady_section(s: dict[str, Any]) -> str:
    if "cropping_ratio" not in s:
        return ("<p>The log holds no steadied path (it was written by <code>measure</code>); "
                "run <code>stabilize steady</code> for the figures of the output.</p>"
                + _table(["figure", "value"], [
                    ["stability, translation (1 = steady)",
                     fmt_sig(s.get("stability_translation"))],
                    ["stability, rotation (1 = steady)", fmt_sig(s.get("stability_rotation"))],
                ]))
    rows = [
        ["stability, translation (1 = steady)", fmt_sig(s.get("stability_translation_in")),
         fmt_sig(s.get("stability_translation_out"))],
        ["stability, rotation (1 = steady)", fmt_sig(s.get("stability_rotation_in")),
         fmt_sig(s.get("stability_rotation_out"))],
    ]
    extra = [
        ["cropping ratio (1 = nothing cut)", fmt_sig(s.get("cropping_ratio"))],
        ["distortion (1 = no stretch)", fmt_sig(s.get("distortion"))],
        ["margin cut from each side", _percent(s.get("margin")) + " of the width and height"
         if isinstance(s.get("margin"), int | float) else MISSING],
        ["frames whose correction was eased", str(s.get("frames_correction_eased", MISSING))],
    ]
    if "output_steadier" in s:
        verdict = {True: "yes", False: "NO: check the log and the settings",
                   None: "could not be checked"}[s.get("output_steadier")]
        if s.get("output_steadier") and s.get("output_keeps_shake"):
            verdict = "yes, but not steady: it keeps over a tenth of the shake"
        extra.append(["steadier than the source (both measured on frames)", verdict])
        measured = s.get("output_pairs_measured")
        if measured is not None:
            carried = s.get("output_pairs_carried") or 0.0
            extra.append(["frame pairs measured on the output / carried from the source",
                          f"{_percent(measured)} / {_percent(carried)}"])
        extra.append(["shake removed, x / y (100 % = all)",
                      f"{_percent(s.get('shake_reduction_x'))} / "
                      f"{_percent(s.get('shake_reduction_y'))}"])
    return (_table(["figure", "as shot", "steadied"], rows) + "<p></p>"
            + _table(["after steadying", "value"], extra))


def _data_uri(image: bytes) -> str:
    """A PNG or JPEG image (told apart by its first bytes) as a data URI."""
    kind = "jpeg" if image[:3] == b"\xff\xd8\xff" else "png"
    return f"data:image/{kind};base64," + base64.b64encode(image).decode("ascii")


def _plot_figure(role: str, wide: bytes, narrow: bytes | None) -> str:
    """One plot with its caption; with a narrow copy, a ``<picture>`` that shows it on
    phones (:data:`NARROW_SCREEN`) and the wide one elsewhere."""
    alt = escape(role.replace("_", " "))
    img = f'<img alt="{alt}" src="{_data_uri(wide)}">'
    if narrow is not None:
        img = (f'<picture><source media="{NARROW_SCREEN}" srcset="{_data_uri(narrow)}">'
               f"{img}</picture>")
    return (f'<figure class="plot">{img}'
            f"<figcaption>{escape(_PLOT_CAPTIONS.get(role, ''))}</figcaption></figure>")


#: The unit of each setting that takes a number of something.
_SETTING_UNITS = {"analysis_width": "px", "window_s": "s", "inlier_px": "px",
                  "shake_above_hz": "Hz", "fov_deg": "deg", "readout_ms": "ms"}


def setting_text(key: str, value: Any, summary: dict[str, Any] | None = None) -> str:
    """A setting's value in plain words, with its unit.

    ``None`` reads "not given", an empty list "none", a region list ``x 0, y 980, 1920 × 100
    px``, a boolean "yes"/"no", ``margin`` as a percentage of the frame (with the one chosen,
    from ``summary``, for ``auto``), ``analysis_width`` 0 as "full resolution".

    Parameters
    ----------
    key : the setting's name (as in the motion log's ``settings``).
    value : its value (JSON-ready).
    summary : the clip's summary, for the margin ``auto`` chose; optional.

    Returns
    -------
    str : the text to show.
    """
    if value is None:
        return "not given"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, list | tuple):
        if not value:
            return "none"
        if key == "ignore":
            return "; ".join(f"x {r[0]}, y {r[1]}, {r[2]} × {r[3]} px" for r in value
                             if isinstance(r, list | tuple) and len(r) == 4) or MISSING
        return ", ".join(str(v) for v in value)
    if key == "margin":
        if value == "auto":
            chosen = (summary or {}).get("margin")
            return "auto" + (f" (chose {_percent(chosen)})"
                             if isinstance(chosen, int | float) else "")
        return _percent(value) if isinstance(value, int | float) else str(value)
    if key == "analysis_width" and value == 0:
        return "full resolution"
    unit = _SETTING_UNITS.get(key)
    if unit is not None and isinstance(value, int | float):
        return f"{value:g}\u00a0{unit}"
    return str(value)


#: What each verdict level says, in plain words.
_VERDICT_TEXT = {
    "sound": "nothing found that makes these figures doubtful.",
    "rough": "treat these figures as rough estimates.",
    "unreliable": "these figures are not reliable; check the original footage.",
}


def _verdict_section(s: dict[str, Any]) -> str:
    level = s.get("trust")
    if not isinstance(level, str):
        return ""
    reasons = s.get("trust_reasons") or []
    items = "".join(f"<li>{escape(str(r))}</li>" for r in reasons)
    body = f"<ul>{items}</ul>" if items else ""
    return (f'<section class="verdict verdict-{escape(level)}"><p><strong>Verdict: '
            f'{escape(level)}</strong> — {escape(_VERDICT_TEXT.get(level, ""))}</p>{body}'
            "</section>")


def _uncertainty_section(s: dict[str, Any], notes: list[str]) -> str:
    n = s.get("frames")
    rows = [
        ["frames", str(n)],
        ["weak (few or bunched inliers)", _share(s.get("frames_weak"), n)],
        ["failed (stand-in motion)", _share(s.get("frames_failed"), n)],
        ["scene cuts", str(s.get("cuts", MISSING))],
        ["median inlier share", _percent(s.get("inlier_ratio_median"))],
        ["median fit residual", _with(s.get("fit_rms_px_median"), "px")],
        ["frequency resolution", _with(s.get("spectrum_resolution_hz"), "Hz")],
        ["highest measurable frequency (Nyquist)", _with(s.get("nyquist_hz"), "Hz")],
    ]
    body = _table(["measurement", "value"], rows)
    if notes:
        items = "".join(f"<li>{escape(t)}</li>" for t in notes)
        body += f'<div class="notes"><strong>Notes on this clip</strong><ul>{items}</ul></div>'
    return body


def _vibration_card(s: dict[str, Any]) -> str:
    """The rolling-shutter vibration card: frequency, amplitude and the readout used."""
    readout = f"readout {_with(s.get('readout_ms'), 'ms')} ({s.get('readout_source')})"
    if s.get("readout_ms_sigma") is not None:
        readout += f" ± {fmt_sig(s['readout_ms_sigma'])} ms"
    if not s.get("vibration_found"):
        return _card("vibration above the frame rate", "none found", readout)
    deg = s.get("vibration_deg")
    more = f"{_with(s.get('vibration_px'), 'px')}" + ("" if deg is None else
                                                       f", {fmt_sig(deg)} deg")
    return _card("vibration above the frame rate", _with(s.get("vibration_hz"), "Hz"),
                 f"{more}; {readout}")


def render_page(*, name: str, source: dict[str, Any], summary: dict[str, Any], notes: list[str],
                settings: dict[str, Any], images: dict[str, bytes],
                log_name: str | None, tool_version: str,
                narrow_images: dict[str, bytes] | None = None) -> str:
    """The report page as one HTML string.

    Parameters
    ----------
    name : the clip's NAME.
    source, summary, settings : as in the motion log's JSON (summary with the report's extra
        figures).
    notes : notes on this clip's uncertainty (the standing :data:`CAUTIONS` are added).
    images : PNG bytes by plot role (``path_plot`` …), embedded as base64 data URIs.
    narrow_images : the same plots drawn for phones (the ``narrow`` layout of
        :mod:`stabilize.report_plots`), shown on screens matching :data:`NARROW_SCREEN`;
        a role missing here shows its ``images`` plot on every screen.
    log_name : file name of the motion log the figures come from.
    tool_version : the version that wrote the report.
    """
    s = summary
    w, h = source.get("width"), source.get("height")
    fps = s.get("fps") or source.get("fps")
    nominal = s.get("fps_nominal")
    rate = f"{fmt_sig(fps, 4)} frames per second"
    if s.get("timestamps_irregular") and nominal:
        rate += f" on average, irregular (the container says {fmt_sig(nominal, 4)})"
    elif isinstance(nominal, int | float) and isinstance(fps, int | float) and \
            abs(nominal - fps) > 1e-3 * nominal:
        rate += f" (the container says {fmt_sig(nominal, 4)})"
    duration = source.get("duration_s")
    sub = (f"{w}×{h} px, {rate}, {s.get('frames')} frames"
           + (f", {fmt_sig(duration)} s" if duration else "")
           + (f" — figures from {log_name}" if log_name else ""))
    x_deg = s.get("jitter_rms_x_deg")
    fov = settings.get("fov_deg")
    fov_text = ("No field of view was given (setting fov_deg), so there are no figures in "
                "degrees."
                if fov is None else
                f"Figures in degrees use the horizontal field of view of {fmt_sig(fov)} deg.")
    uncertain = (s.get("frames_weak_share") or 0.0) + (s.get("frames_failed_share") or 0.0)
    cards = "".join([
        _card("horizontal shake (RMS)", _with(s.get("jitter_rms_x_px"), "px"),
              "" if x_deg is None else f"{fmt_sig(x_deg)} deg"),
        _card("vertical shake (RMS)", _with(s.get("jitter_rms_y_px"), "px"),
              "" if s.get("jitter_rms_y_deg") is None else f"{fmt_sig(s['jitter_rms_y_deg'])} deg"),
        _card("rotation shake (RMS)", _with(s.get("jitter_rms_rot_deg"), "deg")),
        _card("dominant shake frequency", _dominant(s, "x"),
              f"horizontal; vertical {_dominant(s, 'y')}, rotation {_dominant(s, 'rot')}"),
        _card("weak or failed frames", f"{100.0 * uncertain:.1f} %",
              f"{s.get('frames_weak', 0)} weak, {s.get('frames_failed', 0)} failed"),
    ])
    if "vibration_found" in s:
        cards += _vibration_card(s)
    shown = set(s.get("trust_reasons") or [])
    other_notes = [n for n in notes if n not in shown]
    plots = "".join(_plot_figure(role, data, (narrow_images or {}).get(role))
                    for role, data in images.items())
    settings_rows = [[k, setting_text(k, v, s)] for k, v in settings.items()
                     if k not in RUN_SWITCHES]
    caution_items = "".join(f"<li>{escape(c)}</li>" for c in CAUTIONS)
    body = f"""{_verdict_section(s)}
<section id="key-figures"><h2>Key figures</h2><div class="cards">{cards}</div></section>
<section id="certainty"><h2>How certain these figures are</h2>
{_uncertainty_section(s, other_notes)}</section>
<section id="shake"><h2>Shake per axis</h2>
<p>Shake is the camera path's motion above {_with(s.get("shake_above_hz"), "Hz")}: the path minus
its slow, deliberate part; x is horizontal, y vertical. {fov_text}</p>
{_figures_section(s)}</section>
<section id="bands"><h2>Shake power by frequency band</h2>
<p>Power in each band (its share of the axis's total in brackets); the bands add up to the
shake RMS squared. Motion below the shake cut-off is not counted, so the lowest band is small
unless the cut-off is lowered.</p>
{_bands_section(s)}</section>
<section id="steadiness"><h2>Steadiness</h2>
<p>Stability: the share of the per-frame motion's spectral energy at the lowest frequencies
(after Liu, Yuan, Tan and Sun, SIGGRAPH 2013); 1 means steady. Scene cuts and frames with a
stand-in motion are left out, and motion no larger than the measurement's own noise
({_with(s.get("motion_noise_px"), "px")} per frame) counts as steady. It says how smooth the
motion is, not how large: see the shake figures for that.</p>
{_steady_section(s)}</section>
<section id="plots"><h2>Plots</h2>{plots}</section>
<section id="settings"><h2>Settings used</h2>
<p>The settings that shape these figures and the steadied video (switches that only change
how the run behaves are left out).</p>
{_table(["setting", "value"], settings_rows)}</section>
<section id="cautions" class="cautions"><h2>Cautions</h2><ul>{caution_items}</ul></section>"""
    return html_page(
        title=f"Shake report: {name}", header=f'<p class="sub">{escape(sub)}</p>', body=body,
        footer=f"Written by stabilize {escape(tool_version)}. This page needs no network: "
               "every image\nis inside the file.")
