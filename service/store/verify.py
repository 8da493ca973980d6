"""Audit verification: the hash chain, its head against the auditor's anchors, and every stored
row against the event that recorded it.

The chain alone proves that no event was edited or removed from its middle. What it recorded is
checked here: each event that stores something holds its hash (the 'submitted' event the question
and submission, 'computed' the result record, 'rerun_done' and 'exploration_done' what they stored,
'token_created' a token's role and secret hash) and each event that sets a request's status
names it. Verification recomputes those hashes from the stored rows (never from a stored hash
column) and compares. Deleting the newest events leaves a shorter, consistent chain; only an
anchor kept outside the database (the head event's id and hash, see ``Anchor``) reveals it.

Rows written before the events carried these hashes cannot be checked; they are listed as
"not covered", never passed silently.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.engine.records import record_hash
from service.engine.records import verify as record_self_consistent

from .audit import content_hash, event_hash
from .models import ApiToken, AuditEvent, Exploration, Request, Rerun, Result
from .requests import question_hash, submission_hash
from .types import utcnow


@dataclass
class Anchor:
    """The chain's head as an auditor recorded it: event id and hash (and when it was seen)."""

    event: int
    sha256: str
    events: int | None = None
    verified_at: str | None = None

    def as_json(self) -> str:
        """One line of the anchor file."""
        return json.dumps(
            {
                "event": self.event,
                "sha256": self.sha256,
                "events": self.events,
                "verified_at": self.verified_at,
            },
            sort_keys=True,
        )


class AnchorFileError(ValueError):
    """The anchor file cannot be read; the message names the file and the line."""


def read_anchors(path: Path) -> list[Anchor]:
    """Return every anchor of an anchor file (JSON lines, oldest first); [] when it is absent."""
    if not path.exists():
        return []
    anchors: list[Anchor] = []
    try:
        lines = path.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        raise AnchorFileError(f"cannot read the anchor file {path}: {exc}") from None
    for number, line in enumerate(lines, start=1):
        if not line.strip():
            continue
        try:
            data = json.loads(line)
            anchor = Anchor(
                event=int(data["event"]),
                sha256=str(data["sha256"]),
                events=data.get("events"),
                verified_at=data.get("verified_at"),
            )
        except (ValueError, KeyError, TypeError):
            raise AnchorFileError(
                f"anchor file {path}, line {number}: not an anchor "
                '(expected {"event": <id>, "sha256": <hash>, ...})'
            ) from None
        anchors.append(anchor)
    return anchors


def append_anchor(path: Path, anchor: Anchor) -> None:
    """Append ``anchor`` to the anchor file, creating it readable by its owner only."""
    import os

    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
    with os.fdopen(fd, "a", encoding="utf-8") as handle:
        handle.write(anchor.as_json() + "\n")


@dataclass
class Report:
    """What verification found: findings (tampering), rows not covered, and what was checked."""

    events: int = 0
    head: Anchor | None = None
    findings: list[str] = field(default_factory=list)
    not_covered: dict[str, list[str]] = field(default_factory=dict)
    checked: dict[str, int] = field(default_factory=dict)

    @property
    def intact(self) -> bool:
        """True when nothing was found (rows not covered are reported, not failed)."""
        return not self.findings

    def uncovered(self, what: str, ident: str) -> None:
        """Note a row written before its event carried the hash to check it with."""
        self.not_covered.setdefault(what, []).append(ident)

    def summary(self) -> str:
        """The closing line: intact or not, and how much was checked."""
        parts = ", ".join(f"{n} {what}" for what, n in self.checked.items())
        if self.intact:
            return f"audit trail intact: {self.events} events, {parts}"
        return f"audit trail NOT intact: {len(self.findings)} finding(s); checked {parts}"


# Keys of the per-object event maps built from the chain.
@dataclass
class _Seen:
    submitted: dict[str, AuditEvent] = field(default_factory=dict)
    status: dict[str, AuditEvent] = field(default_factory=dict)
    computed: dict[str, AuditEvent] = field(default_factory=dict)
    reruns_requested: dict[str, AuditEvent] = field(default_factory=dict)
    reruns_done: dict[str, AuditEvent] = field(default_factory=dict)
    explorations_requested: dict[str, AuditEvent] = field(default_factory=dict)
    explorations_done: dict[str, AuditEvent] = field(default_factory=dict)
    tokens_created: dict[str, AuditEvent] = field(default_factory=dict)
    tokens_revoked: dict[str, AuditEvent] = field(default_factory=dict)


def _detail(event: AuditEvent) -> dict[str, Any]:
    return event.detail if isinstance(event.detail, dict) else {}


def _collect(event: AuditEvent, seen: _Seen) -> None:
    detail = _detail(event)
    action, request_id = event.action, event.request_id
    if action == "submitted" and request_id:
        seen.submitted.setdefault(request_id, event)
    if request_id and "status" in detail and detail.get("job", "request") == "request":
        seen.status[request_id] = event  # the newest one wins
    if action == "computed" and request_id and detail.get("result", "stored") == "stored":
        seen.computed.setdefault(request_id, event)
    if action == "rerun_requested" and detail.get("rerun_id"):
        seen.reruns_requested[str(detail["rerun_id"])] = event
    if action == "rerun_done" and detail.get("job_id"):
        seen.reruns_done[str(detail["job_id"])] = event
    if action == "exploration_requested" and detail.get("exploration_id"):
        seen.explorations_requested[str(detail["exploration_id"])] = event
    if action == "exploration_done" and detail.get("job_id"):
        seen.explorations_done[str(detail["job_id"])] = event
    if action == "token_created" and detail.get("token_id"):
        seen.tokens_created[str(detail["token_id"])] = event
    if action == "token_revoked" and detail.get("token_id"):
        seen.tokens_revoked.setdefault(str(detail["token_id"]), event)


def _check_chain(events: list[AuditEvent], report: Report) -> None:
    prev: str | None = None
    broken: list[AuditEvent] = []
    for event in events:
        if event.prev_sha256 != prev or event.sha256 != event_hash(event):
            broken.append(event)
        prev = event.sha256
    if broken:
        first = broken[0]
        report.findings.append(
            f"audit trail broken at event {first.id} ({first.action}, request "
            f"{first.request_id}): its hash or its link to the previous event does not match; "
            f"{len(broken)} of {len(events)} events fail"
        )


def _check_anchors(events: list[AuditEvent], anchors: list[Anchor], report: Report) -> None:
    by_id = {e.id: e for e in events}
    head = events[-1].id if events else None
    for anchor in anchors:
        seen = f" (recorded {anchor.verified_at})" if anchor.verified_at else ""
        if head is None or head < anchor.event:
            ends = f"ends at event {head}" if head is not None else "is empty"
            report.findings.append(
                f"chain {ends} but the anchor{seen} says {anchor.event}: "
                "the newest events were deleted"
            )
        elif anchor.event not in by_id:
            report.findings.append(
                f"event {anchor.event}, the head of the chain in the anchor{seen}, is gone"
            )
        elif by_id[anchor.event].sha256 != anchor.sha256:
            report.findings.append(
                f"event {anchor.event} no longer has the hash the anchor{seen} recorded: "
                "the chain was rewritten from there on"
            )


def _check_requests(session: Session, seen: _Seen, report: Report) -> None:
    rows = 0
    present: set[str] = set()
    for row in session.scalars(select(Request).order_by(Request.submitted_at, Request.id)):
        rows += 1
        present.add(row.id)
        event = seen.submitted.get(row.id)
        if event is None:
            report.findings.append(
                f"request {row.id} has no 'submitted' event: it was not created by the service"
            )
        else:
            detail = _detail(event)
            if "question_sha256" not in detail:
                report.uncovered("questions", row.id)
            elif question_hash(row) != detail["question_sha256"]:
                report.findings.append(
                    f"question of request {row.id}: the stored question differs from what its "
                    f"'submitted' event {event.id} recorded (a rerun would recompute the changed "
                    "question)"
                )
            if (
                "submission_sha256" in detail
                and submission_hash(row) != detail["submission_sha256"]
            ):
                report.findings.append(
                    f"request {row.id}: its protocol, requester, deadline, notes, raw question or "
                    f"submitter differ from what its 'submitted' event {event.id} recorded"
                )
        status_event = seen.status.get(row.id)
        if status_event is None:
            report.uncovered("statuses", row.id)
        elif _detail(status_event)["status"] != row.status:
            report.findings.append(
                f"status of request {row.id} is '{row.status}' but its last status event "
                f"{status_event.id} ({status_event.action}) says "
                f"'{_detail(status_event)['status']}'"
            )
    for request_id, event in seen.submitted.items():
        if request_id not in present:
            report.findings.append(
                f"request {request_id} is gone: its 'submitted' event {event.id} names it"
            )
    report.checked["requests"] = rows


def _check_results(session: Session, seen: _Seen, report: Report) -> None:
    rows = 0
    present: set[str] = set()
    for row in session.scalars(select(Result).order_by(Result.id)):
        rows += 1
        present.add(row.request_id)
        record = row.record if isinstance(row.record, dict) else {}
        try:
            actual = record_hash(record)
            self_consistent = record_self_consistent(record)
        except (TypeError, ValueError):  # not even canonical JSON any more
            actual, self_consistent = None, False
        event = seen.computed.get(row.request_id)
        if event is None:
            report.findings.append(
                f"result of request {row.request_id} (result {row.id}) has no 'computed' event: "
                "it was not stored by a worker"
            )
            continue
        recorded = _detail(event).get("record_sha256")
        if actual != recorded:
            report.findings.append(
                f"result of request {row.request_id}: record hash differs from the 'computed' "
                f"event {event.id} (the stored record hashes to {actual}, the event recorded "
                f"{recorded}): the record was altered"
            )
        elif not self_consistent or row.record_sha256 != recorded:
            report.findings.append(
                f"result of request {row.request_id}: the record matches its 'computed' event "
                f"{event.id} but its stored hash fields were altered"
            )
    for request_id, event in seen.computed.items():
        if request_id not in present:
            report.findings.append(
                f"result of request {request_id} is missing: the 'computed' event {event.id} "
                f"recorded one with hash {_detail(event).get('record_sha256')}"
            )
    report.checked["results"] = rows


def _check_jobs(
    session: Session,
    report: Report,
    *,
    model: type[Rerun] | type[Exploration],
    label: str,
    plural: str,
    requested: dict[str, AuditEvent],
    done: dict[str, AuditEvent],
    hash_key: str,
    digest,
) -> None:
    rows = 0
    present: set[str] = set()
    for row in session.scalars(select(model).order_by(model.id)):
        rows += 1
        present.add(row.id)
        if row.id not in requested:
            report.findings.append(
                f"{label} {row.id} of request {row.request_id} has no event that requested it"
            )
        event = done.get(row.id)
        if row.status != "done":
            if event is not None:
                report.findings.append(
                    f"{label} {row.id} is '{row.status}' but event {event.id} recorded it done"
                )
            continue
        if event is None:
            report.findings.append(f"{label} {row.id} is done but no event recorded its result")
        elif hash_key not in _detail(event):
            report.uncovered(f"{label} results", row.id)
        else:
            try:
                actual = digest(row)
            except (TypeError, ValueError):
                actual = None
            if actual != _detail(event)[hash_key]:
                report.findings.append(
                    f"{label} {row.id} of request {row.request_id}: its stored result differs "
                    f"from what event {event.id} recorded"
                )
    for job_id, event in requested.items():
        if job_id not in present:
            report.findings.append(f"{label} {job_id} is gone: event {event.id} requested it")
    report.checked[plural] = rows


def _check_tokens(session: Session, seen: _Seen, report: Report) -> None:
    rows = 0
    present: set[str] = set()
    for row in session.scalars(select(ApiToken).order_by(ApiToken.created_at, ApiToken.id)):
        rows += 1
        present.add(row.id)
        created = seen.tokens_created.get(row.id)
        revoked = seen.tokens_revoked.get(row.id)
        if created is None:
            if row.revoked_at is None:
                report.findings.append(
                    f"token {row.id} ({row.role}, {row.name!r}) is active but no 'token_created' "
                    "event issued it: revoke it and issue a new one"
                )
            else:
                report.uncovered("revoked tokens", row.id)
            continue
        detail = _detail(created)
        if detail.get("role") != row.role:
            report.findings.append(
                f"token {row.id} has role '{row.role}' but its 'token_created' event "
                f"{created.id} issued it as '{detail.get('role')}'"
            )
        if detail.get("secret_sha256") != row.secret_sha256:
            report.findings.append(
                f"token {row.id}: its secret hash differs from the one its 'token_created' "
                f"event {created.id} recorded (another secret would now open it)"
            )
        if revoked is not None and row.revoked_at is None:
            report.findings.append(
                f"token {row.id} is active again although event {revoked.id} revoked it"
            )
        if revoked is None and row.revoked_at is not None:
            report.findings.append(f"token {row.id} is marked revoked but no event revoked it")
    for token_id, event in seen.tokens_created.items():
        if token_id not in present:
            report.findings.append(f"token {token_id} is gone: event {event.id} issued it")
    report.checked["tokens"] = rows


def verify_store(session: Session, anchors: list[Anchor] | None = None) -> Report:
    """Check the chain, the anchors and every stored row against its events."""
    report = Report()
    events = list(session.scalars(select(AuditEvent).order_by(AuditEvent.id)))
    report.events = len(events)
    _check_chain(events, report)
    _check_anchors(events, anchors or [], report)
    seen = _Seen()
    for event in events:
        _collect(event, seen)
    _check_requests(session, seen, report)
    _check_results(session, seen, report)
    _check_jobs(
        session,
        report,
        model=Rerun,
        label="rerun",
        plural="reruns",
        requested=seen.reruns_requested,
        done=seen.reruns_done,
        hash_key="record_sha256",
        digest=lambda row: record_hash(row.record),
    )
    _check_jobs(
        session,
        report,
        model=Exploration,
        label="exploration",
        plural="explorations",
        requested=seen.explorations_requested,
        done=seen.explorations_done,
        hash_key="result_sha256",
        digest=lambda row: content_hash(row.result),
    )
    _check_tokens(session, seen, report)
    if events:
        report.head = Anchor(
            event=events[-1].id,
            sha256=events[-1].sha256,
            events=len(events),
            verified_at=_now_iso(),
        )
    return report


def _now_iso() -> str:
    now: datetime = utcnow()
    return now.isoformat(timespec="seconds")
