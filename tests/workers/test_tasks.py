"""The task bodies, called directly against SQLite: claims, idempotent results, cancel, reruns."""

from __future__ import annotations

import base64
import json
import random
from datetime import timedelta
from pathlib import Path

import pytest
from sqlalchemy import event, func, select, update
from statsmodels.stats.power import TTestIndPower
from workers_testkit import insert_request, two_groups_question

from service.engine import canonical_json, compute
from service.engine import run_chunk as engine_run_chunk
from service.engine.records import differences
from service.store import jobs
from service.store.db import session_scope
from service.store.models import AuditEvent, ChunkResult, Request, Rerun, Result
from service.store.types import utcnow
from workers import tasks

# Power of the two-sided t test at d = 0.5, n = 30 per group, alpha .05: 0.4779
# (formula: noncentral t; recomputed with statsmodels TTestIndPower).
POWER_D05_N30 = TTestIndPower().power(effect_size=0.5, nobs1=30, alpha=0.05, ratio=1.0)


def _request(factory, request_id: str) -> Request:
    with session_scope(factory) as session:
        return session.get(Request, request_id)


def _results(factory, request_id: str) -> list[Result]:
    with session_scope(factory) as session:
        return list(session.scalars(select(Result).where(Result.request_id == request_id)))


def _actions(factory, request_id: str) -> list[tuple[str, str]]:
    with session_scope(factory) as session:
        rows = session.execute(
            select(AuditEvent.actor, AuditEvent.action)
            .where(AuditEvent.request_id == request_id)
            .order_by(AuditEvent.id)
        )
        return [(a, b) for a, b in rows]


def shuffled(seed: int):
    rng = random.Random(seed)

    def order(indices: list[int]) -> list[int]:
        rng.shuffle(indices)
        return indices

    return order


def test_an_analytic_request_is_computed_once_and_a_second_delivery_is_quiet(
    sqlite_config, factory
):
    request_id = insert_request(factory, two_groups_question())
    assert tasks.run_request_job(request_id, sqlite_config) == "computed"
    row = _request(factory, request_id)
    assert row.status == "computed" and row.progress == 1.0 and row.lease_owner is None
    [result] = _results(factory, request_id)
    assert result.record["power"]["estimate"] == pytest.approx(POWER_D05_N30, abs=1e-4)
    assert result.record_sha256 == result.record["reproducibility"]["record_sha256"]
    # The same message delivered again: the claim fails and nothing changes.
    assert tasks.run_request_job(request_id, sqlite_config) == "skipped"
    assert len(_results(factory, request_id)) == 1
    actions = [action for actor, action in _actions(factory, request_id)]
    assert "running" in actions and actions[-1] == "computed"
    assert all(actor.startswith("worker:") for actor, _ in _actions(factory, request_id))


def test_a_request_held_by_a_live_lease_is_left_alone(sqlite_config, factory):
    request_id = insert_request(factory, two_groups_question())
    with session_scope(factory) as session:
        session.execute(
            update(Request)
            .where(Request.id == request_id)
            .values(
                status="running",
                lease_owner="worker:other:1:x",
                lease_expires_at=utcnow() + timedelta(minutes=5),
                attempts=1,
            )
        )
    assert tasks.run_request_job(request_id, sqlite_config) == "skipped"
    row = _request(factory, request_id)
    assert row.lease_owner == "worker:other:1:x" and row.attempts == 1
    assert _results(factory, request_id) == []


def test_an_identical_second_result_is_a_no_op_and_a_different_one_a_logged_conflict(
    sqlite_config, factory, caplog
):
    question = two_groups_question()
    request_id = insert_request(factory, question)
    assert tasks.run_request_job(request_id, sqlite_config) == "computed"
    [first] = _results(factory, request_id)

    def second_write(record: dict) -> str | None:
        # A redelivered job that recomputed after its first result was stored.
        with session_scope(factory) as session:
            session.execute(
                update(Request)
                .where(Request.id == request_id)
                .values(status="running", lease_owner="worker:again:2:y")
            )
            return jobs.finish_request(
                session,
                request_id,
                "worker:again:2:y",
                record,
                started_at=utcnow(),
                chunk_size=None,
            )

    assert second_write(compute(question)) == "identical"
    [same] = _results(factory, request_id)
    assert same.conflict is None and same.finished_at == first.finished_at

    other = compute(dict(question, alpha=0.01))
    with caplog.at_level("ERROR", logger="service.store.jobs"):
        assert second_write(other) == "conflict"
    [kept] = _results(factory, request_id)
    assert canonical_json(kept.record) == canonical_json(first.record)  # never overwritten
    assert kept.conflict[0]["record_sha256"] == other["reproducibility"]["record_sha256"]
    assert "question.alpha" in kept.conflict[0]["differences"]
    assert "different result" in caplog.text
    assert _request(factory, request_id).status == "computed"


def test_a_question_the_engine_refuses_fails_with_its_message(sqlite_config, factory):
    request_id = insert_request(factory, dict(two_groups_question(), layout="three_groups"))
    assert tasks.run_request_job(request_id, sqlite_config) == "failed"
    row = _request(factory, request_id)
    assert row.status == "failed"
    assert "layout" in row.error and "three_groups" in row.error
    assert _actions(factory, request_id)[-1][1] == "failed"


def test_a_simulation_over_budget_fails_naming_the_field(sqlite_config, factory):
    request_id = insert_request(factory, two_groups_question(method="simulation"))
    config = dict(sqlite_config, SIMULATION_BUDGET=1000)
    assert tasks.run_request_job(request_id, config) == "failed"
    assert "simulation.replicates" in _request(factory, request_id).error


def test_cancel_between_chunks_stops_the_simulation(sqlite_config, factory):
    question = two_groups_question(method="simulation", replicates=5000, chunk_size=500)
    request_id = insert_request(factory, question)
    calls = []

    def runner(task: dict) -> dict:
        calls.append(1)
        if len(calls) == 2:  # the requester presses cancel while chunk 2 runs
            with session_scope(factory) as session:
                session.execute(
                    update(Request).where(Request.id == request_id).values(cancel_requested=True)
                )
        return engine_run_chunk(task)

    # Read the flag before every chunk (by default a running job reads it at most every 0.2 s).
    config = dict(sqlite_config, CANCEL_CHECK_SECONDS=0.0)
    assert tasks.run_request_job(request_id, config, runner=runner) == "cancelled"
    assert 2 <= len(calls) < 10  # stopped well before the 10 chunks of the whole run
    row = _request(factory, request_id)
    assert row.status == "cancelled" and row.lease_owner is None
    assert _results(factory, request_id) == []
    assert _actions(factory, request_id)[-1][1] == "cancelled"


def test_the_cancel_flag_is_read_a_few_times_per_job_not_once_per_chunk(sqlite_config, factory):
    # 40 chunks a stream (with the effect, and the null check without it); a read per chunk
    # cost more than the chunks themselves.
    question = two_groups_question(method="simulation", replicates=20_000, chunk_size=500)
    request_id = insert_request(factory, question)
    reads = []
    engine = factory.kw["bind"]

    def count(_conn, _cursor, statement, *_args) -> None:
        if statement.lstrip().startswith("SELECT requests.cancel_requested "):
            reads.append(statement)  # jobs.cancel_requested's read

    calls = []

    def runner(task: dict) -> dict:
        calls.append(1)
        return engine_run_chunk(task)

    event.listen(engine, "before_cursor_execute", count)
    try:
        # An interval far longer than the job: only the first check reads the flag.
        config = dict(sqlite_config, CANCEL_CHECK_SECONDS=600.0)
        assert tasks.run_request_job(request_id, config, runner=runner) == "computed"
    finally:
        event.remove(engine, "before_cursor_execute", count)
    assert len(calls) >= 40 and len(reads) == 1


def test_shuffled_chunk_order_gives_the_record_of_the_in_process_executor(sqlite_config, factory):
    question = two_groups_question(method="simulation", replicates=4000, chunk_size=500)
    expected = compute(question)  # the engine's default executor: in process, in order
    request_id = insert_request(factory, question)
    assert tasks.run_request_job(request_id, sqlite_config, order=shuffled(11)) == "computed"
    [result] = _results(factory, request_id)
    assert canonical_json(result.record) == canonical_json(expected)
    # The simulated power agrees with the noncentral t within 4 Monte Carlo standard errors.
    power = result.record["power"]
    assert abs(power["estimate"] - POWER_D05_N30) < 4 * power["mcse"]
    # The job has ended: no work unit is left behind in the table.
    with session_scope(factory) as session:
        left = session.scalar(select(func.count()).where(ChunkResult.job_id == request_id))
    assert left == 0


def test_a_shared_job_gives_the_in_process_record_and_leaves_no_unit(sqlite_config, factory):
    question = two_groups_question(method="simulation", replicates=4000, chunk_size=250)
    expected = compute(question)
    request_id = insert_request(factory, question)
    helped: list[str] = []
    runs = []

    def runner(task: dict) -> dict:
        # Three chunks measure the speed, the fourth is the first unit the orchestrator takes:
        # a helper (same process, same code) joins in.
        runs.append(1)
        if len(runs) == 4 and not helped:
            helped.append(tasks.run_helper_job("request", request_id, sqlite_config))
        return engine_run_chunk(task)

    # Split every batch once measured, one chunk per unit; helpers go to the real (folder) broker.
    config = dict(sqlite_config, FANOUT_SPLIT_SECONDS=0.0, FANOUT_UNIT_SECONDS=0.0)
    assert tasks.run_request_job(request_id, config, fan_out=True, runner=runner) == "computed"
    [result] = _results(factory, request_id)
    assert canonical_json(result.record) == canonical_json(expected)
    assert helped and helped[0].startswith("helped:")
    # FANOUT_HELPERS (1) message per split batch, on the helper queue; delivered after the job
    # ended, each finds nothing to do.
    sent = [
        json.loads(p.read_text())
        for p in (Path(config["BROKER_TRANSPORT_OPTIONS"]["data_folder_in"])).iterdir()
    ]
    assert sent and all(m["headers"]["task"] == "sizewise.run_helper" for m in sent)
    for message in sent:
        kind, job_id = json.loads(base64.b64decode(message["body"]))[0]
        assert tasks.run_helper_job(kind, job_id, config) == "skipped"
    with session_scope(factory) as session:
        left = session.scalar(select(func.count()).where(ChunkResult.job_id == request_id))
    assert left == 0


def test_a_lost_lease_stops_the_job_without_writing(sqlite_config, factory):
    question = two_groups_question(method="simulation", replicates=4000, chunk_size=500)
    request_id = insert_request(factory, question)
    calls = []

    def runner(task: dict) -> dict:
        calls.append(1)
        if len(calls) == 2:  # the sweeper judged us dead and another worker claimed the job
            with session_scope(factory) as session:
                session.execute(
                    update(Request)
                    .where(Request.id == request_id)
                    .values(lease_owner="worker:thief:3:z")
                )
        return engine_run_chunk(task)

    config = dict(sqlite_config, LEASE_SECONDS=0.01)  # renew on every chunk
    assert tasks.run_request_job(request_id, config, runner=runner) == "lost"
    row = _request(factory, request_id)
    assert row.status == "running" and row.lease_owner == "worker:thief:3:z"
    assert _results(factory, request_id) == []


def test_a_helper_message_for_a_finished_job_exits_quietly(sqlite_config, factory):
    request_id = insert_request(factory, two_groups_question())
    assert tasks.run_helper_job("request", request_id, sqlite_config) == "skipped"
    with pytest.raises(ValueError, match="job must be one of request, rerun, exploration"):
        tasks.run_helper_job("report", request_id, sqlite_config)


def _rerun(factory, request_id: str, record: dict) -> str:
    rerun_id = "r" + request_id[1:]
    with session_scope(factory) as session:
        session.add(
            Rerun(
                id=rerun_id,
                request_id=request_id,
                status="queued",
                requested_by="research-office",
                env_original=record["reproducibility"]["versions"],
            )
        )
    return rerun_id


def test_a_rerun_of_a_simulation_reproduces_the_record_exactly(sqlite_config, factory):
    question = two_groups_question(method="simulation", replicates=2000, chunk_size=500)
    request_id = insert_request(factory, question)
    assert tasks.run_request_job(request_id, sqlite_config) == "computed"
    [result] = _results(factory, request_id)
    rerun_id = _rerun(factory, request_id, result.record)
    assert tasks.run_rerun_job(rerun_id, sqlite_config, order=shuffled(5)) == "done"
    assert tasks.run_rerun_job(rerun_id, sqlite_config) == "skipped"
    with session_scope(factory) as session:
        rerun = session.get(Rerun, rerun_id)
        assert rerun.status == "done" and rerun.identical is True and rerun.differences == []
        assert rerun.record_sha256 == result.record_sha256
        assert rerun.env_rerun == result.record["reproducibility"]["versions"]


def test_a_rerun_reports_the_dotted_paths_that_differ(sqlite_config, factory):
    question = two_groups_question()
    request_id = insert_request(factory, question)
    assert tasks.run_request_job(request_id, sqlite_config) == "computed"
    [result] = _results(factory, request_id)
    # Pretend the original was computed elsewhere with a different scipy.
    record = result.record
    record["reproducibility"]["versions"]["scipy"] = "0.0-elsewhere"
    with session_scope(factory) as session:
        session.execute(update(Result).where(Result.id == result.id).values(record=record))
    rerun_id = _rerun(factory, request_id, record)
    assert tasks.run_rerun_job(rerun_id, sqlite_config) == "done"
    with session_scope(factory) as session:
        rerun = session.get(Rerun, rerun_id)
        assert rerun.identical is False
        assert rerun.differences == ["reproducibility.versions.scipy"]
        assert rerun.env_original["scipy"] == "0.0-elsewhere"


def test_rerun_differences_name_nested_fields_and_list_items():
    # The comparison a rerun stores (service.engine.records.differences, used by run_rerun_job).
    a = {"power": {"estimate": 0.5, "ci95": [0.4, 0.6]}, "x": 1}
    b = {"power": {"estimate": 0.5, "ci95": [0.4, 0.7]}, "y": 1}
    assert differences(a, b) == ["power.ci95.1", "x", "y"]
    assert differences([1, 2], [1, 2, 3]) == ["$"]
