"""Open an HTML report in headless Chromium and read back what a probe script saw.

Shared by the browser tests (``tests/report/test_report_browser.py``,
``tests/test_ensemble_compare.py``). A copy of the page gets `PROBE_HEAD` at
the start of ``<head>`` (it records ``error`` events, including failed
resources, unhandled rejections and ``console.error``/``console.warn``
calls into ``window.__problems``) and, at the end of ``<body>``, a test's
own script that builds a ``verdict`` object on window load, which is then
written as JSON into ``<pre id="probe">``; Chromium's ``--dump-dom`` gives the DOM back after
loading and `probe` returns the parsed verdict.

Chromium is Debian's (``/usr/bin/chromium``; CI installs it, see
``.ci/run``); `chromium_binary` returns None where none is found, and the
tests then skip, saying so.
"""

from __future__ import annotations

import html
import json
import re
import shutil
import subprocess
from pathlib import Path
from typing import Any

TIMEOUT = 60  # s per browser run

PROBE_HEAD = """<script>
window.__problems = [];
window.addEventListener("error", function (event) {
  var target = event.target && event.target !== window ? (event.target.tagName || "?") : "script";
  window.__problems.push("error (" + target + "): " + (event.message || event.type));
}, true);
window.addEventListener("unhandledrejection", function (event) {
  window.__problems.push("unhandled rejection: " + event.reason);
});
["error", "warn"].forEach(function (level) {
  var original = console[level];
  console[level] = function () {
    window.__problems.push("console." + level + ": " + Array.prototype.join.call(arguments, " "));
    return original.apply(console, arguments);
  };
});
</script>"""


#: JavaScript: the text of every table cell (but those of class ``text``: paths, checksums) that the
#: browser broke over more than one line; a test's verdict can hold ``wrappedCells()``.
WRAPPED_CELLS = """function wrappedCells() {
  return Array.prototype.filter.call(document.querySelectorAll("td:not(.text)"), function (td) {
    var range = document.createRange();
    range.selectNodeContents(td);
    var line = range.getClientRects()[0];
    return line !== undefined && range.getBoundingClientRect().height > 1.5 * line.height;
  }).map(function (td) { return td.textContent; });
}"""
#: The window of every probe: the width at which the report is read (its figures at most 1100 px).
WINDOW = "--window-size=1280,4000"


def chromium_binary() -> str | None:
    """Path of a Chromium binary, or None."""
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None


def browse(chromium: str, profile: Path, *args: str) -> subprocess.CompletedProcess:
    """Run headless Chromium with a fresh profile folder and `args`; its output as text."""
    command = [chromium, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
               f"--user-data-dir={profile}", *args]  # fmt: skip
    return subprocess.run(command, capture_output=True, text=True, timeout=TIMEOUT, check=False)


def _on_load(verdict: str) -> str:
    """A script that runs `verdict` on window load and writes its ``verdict`` object into the page."""
    return f"""<script>
{WRAPPED_CELLS}
window.addEventListener("load", function () {{
{verdict}
  var pre = document.createElement("pre");
  pre.id = "probe";
  pre.textContent = JSON.stringify(verdict);
  document.body.appendChild(pre);
}});
</script>"""


def probe(chromium: str, page: Path, folder: Path, verdict: str) -> dict[str, Any]:
    """What the probe scripts saw when Chromium loaded a probed copy of `page`.

    Parameters
    ----------
    chromium : str
        The browser binary.
    page : Path
        The HTML file (left unchanged).
    folder : Path
        An empty folder for the probed copy and the browser profile.
    verdict : str
        JavaScript statements, run on window load, that set ``var verdict`` to what the
        test wants back (they can read ``window.__problems`` and call ``wrappedCells()``).
    """
    text = page.read_text(encoding="utf-8")
    assert text.count("<head>") == 1 and text.count("</body>") == 1
    probed = text.replace("<head>", "<head>\n" + PROBE_HEAD, 1)
    probed = probed.replace("</body>", _on_load(verdict) + "\n</body>", 1)
    path = folder / f"{page.stem}-probed.html"
    path.write_text(probed, encoding="utf-8")
    done = browse(chromium, folder / "profile", "--dump-dom", WINDOW, "--virtual-time-budget=10000",
                  path.as_uri())  # fmt: skip
    found = re.search(r'<pre id="probe">(.*?)</pre>', done.stdout, re.DOTALL)
    assert found, f"no probe verdict in the dumped DOM (exit {done.returncode}): {done.stderr[-2000:]}"
    return json.loads(html.unescape(found.group(1)))


def assert_self_contained(page: str) -> None:
    """The page references nothing outside itself: only PNG data URIs, no script, stylesheet or URL."""
    references = re.findall(r"""\b(?:src|href|action|poster|srcset)\s*=\s*["']?([^"'\s>]*)""", page, re.I)
    assert references and all(r.startswith("data:image/png;base64,") for r in references), [
        r[:60] for r in references if not r.startswith("data:")
    ]
    assert not re.search(r"https?://|(?:src|href)\s*=\s*[\"']?//", page, re.I)
    assert "<script" not in page.lower() and "<link" not in page.lower() and "@import" not in page
    assert "url(" not in page
