"""A real browser for the report tests: headless Chromium (Debian's ``chromium`` package) opens a page and says
whether every image decoded, whether any error fired, and whether the page fetched anything."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from pathlib import Path
from typing import Any

import pytest

CHROMIUM = "/usr/bin/chromium"

# Written into a copy of the page, before its Content-Security-Policy, so it may run: on load it records
# whether each image decoded, any error events, and any resource the page fetched.
PROBE = """<script>
window.__probeErrors = [];
window.addEventListener("error", function (e) { window.__probeErrors.push(String(e.message || e.type)); }, true);
window.addEventListener("load", function () {
  var images = Array.prototype.slice.call(document.images);
  var out = document.createElement("pre");
  out.id = "probe-result";
  out.textContent = JSON.stringify({
    images: images.length,
    undecoded: images.filter(function (i) { return !(i.complete && i.naturalWidth > 0); })
                     .map(function (i) { return i.alt; }),
    errors: window.__probeErrors,
    fetched: performance.getEntriesByType("resource").map(function (r) { return r.name; })
  });
  document.body.appendChild(out);
});
</script>"""


def require_chromium() -> None:
    """Skip the test without Chromium, except on CI, where it must be there."""
    if not Path(CHROMIUM).is_file() or shutil.which("chromium") is None:
        if os.environ.get("CI") == "true":
            pytest.fail("chromium is not installed; .ci/run installs it with apt-get")
        pytest.skip("headless Chromium (Debian package chromium) is not installed; apt-get install chromium")


def chromium_args(profile: Path) -> list[str]:
    return [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            f"--user-data-dir={profile}"]


def probe(page: Path, profile: Path) -> dict[str, Any]:
    """Open ``page`` (already carrying PROBE) and return what the probe recorded."""
    done = subprocess.run([*chromium_args(profile), "--virtual-time-budget=10000", "--dump-dom", page.as_uri()],
                          capture_output=True, text=True, timeout=120, check=True)
    found = re.search(r'<pre id="probe-result">(.*?)</pre>', done.stdout, flags=re.S)
    assert found, "the probe script wrote nothing into the page"
    return json.loads(found.group(1).replace("&quot;", '"').replace("&amp;", "&"))


def probed_copy(html: str, path: Path) -> Path:
    """Write ``html`` with the probe inserted to ``path``; return it."""
    path.write_text(html.replace("<head>", "<head>\n" + PROBE, 1), encoding="utf-8")
    return path
