"""Security headers on every response, and a Content-Security-Policy on pages a browser renders.

Report pages are opened with a signed link whose secret is in the query string, so the browser
must never send the URL on as a Referer (Referrer-Policy: no-referrer), never guess a content
type (nosniff), and run nothing but the page's own inline script: the policy lists the SHA-256
of each inline <script> the page carries, so an injected one does not run.
"""

from __future__ import annotations

import base64
import hashlib
import re

from flask import Flask, Response, request

# The blueprint of the desk's pages (service/desk), which post forms.
DESK = "desk"

# Inline styles are allowed: the templates and SVG plots style with <style> elements; a style
# cannot run code, and everything else (scripts, frames, forms, connections) is refused.
_POLICY = (
    "default-src 'none'; img-src 'self' data:; style-src 'self' 'unsafe-inline'; "
    "base-uri 'none'; form-action 'none'; frame-ancestors 'none'"
)
_SCRIPT = re.compile(r"<script(?:\s[^>]*)?>(.*?)</script>", re.DOTALL | re.IGNORECASE)
_RENDERED = ("text/html", "image/svg+xml")


def content_security_policy(html: str, *, forms: bool = False) -> str:
    """The policy of one page: the base policy plus the hash of each of its inline scripts.

    ``forms``: the page posts forms to this site (the desk's pages), so form-action is 'self'.
    """
    hashes = [
        "'sha256-" + base64.b64encode(hashlib.sha256(body.encode("utf-8")).digest()).decode() + "'"
        for body in _SCRIPT.findall(html)
    ]
    script = f"; script-src {' '.join(hashes)}" if hashes else ""
    policy = _POLICY.replace("form-action 'none'", "form-action 'self'") if forms else _POLICY
    return policy + script


def _secure(response: Response) -> Response:
    desk = request.blueprint == DESK
    response.headers["X-Content-Type-Options"] = "nosniff"
    # The desk's URLs carry no secrets, and its forms need a same-origin Referer over HTTPS
    # (Flask-WTF's strict check); other sites still learn nothing.
    response.headers["Referrer-Policy"] = "same-origin" if desk else "no-referrer"
    if response.mimetype in _RENDERED and not response.direct_passthrough:
        body = response.get_data(as_text=True)
        response.headers["Content-Security-Policy"] = content_security_policy(body, forms=desk)
    return response


def init_headers(app: Flask) -> None:
    """Add the security headers to every response of ``app``."""
    app.after_request(_secure)
