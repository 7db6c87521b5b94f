"""Layout checks of the report page in a real browser (Debian's headless Chromium).

The page itself runs no script (its Content-Security-Policy forbids any).  To measure it, a
copy is made with that one meta tag removed and a small measuring script appended; the
layout is the same.  The script unfolds every ``<details>``, then reports the page's width
against the window's, every box whose content is wider than the box (a table that would need
sideways scrolling, text cut at a box edge) and every image reaching past the window.  The
copy is opened with ``--dump-dom`` at the window width asked for (no network, fresh profile).
"""

import html
import json
import re
import subprocess
from pathlib import Path

CHROMIUM = "/usr/bin/chromium"

_MEASURE = """<script>
document.querySelectorAll('details').forEach(d => { d.open = true; });
const root = document.documentElement;
const problems = [];
if (root.scrollWidth > root.clientWidth) {
  problems.push('page scrolls sideways: ' + root.scrollWidth + ' > ' + root.clientWidth);
}
const boxes = '.scroll, td, th, h1, h2, h3, h4, p, li, figcaption, summary, code, nav';
document.querySelectorAll(boxes).forEach(e => {
  if (e.scrollWidth > e.clientWidth + 1) {
    problems.push(e.tagName.toLowerCase() + (e.className ? '.' + e.className : '') + ' ' +
      e.scrollWidth + ' > ' + e.clientWidth + ': ' + e.textContent.trim().slice(0, 70));
  }
});
document.querySelectorAll('img').forEach(e => {
  if (e.getBoundingClientRect().right > root.clientWidth + 0.5) {
    problems.push('image past the window: ' + e.alt);
  }
});
const out = document.createElement('pre');
out.id = 'layout-check';
out.textContent = JSON.stringify({width: root.clientWidth, problems: problems});
document.body.appendChild(out);
</script>"""


def chromium_args(profile: Path) -> list[str]:
    return [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        "--hide-scrollbars",
        f"--user-data-dir={profile}",
    ]


def layout_problems(page: Path, width: int, workdir: Path) -> list[str]:
    """What does not fit when ``page`` is shown in a window ``width`` pixels wide (empty when
    the page has no sideways scroll, no box narrower than its content, no image too wide)."""
    text = page.read_text()
    text = re.sub(r'<meta http-equiv="Content-Security-Policy"[^>]*>', "", text, count=1)
    assert "</body>" in text
    check = workdir / f"layout-check-{width}.html"
    check.write_text(text.replace("</body>", _MEASURE + "</body>", 1))
    run = subprocess.run(
        chromium_args(workdir / f"profile-{width}")
        + [f"--window-size={width},1000", "--dump-dom", check.resolve().as_uri()],
        capture_output=True,
        text=True,
        timeout=180,
    )
    assert run.returncode == 0, run.stderr
    found = re.search(r'<pre id="layout-check">(.*?)</pre>', run.stdout, re.S)
    assert found, run.stdout[-2000:] + run.stderr[-2000:]
    result = json.loads(html.unescape(found.group(1)))
    assert result["width"] == width, result  # the window really had that width
    return result["problems"]
