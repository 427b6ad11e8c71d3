"""The HTML report rendered by a real browser (headless Chromium).

A copy of report.html gets a probe injected at the top of <head>: a Content-Security-Policy
that allows only inline style/script and ``data:`` images (so any fetch of an outside resource
is blocked and reported), listeners for resource errors, policy violations and console.error,
and a load handler that writes the count of decoded images (naturalWidth > 0) and the errors
into the DOM.  ``chromium --dump-dom`` prints the DOM after load; the test parses it.

Outside references:

- W3C, "Content Security Policy Level 3", Working Draft (directives ``default-src``,
  ``img-src``; the ``securitypolicyviolation`` event).
- WHATWG, "HTML Living Standard": ``HTMLImageElement.naturalWidth`` is 0 for an image that
  could not be decoded; ``document.images``; the window ``load`` event.
- W3C, "Portable Network Graphics (PNG) Specification (Second Edition)", 2003, section 5.2:
  the PNG signature checked on the screenshot.

The browser runs with --headless --no-sandbox --disable-gpu --disable-quic --no-first-run
--disable-background-networking --disable-component-update --disable-sync and a fresh
--user-data-dir.  Without Chromium the test is skipped, except under CI (env CI set), where a
missing browser is a failure.
"""

from __future__ import annotations

import html
import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from gridfactory import engine_grid as synthetic_grid

from tolerance.plots import figure_names
from tolerance.report import write_report

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # W3C PNG spec, 2003, section 5.2

PROBE = """<meta http-equiv="Content-Security-Policy" content="default-src 'none'; \
img-src data:; style-src 'unsafe-inline'; script-src 'unsafe-inline'">
<script>
window.__probe = [];
window.addEventListener('error', function (e) {
  var t = e.target;
  window.__probe.push(t && t !== window && t.tagName ? 'resource failed: ' + t.tagName
                      : 'script error: ' + e.message);
}, true);
document.addEventListener('securitypolicyviolation', function (e) {
  window.__probe.push('blocked outside resource: ' + e.blockedURI);
});
(function () {
  var original = console.error;
  console.error = function () {
    window.__probe.push('console.error: ' + Array.prototype.join.call(arguments, ' '));
    return original.apply(console, arguments);
  };
})();
window.addEventListener('load', function () {
  var images = Array.prototype.slice.call(document.images);
  var decoded = images.filter(function (i) { return i.complete && i.naturalWidth > 0; });
  var out = document.createElement('pre');
  out.id = 'retol-probe';
  out.textContent = JSON.stringify({images: images.length, decoded: decoded.length,
                                    errors: window.__probe});
  document.body.appendChild(out);
});
</script>
"""

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def _chromium() -> str:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    if Path("/usr/bin/chromium").exists():
        return "/usr/bin/chromium"
    if os.environ.get("CI"):
        pytest.fail("chromium is not installed (install it: apt-get install -y chromium)")
    pytest.skip("chromium is not installed")


def _run(browser, args, profile: Path):
    cmd = [browser, *FLAGS, f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0",
           *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120, check=False)


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    grid = synthetic_grid(n_candidates=3, n_samples=150)
    out = tmp_path_factory.mktemp("browser") / "report"
    return write_report(grid, out), len(figure_names(grid))


def test_report_renders_in_chromium_with_every_image_decoded(report, tmp_path):
    browser = _chromium()
    path, n_figures = report
    text = path.read_text(encoding="utf-8")
    assert text.count("<head>") == 1
    probe = tmp_path / "probe.html"
    probe.write_text(text.replace("<head>", "<head>" + PROBE, 1), encoding="utf-8")

    res = _run(browser, ["--dump-dom", probe.as_uri()], tmp_path / "profile-dom")
    assert res.returncode == 0, res.stderr[-2000:]
    m = re.search(r'<pre id="retol-probe">(.*?)</pre>', res.stdout, flags=re.S)
    assert m, "the probe did not run: " + res.stdout[-500:]
    result = json.loads(html.unescape(m.group(1)))
    assert result["errors"] == []
    assert result["images"] == n_figures
    assert result["decoded"] == n_figures  # every image has naturalWidth > 0 (WHATWG HTML)
    console = [ln for ln in res.stderr.splitlines() if ":CONSOLE" in ln]
    assert console == []


def test_report_screenshot(report, tmp_path):
    browser = _chromium()
    path, _ = report
    shot = tmp_path / "shot.png"
    res = _run(browser, [f"--screenshot={shot}", "--window-size=1280,4000", path.as_uri()],
               tmp_path / "profile-shot")
    assert res.returncode == 0, res.stderr[-2000:]
    data = shot.read_bytes()
    assert data.startswith(PNG_SIGNATURE)
    assert len(data) > 20_000  # a blank page compresses to a few kB
    console = [ln for ln in res.stderr.splitlines() if ":CONSOLE" in ln]
    assert console == []


def test_all_failing_report_shows_the_no_candidate_box_first(tmp_path):
    """A report where nothing meets the goal: in the rendered DOM the first box after the header
    is "No candidate meets the goal" (WHATWG HTML: document order of querySelectorAll)."""
    from test_review_outputs import all_fail_text

    import tolerance
    from tolerance.spec import loads

    browser = _chromium()
    grid = tolerance.run(loads(all_fail_text(), "fail.toml"), samples=300)
    path = write_report(grid, tmp_path / "fail")
    probe = tmp_path / "boxes.html"
    script = (
        "<script>window.addEventListener('load', function () {"
        "var b = document.querySelectorAll('.pick, .nopick, .caution, p.note');"
        "var out = document.createElement('pre'); out.id = 'retol-boxes';"
        "out.textContent = JSON.stringify(Array.prototype.map.call(b, function (e) {"
        "return [e.className, e.innerText.slice(0, 60)]; }));"
        "document.body.appendChild(out); });</script>"
    )
    text = path.read_text(encoding="utf-8")
    probe.write_text(text.replace("<head>", "<head>" + script, 1), encoding="utf-8")
    res = _run(browser, ["--dump-dom", probe.as_uri()], tmp_path / "profile-boxes")
    assert res.returncode == 0, res.stderr[-2000:]
    m = re.search(r'<pre id="retol-boxes">(.*?)</pre>', res.stdout, flags=re.S)
    assert m, res.stdout[-500:]
    boxes = json.loads(html.unescape(m.group(1)))
    assert boxes[0][0] == "nopick"
    assert boxes[0][1].startswith("No candidate meets the goal")
    assert not any(cls == "pick" for cls, _ in boxes)
