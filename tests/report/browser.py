"""Open an HTML file in headless Chromium and read back what rendered.

No browser driver or npm package: Chromium's own ``--dump-dom`` prints the page
after it loaded, and a small script put at the top of a copy of the page writes
into the DOM what the test needs (every image's natural size, every section's
height, every error and ``console.error``). ``--screenshot`` saves a PNG.
"""

import html
import json
import re
import shutil
import subprocess

import pytest

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
requires_chromium = pytest.mark.skipif(
    CHROMIUM is None, reason="headless Chromium not installed (Debian: apt-get install chromium, as .ci/run does); "
                             "the report is not opened in a browser")

#: Flags of a quiet, private, offline-capable headless browser.
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--hide-scrollbars")

PROBE = """<script>
window.__probe = [];
window.addEventListener('error', function (e) {
  var t = e.target;
  window.__probe.push('error: ' + (e.message || (t && (t.currentSrc || t.src || t.href)) || 'a resource failed'));
}, true);
window.addEventListener('unhandledrejection', function (e) { window.__probe.push('rejection: ' + e.reason); });
var __err = console.error;
console.error = function () { window.__probe.push('console.error: ' + Array.prototype.join.call(arguments, ' '));
  __err.apply(console, arguments); };
window.addEventListener('load', function () {
  var out = document.createElement('pre');
  out.id = 'probe-result';
  out.textContent = JSON.stringify({
    title: document.title,
    images: Array.prototype.map.call(document.images, function (i) {
      return {alt: i.alt, width: i.naturalWidth, height: i.naturalHeight, complete: i.complete}; }),
    sections: Array.prototype.map.call(document.querySelectorAll('section'), function (s) {
      var r = s.getBoundingClientRect();
      return {id: s.id, top: r.top + window.scrollY, height: r.height, absent: s.classList.contains('absent')}; }),
    caution: (document.getElementById('caution') || {}).offsetTop,
    errors: window.__probe});
  document.body.appendChild(out);
});
</script>"""


def _run(args, timeout=120):
    return subprocess.run([CHROMIUM, *FLAGS, *args], capture_output=True, text=True, timeout=timeout)


def probe(page, workdir, *, width=1280):
    """Load ``page`` (an HTML file) with the probe script; return (result dict, chromium stderr)."""
    text = page.read_text(encoding="utf-8")
    probed = workdir / "probed.html"
    probed.write_text(text.replace("<head>", "<head>" + PROBE, 1), encoding="utf-8")
    done = _run([f"--user-data-dir={workdir / 'profile-dump'}", "--virtual-time-budget=20000",
                 f"--window-size={width},1000",
                 "--enable-logging=stderr", "--v=0", "--dump-dom", probed.as_uri()])
    m = re.search(r'<pre id="probe-result">(.*?)</pre>', done.stdout, flags=re.S)
    if m is None:
        raise AssertionError(f"the probe did not report (exit {done.returncode}); stderr: {done.stderr[-2000:]}")
    return json.loads(html.unescape(m.group(1))), done.stderr


def screenshot(page, path, workdir, *, width=1280, height=2400):
    """Save a screenshot of the top ``height`` pixels of ``page`` to ``path``."""
    done = _run([f"--user-data-dir={workdir / 'profile-shot'}", f"--window-size={width},{height}",
                 "--virtual-time-budget=20000", f"--screenshot={path}", page.as_uri()])
    if not path.is_file():
        raise AssertionError(f"no screenshot (exit {done.returncode}); stderr: {done.stderr[-2000:]}")
    return path
