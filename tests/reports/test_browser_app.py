"""The real app in a real browser: a report link opens the full report, explorations included.

The Flask app (create_app on a temporary SQLite file, a filesystem broker in tmp) serves on an
ephemeral 127.0.0.1 port through werkzeug; the request and its explorations are computed by the
worker's own task functions. Headless Chromium opens the signed link: no bearer header.
Skipped only when /usr/bin/chromium is absent and SIZEWISE_REQUIRE_BROWSER is unset.
"""

import threading

import pytest
from test_browser import CHROMIUM, _chromium, _page_errors, _png_pixels  # noqa: F401
from werkzeug.serving import make_server

from service import create_app
from service.api.auth import local_client
from service.store.migrate import upgrade
from workers.exploration_tasks import run_exploration_job

pytestmark = pytest.mark.skipif(
    not __import__("os").path.exists(CHROMIUM)
    and not __import__("os").environ.get("SIZEWISE_REQUIRE_BROWSER"),
    reason="chromium not installed (set SIZEWISE_REQUIRE_BROWSER=1 to make this a failure)",
)

# Invented protocol of the Northbridge General Hospital research office.
BODY = {
    "protocol": {
        "id": "NGH-CRO-2025-052",
        "title": "Supervised exercise after cardiac surgery",
        "principal_investigator": "Dr. Ines Halvorsen",
    },
    "requester": {
        "name": "Dr. Ines Halvorsen",
        "email": "i.halvorsen@northbridge-general.example",
        "department": "Cardiac rehabilitation",
    },
    "effect_source": "SD from the 2024 Northbridge audit of rehabilitation visits",
    "question": {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "effect": {"difference": 40},
        "assumptions": {"sd": 90},
        "adjustments": {"dropout": 0.15},
    },
    "explorations": [
        {
            "type": "sensitivity_grid",
            "grid": {"effect.difference": [30, 40, 50], "assumptions.sd": [80, 90, 100]},
        },
        {"type": "robustness_panel"},
    ],
}


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    """The app on an ephemeral port with one computed request and its explorations; yields (url, id)."""
    root = tmp_path_factory.mktemp("app")
    url = f"sqlite:///{root / 'sizewise.db'}"
    upgrade(url)
    app = create_app(
        {
            "DATABASE_URL": url,
            "BROKER_URL": f"filesystem://{root / 'broker'}",
            "SECRET_KEY": "northbridge-browser-test",
        }
    )
    config = app.extensions["sizewise"]["config"]
    client = local_client(app, "statistician", "Northbridge biostatistics core")
    reply = client.post("/v1/requests", json=BODY)
    assert reply.status_code == 202, reply.get_json()
    detail = reply.get_json()
    # A closed-form question is answered at submission; its explorations go to the workers.
    assert detail["status"] == "computed"
    for exploration in detail["explorations"]:
        assert run_exploration_job(exploration["id"], config) == "done"
    # The link is absolute on the test client's host; the browser opens it on the served port.
    link = client.post(f"/v1/requests/{detail['id']}/report-links").get_json()["url"]
    link = link.removeprefix("http://localhost")
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_port}", link, detail["id"]
    finally:
        server.shutdown()
        thread.join(timeout=10)
        app.extensions["sizewise"]["engine"].dispose()


def test_the_link_opens_the_report_with_explorations(served, tmp_path):
    base, link, request_id = served
    result = _chromium(tmp_path, "--dump-dom", "--virtual-time-budget=3000", base + link)
    dom = result.stdout
    assert request_id in dom and "Supervised exercise after cardiac surgery" in dom
    for section in ('id="sensitivity"', 'id="sensitivity-figure"', 'id="robustness"', 'id="curve"'):
        assert section in dom, section
    assert "2024 Northbridge audit of rehabilitation visits" in dom
    assert not _page_errors(result.stderr), _page_errors(result.stderr)


def test_screenshot_is_not_blank(served, tmp_path):
    base, link, _ = served
    shot = tmp_path / "report.png"
    result = _chromium(tmp_path, f"--screenshot={shot}", "--window-size=1280,2400", base + link)
    assert shot.exists(), result.stderr[-2000:]
    width, height, distinct = _png_pixels(shot.read_bytes())
    assert (width, height) == (1280, 2400) and distinct > 100
    from matplotlib import image

    assert image.imread(str(shot)).std() > 0.05  # contrast, not a uniform wash
    assert not _page_errors(result.stderr), _page_errors(result.stderr)


def test_print_to_pdf(served, tmp_path):
    base, link, _ = served
    pdf = tmp_path / "report.pdf"
    result = _chromium(tmp_path, f"--print-to-pdf={pdf}", "--no-pdf-header-footer", base + link)
    assert pdf.exists(), result.stderr[-2000:]
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF") and len(data) > 20_000
    assert data.count(b"/Type /Page") - data.count(b"/Type /Pages") >= 3  # report + grid + panel


def test_without_the_link_the_browser_is_refused(served, tmp_path):
    base, link, request_id = served
    result = _chromium(tmp_path, "--dump-dom", f"{base}/v1/requests/{request_id}/report")
    assert "Authentication required" in result.stdout
