"""The report inside the desk's request page: the API's report page, cut into its parts.

The report is rendered by service.reports exactly as GET /v1/requests/{id}/report renders it;
the desk keeps its stylesheet, its sections and its script, and puts its own masthead around them.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from markupsafe import Markup

from service.api.reports import report_html

_STYLE = re.compile(r"<style>(.*?)</style>", re.S)
_MAIN = re.compile(r'<main class="page">(.*?)(?:<footer>.*?</footer>\s*)?</main>', re.S)
_SCRIPTS = re.compile(r"</main>(.*?)</body>", re.S)


@dataclass(frozen=True)
class ReportParts:
    """The report's stylesheet, sections and trailing scripts, as safe markup."""

    style: Markup
    body: Markup
    scripts: Markup


def report_parts(detail: dict, done: dict) -> ReportParts:
    """Render the request's report (it must have a result) and return its parts."""
    html = report_html(detail, done)
    style, main, scripts = _STYLE.search(html), _MAIN.search(html), _SCRIPTS.search(html)
    if main is None:  # a report layout this cut does not know: show the page whole
        return ReportParts(Markup(""), Markup(html), Markup(""))
    # The markup comes from the report's autoescaped templates: safe to inline as it is.
    return ReportParts(
        Markup(style.group(1) if style else ""),
        Markup(main.group(1)),
        Markup(scripts.group(1) if scripts else ""),
    )
