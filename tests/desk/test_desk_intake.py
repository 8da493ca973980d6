"""The intake page: one form per registered cell, built from its declared fields, submitted
through the same path as POST /v1/requests (one schema), refusals beside their inputs."""

from __future__ import annotations

import re

import pytest
from markupsafe import escape
from sqlalchemy import func, select

from service.desk import intake_form
from service.engine import designs
from service.schemas.catalogue import example
from service.store.db import session_scope
from service.store.models import Request
from tests.engine import toy_design as engine_toy

CELLS = [(d.outcome, d.layout) for d in designs.all()]
REQUEST_FIELDS = {
    "protocol.id": "NGH-2026-114",
    "protocol.title": "Falls prevention on the geriatric ward",
    "requester.name": "Dr. Lena Brandt",
    "requester.email": "l.brandt@northbridge-general.example",
    "requester.department": "Geriatrics",
    "deadline": "2099-06-30",
}


def _esc(text: str) -> str:
    return str(escape(text))


def _path(outcome: str, layout: str) -> str:
    return f"/desk/intake/{outcome}/{layout}"


def _flat(node: dict, prefix: str = "question.") -> dict[str, str]:
    """A question as the form's inputs carry it: dotted names, text values."""
    out = {}
    for key, value in node.items():
        if isinstance(value, dict):
            out.update(_flat(value, f"{prefix}{key}."))
        elif isinstance(value, list):
            out[prefix + key] = ", ".join(f"{v:g}" for v in value)
        elif isinstance(value, bool):
            out[prefix + key] = "true" if value else "false"
        else:
            out[prefix + key] = str(value)
    return out


def _form_for(design) -> dict[str, str]:
    question = {k: v for k, v in example(design).items() if k not in ("outcome", "layout")}
    return {**REQUEST_FIELDS, **_flat(question)}


def _input(html: str, name: str) -> str:
    """The tag of the input or select named ``name``."""
    match = re.search(rf'<(?:input|select|textarea)[^>]*name="{re.escape(name)}"[^>]*>', html)
    assert match, f"no input named {name}"
    return match.group(0)


def _field_block(html: str, name: str) -> str:
    match = re.search(
        rf'<div class="intake-field[^"]*" data-field="{re.escape(name)}">(.*?)</div>', html, re.S
    )
    assert match, f"no field block for {name}"
    return match.group(1)


def _stored(app) -> int:
    with session_scope(app.extensions["sizewise"]["sessions"]) as db:
        return db.scalar(select(func.count()).select_from(Request))


def test_the_index_lists_every_cell_with_its_label_and_analyses(desk):
    html = desk("intake").get("/desk/intake").get_data(as_text=True)
    for d in designs.all():
        assert _esc(d.label) in html
        assert f'href="{_path(d.outcome, d.layout)}"' in html
        for a in d.analyses:
            assert _esc(a.label) in html


@pytest.mark.parametrize("cell", CELLS, ids=[f"{o}.{lay}" for o, lay in CELLS])
def test_each_cell_form_has_every_declared_field_with_its_constraints(desk, cell):
    design = designs.get(*cell)
    r = desk("intake").get(_path(*cell))
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    assert _esc(design.label) in html
    for f in design.fields:
        name = f"question.{f.path}"
        tag, block = _input(html, name), _field_block(html, name)
        label = f.label[:1].upper() + f.label[1:]
        assert _esc(label) in block and _esc(f.help) in block
        if f.unit:
            assert f"({f.unit})" in block
        if f.type in ("number", "integer"):
            assert 'type="number"' in tag
            assert ('step="1"' if f.type == "integer" else 'step="any"') in tag
            for end, value, open_end in (
                ("min", f.minimum, f.exclusive_minimum),
                ("max", f.maximum, f.exclusive_maximum),
            ):
                if value is not None:
                    attr = f"data-exclusive-{end}" if open_end else end
                    assert f'{attr}="{value:g}"' in tag, (name, tag)
        if f.type == "choice":
            for choice in f.choices:
                assert f'<option value="{choice}"' in block
        if f.type == "boolean":
            assert '<option value="true"' in block and '<option value="false"' in block
        if f.default is not None:
            shown = str(f.default).lower() if f.type == "boolean" else str(f.default)
            assert f"Default: {shown}." in block
    # Alternative forms are named together, once.
    alternatives = [form for form in design.forms if form]
    if len(alternatives) > 1:
        forms = re.search(r'<p class="forms" id="intake-forms">(.*?)</p>', html, re.S).group(1)
        assert forms.count("<em>or</em>") == len(alternatives) - 1
    # The analyses, the common question fields and the request's fields.
    for a in design.analyses:
        assert f'<option value="{a.name}"' in _field_block(html, "question.analysis")
    for name in (
        "question.find",
        "question.alpha",
        "question.alternative",
        "question.target_power",
        "question.hypothesis.aim",
        "question.hypothesis.margin",
        "question.allocation_ratio",
        "question.sample_size.per_group",
        "question.adjustments.dropout",
        "question.method",
        "question.simulation.replicates",
        "question.simulation.seed",
        *REQUEST_FIELDS,
    ):
        _input(html, name)
    assert 'max="0.5"' in _input(html, "question.alpha")
    assert 'type="date"' in _input(html, "deadline")
    assert 'name="csrf_token"' in html


@pytest.mark.parametrize("cell", CELLS, ids=[f"{o}.{lay}" for o, lay in CELLS])
def test_a_valid_submission_is_stored_and_opens_its_request_page(desk, desk_app, cell):
    design = designs.get(*cell)
    d = desk("intake", "ward.office")
    r = d.post(_path(*cell), _form_for(design), form_page=_path(*cell))
    assert r.status_code == 302, r.get_data(as_text=True)
    request_id = r.headers["Location"].rsplit("/", 1)[-1]
    assert r.headers["Location"].endswith(f"/desk/requests/{request_id}")
    page = d.get(f"/desk/requests/{request_id}").get_data(as_text=True)
    assert "NGH-2026-114" in page and _esc(design.label) in page
    with session_scope(desk_app.extensions["sizewise"]["sessions"]) as db:
        row = db.get(Request, request_id)
        assert (row.question["outcome"], row.question["layout"]) == cell
        assert row.requester["department"] == "Geriatrics"
        # What the form carried arrives as the API would have stored it: numbers as numbers.
        expected = example(design)
        for block in ("effect", "assumptions"):
            for key, value in (expected.get(block) or {}).items():
                assert row.question_raw[block][key] == value


@pytest.mark.parametrize("cell", CELLS, ids=[f"{o}.{lay}" for o, lay in CELLS])
def test_an_invalid_submission_shows_the_message_beside_the_field_and_stores_nothing(
    desk, desk_app, cell
):
    design = designs.get(*cell)
    solved = next(f for f in design.fields if f.name == design.solved)
    form = {**_form_for(design), f"question.{solved.path}": "lots", "question.alpha": "0.9"}
    before = _stored(desk_app)
    d = desk("intake")
    r = d.post(_path(*cell), form, form_page=_path(*cell))
    assert r.status_code == 422
    html = r.get_data(as_text=True)
    assert _stored(desk_app) == before
    alpha = _field_block(html, "question.alpha")
    assert 'class="field-error"' in alpha and "0.5" in alpha
    effect = _field_block(html, f"question.{solved.path}")
    assert 'class="field-error"' in effect and "lots" in effect
    # The form keeps what was typed.
    assert 'value="lots"' in _input(html, f"question.{solved.path}")
    assert 'value="NGH-2026-114"' in _input(html, "protocol.id")


def _without_department(form: dict) -> dict:
    return {k: v for k, v in form.items() if k != "requester.department"}


def _power_without_sizes(form: dict) -> dict:
    # find = power without enrolled numbers: the schema names the whole "question.sample_size".
    return {**form, "question.find": "power"}


@pytest.mark.parametrize(
    "change,beside,message",
    [
        (_without_department, "requester.department", "required"),
        (_power_without_sizes, "question.sample_size.per_group", "is required when find = power"),
    ],
    ids=["field", "block"],
)
def test_a_refusal_sits_beside_its_input_or_its_blocks_first(desk, change, beside, message):
    cell = _path("continuous", "two_groups")
    form = change(_form_for(designs.get("continuous", "two_groups")))
    r = desk("statistician").post(cell, form, form_page=cell)
    assert r.status_code == 422
    block = _field_block(r.get_data(as_text=True), beside)
    assert 'class="field-error"' in block and message in block


def test_a_toy_design_registered_in_a_test_gets_an_intake_page(desk):
    toy = engine_toy.register()
    try:
        d = desk("intake")
        assert f'href="{_path(toy.outcome, toy.layout)}"' in d.get("/desk/intake").get_data(
            as_text=True
        )
        html = d.get(_path(toy.outcome, toy.layout)).get_data(as_text=True)
        for f in toy.fields:
            _input(html, f"question.{f.path}")
        form = {
            **REQUEST_FIELDS,
            "question.effect.rate_ratio": "1.5",
            "question.assumptions.reference_rate": "2",
        }
        r = d.post(_path(toy.outcome, toy.layout), form, form_page=_path(toy.outcome, toy.layout))
        assert r.status_code == 302, r.get_data(as_text=True)
    finally:
        engine_toy.unregister()


def test_an_unknown_cell_has_no_intake_page(desk):
    assert desk("intake").get("/desk/intake/weather/two_groups").status_code == 404


def test_intake_refuses_a_form_without_its_csrf_token(desk, desk_app):
    before = _stored(desk_app)
    d = desk("intake")
    design = designs.get("continuous", "two_groups")
    r = d.client.post(_path("continuous", "two_groups"), data=_form_for(design))
    assert r.status_code == 400 and _stored(desk_app) == before


@pytest.mark.parametrize("role", ["auditor", "admin"])
def test_roles_that_cannot_submit_cannot_use_the_intake_page(desk, role):
    assert desk(role).get("/desk/intake").status_code == 403


def test_the_body_leaves_empty_inputs_out_and_reads_numbers_as_a_client_posts_them():
    design = designs.get("binary", "two_groups")
    form = {
        "protocol.id": "NGH-2026-114",
        "question.alpha": " 0.025 ",
        "question.target_power": "",
        "question.sample_size.per_group": "120, 240",
        "question.analysis_options.continuity_correction": "true",
        "question.effect.p_treatment": "about a third",
        "question.adjustments.comparisons": "2",
        "not.an.input": "ignored",
    }
    body = intake_form.body_from_form(design, form)
    assert body == {
        "protocol": {"id": "NGH-2026-114"},
        "question": {
            "outcome": "binary",
            "layout": "two_groups",
            "alpha": 0.025,
            "sample_size": {"per_group": [120, 240]},
            "analysis_options": {"continuity_correction": True},
            # Not a number: passed on as typed, so the schema's own message names it.
            "effect": {"p_treatment": "about a third"},
            "adjustments": {"comparisons": 2},
        },
    }
