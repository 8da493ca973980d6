"""The OpenAPI document types every request and response (issue 16).

Structure checks on the document (the question referenced and generated from the designs'
declarations, the result record typed, members required where the server always sends them,
enums defined once), live answers validated against it, and a client generated from it with
openapi-python-client in strict mode (built in a temporary folder, never committed).
"""

from __future__ import annotations

import importlib
import inspect
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import jsonschema
import pytest

from service import create_app
from service.api.openapi import build_spec
from service.engine import designs
from service.schemas.declared import block_fields
from service.store.models import REQUEST_STATUSES

EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"
CONFIG = Path(__file__).with_name("openapi_client_config.yaml")
REF = "#/components/schemas/"


@pytest.fixture(scope="module")
def document(tmp_path_factory) -> dict:
    """The document of an app on a throwaway SQLite file (building it reads no database)."""
    folder = tmp_path_factory.mktemp("openapi")
    app = create_app(
        {
            "DATABASE_URL": f"sqlite:///{folder / 'unused.db'}",
            "BROKER_URL": f"filesystem://{folder / 'broker'}",
        }
    )
    with app.app_context():
        return build_spec(app)


def _name(ref: dict) -> str:
    return ref["$ref"].removeprefix(REF)


def _validator(document: dict, component: str) -> jsonschema.Draft202012Validator:
    """A JSON Schema validator of one component, its references resolved in the document."""
    schema = {"$ref": REF + component, "components": document["components"]}
    return jsonschema.Draft202012Validator(schema)


def _errors(document: dict, component: str, value) -> list[str]:
    return [
        f"{'/'.join(map(str, e.absolute_path))}: {e.message}"
        for e in _validator(document, component).iter_errors(value)
    ]


def _walk(node, path=""):
    """Every (path, dict) in a JSON document."""
    if isinstance(node, dict):
        yield path, node
        for key, value in node.items():
            yield from _walk(value, f"{path}/{key}")
    elif isinstance(node, list):
        for index, value in enumerate(node):
            yield from _walk(value, f"{path}/{index}")


# -- the document itself ----------------------------------------------------------------------


def test_document_is_valid_and_served_without_a_token(anon_client, document):
    from openapi_spec_validator import validate

    r = anon_client.get("/openapi.json")
    assert r.status_code == 200 and r.mimetype == "application/json"
    served = r.get_json()
    validate(served)
    operation = served["paths"]["/openapi.json"]["get"]
    assert operation["security"] == []
    assert operation["responses"]["200"]["content"]["application/json"]["schema"]["type"] == (
        "object"
    )
    assert served["components"]["schemas"].keys() == document["components"]["schemas"].keys()


def test_the_question_is_referenced_and_one_variant_per_cell(document):
    schemas = document["components"]["schemas"]
    for body in ("RequestCreate", "CalculationCreate"):
        assert schemas[body]["properties"]["question"]["$ref"] == REF + "Question"
        assert "question" in schemas[body]["required"]
    variants = [_name(v) for v in schemas["Question"]["oneOf"]]
    cells = {}
    for name in variants:
        props = schemas[name]["properties"]
        cells[(props["outcome"]["const"], props["layout"]["const"])] = name
        assert schemas[name]["required"] == ["outcome", "layout"]
        assert schemas[name]["additionalProperties"] is False
    assert set(cells) == {(d.outcome, d.layout) for d in designs.all()}
    # Each block's members are the design's declared fields, nothing typed by hand.
    for design in designs.all():
        variant = schemas[cells[(design.outcome, design.layout)]]["properties"]
        for block in ("effect", "assumptions", "analysis_options"):
            component = schemas[_name(variant[block]["anyOf"][0])]
            declared = [f.name for f in block_fields(design, block)]
            assert list(component["properties"]) == declared, (design.cell, block)
            assert component["additionalProperties"] is False
        analysis = variant["analysis"]["anyOf"][0]
        assert schemas[_name(analysis)]["enum"] == [a.name for a in design.analyses]


def test_the_examples_are_questions_and_an_empty_question_is_not(document):
    for path in sorted(EXAMPLES.glob("*.json")):
        assert _errors(document, "Question", json.loads(path.read_text())) == [], path.name
    # The issue's {"question": {}}: valid by the old document, refused by the server.
    assert _errors(document, "RequestCreate", {"question": {}}) != []
    assert _errors(document, "Question", {}) != []
    # A field of another cell is not part of this one.
    wrong = {"outcome": "continuous", "layout": "two_groups", "effect": {"hazard_ratio": 0.7}}
    assert _errors(document, "Question", wrong) != []


def test_the_data_model_distributions_are_told_apart_by_family(document):
    schemas = document["components"]["schemas"]
    control = schemas["ContinuousTwoGroupsData"]["properties"]["control"]
    assert control["discriminator"]["propertyName"] == "family"
    for family, ref in control["discriminator"]["mapping"].items():
        assert schemas[ref.removeprefix(REF)]["properties"]["family"]["const"] == family


def test_the_result_record_is_referenced_and_typed(document):
    schemas = document["components"]["schemas"]
    record = schemas["ResultRecord"]
    assert set(record["required"]) >= {
        "record_version",
        "question",
        "sample_size",
        "power",
        "effect",
        "method",
        "type_i_error",
        "search",
        "events",
        "reproducibility",
        "cautions",
        "warnings",
    }
    props = record["properties"]
    assert props["question"]["$ref"] == REF + "Question"
    for member, component in (
        ("sample_size", "SampleSizeResult"),
        ("method", "MethodResult"),
        ("reproducibility", "Reproducibility"),
    ):
        assert props[member] == {**props[member], "$ref": REF + component}
        assert schemas[component]["required"], component
    for member, component in (
        ("type_i_error", "TypeIErrorCheck"),
        ("search", "SearchResult"),
        ("events", "EventsResult"),
        ("effect", "EffectResult"),
        ("power", "PowerResult"),  # null for a precision question
    ):
        assert props[member]["anyOf"] == [{"$ref": REF + component}, {"type": "null"}]
    calculate = document["paths"]["/v1/calculations"]["post"]["responses"]["200"]
    assert calculate["content"]["application/json"]["schema"] == {"$ref": REF + "ResultRecord"}


def test_full_objects_extend_their_summaries(document):
    schemas = document["components"]["schemas"]
    request = schemas["Request"]["allOf"]
    assert request[0] == {"$ref": REF + "RequestSummary"}
    assert request[1]["properties"]["result"]["anyOf"][0] == {"$ref": REF + "ResultRecord"}
    assert "result" in request[1]["required"]
    summary = schemas["RequestSummary"]
    assert summary["properties"]["protocol"] == {"$ref": REF + "Protocol"}
    assert summary["properties"]["requester"] == {"$ref": REF + "Requester"}
    assert summary["properties"]["question"]["$ref"] == REF + "Question"
    # Every member of the summary is sent on every answer; some of them may be null.
    assert set(summary["required"]) == set(summary["properties"])
    assert summary["properties"]["assigned_to"]["type"] == ["string", "null"]
    page = schemas["RequestPage"]["properties"]["items"]["items"]
    assert page == {"$ref": REF + "RequestSummary"}
    assert schemas["Exploration"]["allOf"][0] == {"$ref": REF + "ExplorationSummary"}


def test_enums_are_named_once_and_referenced(document):
    schemas = document["components"]["schemas"]
    named = {name: s for name, s in schemas.items() if "enum" in s}
    statuses = [n for n, s in named.items() if set(s["enum"]) == set(REQUEST_STATUSES)]
    assert statuses == ["RequestStatus"]
    queued = [n for n, s in named.items() if "queued" in s["enum"]]
    assert sorted(queued) == ["JobStatus", "RequestStatus"]
    values = [tuple(s["enum"]) for s in named.values()]
    assert len(values) == len(set(values)), "two enum components hold the same values"
    inline = [
        p
        for p, node in _walk(document)
        if isinstance(node.get("enum"), list) and p.count("/") != 3  # not a component itself
    ]
    assert inline == [], inline[:5]
    status = document["paths"]["/v1/requests"]["get"]["parameters"][0]
    assert status["name"] == "status" and status["schema"] == {"$ref": REF + "RequestStatus"}
    assert schemas["RequestSummary"]["properties"]["status"] == {"$ref": REF + "RequestStatus"}


def test_the_exploration_body_is_one_of_two_kinds(document):
    schemas = document["components"]["schemas"]
    body = schemas["ExplorationCreate"]
    assert body["discriminator"]["propertyName"] == "type"
    assert set(body["discriminator"]["mapping"]) == {"sensitivity_grid", "robustness_panel"}
    grid = schemas["SensitivityGridCreate"]
    assert grid["required"] == ["grid", "type"]
    assert grid["properties"]["grid"]["additionalProperties"]["items"]["type"] == "number"
    assert grid["properties"]["grid"]["maxProperties"] == 3  # at most 3 axes
    params = schemas["ExplorationSummary"]["properties"]["params"]
    assert params["$ref"] == REF + "ExplorationParams"
    assert "grid" not in schemas["RobustnessPanelCreate"]["properties"]
    assert _errors(document, "ExplorationCreate", {"type": "sensitivity_grid"}) != []
    ok = {"type": "sensitivity_grid", "grid": {"effect.difference": [4, 5]}}
    assert _errors(document, "ExplorationCreate", ok) == []
    items = schemas["RequestCreate"]["properties"]["explorations"]["items"]
    assert items == {"$ref": REF + "ExplorationCreate"}


def test_report_pages_take_a_link_or_a_token(document):
    for page, media in (("report", "text/html"), ("curve.svg", "image/svg+xml")):
        get = document["paths"][f"/v1/requests/{{request_id}}/{page}"]["get"]
        # A bearer token, or none at all when the signed link is given.
        assert get["security"] == [{"bearer": []}, {}]
        link = [p for p in get["parameters"] if p["name"] == "link"]
        assert link and link[0]["in"] == "query" and not link[0]["required"]
        assert get["responses"]["200"]["content"][media]["schema"]["type"] == "string"
    png = document["paths"]["/v1/requests/{request_id}/curve.png"]["get"]["responses"]["200"]
    assert png["content"]["image/png"]["schema"]["format"] == "binary"
    url = document["components"]["schemas"]["ReportLink"]["properties"]["url"]
    assert url["format"] == "uri"


def test_conflicts_rate_limits_and_idempotency_are_documented(document):
    schemas = document["components"]["schemas"]
    assert "allowed_from" in schemas["Problem"]["properties"]
    cancel = document["paths"]["/v1/requests/{request_id}/cancel"]["post"]["responses"]
    assert "allowed_from" in cancel["409"]["description"]
    create = document["paths"]["/v1/requests"]["post"]
    headers = create["responses"]["429"]["headers"]
    assert headers["Retry-After"]["required"] is True
    assert {"X-RateLimit-Limit", "X-RateLimit-Remaining", "X-RateLimit-Reset"} <= set(headers)
    key = [p for p in create["parameters"] if p["name"] == "Idempotency-Key"][0]
    assert "global across tokens" in key["description"]
    submitted_to = [
        p
        for p in document["paths"]["/v1/requests"]["get"]["parameters"]
        if p["name"] == "submitted_to"
    ][0]
    assert "not be before submitted_from" in submitted_to["description"]
    token = schemas["TokenCreate"]
    assert (
        token["required"] == ["role"]
        and "named after its role" in (token["properties"]["name"]["description"])
    )


# -- live answers against the document --------------------------------------------------------


def test_live_answers_match_the_document(api, client, document):
    calculated = client.post("/v1/calculations", json={"question": api.question_body()})
    assert calculated.status_code == 200
    assert _errors(document, "ResultRecord", calculated.get_json()) == []
    submitted = api.submit()
    assert submitted.status_code == 202
    assert _errors(document, "Request", submitted.get_json()) == []
    request_id = submitted.get_json()["id"]
    if submitted.get_json()["status"] != "computed":
        api.compute_as_worker(request_id)
    body = client.get(f"/v1/requests/{request_id}").get_json()
    assert body["status"] == "computed" and body["result"] is not None
    assert _errors(document, "Request", body) == []
    page = client.get("/v1/requests").get_json()
    assert _errors(document, "RequestPage", page) == []
    catalogue = client.get("/v1/catalogue").get_json()
    assert _errors(document, "Catalogue", catalogue) == []
    link = api.post(f"/v1/requests/{body['id']}/report-links").get_json()
    assert _errors(document, "ReportLink", link) == []
    assert link["url"].startswith("http")
    grid = {"type": "sensitivity_grid", "grid": {"effect.difference": [0.4, 0.5]}}
    exploration = api.post(f"/v1/requests/{request_id}/explorations", grid)
    assert exploration.status_code == 202
    assert _errors(document, "Exploration", exploration.get_json()) == []
    listed = client.get(f"/v1/requests/{request_id}/explorations").get_json()
    assert _errors(document, "ExplorationList", listed) == []
    comment = api.post(f"/v1/requests/{request_id}/comments", {"text": "SD from the audit."})
    assert _errors(document, "AuditEvent", comment.get_json()) == []
    rerun = api.post(f"/v1/requests/{request_id}/reruns", role="auditor")
    assert rerun.status_code == 202
    assert _errors(document, "Rerun", rerun.get_json()) == []
    reruns = client.get(f"/v1/requests/{request_id}/reruns").get_json()
    assert _errors(document, "RerunList", reruns) == []
    bundle = client.get(f"/v1/requests/{request_id}/bundle").get_json()
    assert _errors(document, "AuditBundle", bundle) == []
    deliveries = client.get(f"/v1/requests/{request_id}/deliveries").get_json()
    assert _errors(document, "DeliveryList", deliveries) == []
    refused = api.post(f"/v1/requests/{request_id}/cancel")
    assert refused.status_code == 409 and refused.get_json()["allowed_from"]
    assert _errors(document, "Problem", refused.get_json()) == []


# Questions whose records hold the blocks no example reaches (invented Northbridge studies):
# Holm's multiplicity block, a simulated interim test, clusters, find = effect, find = precision
# and an exact test's saw-toothed search. Simulations are kept small: only the shape is checked.
SMALL_SIMULATION = {"replicates": 400, "search_replicates": 200, "chunk_size": 200, "seed": 11}
MORE_QUESTIONS = {
    "holm": {
        "outcome": "continuous",
        "layout": "two_groups",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
        "adjustments": {"comparisons": 3, "multiplicity": "holm", "comparisons_correlation": 0.3},
    },
    "simulated_interim": {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "power",
        "effect": {"difference": -5.0},
        "assumptions": {"sd": 12.0},
        "sample_size": {"per_group": [124, 124]},
        "interim": {"looks": 3},
        "method": "simulation",
        "simulation": SMALL_SIMULATION,
    },
    "clusters": {
        "outcome": "continuous",
        "layout": "two_groups",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
        "adjustments": {"cluster": {"mean_size": 10, "icc": 0.05}},
    },
    "effect": {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "effect",
        "assumptions": {"sd": 1.0},
        "sample_size": {"per_group": [50, 50]},
    },
    "precision": {
        "outcome": "continuous",
        "layout": "single_group",
        "find": "precision",
        "hypothesis": {"aim": "estimation"},
        "assumptions": {"sd": 1.0},
        "sample_size": {"per_group": [50]},
    },
    "exact_mcnemar": {
        "outcome": "binary",
        "layout": "paired",
        "analysis": "exact_mcnemar",
        "effect": {"p_treatment_only": 0.2},
        "assumptions": {"p_control_only": 0.05},
    },
}
QUESTIONS = {
    **{path.stem: json.loads(path.read_text()) for path in sorted(EXAMPLES.glob("*.json"))},
    **MORE_QUESTIONS,
}


@pytest.mark.parametrize("name", sorted(QUESTIONS))
def test_every_example_is_a_question_and_its_answers_match_the_document(
    name, api, client, document
):
    from service.schemas import load_question

    question = json.loads(json.dumps(QUESTIONS[name]))
    simulated = load_question(question)["method"] == "simulation"
    if simulated:
        question["simulation"] = {**(question.get("simulation") or {}), **SMALL_SIMULATION}
    assert _errors(document, "Question", question) == []
    body = api.request_body(question)
    assert _errors(document, "RequestCreate", body) == []
    if not simulated:  # simulations are answered through /v1/requests only
        calculated = client.post("/v1/calculations", json={"question": question})
        assert calculated.status_code == 200, calculated.get_json()
        assert _errors(document, "ResultRecord", calculated.get_json()) == []
    submitted = api.submit(body)
    assert submitted.status_code == 202, submitted.get_json()
    assert _errors(document, "Request", submitted.get_json()) == []
    request_id = submitted.get_json()["id"]
    if submitted.get_json()["status"] != "computed":
        api.compute_as_worker(request_id)
    stored = client.get(f"/v1/requests/{request_id}").get_json()
    assert stored["status"] == "computed" and stored["result"] is not None
    assert _errors(document, "Request", stored) == []


def test_a_token_posted_without_a_name_is_named_after_its_role(client, auth):
    r = client.post("/v1/tokens", json={"role": "auditor"}, headers=auth("admin", "it.desk"))
    assert r.status_code == 201
    assert r.get_json()["name"] == "auditor"


# -- a client generated from the document ------------------------------------------------------


def _generator() -> str | None:
    local = Path(sys.executable).with_name("openapi-python-client")
    return str(local) if local.exists() else shutil.which("openapi-python-client")


def test_a_strict_generated_client_builds_and_reads_a_record(document, tmp_path):
    exe = _generator()
    if exe is None:
        pytest.skip("openapi-python-client is not installed (it is in the test extra)")
    source = tmp_path / "openapi.json"
    source.write_text(json.dumps(document))
    package = "sizewise_generated_client"
    env = {**os.environ, "PATH": f"{Path(sys.executable).parent}{os.pathsep}{os.environ['PATH']}"}
    run = subprocess.run(
        [
            exe,
            "generate",
            "--path",
            str(source),
            "--config",
            str(CONFIG),
            "--meta",
            "none",
            "--output-path",
            str(tmp_path / package),
            "--fail-on-warning",
        ],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )
    output = run.stdout + run.stderr
    assert run.returncode == 0, output
    assert "Warning" not in output, output
    sys.path.insert(0, str(tmp_path))
    try:
        models = importlib.import_module(f"{package}.models")
        record_type = models.ResultRecord
        annotations = {k: str(v) for k, v in record_type.__annotations__.items()}
        assert "SampleSizeResult" in annotations["sample_size"]
        assert "Unset" not in annotations["sample_size"]
        assert "None" in annotations["type_i_error"]
        assert {m.value for m in models.RequestStatus} == set(REQUEST_STATUSES)
        request_fields = {k: str(v) for k, v in models.Request.__annotations__.items()}
        assert "ResultRecord" in request_fields["result"]
        assert "RequestStatus" in request_fields["status"]
        # The curve takes the signed link as a parameter and reads the PNG as bytes.
        png = importlib.import_module(f"{package}.api.reports.reports_curve_png")
        signature = inspect.signature(png.sync_detailed)
        assert "link" in signature.parameters
        assert "File" in str(signature.return_annotation)
        # A record the engine computed reads into typed objects and back unchanged.
        from service.engine import compute
        from service.schemas import load_question

        question = load_question(json.loads((EXAMPLES / "northbridge_bp_trial.json").read_text()))
        record = compute(question)
        typed = record_type.from_dict(record)
        assert type(typed.question).__name__ == "QuestionContinuousTwoGroups"
        assert typed.sample_size.per_group == record["sample_size"]["per_group"]
        assert typed.method.method == models.Method.ANALYTIC
        assert typed.to_dict() == record
    finally:
        sys.path.remove(str(tmp_path))
        for name in [m for m in sys.modules if m.split(".")[0] == package]:
            del sys.modules[name]
