"""The report in a real browser: it renders, prints to PDF and raises no script errors.

Skipped only when /usr/bin/chromium is absent and SIZEWISE_REQUIRE_BROWSER is unset (CI sets it).
"""

import functools
import http.server
import os
import shutil
import subprocess
import threading
import zlib
from pathlib import Path

import pytest
from reports_testkit import REQUEST, question

from service.engine.explore import robustness, sensitivity
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report, render_staff_list

CHROMIUM = "/usr/bin/chromium"

pytestmark = pytest.mark.skipif(
    not os.path.exists(CHROMIUM) and not os.environ.get("SIZEWISE_REQUIRE_BROWSER"),
    reason="chromium not installed (set SIZEWISE_REQUIRE_BROWSER=1 to make this a failure)",
)

# Test-only probe, placed first in <head>: records script errors and console.error calls in a
# DOM attribute, then clicks the copy button once the page has loaded.
_PROBE = """<script>
(function () {
  var errors = [];
  function note(msg) { errors.push(String(msg)); document.documentElement.setAttribute("data-errors", errors.join(" | ")); }
  window.addEventListener("error", function (e) { note(e.message || "resource error"); }, true);
  window.addEventListener("unhandledrejection", function (e) { note("unhandled rejection: " + e.reason); });
  var original = console.error;
  console.error = function () { note(Array.prototype.join.call(arguments, " ")); original.apply(console, arguments); };
  window.addEventListener("load", function () {
    document.getElementById("copy-justification").click();
    setTimeout(function () { document.documentElement.setAttribute("data-probe", "done"); }, 300);
  });
})();
</script>"""


@pytest.fixture(scope="module")
def site(tmp_path_factory, simulated_record):
    """Serve the report (and a probed copy and the staff list) from a local ephemeral-port server."""
    root = tmp_path_factory.mktemp("site")
    q = question(adjustments={"dropout": 0.1})
    page = render_report(
        REQUEST,
        simulated_record,
        curve_svg=power_curve_svg(curve_points(simulated_record, replicates=300)),
        sensitivity=sensitivity(
            q, {"effect.difference": [0.4, 0.5, 0.6], "adjustments.dropout": [0.1, 0.2]}
        ),
        robustness=robustness(
            simulated_record["question"],
            simulated_record["sample_size"]["per_group"],
            replicates=300,
            seed=11,
        ),
    )
    (root / "report.html").write_text(page, encoding="utf-8")
    (root / "probe.html").write_text(page.replace("<head>", "<head>" + _PROBE, 1), encoding="utf-8")
    (root / "list.html").write_text(
        render_staff_list([REQUEST, dict(REQUEST, id="a" * 32, status="queued")]), encoding="utf-8"
    )
    handler = functools.partial(_QuietHandler, directory=str(root))
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_address[1]}"
    finally:
        server.shutdown()
        server.server_close()
        thread.join(timeout=10)


class _QuietHandler(http.server.SimpleHTTPRequestHandler):
    def log_message(self, *args):  # keep pytest output clean
        pass


def _chromium(tmp_path: Path, *args: str) -> subprocess.CompletedProcess:
    profile = tmp_path / "profile"
    profile.mkdir(exist_ok=True)
    cmd = [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={profile}",
        "--enable-logging=stderr",
        "--v=0",
        *args,
    ]
    try:
        return subprocess.run(cmd, capture_output=True, text=True, timeout=120, check=False)
    finally:
        shutil.rmtree(profile, ignore_errors=True)


def _page_errors(stderr: str) -> list[str]:
    # Page console output appears as "INFO:CONSOLE:<line>]" lines; uncaught exceptions say "Uncaught".
    return [line for line in stderr.splitlines() if "Uncaught" in line or ":CONSOLE" in line]


def _png_pixels(data: bytes) -> tuple[int, int, int]:
    """Return (width, height, distinct scanline byte values) from a PNG, using zlib only."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, idat, width, height = 8, b"", 0, 0
    while pos < len(data):
        length = int.from_bytes(data[pos : pos + 4], "big")
        kind = data[pos + 4 : pos + 8]
        body = data[pos + 8 : pos + 8 + length]
        if kind == b"IHDR":
            width, height = int.from_bytes(body[:4], "big"), int.from_bytes(body[4:8], "big")
        elif kind == b"IDAT":
            idat += body
        pos += 12 + length
    raw = zlib.decompress(idat)
    return width, height, len(set(raw))


def test_screenshot_is_not_blank(site, tmp_path):
    shot = tmp_path / "report.png"
    result = _chromium(
        tmp_path, f"--screenshot={shot}", "--window-size=1280,2000", f"{site}/report.html"
    )
    assert shot.exists(), result.stderr[-2000:]
    width, height, distinct = _png_pixels(shot.read_bytes())
    assert (width, height) == (1280, 2000)
    assert distinct > 100  # text, chart and tables: far more than a blank or single-color page
    from matplotlib import image

    pixels = image.imread(str(shot))
    assert pixels.std() > 0.05  # contrast, not a uniform wash
    assert not _page_errors(result.stderr), _page_errors(result.stderr)


def test_print_to_pdf(site, tmp_path):
    pdf = tmp_path / "report.pdf"
    result = _chromium(
        tmp_path, f"--print-to-pdf={pdf}", "--no-pdf-header-footer", f"{site}/report.html"
    )
    assert pdf.exists(), result.stderr[-2000:]
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF") and len(data) > 20_000
    assert data.count(b"/Type /Page") - data.count(b"/Type /Pages") >= 2  # a multi-page document


def test_no_script_errors_and_copy_button_works(site, tmp_path):
    result = _chromium(tmp_path, "--dump-dom", "--virtual-time-budget=5000", f"{site}/probe.html")
    dom = result.stdout
    html_tag = dom[dom.index("<html") : dom.index(">", dom.index("<html")) + 1]
    assert 'data-probe="done"' in html_tag, result.stderr[-2000:]
    assert "data-errors" not in html_tag, html_tag
    assert 'id="copy-status"' in dom and ("Copied." in dom or "Text selected" in dom)
    assert not _page_errors(result.stderr), _page_errors(result.stderr)


def test_staff_list_renders(site, tmp_path):
    result = _chromium(tmp_path, "--dump-dom", f"{site}/list.html")
    assert "Sample size requests" in result.stdout and "Queued" in result.stdout
    assert not _page_errors(result.stderr)
