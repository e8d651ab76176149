"""The report page in a real browser: headless Chromium, when one is installed.

The report of the stored fit example (tests/data/fit_example.json and its turns file, with an
invented comparison table so that every table of an SME report is on the page) is written into
tmp_path. A copy of report.html gets a small script (the page itself has none) that, once the
page has loaded, writes into a ``<pre id="fringe-browser-check">`` what it found:

* the document's width beyond the window (horizontal overflow of the page), every element
  outside the page's scrolling boxes (``div.wide``, around each table) whose right edge lies
  beyond the window, and every scrolling box whose content is wider than the box (a table that
  would need its own scroll bar);
* every ``<img>`` that did not load (``naturalWidth`` 0);
* every error: ``window.onerror``, failed resources (error events, captured) and
  ``console.error`` calls.

Chromium runs with ``--dump-dom`` and the test reads that element back, at a desktop width
(1200 px) and at a narrow one (480 px; there only the page as a whole must not overflow:
a wide table may scroll inside its own box). A print to PDF must produce a PDF. The browser is
looked for as ``chromium``, ``chromium-browser`` or ``google-chrome`` on PATH; without one the
tests are skipped with that reason. Chromium writes its profile under tmp_path.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess

import pytest

from tests.helpers.commands import run_command

BROWSERS = ("chromium", "chromium-browser", "google-chrome")
BROWSER = next((b for b in map(shutil.which, BROWSERS) if b), None)

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(BROWSER is None, reason="no Chromium-family browser on PATH (looked for "
                                               + ", ".join(BROWSERS) + ")"),
]

#: Injected first thing in <head> (errors during the load are caught too).
PROBE_HEAD = """<script>
window.__fringeErrors = [];
window.addEventListener("error", function (e) {
  var t = e.target && e.target !== window ? (e.target.tagName || "?") + " failed to load"
                                          : String(e.message);
  window.__fringeErrors.push(t);
}, true);
(function () {
  var orig = console.error;
  console.error = function () {
    window.__fringeErrors.push("console.error: " + Array.prototype.join.call(arguments, " "));
    return orig.apply(console, arguments);
  };
})();
</script>"""

#: Injected at the end of <body>: the findings, once everything has loaded.
PROBE_BODY = """<script>
window.addEventListener("load", function () {
  var w = document.documentElement.clientWidth, wide = [], inner = [];
  function name(el) {
    return el.tagName.toLowerCase() + (el.id ? "#" + el.id : "") +
           (el.className && typeof el.className === "string" ? "." + el.className : "");
  }
  document.querySelectorAll("body *").forEach(function (el) {
    if (el.id === "fringe-browser-check") return;
    var box = el.parentElement && el.parentElement.closest("div.wide");
    if (box) return;                       // inside a scrolling box: counted below
    var r = el.getBoundingClientRect();
    if (r.width > 0 && r.right > w + 0.5) wide.push(name(el) + " right=" + r.right.toFixed(1));
  });
  document.querySelectorAll("div.wide").forEach(function (el) {
    if (el.scrollWidth > el.clientWidth + 0.5)
      inner.push(name(el.firstElementChild || el) + " " + el.scrollWidth + ">" + el.clientWidth);
  });
  var bad = [];
  Array.prototype.forEach.call(document.images, function (img) {
    if (!(img.complete && img.naturalWidth > 0)) bad.push(img.alt || img.src.slice(0, 40));
  });
  var out = document.createElement("pre");
  out.id = "fringe-browser-check";
  out.textContent = JSON.stringify({
    window: w, document: document.documentElement.scrollWidth, beyond_window: wide,
    scrolling_inside: inner, images: document.images.length, not_loaded: bad,
    errors: window.__fringeErrors});
  document.body.appendChild(out);
});
</script>"""


def _chromium(tmp_path, *args: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, HOME=str(tmp_path), XDG_CONFIG_HOME=str(tmp_path / "xdg-config"),
               XDG_CACHE_HOME=str(tmp_path / "xdg-cache"))
    cmd = [BROWSER, "--headless", "--disable-gpu", "--no-sandbox", "--no-first-run",
           "--disable-extensions", "--hide-scrollbars",
           f"--user-data-dir={tmp_path / 'chromium-profile'}", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=180, env=env,
                          cwd=tmp_path, check=False)


@pytest.fixture(scope="module")
def report_dir(tmp_path_factory, data_dir):
    """The report of the fit example, with an invented comparison table, in a temporary folder."""
    folder = tmp_path_factory.mktemp("browser-report")
    for name in ("fit_example.json", "fit_example.turns.h5"):
        shutil.copy(data_dir / name, folder / name)
    (folder / "earlier.csv").write_text(
        "# Invented numbers, for illustration only.\nname,value,sigma,citation\n"
        'ke_XY,-3.1e-17,2.5e-17,"Invented group A, J. Invented Phys. 1, 1 (2020)"\n'
        'ke_ZZ,1.2e-15,2.4e-15,"Invented group B (2018)"\n', encoding="utf-8")
    run = run_command(folder, ["report", "fit_example.json", "--out", "out",
                               "--compare", "earlier.csv"])
    assert run.exit_code == 0, run.stdout + run.stderr
    return folder / "out"


@pytest.fixture(scope="module")
def probed_page(report_dir):
    """A copy of report.html (beside the original, so relative names resolve alike) with the
    probe scripts; the original is left as it was written."""
    page = report_dir / "report.html"
    text = page.read_text(encoding="utf-8")
    assert "<script" not in text            # the page itself has no scripts
    probed = text.replace("<head>", "<head>\n" + PROBE_HEAD, 1).replace(
        "</body>", PROBE_BODY + "\n</body>", 1)
    target = report_dir / "report-probed.html"
    target.write_text(probed, encoding="utf-8")
    return target


def _findings(tmp_path, page, width: int) -> dict:
    done = _chromium(tmp_path, f"--window-size={width},900", "--virtual-time-budget=10000",
                     "--dump-dom", page.as_uri())
    assert done.returncode == 0, done.stderr[-2000:]
    m = re.search(r'<pre id="fringe-browser-check">(.*?)</pre>', done.stdout, re.S)
    assert m, "the probe wrote no findings (the page's load event did not fire?)\n" + \
        done.stderr[-2000:]
    raw = m.group(1).replace("&quot;", '"').replace("&lt;", "<").replace("&gt;", ">")
    return json.loads(raw.replace("&amp;", "&"))


def test_page_at_desktop_width_fits_loads_every_image_and_has_no_errors(tmp_path, probed_page):
    f = _findings(tmp_path, probed_page, 1200)
    assert f["document"] <= f["window"], f
    assert f["beyond_window"] == [], f["beyond_window"]
    assert f["scrolling_inside"] == [], f["scrolling_inside"]
    assert f["images"] == 5, f                   # the five figures of the fit example
    assert f["not_loaded"] == [], f["not_loaded"]
    assert f["errors"] == [], f["errors"]


def test_page_at_narrow_width_does_not_overflow(tmp_path, probed_page):
    f = _findings(tmp_path, probed_page, 480)
    assert f["document"] <= f["window"], f
    assert f["beyond_window"] == [], f["beyond_window"]
    assert f["not_loaded"] == [] and f["errors"] == [], f


def test_page_prints_to_pdf(tmp_path, report_dir):
    pdf = tmp_path / "report.pdf"
    done = _chromium(tmp_path, "--no-pdf-header-footer", f"--print-to-pdf={pdf}",
                     (report_dir / "report.html").as_uri())
    assert done.returncode == 0, done.stderr[-2000:]
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-")
    pages = len(re.findall(rb"/Type\s*/Page[^s]", data))
    assert 2 <= pages <= 30, pages               # the page, laid out on several sheets
