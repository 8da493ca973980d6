"""Several real Celery workers share one filesystem:// queue and one SQLite file without losing
or duplicating a job: every request is claimed once, computed once, and the queue ends empty."""

from __future__ import annotations

import math
import os
import re
import uuid
from pathlib import Path

import pytest
from sqlalchemy import select

from service import create_app
from service.api.auth import local_client
from service.config import load_config
from service.run_local import WORKER_COMMAND, local_argv
from service.store.db import make_engine, make_sessionmaker, session_scope
from service.store.migrate import upgrade
from service.store.models import Request, Result

from ._procs import start, stop_all, tail, wait_for

pytestmark = pytest.mark.slow

WORKERS = 3
JOBS = 30
TERMINAL = {"computed", "failed", "cancelled"}


@pytest.fixture(scope="module")
def embedded(tmp_path_factory: pytest.TempPathFactory):
    """A migrated SQLite file, a filesystem broker and WORKERS real worker processes on them."""
    tmp_path = tmp_path_factory.mktemp("embedded")
    config = load_config(
        {
            "DATABASE_URL": f"sqlite:///{tmp_path / 'queue.db'}",
            "BROKER_URL": f"filesystem://{tmp_path / 'broker'}",
        }
    )
    upgrade(config["DATABASE_URL"])
    env = dict(
        os.environ,
        SIZEWISE_DATABASE_URL=config["DATABASE_URL"],
        SIZEWISE_BROKER_URL=config["BROKER_URL"],
        PYTHONUNBUFFERED="1",
    )
    logs = [tmp_path / f"worker{i}.log" for i in range(WORKERS)]
    procs = []
    try:
        for i, log in enumerate(logs):
            # The launcher's own command, one pool process each, distinct node names.
            argv = local_argv(WORKER_COMMAND) + [
                "--concurrency", "1", "-n", f"ops{i}-{uuid.uuid4().hex[:6]}@%h",
            ]  # fmt: skip
            procs.append(start(argv, env, log))
        for proc, log in zip(procs, logs, strict=True):
            wait_for(
                lambda p=proc, lg=log: _ready(p, lg), 90, f"worker ready\n{tail(log)}", step=0.5
            )
        yield config, logs
    finally:
        stop_all(procs)


def _ready(proc, log: Path) -> bool:
    if proc.poll() is not None:
        raise AssertionError(f"worker exited early:\n{tail(log)}")
    return log.exists() and " ready." in log.read_text(errors="replace")


def _question(i: int) -> dict:
    # Thirty distinct analytic questions, so a mixed-up result would show.
    return {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "target_power": 0.8,
        "effect": {"difference": round(3.0 + 0.25 * i, 2)},
        "assumptions": {"sd": 10.0},
    }


def test_workers_share_the_filesystem_queue_without_loss_or_duplicates(embedded):
    config, logs = embedded
    # Analytic questions would be answered by the API itself; this test is about the queue.
    app = create_app(dict(config, ANSWER_AT_SUBMISSION=False))
    client = local_client(app, role="intake", name="queue check")
    ids = []
    for i in range(JOBS):
        body = {
            "protocol": {"id": f"NGH-OPS-{i:03d}", "title": f"Queue check protocol {i}"},
            "requester": {
                "name": "Queue Check",
                "email": "queue.check@northbridge-general.example",
                "department": None,
            },
            "question": _question(i),
        }
        resp = client.post("/v1/requests", json=body)
        assert resp.status_code == 202, resp.get_json()
        ids.append(resp.get_json()["id"])

    factory = make_sessionmaker(make_engine(config["DATABASE_URL"]))

    def all_done():
        with session_scope(factory) as session:
            rows = session.scalars(select(Request).where(Request.id.in_(ids))).all()
            return len(rows) == JOBS and all(r.status in TERMINAL for r in rows)

    wait_for(all_done, 180, "all requests computed\n" + "\n".join(tail(lg, 15) for lg in logs))

    with session_scope(factory) as session:
        rows = {r.id: r for r in session.scalars(select(Request).where(Request.id.in_(ids)))}
        results = session.scalars(select(Result).where(Result.request_id.in_(ids))).all()
        assert {r.status for r in rows.values()} == {"computed"}
        # Exactly one claim per request: no job ran twice, none was lost.
        assert [r.attempts for r in rows.values()] == [1] * JOBS
        assert sorted(res.request_id for res in results) == sorted(ids)
        for res in results:
            assert res.conflict is None
            # Each record answers its own request's question.
            assert res.record["question"] == rows[res.request_id].question

    claims: dict[str, list[int]] = {}
    for n, log in enumerate(logs):
        for rid in re.findall(r"request ([0-9a-f]{32}): claimed by", log.read_text()):
            claims.setdefault(rid, []).append(n)
    assert sorted(claims) == sorted(ids)
    assert all(len(v) == 1 for v in claims.values()), claims
    # Sharing, not one worker doing everything while the others idle.
    assert len({v[0] for v in claims.values()}) >= 2

    left = list(Path(config["BROKER_TRANSPORT_OPTIONS"]["data_folder_in"]).glob("*.msg"))
    assert left == []


def test_results_match_the_noncentral_t_from_statsmodels(embedded):
    # The records the queue delivered are the right numbers, not only one per request.
    # Source: recomputed with statsmodels TTestIndPower (noncentral t), Cohen 1988 eq. 2.3.1.
    from statsmodels.stats.power import TTestIndPower

    config, _logs = embedded
    # Analytic questions would be answered by the API itself; this test is about the queue.
    app = create_app(dict(config, ANSWER_AT_SUBMISSION=False))
    client = local_client(app, role="intake", name="queue check")
    wanted = {}
    for i in (0, 8, 16):
        q = _question(i)
        body = {
            "protocol": {"id": f"NGH-OPS-T{i}", "title": "Queue numbers check"},
            "requester": {"name": "Queue Check", "email": "q@northbridge-general.example",
                          "department": None},
            "question": q,
        }  # fmt: skip
        resp = client.post("/v1/requests", json=body)
        assert resp.status_code == 202, resp.get_json()
        d = q["effect"]["difference"] / q["assumptions"]["sd"]
        wanted[resp.get_json()["id"]] = TTestIndPower().solve_power(
            effect_size=d, power=0.8, alpha=0.05, ratio=1.0
        )

    def records():
        got = {i: client.get(f"/v1/requests/{i}").get_json() for i in wanted}
        return got if all(g["status"] in TERMINAL for g in got.values()) else None

    got = wait_for(records, 120, "three requests computed")
    for rid, raw in wanted.items():
        assert got[rid]["status"] == "computed", got[rid].get("error")
        size = got[rid]["result"]["sample_size"]
        assert size["steps"][0]["per_group_raw"][0] == pytest.approx(raw, abs=0.01)
        assert size["per_group"] == [math.ceil(raw)] * 2
