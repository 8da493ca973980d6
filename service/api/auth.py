"""Access control: bearer tokens, the role of each endpoint, rate limits and cost budgets.

Every endpoint is listed in ``ACCESS`` with the roles allowed on it; a route missing from the
table is refused for every role (fail closed), and a test walks ``app.url_map`` so a new route
without an entry fails. Only the probes and the OpenAPI document (``PUBLIC``) need no token:
a client generator fetches the document before it has one.

A browser cannot send a bearer header, so a reader may ask for a signed report link
(``?link=<request id>.<expiry>.<HMAC-SHA256>``, valid 24 h); it opens only the three
``LINK_ENDPOINTS`` of that one request. Revoking a request's links (an audited event) changes
the key of every signature checked from then on, so every link issued before stops working.

    401  no token, not a Bearer token, unknown or revoked token (with WWW-Authenticate: Bearer);
         a report link that is malformed, altered or expired
    403  a valid token whose role is not allowed on the endpoint; a report link of another request
    404  an intake token asking for another caller's request (its existence is not revealed)
    429  the per-token rate limit, or the per-token hourly cost budget, is used up

A verified token is remembered by each API process for ``TOKEN_CACHE_SECONDS`` (1 s), so a busy
caller costs one token lookup per second per process, not one per call. A revocation therefore
takes effect at once in the process that made it and within 1 s in every other process (and
for the command line's ``revoke``). Unknown or revoked secrets are never remembered.
"""

from __future__ import annotations

import hashlib
import hmac
import logging
import math
import os
import re
import secrets
import tempfile
import threading
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

from flask import Flask, g, request
from flask.testing import FlaskClient
from flask_limiter import Limiter
from flask_limiter.errors import RateLimitExceeded
from flask_limiter.util import get_remote_address
from limits import parse as parse_limit
from limits.storage import MemoryStorage
from limits.strategies import FixedWindowRateLimiter
from sqlalchemy import select
from werkzeug.wrappers import Response

from service.engine import EngineError, estimate_cost
from service.metrics import BUDGET_REFUSALS
from service.schemas.explorations import budget_refusal
from service.store import tokens as token_store
from service.store.db import session_scope
from service.store.models import TOKEN_ROLES, Request
from service.store.types import utcnow

from . import counters
from .context import sessions, settings
from .errors import ApiError, NotFound, ValidationFailed, problem
from .identity import Caller, current_caller
from .io import refuse_bad_path_text
from .links import absolute

log = logging.getLogger(__name__)

INTAKE, STATISTICIAN, AUDITOR, ADMIN = TOKEN_ROLES
ANY_ROLE = frozenset(TOKEN_ROLES)
READERS = frozenset({INTAKE, STATISTICIAN, AUDITOR})
SUBMITTERS = frozenset({INTAKE, STATISTICIAN})
REVIEWERS = frozenset({STATISTICIAN})

PUBLIC = frozenset({"health.healthz", "health.readyz", "openapi.openapi_json"})
# endpoint -> roles allowed; intake's reads are further limited to its own requests.
ACCESS: dict[str, frozenset[str]] = {
    "calculations.catalogue": ANY_ROLE,
    "calculations.question_schema": ANY_ROLE,
    "calculations.request_schema": ANY_ROLE,
    "calculations.calculate": SUBMITTERS,
    "requests.submit_request": SUBMITTERS,
    "requests.list_requests": READERS,
    "requests.get_request": READERS,
    "requests.cancel_request": REVIEWERS,
    "requests.assign_request": REVIEWERS,
    "requests.comment_request": REVIEWERS,
    "requests.approve_request": REVIEWERS,
    "requests.return_request": REVIEWERS,
    "requests.create_rerun": frozenset({AUDITOR}),
    "requests.list_reruns": READERS,
    "requests.get_rerun": READERS,
    # The whole file an auditor takes away: for the people who review and audit requests.
    "bundles.request_bundle": frozenset({STATISTICIAN, AUDITOR}),
    "reports.request_report": READERS,
    "reports.curve_svg": READERS,
    "reports.curve_png": READERS,
    "reports.staff_requests": frozenset({STATISTICIAN, AUDITOR}),
    "reports.create_report_link": READERS,
    # Whoever may issue a request's links may revoke them (intake: only its own requests).
    "reports.revoke_report_links": READERS,
    "reports.explorations.create_exploration": REVIEWERS,
    "reports.explorations.list_explorations": READERS,
    "reports.explorations.get_exploration": READERS,
    "tokens.create_token": frozenset({ADMIN}),
    "tokens.list_tokens": frozenset({ADMIN}),
    "tokens.revoke_token": frozenset({ADMIN}),
    # Operators' view of the pipeline; Prometheus sends an admin bearer token.
    "metrics.metrics_page": frozenset({ADMIN}),
    # A submitting token's own callback URL; the delivery log goes with the request it is about.
    "webhooks.put_webhook": SUBMITTERS,
    "webhooks.get_webhook": SUBMITTERS,
    "webhooks.delete_webhook": SUBMITTERS,
    "webhooks.list_deliveries": READERS,
}

# The desk (service/desk): pages signed into with a session cookie instead of a bearer header.
# Each page or form does what an API endpoint does, so it takes that endpoint's roles: one table.
PAGES_PREFIX = "desk."
PAGES_PUBLIC = frozenset({"desk.sign_in_form", "desk.sign_in", "desk.sign_out"})
PAGE_MIRRORS: dict[str, str] = {
    "desk.queue": "requests.list_requests",
    "desk.request_page": "requests.get_request",
    "desk.assign": "requests.assign_request",
    "desk.comment": "requests.comment_request",
    "desk.approve": "requests.approve_request",
    "desk.return_request": "requests.return_request",
    "desk.cancel": "requests.cancel_request",
    "desk.explore": "reports.explorations.create_exploration",
    "desk.rerun": "requests.create_rerun",
    "desk.tokens": "tokens.list_tokens",
    "desk.issue": "tokens.create_token",
    "desk.revoke_token": "tokens.revoke_token",
    # The intake page submits a request as POST /v1/requests does.
    "desk.intake_index": "requests.submit_request",
    "desk.intake_form_page": "requests.submit_request",
    "desk.intake_submit": "requests.submit_request",
}
ACCESS.update({page: ACCESS[api] for page, api in PAGE_MIRRORS.items()})
# The desk's front door sends each role where it may go.
ACCESS["desk.home"] = ANY_ROLE
# The desk installs the function that reads its session cookie (service.desk.session).
SESSION_CALLER = "session_caller"

REALM = 'Bearer realm="sizewise"'
# The pages a signed report link opens (GET only), and nothing else.
LINK_ENDPOINTS = frozenset({"reports.request_report", "reports.curve_svg", "reports.curve_png"})
LINK_PARAM = "link"
LINK_LIFETIME = timedelta(hours=24)
LINK_ROLE = "report link"
# ASCII only (str.isdigit accepts other scripts' digits; compare_digest refuses non-ASCII text).
_LINK_PATTERN = re.compile(r"([0-9a-f]{32})\.([0-9]{1,12})\.([0-9a-f]{64})", re.ASCII)
_REQUEST_ID = re.compile(r"[0-9a-f]{32}", re.ASCII)
LINK_KEY_FILE = "secret_key"
# The audit action that revokes every report link of a request issued until then.
LINKS_REVOKED = "report_links_revoked"
LIMITER_EXTENSION = "sizewise_limiter"
COUNTERS_FILE = "ratelimit.sqlite"
BUDGET_WINDOW = timedelta(hours=1)
# How long a process may keep accepting a token revoked by another process (see the docstring).
TOKEN_CACHE_SECONDS = 1.0
TOKEN_CACHE_SIZE = 4096
TOKEN_CACHE = "token_cache"
REQUEST_OWNERS = "request_owners"
REQUEST_OWNERS_SIZE = 4096


class TokenCache:
    """Verified callers by secret hash for a short time; one per application (API process)."""

    def __init__(self, seconds: float = TOKEN_CACHE_SECONDS, size: int = TOKEN_CACHE_SIZE):
        self.seconds, self.size = seconds, size
        self._entries: dict[str, tuple[Caller, float]] = {}
        self._lock = threading.Lock()

    def get(self, key: str) -> Caller | None:
        """The caller verified under ``key`` less than ``seconds`` ago, else None."""
        entry = self._entries.get(key)
        if entry is None or time.monotonic() - entry[1] >= self.seconds:
            return None
        return entry[0]

    def put(self, key: str, caller: Caller) -> None:
        with self._lock:
            if len(self._entries) >= self.size:
                self._entries.clear()  # many distinct tokens at once: start over, stay bounded
            self._entries[key] = (caller, time.monotonic())

    def forget(self, token_id: str) -> None:
        """Drop every entry of ``token_id`` (its revocation in this process applies at once)."""
        with self._lock:
            for key in [k for k, (c, _at) in self._entries.items() if c.token_id == token_id]:
                del self._entries[key]


def token_cache() -> TokenCache:
    """This application's cache of verified tokens."""
    from flask import current_app

    return current_app.extensions["sizewise"][TOKEN_CACHE]


class Unauthorized(ApiError):
    """No usable bearer token (401); the response asks for one with WWW-Authenticate."""

    status = 401
    slug = "unauthorized"
    title = "Authentication required"


class Forbidden(ApiError):
    """The token is valid but its role may not use this endpoint (403)."""

    status = 403
    slug = "forbidden"
    title = "Not allowed for this role"


class BudgetUsed(ApiError):
    """The token's hourly cost budget would be exceeded (429)."""

    status = 429
    slug = "budget-exceeded"
    title = "Hourly cost budget exceeded"


def _bearer_secret() -> str:
    header = request.headers.get("Authorization")
    if header is None or not header.strip():
        raise Unauthorized(
            "this endpoint needs an 'Authorization: Bearer <token>' header",
            errors={"headers.Authorization": ["missing; send 'Bearer <token>'"]},
            headers={"WWW-Authenticate": REALM},
        )
    scheme, _, secret = header.strip().partition(" ")
    if scheme.lower() != "bearer" or not secret.strip():
        raise Unauthorized(
            f"the Authorization header must be 'Bearer <token>'; got scheme {scheme[:20]!r}",
            errors={"headers.Authorization": [f"must be 'Bearer <token>'; got {scheme[:20]!r}"]},
            headers={"WWW-Authenticate": f'{REALM}, error="invalid_request"'},
        )
    return secret.strip()


def _request_owner(request_id: str) -> str | None:
    """The token that submitted ``request_id`` (None for an unknown id), remembered per process.

    A request's submitter never changes (it is part of the hash its 'submitted' event holds) and
    requests are never deleted, so an intake form polling its request costs no query here after
    the first. Unknown ids are not remembered.
    """
    from flask import current_app

    owners = current_app.extensions["sizewise"][REQUEST_OWNERS]
    owner = owners.get(request_id)
    if owner is None and _REQUEST_ID.fullmatch(request_id):
        with session_scope(sessions()) as session:
            owner = session.scalar(select(Request.submitted_by).where(Request.id == request_id))
        if owner is not None:
            if len(owners) >= REQUEST_OWNERS_SIZE:
                owners.clear()  # stay bounded
            owners[request_id] = owner
    return owner


def _check_owner(caller: Caller) -> None:
    """Answer 404 when an intake token names a request it did not submit."""
    request_id = (request.view_args or {}).get("request_id")
    if caller.role != INTAKE or not isinstance(request_id, str):
        return
    owner = _request_owner(request_id)
    # Unknown ids fall through to the view, which answers the same 404 with its own checks.
    if owner is not None and owner != caller.token_id:
        raise NotFound(f"no request with id '{request_id}'")


def var_folder() -> Path:
    """The folder of what every API process on the host shares: SIZEWISE_VAR_DIR, else var/."""
    return Path(os.environ.get("SIZEWISE_VAR_DIR") or Path(__file__).resolve().parents[2] / "var")


def link_key(config: dict[str, Any]) -> bytes:
    """Return the report-link key: SECRET_KEY, else a random key kept once under the var folder."""
    configured = str(config.get("SECRET_KEY") or "")
    if configured:
        return configured.encode("utf-8")
    folder = var_folder()
    path = folder / LINK_KEY_FILE
    folder.mkdir(mode=0o700, parents=True, exist_ok=True)
    if not path.exists():
        # Written whole under a private name, then linked in place: of several processes
        # starting at once exactly one key wins, and none reads a file still being written.
        fd, draft = tempfile.mkstemp(prefix=f".{LINK_KEY_FILE}.", dir=folder)
        try:
            with os.fdopen(fd, "w") as handle:
                handle.write(secrets.token_hex(32))
            os.link(draft, path)
        except FileExistsError:
            pass
        finally:
            os.unlink(draft)
    return path.read_text().strip().encode("utf-8")


def _signature(key: bytes, request_id: str, expires: int, generation: int = 0) -> str:
    # Generation 0 signs exactly what links signed before revocation existed, so they still work.
    message = f"{request_id}.{expires}" + (f".{generation}" if generation else "")
    return hmac.new(key, message.encode(), hashlib.sha256).hexdigest()


def sign_link(key: bytes, request_id: str, expires_at: datetime, generation: int = 0) -> str:
    """Return the link token for ``request_id`` valid until ``expires_at`` (whole seconds).

    ``generation`` is how many times the request's links were revoked: a revocation changes
    what a valid signature is, so every link signed before it stops working.
    """
    expires = int(expires_at.timestamp())
    return f"{request_id}.{expires}.{_signature(key, request_id, expires, generation)}"


def link_generation(session, request_id: str) -> int:
    """How many times the request's report links were revoked (its audit events say)."""
    from sqlalchemy import func, select

    from service.store.models import AuditEvent

    return int(
        session.scalar(
            select(func.count())
            .select_from(AuditEvent)
            .where(AuditEvent.request_id == request_id, AuditEvent.action == LINKS_REVOKED)
        )
        or 0
    )


def report_link(request_id: str, generation: int, now: datetime | None = None) -> dict[str, Any]:
    """Return a signed URL of the request's report page and when it expires (24 h from now)."""
    from flask import current_app

    now = now or utcnow()
    expires_at = datetime.fromtimestamp(int((now + LINK_LIFETIME).timestamp()), UTC)
    key = current_app.extensions["sizewise"]["link_key"]
    token = sign_link(key, request_id, expires_at, generation)
    return {
        "url": absolute(f"/v1/requests/{request_id}/report?{LINK_PARAM}={token}"),
        "expires_at": expires_at,
    }


def _link_refused(detail: str, message: str) -> Unauthorized:
    return Unauthorized(
        detail,
        errors={f"query.{LINK_PARAM}": [message]},
        headers={"WWW-Authenticate": f'{REALM}, error="invalid_token"'},
    )


def _link_caller(token: str) -> Caller:
    """Verify a report link for the request in the URL; 401 when bad or expired, 403 elsewhere."""
    from flask import current_app

    request_id = (request.view_args or {}).get("request_id", "")
    match = _LINK_PATTERN.fullmatch(token)
    if match is None:
        raise _link_refused(
            "the report link is malformed; ask for a new one with POST "
            f"/v1/requests/{request_id}/report-links",
            "must be '<request id>.<expiry>.<signature>' as issued",
        )
    linked, expires_text, signature = match.groups()
    expires = int(expires_text)
    key = current_app.extensions["sizewise"]["link_key"]
    generation = 0
    if _REQUEST_ID.match(linked):
        with session_scope(sessions()) as session:
            generation = link_generation(session, linked)
    if not hmac.compare_digest(signature, _signature(key, linked, expires, generation)):
        if any(
            hmac.compare_digest(signature, _signature(key, linked, expires, older))
            for older in range(generation)
        ):
            raise _link_refused(
                "this report link was revoked (every link of the request issued before the "
                f"revocation stopped working); ask for a new one with POST "
                f"/v1/requests/{linked}/report-links",
                "revoked",
            )
        raise _link_refused(
            "the report link's signature does not match: it was altered or signed with another key",
            "signature does not match",
        )
    if linked != request_id:
        raise Forbidden(
            f"this report link opens request '{linked}', not '{request_id}'",
            errors={f"query.{LINK_PARAM}": [f"issued for request '{linked}'"]},
        )
    now = utcnow()
    if expires > (now + LINK_LIFETIME).timestamp() + 1:
        # No link is issued for longer than LINK_LIFETIME: one that claims more was not made here.
        raise _link_refused(
            "the report link's expiry lies further ahead than any issued link's "
            f"{LINK_LIFETIME.total_seconds() / 3600:g} h; ask for a new one",
            "expiry beyond the lifetime of an issued link",
        )
    expires_at = datetime.fromtimestamp(expires, UTC)
    if expires_at <= now:
        raise _link_refused(
            f"the report link expired at {expires_at.isoformat()}; ask for a new one",
            f"expired at {expires_at.isoformat()}",
        )
    return Caller(f"link:{request_id}", LINK_ROLE, LINK_ROLE)


def _looks_like(secret: str) -> bool:
    return secret.startswith(token_store.TOKEN_PREFIX) and len(secret) <= 200


def caller_for_digest(digest: str) -> Caller | None:
    """The caller of the active token whose secret hashes to ``digest``, else None (revoked).

    The one token lookup: bearer calls and the desk's signed-in pages both go through it, so a
    revocation reaches both the same way (at once here, within TOKEN_CACHE_SECONDS elsewhere).
    """
    cache = token_cache()
    caller = cache.get(digest)
    if caller is not None:
        return caller
    # The lookup also writes last_used_at (at most once a minute), so a cached token's last
    # use is recorded within TOKEN_CACHE_SECONDS of that resolution.
    with session_scope(sessions()) as session:
        row = token_store.verify_digest(session, digest)
        caller = Caller(row.id, row.name, row.role) if row is not None else None
    if caller is not None:
        cache.put(digest, caller)
    return caller


def _verified_caller(endpoint: str) -> Caller:
    """The caller of a valid report link or bearer token; Unauthorized otherwise."""
    link = request.args.get(LINK_PARAM)
    if link is not None and endpoint in LINK_ENDPOINTS and request.method in ("GET", "HEAD"):
        return _link_caller(link)
    secret = _bearer_secret()
    caller = caller_for_digest(token_store.hash_secret(secret)) if _looks_like(secret) else None
    if caller is None:
        raise Unauthorized(
            "the bearer token is not valid: unknown or revoked",
            errors={"headers.Authorization": ["unknown or revoked token"]},
            headers={"WWW-Authenticate": f'{REALM}, error="invalid_token"'},
        )
    return caller


def authenticate() -> None:
    """Before every request: verify the bearer token (or report link) and the endpoint's role."""
    endpoint = request.endpoint
    # No endpoint means a 404 or 405 from routing; nothing is served, so nothing to protect.
    if endpoint is None or endpoint in PUBLIC or endpoint in PAGES_PUBLIC:
        return
    if endpoint.startswith(PAGES_PREFIX):
        from flask import current_app

        # A page of the desk: the session cookie names the token (a KeyError fails closed).
        caller = current_app.extensions["sizewise"][SESSION_CALLER]()
    else:
        try:
            caller = _verified_caller(endpoint)
        except Unauthorized:
            # Calls that fail authentication never reach the per-token limit: count their address.
            _limit_unauthenticated()
            raise
    g.caller = caller
    if caller.role == LINK_ROLE:
        # The link names its one request, so neither the role table nor ownership applies.
        return
    authorize(caller, endpoint)


def allowed_roles(endpoint: str) -> frozenset[str]:
    """The roles the access table allows on ``endpoint`` (none when it is missing)."""
    return ACCESS.get(endpoint, frozenset())


def authorize(caller: Caller, endpoint: str) -> None:
    """Refuse (403) a role the access table does not allow; hide others' requests from intake."""
    allowed = allowed_roles(endpoint)
    if caller.role not in allowed:
        names = ", ".join(r for r in TOKEN_ROLES if r in allowed) or "none"
        raise Forbidden(
            f"role '{caller.role}' may not {request.method} {request.path}; allowed roles: {names}",
            role=caller.role,
            allowed_roles=sorted(allowed),
        )
    _check_owner(caller)


def rate_limit_key() -> str:
    """The rate-limit bucket: the verified token's id, else the caller's address."""
    caller = g.get("caller")
    return f"token:{caller.token_id}" if caller is not None else f"addr:{get_remote_address()}"


def storage_url(config: dict[str, Any]) -> str:
    """Return where rate-limit counters live, shared by every API process.

    The setting when given; else (empty) the broker when it is Redis, else a SQLite file beside
    the report-link key under SIZEWISE_VAR_DIR (or var/) that every process on the host opens.
    ``memory://`` (one count per process) must be asked for explicitly.
    """
    url = str(config.get("RATELIMIT_STORAGE_URL") or "")
    if url:
        return url
    broker = str(config.get("BROKER_URL") or "")
    if broker.startswith(("redis://", "rediss://")):
        return broker
    return f"{counters.SCHEME}://{var_folder() / COUNTERS_FILE}"


def _limit_unauthenticated() -> None:
    """Count a call refused for want of a valid token against its address; 429 past the rate."""
    from flask import current_app

    limiter = current_app.extensions.get(LIMITER_EXTENSION)
    if limiter is None or not limiter.enabled:
        return
    item = parse_limit(str(settings()["RATE_LIMIT"]))
    key = ("unauthenticated", f"addr:{get_remote_address()}")
    strategy = limiter.limiter
    try:
        allowed = strategy.hit(item, *key)
    except Exception:  # the shared store is down: count in this process, like the limiter does
        log.warning("rate-limit storage unavailable; counting unauthenticated calls in memory")
        strategy = current_app.extensions.setdefault(
            "sizewise_fallback_limiter", FixedWindowRateLimiter(MemoryStorage())
        )
        allowed = strategy.hit(item, *key)
    if allowed:
        return
    reset = strategy.get_window_stats(item, *key).reset_time
    raise ApiError(
        f"the rate limit of {item} per address for calls without a valid token is used up; "
        "retry after the Retry-After header's seconds",
        status=429,
        title="Too many requests",
        slug="rate-limited",
        headers={"Retry-After": str(max(1, math.ceil(reset - time.time())))},
        limit=str(item),
    )


def _rate_limited(exc: RateLimitExceeded) -> Response:
    return problem(
        429,
        "Too many requests",
        f"the rate limit of {exc.description} per token is used up; retry after the "
        "Retry-After header's seconds",
        slug="rate-limited",
        limit=str(exc.description),
    )


def init_auth(app: Flask) -> Limiter:
    """Install token checks, the per-token rate limit and the 429 handler on ``app``."""
    from . import health

    # Registered before the limiter's own hook, so the limit is keyed by the verified token.
    app.before_request(refuse_bad_path_text)
    app.before_request(authenticate)
    config = app.extensions["sizewise"]["config"]
    app.extensions["sizewise"]["link_key"] = link_key(config)
    app.extensions["sizewise"][TOKEN_CACHE] = TokenCache()
    app.extensions["sizewise"][REQUEST_OWNERS] = {}
    limiter = Limiter(
        rate_limit_key,
        application_limits=[str(config["RATE_LIMIT"])],
        storage_uri=counters.window_storage_url(storage_url(config)),
        strategy="fixed-window",
        headers_enabled=True,
        retry_after="delta-seconds",
        key_prefix="sizewise",
        # Counters shared through Redis fall back to this process's memory while Redis is down,
        # so a broker outage never turns into 500s on every authenticated call.
        in_memory_fallback_enabled=True,
    )
    limiter.exempt(health.bp)
    limiter.init_app(app)
    app.register_error_handler(RateLimitExceeded, _rate_limited)
    app.extensions[LIMITER_EXTENSION] = limiter
    return limiter


def _cost(question: dict, field: str = "question") -> int:
    try:
        return int(estimate_cost(question))
    except EngineError as exc:
        raise ValidationFailed(str(exc), errors={field: [str(exc)]}) from None


def check_submission_cost(question: dict) -> int:
    """Refuse a simulation over the per-simulation budget (422); return its estimated draws.

    The token's hourly budget is charged by ``charge`` in the transaction that stores the work.
    """
    config = settings()
    estimate = _cost(question)
    per_simulation = int(config["SIMULATION_BUDGET"])
    message = budget_refusal(
        estimate, per_simulation, "lower replicates (or search_replicates) or the sample size"
    )
    if message is not None:
        BUDGET_REFUSALS.labels("per_simulation").inc()
        raise ValidationFailed(
            message,
            errors={"question.simulation.replicates": [message]},
            estimate=estimate,
            budget=per_simulation,
        )
    return estimate


def charge(session, items: list[tuple[str, str, int]]) -> int:
    """Reserve ``(kind, subject id, draws)`` against the caller's hourly budget, or 429.

    Runs inside the transaction that stores the work, so a refusal stores nothing and concurrent
    calls of one token cannot together pass the budget (see ``tokens.reserve_spend``).
    """
    hourly = int(settings()["TOKEN_HOURLY_BUDGET"])
    try:
        return token_store.reserve_spend(
            session, current_caller().token_id, items, budget=hourly, window=BUDGET_WINDOW
        )
    except token_store.BudgetRefused as exc:
        BUDGET_REFUSALS.labels("token_hourly").inc()
        what = (
            "this simulation's"
            if len(items) == 1
            else "these simulations' (request and explorations)"
        )
        raise BudgetUsed(
            f"{what} estimated cost of {exc.estimate:,} draws exceeds the "
            f"{exc.remaining:,} draws left of this token's hourly budget of {hourly:,}",
            headers={"Retry-After": str(exc.retry_after)},
            estimate=exc.estimate,
            remaining=exc.remaining,
            budget=hourly,
        ) from None


def local_client(app: Flask, role: str = STATISTICIAN, name: str = "local client") -> FlaskClient:
    """Return a test client of ``app`` that sends a freshly issued token of ``role``."""
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        _token_id, secret = token_store.create_token(session, role, name)
    client = app.test_client()
    client.environ_base["HTTP_AUTHORIZATION"] = f"Bearer {secret}"
    return client
