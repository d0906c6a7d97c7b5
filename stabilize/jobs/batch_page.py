"""The batch summary page: one row per clip, in the report pages' look, readable on a phone.

A self-contained page (no scripts, no network, :func:`stabilize.report_page.html_page`):
every clip with its status, the verdict on its figures (:func:`stabilize.shake.trust_verdict`:
``sound``, ``rough`` or ``unreliable``), its shake figures with their units and links to its
report, video and log (relative, so the folder can move). Clips whose figures are ``rough``
or ``unreliable`` are marked (a coloured edge, a tinted row, the verdict as a badge) and
listed with their reasons above the table. On a screen up to 40 rem wide each row becomes a
card, one figure a line, so that no link sits off-screen.
"""

from __future__ import annotations

from html import escape
from pathlib import Path
from typing import Any, Protocol

from ..report_page import (
    MISSING,
    NARROW_SCREEN,
    dominant_text,
    fmt_sig,
    html_page,
    hz_text,
    relative_href,
)
from ..version import __version__

__all__ = ["BATCH_CSS", "DOUBTFUL", "summary_html"]

#: Verdicts that make a clip's figures not to be trusted as they stand.
DOUBTFUL = ("rough", "unreliable")

#: The table's look, added to :data:`stabilize.report_page.PAGE_CSS`; below
#: :data:`stabilize.report_page.NARROW_SCREEN` every row is a card.
BATCH_CSS = f"""
main {{ max-width: 80rem; }}
table.clips th {{ white-space: normal; vertical-align: bottom; }}
table.clips td {{ vertical-align: top; }}
table.clips td.clip {{ font-weight: 600; overflow-wrap: anywhere; min-width: 11rem; }}
table.clips td.dominant {{ white-space: normal; }}
table.clips td.files a {{ margin-right: 0.6rem; }}
table.clips td.files {{ white-space: normal; text-align: left; min-width: 10rem;
                        overflow-wrap: anywhere; }}
table.clips td.files .why {{ font-size: 0.85rem; }}
table.clips .trust, table.clips th.files {{ text-align: left; }}
tr.doubt-rough td {{ background: var(--warn-bg); }}
tr.doubt-rough td:first-child {{ box-shadow: inset 5px 0 0 var(--warn-line); }}
tr.doubt-unreliable td {{ background: #fbe9e7; }}
tr.doubt-unreliable td:first-child {{ box-shadow: inset 5px 0 0 #c8453b; }}
tr.failed td {{ background: #f1f1f1; color: var(--muted); }}
.badge {{ display: inline-block; padding: 0 0.45rem; border-radius: 0.8rem;
          font-weight: 650; font-size: 0.85rem; background: #e6f2e3; color: #2f6b2a; }}
.badge.rough {{ background: var(--warn-line); color: #3d2c00; }}
.badge.unreliable {{ background: #b3261e; color: #ffffff; }}
ul.doubtful li {{ margin: 0.25rem 0; }}
@media {NARROW_SCREEN} {{
  table.clips, table.clips tbody, table.clips tr, table.clips td {{ display: block;
    width: 100%; }}
  table.clips thead {{ display: none; }}
  table.clips tr {{ border-bottom: 6px solid var(--paper); padding: 0.3rem 0; }}
  table.clips td {{ display: flex; justify-content: space-between; gap: 0.75rem;
    text-align: right; white-space: normal; border-bottom: 1px solid var(--line);
    padding: 0.3rem 0.6rem; }}
  table.clips td::before {{ content: attr(data-label); color: var(--muted); text-align: left;
    flex: 0 0 auto; }}
  table.clips td.clip {{ font-size: 1.05rem; }}
  table.clips td.clip::before {{ content: none; }}
  table.clips td.files, table.clips td.trust {{ text-align: right; }}
  tr.doubt-rough td:first-child, tr.doubt-unreliable td:first-child {{ box-shadow: none; }}
  tr.doubt-rough {{ border-left: 6px solid var(--warn-line); }}
  tr.doubt-unreliable {{ border-left: 6px solid #c8453b; }}
}}
"""


class ClipRow(Protocol):
    """What the page reads of a clip's result (:class:`stabilize.jobs.batch.ClipResult`)."""

    clip: str
    status: str
    error: str
    summary: dict[str, Any]

    def row(self, out_dir: Path) -> dict[str, Any]: ...


def _with(v: Any, unit: str) -> str:
    text = fmt_sig(v)
    return text if text == MISSING else f"{text}\u00a0{unit}"


def _count(v: Any) -> str:
    return str(v) if isinstance(v, int) and not isinstance(v, bool) else MISSING


def _badge(trust: Any) -> str:
    """The verdict as a coloured badge (its reasons are listed above the table)."""
    if not isinstance(trust, str) or not trust:
        return MISSING
    return f'<span class="badge {escape(trust)}">{escape(trust)}</span>'


def _reasons(summary: dict[str, Any]) -> str:
    return " ".join(str(r) for r in summary.get("trust_reasons") or [])


#: Columns: title, CSS class of the cell.
_HEADS = (("clip", "clip"), ("status", ""), ("verdict", "trust"), ("frames", ""),
          ("shake x (RMS)", ""), ("shake y (RMS)", ""), ("shake rotation (RMS)", ""),
          ("dominant x / y", "dominant"), ("weak / failed frames", ""),
          ("files", "files"))


def _cells(r: ClipRow, out_dir: Path) -> list[str]:
    """The cells of one clip's row, as HTML, in the order of :data:`_HEADS`."""
    row = r.row(out_dir)
    s = r.summary
    links = " ".join(f'<a href="{escape(relative_href(row[k]))}">{label}</a>'
                     for k, label in (("report", "report"), ("video", "video"),
                                      ("log", "log")) if relative_href(row[k]))
    links = f"<span>{links}</span>" if links else ""
    files = (f'<span class="why">{escape(r.error)}</span>' if r.status == "failed"
             else (links or MISSING))
    def hz(v: Any) -> str:  # as the report writes it: to the spectrum's resolution
        return hz_text(v, s.get("spectrum_resolution_hz"))

    return [escape(r.clip), escape(r.status), _badge(row["trust"]),
            _count(s.get("frames")),
            escape(_with(s.get("jitter_rms_x_px"), "px")),
            escape(_with(s.get("jitter_rms_y_px"), "px")),
            escape(_with(s.get("jitter_rms_rot_deg"), "deg")),
            escape(f"{dominant_text(s, 'x', hz)} / {dominant_text(s, 'y', hz)}"),
            f"{_count(s.get('frames_weak'))} / {_count(s.get('frames_failed'))}", files]


def _doubtful_list(results: list[ClipRow], out_dir: Path) -> str:
    """The clips whose verdict is rough or unreliable, listed above the table."""
    items = []
    for r in results:
        trust = r.row(out_dir)["trust"]
        if trust in DOUBTFUL:
            why = _reasons(r.summary)
            items.append(f"<li><strong>{escape(r.clip)}</strong> {_badge(trust)}"
                         + (f" {escape(why)}" if why else "") + "</li>")
    if not items:
        return ""
    return (f'<div class="notes"><strong>{len(items)} of {len(results)} clips have figures '
            "not to be trusted as they stand</strong> (check their reports and the original "
            f'footage):<ul class="doubtful">{"".join(items)}</ul></div>')


def summary_html(results: list[ClipRow], out_dir: Path) -> str:
    """The batch summary page as one HTML string.

    Parameters
    ----------
    results : one result per clip, in input order (:class:`stabilize.jobs.batch.ClipResult`).
    out_dir : the batch's output folder, where the page is written (links are relative to
        it).

    Returns
    -------
    str : the page.
    """
    head = "".join((f'<th class="{k}">' if k else "<th>") + f"{escape(t)}</th>"
                   for t, k in _HEADS)
    body = []
    for r in results:
        trust = r.row(out_dir)["trust"]
        classes = [r.status] + ([f"doubt-{trust}"] if trust in DOUBTFUL else [])
        tds = "".join(
            f'<td data-label="{escape(title)}"' + (f' class="{k}"' if k else "") + f">{c}</td>"
            for (title, k), c in zip(_HEADS, _cells(r, out_dir), strict=True))
        body.append(f'<tr class="{escape(" ".join(classes))}">{tds}</tr>')
    counts = {s: sum(r.status == s for r in results) for s in ("done", "skipped", "failed")}
    intro = (f"<p>{len(results)} clips: {counts['done']} done, {counts['skipped']} skipped "
             f"(done before), {counts['failed']} failed. Shake is the camera's motion above "
             "the shake cut-off, as the frames sample it (RMS, pixels and degrees); the "
             "dominant frequency is the strongest clear peak of its spectrum. The verdict "
             "says how far each clip's figures can be trusted: <em>sound</em>, "
             "<em>rough</em> (treat them as estimates) or <em>unreliable</em> (check the "
             f"original footage), and why; each clip's report says more. {MISSING}: not "
             "measured.</p>")
    table = (f'<div class="scroll"><table class="clips"><thead><tr>{head}</tr></thead>'
             f'<tbody>{"".join(body)}</tbody></table></div>')
    return html_page(title="Batch summary", header="",
                     body=intro + _doubtful_list(results, out_dir) + table,
                     footer=f"Written by stabilize {escape(__version__)}. This page needs no "
                            "network.", extra_css=BATCH_CSS)
