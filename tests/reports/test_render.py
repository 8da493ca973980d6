"""The HTML report and the staff list: every required block, escaped input, self-contained page."""

import copy
from html.parser import HTMLParser

import pytest
from markupsafe import escape
from reports_testkit import REQUEST, question

from service.engine import CAUTIONS
from service.engine.explore import robustness, sensitivity
from service.reports.justification import justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report, render_staff_list

BLOCKS = (
    "protocol",
    "question",
    "answer",
    "steps",
    "justification",
    "curve",
    "sensitivity",
    "robustness",
    "reproducibility",
    "cautions",
)


class _Ids(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids: list[str] = []
        self.tags: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        for name, value in attrs:
            if name == "id":
                self.ids.append(value)


def _parse(page: str) -> _Ids:
    parser = _Ids()
    parser.feed(page)
    return parser


@pytest.fixture(scope="module")
def full_page(simulated_record):
    q = question(adjustments={"dropout": 0.1})
    sens = sensitivity(q, {"effect.difference": [0.4, 0.5, 0.6]})
    rob = robustness(
        simulated_record["question"],
        simulated_record["sample_size"]["per_group"],
        replicates=300,
        seed=11,
    )
    svg = power_curve_svg(curve_points(simulated_record, replicates=300))
    return (
        render_report(REQUEST, simulated_record, curve_svg=svg, sensitivity=sens, robustness=rob),
        sens,
        rob,
    )


def test_report_has_every_block(full_page, simulated_record):
    page, sens, rob = full_page
    parsed = _parse(page)
    for block in BLOCKS:
        assert block in parsed.ids, block
    assert len(parsed.ids) == len(set(parsed.ids)), "duplicate ids"
    for text in (
        REQUEST["protocol"]["title"],
        REQUEST["protocol"]["id"],
        REQUEST["requester"]["name"],
        "Computed, awaiting review",
        str(simulated_record["reproducibility"]["seed"]),
        simulated_record["reproducibility"]["record_sha256"],
        f"POST /v1/requests/{REQUEST['id']}/reruns",
        "sizewise compute",
        "@media print",
        'id="copy-justification"',
        "navigator.clipboard",
        'id="target-line"',
        'id="chosen-n"',
    ):
        assert text in page, text
    for caution in CAUTIONS:
        assert str(escape(caution)) in page
    context = REQUEST["context"]
    assert str(escape(justification(simulated_record, context))) in page
    for d in rob["departures"]:
        assert str(escape(d["description"])) in page
    assert page.count("<tr>") >= len(sens["cells"]) + len(rob["departures"])


def test_report_is_self_contained(full_page):
    page = full_page[0]
    for external in ("<link", "@import", 'src="http', "src='http", "url(http", "fonts.googleapis"):
        assert external not in page


def test_report_without_optional_blocks(analytic_record):
    page = render_report(
        REQUEST, analytic_record, curve_svg=power_curve_svg(curve_points(analytic_record))
    )
    ids = _parse(page).ids
    assert "sensitivity" not in ids and "robustness" not in ids
    # analytic: no seed is needed, and the steps table lists each adjustment
    assert "none needed" in page
    for label in ("Multiple comparisons", "Base size", "Design effect", "Dropout"):
        assert label in page


def test_input_is_escaped(analytic_record):
    request = copy.deepcopy(REQUEST)
    request["protocol"]["title"] = "<script>alert('x')</script> & co"
    request["requester"]["name"] = '"><img src=x onerror=alert(1)>'
    page = render_report(request, analytic_record, curve_svg="<svg></svg>")
    assert "<script>alert" not in page and "<img src=x" not in page
    assert "&lt;script&gt;alert(&#39;x&#39;)&lt;/script&gt; &amp; co" in page


def test_staff_list():
    rows = [
        dict(REQUEST, question=question(), method="analytic"),
        dict(REQUEST, id="a" * 32, status="running", progress=0.4, assigned_to=None),
        dict(
            REQUEST,
            id="b" * 32,
            status="failed",
            protocol={"id": "NGH-2025-020", "title": "<b>Falls</b>"},
        ),
    ]
    page = render_staff_list(rows)
    assert page.count("<tbody>") == 1 and page.count('class="status status-') == 3
    for label in ("Computed, awaiting review", "Computing", "Failed", "unassigned", "40% done"):
        assert label in page, label
    assert f'href="/v1/requests/{"a" * 32}/report"' in page
    assert "&lt;b&gt;Falls&lt;/b&gt;" in page
    assert "3 requests: 1 computing, 1 computed, awaiting review, 1 failed" in page
    # the first row's cell and analysis in words (test_prose checks them against the design)
    assert "Continuous outcome, two groups" in page
    assert "No requests yet." in render_staff_list([])
