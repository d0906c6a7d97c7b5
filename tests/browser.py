"""Headless Chromium for the page tests: screenshots, and the layout as the browser lays it
out (widths, overflow, font sizes), read by a small script added to a copy of the page."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

#: The screens every page is checked on: a phone and a laptop, CSS pixels.
PHONE, LAPTOP = 390, 1280

_MEASURE = """<script>
window.addEventListener("load", () => {
  const box = (e) => { const r = e.getBoundingClientRect();
                       return {left: r.left, right: r.right, width: r.width}; };
  const texts = [...document.querySelectorAll("body *")].filter((e) =>
      [...e.childNodes].some((n) => n.nodeType === 3 && n.textContent.trim()) &&
      e.getClientRects().length);
  const out = {
    viewport: window.innerWidth,
    scroll_width: document.documentElement.scrollWidth,
    images: [...document.images].map((i) => Object.assign(box(i), {
      alt: i.alt, natural_width: i.naturalWidth,
      variant: i.currentSrc === i.src ? "img" : "source"})),
    links: [...document.links].map((a) => Object.assign(box(a), {text: a.textContent})),
    min_font_px: Math.min(...texts.map((e) => parseFloat(getComputedStyle(e).fontSize))),
    sections: Object.fromEntries([...document.querySelectorAll("section[id]")].map((e) =>
        [e.id, e.getBoundingClientRect().top + window.scrollY])),
  };
  parent.postMessage(JSON.stringify(out), "*");
});
</script>"""

# The page is measured inside a frame of the width wanted: a headless window is never
# narrower than 500 px, a frame can be.
_FRAME = """<!DOCTYPE html><html><body style="margin:0">
<iframe src="{src}" style="border:0;width:{width}px;height:900px"></iframe>
<script>window.addEventListener("message", (e) => {{
  const pre = document.createElement("pre");
  pre.id = "measured";
  pre.textContent = e.data;
  document.body.appendChild(pre);
}});</script></body></html>"""


def chromium() -> str:
    """The browser, or skip (fail on CI, which installs it)."""
    exe = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").is_file()
                                       else None)
    if exe is None:
        if os.environ.get("CI"):
            pytest.fail("chromium is missing; .ci/run installs Debian's chromium package")
        pytest.skip("chromium is not installed (CI installs it)")
    return exe


def browser(exe: str, profile: Path, *args: str) -> subprocess.CompletedProcess:
    """Run headless Chromium once with its own profile folder."""
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             f"--user-data-dir={profile}", "--hide-scrollbars"]
    return subprocess.run([exe, *flags, *args], capture_output=True, text=True, timeout=120)


def screenshot(exe: str, page: Path, out: Path, width: int, height: int,
               anchor: str = "") -> Path:
    """A screenshot of ``page`` in a window ``width`` × ``height`` CSS px, at ``#anchor``."""
    url = page.resolve().as_uri() + (f"#{anchor}" if anchor else "")
    proc = browser(exe, out.parent / f".profile-{out.stem}", f"--window-size={width},{height}",
                   f"--screenshot={out}", url)
    assert proc.returncode == 0 and out.is_file(), proc.stderr[-2000:]
    shutil.rmtree(out.parent / f".profile-{out.stem}", ignore_errors=True)
    return out


def measure(exe: str, page: Path, width: int, work: Path) -> dict:
    """The page's layout at ``width`` CSS px: viewport and scroll width, each image's
    rendered box, natural width and which variant (``img`` or a ``source``) the browser
    chose, each link's box, the smallest computed font size of any text, px, and the top of
    each ``section`` with an id (px from the page's top).

    A copy of the page is measured, in a frame ``width`` px wide: its content security policy
    (which forbids scripts) is dropped and a script that sends the figures to the frame's
    parent is added.
    """
    html = page.read_text()
    html = re.sub(r'<meta http-equiv="Content-Security-Policy".*?>', "", html, flags=re.S)
    copy = page.with_name(f".measure-{width}-{page.name}")
    frame = page.with_name(f".frame-{width}-{page.name}")
    copy.write_text(html.replace("</body>", _MEASURE + "</body>"))
    frame.write_text(_FRAME.format(src=copy.resolve().as_uri(), width=width))
    try:
        proc = browser(exe, work / f"profile-measure-{width}",
                       f"--window-size={max(width, 600) + 40},1000",
                       "--virtual-time-budget=5000", "--dump-dom", frame.resolve().as_uri())
    finally:
        copy.unlink()
        frame.unlink()
    assert proc.returncode == 0, proc.stderr[-2000:]
    found = re.search(r'<pre id="measured">(.*?)</pre>', proc.stdout, flags=re.S)
    assert found, proc.stdout[-2000:]
    return json.loads(found.group(1).replace("&amp;", "&").replace("&lt;", "<")
                      .replace("&gt;", ">").replace("&quot;", '"'))
