"""gunicorn's access log without secrets: report-link signatures and credentials are redacted.

A signed report link carries its secret in the query string (``?link=...``), and a bearer
token travels in the Authorization header; anyone who can read a log line holding either could
open the report (or call the API) as its holder. ``RedactingAccessLogger`` is gunicorn's logger
with every such value replaced by ``[redacted]`` in whatever the log format prints (request
line, query, referrer, headers, environment), so no format setting can bring them back.
``RedactingFilter`` does the same for werkzeug's request log (the development server).
"""

from __future__ import annotations

import logging
import re
from urllib.parse import unquote_plus

from gunicorn.glogging import Logger

REDACTED = "[redacted]"
# Query parameters that carry a secret (compared after percent-decoding, case-insensitively).
SECRET_PARAMS = frozenset({"link", "token", "access_token"})
# Atoms of headers and environment variables that carry credentials.
SECRET_ATOMS = frozenset(
    {
        "{authorization}i",
        "{proxy-authorization}i",
        "{cookie}i",
        "{http_authorization}e",
        "{http_proxy_authorization}e",
        "{http_cookie}e",
    }
)
_PARAM = re.compile(r"(^|[?&;])([^&;=?#\s\"]+)=([^&;#\s\"]*)")


def redact_query(text: str) -> str:
    """Return ``text`` (a URL, a query string, a request line) with secret parameters redacted."""

    def hide(match: re.Match) -> str:
        lead, name, _value = match.groups()
        if unquote_plus(name).strip().lower() in SECRET_PARAMS:
            return f"{lead}{name}={REDACTED}"
        return match.group(0)

    return _PARAM.sub(hide, text)


class RedactingAccessLogger(Logger):
    """gunicorn's Logger whose access-log atoms never hold a report link's or a token's secret."""

    def atoms(self, resp, req, environ, request_time):
        """The atoms gunicorn formats, with secret query values and credential headers removed."""
        atoms = super().atoms(resp, req, environ, request_time)
        for key, value in atoms.items():
            if key.lower() in SECRET_ATOMS:
                atoms[key] = REDACTED
            elif isinstance(value, str) and "=" in value:
                atoms[key] = redact_query(value)
        return atoms


class RedactingFilter(logging.Filter):
    """A logging filter that redacts secret query values from a record's message and arguments."""

    def filter(self, record: logging.LogRecord) -> bool:
        """Rewrite the record in place; never drop it."""
        if isinstance(record.msg, str):
            record.msg = redact_query(record.msg)
        if isinstance(record.args, tuple):
            record.args = tuple(
                redact_query(a) if isinstance(a, str) and "=" in a else a for a in record.args
            )
        return True


def redact_werkzeug_log() -> None:
    """Install ``RedactingFilter`` on werkzeug's request logger, once."""
    logger = logging.getLogger("werkzeug")
    if not any(isinstance(f, RedactingFilter) for f in logger.filters):
        logger.addFilter(RedactingFilter())
