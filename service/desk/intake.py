"""The intake page: a plain HTML form per cell for institutions without a form of their own.

Each registered design (outcome × layout) gets a page at /desk/intake/<outcome>/<layout>, built
from its declared fields (``intake_form``). A submission becomes the same body POST /v1/requests
takes and goes through the same ``submit`` (schema, feasibility, budget, store); a refusal
re-renders the form with each message beside its input, a success opens the request's page.
Signed in through the desk's session, CSRF-checked by the desk's hook, in the one access table.
"""

from __future__ import annotations

from flask import redirect, request, url_for
from marshmallow import ValidationError

from service.api.errors import NotFound, ValidationFailed, flatten_errors
from service.api.requests import submit
from service.engine import designs
from service.engine.errors import QuestionError

from . import intake_form
from .blueprint import bp, page


def _design(outcome: str, layout: str):
    try:
        return designs.get(outcome, layout)
    except QuestionError:
        raise NotFound(f"there is no intake page for {outcome} × {layout}") from None


@bp.get("/intake")
def intake_index():
    """Every registered cell with its analyses, each linking to its intake page."""
    return page("desk/intake_index.html", cells=designs.all())


@bp.get("/intake/<outcome>/<layout>")
def intake_form_page(outcome: str, layout: str):
    """The empty form of one cell."""
    design = _design(outcome, layout)
    return _render(design, values={}, beside={}, rest=[])


@bp.post("/intake/<outcome>/<layout>")
def intake_submit(outcome: str, layout: str):
    """Build the request from the form, submit it as the API does, open its page."""
    design = _design(outcome, layout)
    body = intake_form.body_from_form(design, request.form)
    try:
        detail, _status = submit(body)
    except ValidationError as exc:
        return _refused(design, flatten_errors(exc.messages), "")
    except ValidationFailed as exc:
        return _refused(design, exc.errors or {}, exc.detail)
    return redirect(url_for("desk.request_page", request_id=detail["id"]))


def _refused(design, errors: dict, detail: str):
    beside, rest = intake_form.errors_by_input(design, errors)
    if detail and not beside and not rest:
        rest = [detail]
    values = {k: v for k, v in request.form.items() if k != "csrf_token"}
    return _render(design, values=values, beside=beside, rest=rest, status=422)


def _render(design, *, values: dict, beside: dict, rest: list, status: int = 200):
    return page(
        "desk/intake.html",
        status,
        design=design,
        sections=intake_form.sections(design),
        values=values,
        beside=beside,
        rest=rest,
    )
