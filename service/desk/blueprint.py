"""The desk's blueprint, its hooks and its error pages (HTML, never problem+json)."""

from __future__ import annotations

from urllib.parse import urlsplit

from flask import (
    Blueprint,
    current_app,
    flash,
    g,
    redirect,
    render_template,
    request,
    url_for,
)
from flask_wtf.csrf import CSRFError
from marshmallow import ValidationError

from service.api.auth import allowed_roles
from service.api.errors import ApiError, flatten_errors
from service.store.models import TOKEN_ROLES

from .session import SignInNeeded

bp = Blueprint("desk", __name__, url_prefix="/desk", template_folder="templates")


@bp.before_request
def check_csrf() -> None:
    """Every form the desk takes carries its CSRF token (Flask-WTF); the API is not checked."""
    if request.method == "POST":
        current_app.extensions["sizewise"]["desk_csrf"].protect()


@bp.app_context_processor
def desk_globals() -> dict:
    """What every desk template may ask: who is signed in and what their role may do."""

    def can(endpoint: str) -> bool:
        caller = g.get("caller")
        return caller is not None and caller.role in allowed_roles(endpoint)

    return {"can": can, "caller": g.get("caller")}


def safe_next(target: str | None) -> str:
    """A same-site path under /desk to return to after signing in, else the desk's front page."""
    parts = urlsplit(target or "")
    if parts.scheme or parts.netloc or not parts.path.startswith("/desk/") or "\\" in target:
        return url_for("desk.home")
    return target


def page(template: str, status: int = 200, **context):
    """Render a desk page; nothing a desk page shows is cached."""
    response = current_app.make_response((render_template(template, **context), status))
    response.headers["Cache-Control"] = "no-store"
    return response


@bp.errorhandler(SignInNeeded)
def _sign_in_needed(exc: SignInNeeded):
    flash(exc.message, "info")
    target = request.full_path if request.method == "GET" else request.path
    return redirect(url_for("desk.sign_in_form", next=target.rstrip("?")))


@bp.errorhandler(CSRFError)
def _csrf_refused(exc: CSRFError):
    return page(
        "desk/error.html",
        400,
        title="Form refused",
        message=f"This form was refused: {exc.description} Reload the page and send it again.",
    )


def refusal(exc: ApiError) -> str:
    """A readable sentence for an API refusal: its detail and, when given, each field's reason."""
    fields = exc.errors or {}
    extra = "; ".join(f"{k}: {' '.join(v)}" for k, v in fields.items() if k not in exc.detail)
    return exc.detail + (f" ({extra})" if extra else "")


@bp.errorhandler(ApiError)
def _refused(exc: ApiError):
    titles = {403: "Not allowed for your role", 404: "Not found"}
    message = refusal(exc)
    if exc.status == 403 and exc.extra.get("allowed_roles"):
        roles = [r for r in TOKEN_ROLES if r in exc.extra["allowed_roles"]]
        message = (
            f"Your role ({exc.extra.get('role')}) may not do this; it is for: {', '.join(roles)}."
        )
    return page(
        "desk/error.html", exc.status, title=titles.get(exc.status, exc.title), message=message
    )


@bp.errorhandler(ValidationError)
def _invalid(exc: ValidationError):
    messages = flatten_errors(exc.messages)
    text = "; ".join(f"{k}: {' '.join(v)}" for k, v in messages.items())
    return page("desk/error.html", 422, title="Invalid input", message=text)
