"""Absolute links: every URL the API returns is built here, from one base.

The base is ``SIZEWISE_PUBLIC_URL`` when set (behind a proxy, the name clients use), else the
scheme and host the caller used. A client can follow any link it gets without knowing where
the API lives.
"""

from __future__ import annotations

from flask import g, request, url_for

from .context import settings


def public_base() -> str:
    """The base URL of the API, without a trailing slash."""
    base = g.get("public_base")
    if base is None:
        # Once per HTTP request: a request's view holds five links, each built on this base.
        configured = str(settings().get("PUBLIC_URL") or "").rstrip("/")
        base = g.public_base = configured or request.host_url.rstrip("/")
    return base


def absolute(path: str) -> str:
    """The absolute URL of an API path (``/v1/...``, with its query if any)."""
    return public_base() + path


def link(endpoint: str, **values) -> str:
    """The absolute URL of a Flask endpoint (``url_for`` arguments)."""
    return absolute(url_for(endpoint, **values))
