"""service/demo.py: the invented Northbridge protocols load through the API, once."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from sqlalchemy import func, select

from service import demo
from service.config import load_config
from service.store.db import make_engine, make_sessionmaker, session_scope
from service.store.migrate import upgrade
from service.store.models import ApiToken, AuditEvent, Request


@pytest.fixture
def config(tmp_path: Path) -> dict:
    cfg = load_config(
        {
            "DATABASE_URL": f"sqlite:///{tmp_path / 'demo.db'}",
            "BROKER_URL": f"filesystem://{tmp_path / 'broker'}",
        }
    )
    upgrade(cfg["DATABASE_URL"])
    return cfg


def _rows(cfg: dict) -> list[Request]:
    factory = make_sessionmaker(make_engine(cfg["DATABASE_URL"]))
    with session_scope(factory) as session:
        return list(session.scalars(select(Request).order_by(Request.protocol_id)))


def test_demo_loads_three_protocols_and_is_idempotent(config):
    assert demo.load(config) == len(demo.PROTOCOLS) == 3
    assert demo.load(config) == 0
    rows = _rows(config)
    assert len(rows) == 3
    assert {r.idempotency_key for r in rows} == {key for key, _ in demo.PROTOCOLS}
    # All three came in through the one intake-form token of the first load: submitted_by is
    # that token's id, and the submitter's name and role are the "submitted" event's actor.
    assert len({r.submitted_by for r in rows}) == 1
    factory = make_sessionmaker(make_engine(config["DATABASE_URL"]))
    with session_scope(factory) as session:
        token = session.get(ApiToken, rows[0].submitted_by)
        assert token is not None
        assert (token.role, token.name) == (demo.TOKEN_ROLE, demo.TOKEN_NAME)
        actors = set(
            session.scalars(
                select(AuditEvent.actor).where(
                    AuditEvent.action == "submitted",
                    AuditEvent.request_id.in_([r.id for r in rows]),
                )
            )
        )
    assert actors == {f"{demo.TOKEN_NAME} ({demo.TOKEN_ROLE})"}


def test_demo_covers_an_analytic_trial_a_simulation_and_a_survival_study(config):
    demo.load(config)
    by_cell = {(r.question["outcome"], r.question["layout"], r.method): r for r in _rows(config)}
    assert set(by_cell) == {
        ("continuous", "two_groups", "analytic"),
        ("ordinal", "two_groups", "simulation"),
        ("time_to_event", "two_groups", "analytic"),
    }
    sim = by_cell[("ordinal", "two_groups", "simulation")]
    # The skewed length-of-stay model is what makes the simulation worth running.
    assert sim.question["simulation"]["data"]["control"]["family"] == "lognormal"
    assert sim.seed == sim.question["simulation"]["seed"]


def test_demo_requests_are_queued_with_an_audit_trail(config):
    demo.load(config)
    rows = _rows(config)
    # Closed-form questions are answered at submission; the simulation waits for a worker.
    assert {(r.method, r.status) for r in rows} == {
        ("analytic", "computed"),
        ("simulation", "queued"),
    }
    assert all((r.published_at is not None) == (r.method == "simulation") for r in rows)
    factory = make_sessionmaker(make_engine(config["DATABASE_URL"]))
    with session_scope(factory) as session:
        for row in rows:
            count = session.scalar(
                select(func.count()).select_from(AuditEvent).where(AuditEvent.request_id == row.id)
            )
            assert count >= 1, row.protocol_id
    queued = list((Path(config["BROKER_TRANSPORT_OPTIONS"]["data_folder_in"])).glob("*.msg"))
    tasks = [json.loads(p.read_text())["headers"]["task"] for p in queued]
    # The simulation's task; the explorations of the answered requests are handed over at once.
    assert tasks.count("sizewise.run_request") == 1
    assert set(tasks) <= {"sizewise.run_request", "sizewise.run_exploration"}


def test_demo_set_in_the_invented_hospital():
    assert demo.OFFICE.startswith("Northbridge General Hospital")
    for _key, body in demo.PROTOCOLS:
        assert body["protocol"]["id"].startswith("NGH-CRO-")
        assert body["requester"]["email"].endswith(".example")
