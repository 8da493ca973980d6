"""Leases, attempts and the sweeper's view of stale jobs (service.store.jobs)."""

from __future__ import annotations

from datetime import timedelta

import pytest
from sqlalchemy import update

from service.engine import compute
from service.schemas.question import load_question
from service.store import jobs
from service.store import requests as store
from service.store.audit import verify_chain
from service.store.db import make_engine, make_sessionmaker, session_scope
from service.store.models import Request, Result
from service.store.types import utcnow
from tests.conftest import question_body

QUESTION = question_body()


@pytest.fixture
def factory(settings):
    engine = make_engine(settings["DATABASE_URL"])
    yield make_sessionmaker(engine)
    engine.dispose()


def _new_request(factory) -> str:
    question = load_question(QUESTION)
    with session_scope(factory) as session:
        row = store.create_request(
            session,
            protocol={"id": "NGH-2025-031", "title": "Hip fracture mobilisation"},
            requester={
                "name": "A. Okafor",
                "email": "a.okafor@northbridge.example",
                "department": None,
            },
            deadline=None,
            notes=None,
            question_raw=QUESTION,
            question=question,
            actor="intake",
            idempotency_key=None,
            body_sha256="0" * 64,
        )
        return row.id


def _expire_lease(factory, request_id: str) -> None:
    with session_scope(factory) as session:
        session.execute(
            update(Request)
            .where(Request.id == request_id)
            .values(lease_expires_at=utcnow() - timedelta(seconds=1))
        )


def test_claim_is_exclusive_until_the_lease_expires(factory):
    rid = _new_request(factory)
    with session_scope(factory) as s:
        assert jobs.claim(s, "request", rid, "w1", 60, 3) is True
    with session_scope(factory) as s:
        assert jobs.claim(s, "request", rid, "w2", 60, 3) is False
        assert jobs.renew(s, "request", rid, "w1", 0.25, 60) is True
        assert jobs.renew(s, "request", rid, "w2", 0.5, 60) is False
    _expire_lease(factory, rid)
    with session_scope(factory) as s:
        assert jobs.claim(s, "request", rid, "w2", 60, 3) is True
        assert jobs.renew(s, "request", rid, "w1", 0.5, 60) is False
        row = s.get(Request, rid)
        assert (row.status, row.lease_owner, row.attempts, row.progress) == (
            "running",
            "w2",
            2,
            0.25,
        )


def test_attempts_used_up_marks_failed(factory):
    rid = _new_request(factory)
    for owner in ("w1", "w2"):
        with session_scope(factory) as s:
            assert jobs.claim(s, "request", rid, owner, 60, 2)
        _expire_lease(factory, rid)
    with session_scope(factory) as s:
        assert jobs.claim(s, "request", rid, "w3", 60, 2) is False
        row = s.get(Request, rid)
        assert row.status == "failed"
        assert "2 attempts" in row.error


def test_stale_jobs_and_mark_published(factory):
    rid = _new_request(factory)
    with session_scope(factory) as s:
        assert jobs.stale_jobs(s, utcnow()) == [("request", rid, None)]
        assert jobs.mark_published(s, "request", rid)
    with session_scope(factory) as s:
        assert s.get(Request, rid).status == "queued"
        assert jobs.stale_jobs(s, utcnow()) == []
        jobs.claim(s, "request", rid, "w1", 60, 3)
    _expire_lease(factory, rid)
    with session_scope(factory) as s:
        assert jobs.stale_jobs(s, utcnow()) == [("request", rid, None)]


def test_first_result_wins_and_a_different_one_is_kept_as_conflict(factory):
    rid = _new_request(factory)
    with session_scope(factory) as s:
        question = s.get(Request, rid).question
        jobs.claim(s, "request", rid, "w1", 60, 3)
    record = compute(question)
    with session_scope(factory) as s:
        assert jobs.finish_request(s, rid, "w1", record, started_at=utcnow())
    other = dict(record, reproducibility={**record["reproducibility"], "record_sha256": "f" * 64})
    with session_scope(factory) as s:
        assert (
            jobs.finish_request(s, rid, "w1", other) is None
        )  # the lease ended with the first result
    with session_scope(factory) as s:
        # a redelivered job that owns a fresh lease and computed something else
        s.execute(
            update(Request).where(Request.id == rid).values(status="running", lease_owner="w2")
        )
        assert jobs.finish_request(s, rid, "w2", record) == "identical"
        s.execute(
            update(Request).where(Request.id == rid).values(status="running", lease_owner="w2")
        )
        assert jobs.finish_request(s, rid, "w2", other) == "conflict"
    with session_scope(factory) as s:
        result = s.query(Result).filter_by(request_id=rid).one()
        assert result.record == record
        assert [c["record_sha256"] for c in result.conflict] == ["f" * 64]
        assert s.get(Request, rid).status == "computed"
        assert verify_chain(s) == []


def test_cancel_and_fail_need_our_lease(factory):
    rid = _new_request(factory)
    with session_scope(factory) as s:
        jobs.claim(s, "request", rid, "w1", 60, 3)
        assert jobs.fail(s, "request", rid, "w2", "boom") is False
        assert jobs.cancel(s, "request", rid, "w1") is True
        assert s.get(Request, rid).status == "cancelled"
    with pytest.raises(ValueError, match="job must be one of request, rerun, exploration"):
        with session_scope(factory) as s:
            jobs.claim(s, "report", rid, "w1", 60, 3)


def test_every_job_row_has_the_lease_columns_of_one_mixin():
    from service.store.models import CHUNK_JOB_KINDS, Leased

    lease = {"published_at", "lease_owner", "lease_expires_at", "attempts"}
    for job in jobs.JOB_KINDS.values():
        assert issubclass(job.model, Leased), job.name
        assert lease <= set(job.model.__table__.columns.keys()), job.name
        # Its work units are stored under a name the chunk_results check constraint allows.
        assert job.unit_key in CHUNK_JOB_KINDS, job.name
    assert list(jobs.JOB_KINDS) == ["request", "rerun", "exploration"]
