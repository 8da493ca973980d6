"""Check an audit bundle with no server and no database: every hash, the chain, a recomputation.

What is checked, each by recomputing from the bundle's own content (never trusting a stored hash):
- the record's hash (``reproducibility.record_sha256`` and the bundle's ``record_sha256``);
- the question and the submission against the hashes the 'submitted' event holds, and the seed
  against that event and the record;
- the record against the hash the 'computed' event holds;
- each of the request's events against its chain hash, and the chain segment link by link from
  the request's first event to its last;
- the record itself, recomputed by the engine from the bundle's question and seed.
"""

from __future__ import annotations

import platform
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from service.engine import EngineError, canonical_json, compute
from service.engine.records import differences, record_hash, versions
from service.store.chain import chain_hash, content_hash

from . import FORMAT, FORMAT_VERSION

OK, FAILED, NOT_COVERED = "ok", "FAILED", "not covered"


class BundleError(ValueError):
    """The file is not a bundle this version reads; the message names the field."""


def environment() -> dict[str, str]:
    """The versions of the process writing or checking a bundle (the record's, plus Python's)."""
    return {**versions(), "python": platform.python_version()}


@dataclass
class Check:
    """One named check and its outcome: OK, FAILED or NOT_COVERED, with what was found."""

    name: str
    outcome: str
    detail: str


@dataclass
class Verdict:
    """Every check, and how the recomputed record compares with the bundle's."""

    checks: list[Check] = field(default_factory=list)
    identical: bool = False
    differences: list[str] = field(default_factory=list)
    computed_with: dict = field(default_factory=dict)
    verified_with: dict = field(default_factory=dict)

    @property
    def passed(self) -> bool:
        return self.identical and all(c.outcome != FAILED for c in self.checks)

    def add(self, name: str, ok: bool | None, detail: str) -> None:
        outcome = NOT_COVERED if ok is None else OK if ok else FAILED
        self.checks.append(Check(name, outcome, detail))


# --- shape ------------------------------------------------------------------------------------

_EVENT_FIELDS = {
    "id": int,
    "request_id": str,
    "detail": dict,
    "actor": str,
    "action": str,
    "created_at": str,
    "sha256": str,
}
_LINK_FIELDS = {"id": int, "sha256": str}


def _need(data: Any, path: str, kind: type | tuple[type, ...]) -> Any:
    if not isinstance(data, kind) or (kind is int and isinstance(data, bool)):
        names = kind.__name__ if isinstance(kind, type) else " or ".join(k.__name__ for k in kind)
        shown = "missing" if data is None else f"a {type(data).__name__}"
        raise BundleError(f"{path}: must be {_article(names)}; got {shown}")
    return data


def _article(name: str) -> str:
    words = {"dict": "JSON object", "list": "JSON array", "str": "string", "int": "integer"}
    return " or ".join(f"a {words.get(n, n)}" for n in name.split(" or "))


def _mapping(value: Any) -> dict:
    return dict(value) if isinstance(value, dict) else {}


def check_shape(bundle: Any) -> dict:
    """Return ``bundle`` when it has every member a check reads; else BundleError naming one."""
    _need(bundle, "bundle", dict)
    if bundle.get("format") != FORMAT:
        raise BundleError(f"format: must be {FORMAT!r}; got {bundle.get('format')!r}")
    if bundle.get("format_version") != FORMAT_VERSION:
        raise BundleError(
            f"format_version: this sizewise reads version {FORMAT_VERSION}; "
            f"got {bundle.get('format_version')!r}"
        )
    _need(bundle.get("request"), "request", dict)
    _need(bundle["request"].get("id"), "request.id", str)
    for key in ("submission", "question", "record", "environment", "audit"):
        _need(bundle.get(key), key, dict)
    _need(bundle.get("record_sha256"), "record_sha256", str)
    if bundle.get("seed") is not None:
        _need(bundle["seed"], "seed", int)
    audit = bundle["audit"]
    for key, fields_ in (("events", _EVENT_FIELDS), ("chain", _LINK_FIELDS)):
        items = _need(audit.get(key), f"audit.{key}", list)
        for index, item in enumerate(items):
            _need(item, f"audit.{key}.{index}", dict)
            for name, kind in fields_.items():
                _need(item.get(name), f"audit.{key}.{index}.{name}", kind)
            prev = item.get("prev_sha256")
            if prev is not None:
                _need(prev, f"audit.{key}.{index}.prev_sha256", str)
    return bundle


# --- checks -----------------------------------------------------------------------------------


def _short(sha: Any) -> str:
    return f"{sha[:12]}…" if isinstance(sha, str) else repr(sha)


def _first(events: list[dict], action: str) -> dict | None:
    return next((e for e in events if e["action"] == action), None)


def _record_hash(bundle: dict, verdict: Verdict) -> str:
    record = bundle["record"]
    actual = record_hash(record)
    claimed = (record.get("reproducibility") or {}).get("record_sha256")
    if claimed != actual:
        verdict.add(
            "record hash",
            False,
            f"the record's content hashes to {_short(actual)}, but its "
            f"reproducibility.record_sha256 says {_short(claimed)}: the record was changed",
        )
    elif bundle["record_sha256"] != actual:
        verdict.add(
            "record hash",
            False,
            f"the bundle's record_sha256 {_short(bundle['record_sha256'])} is not the record's "
            f"hash {_short(actual)}",
        )
    else:
        verdict.add("record hash", True, f"sha256 {_short(actual)} matches the record's content")
    return actual


def _stored_hash(verdict, name, event, key, value, what) -> None:
    """Compare content_hash(value) with the hash ``event`` recorded under ``key``."""
    if event is None:
        verdict.add(name, False, "the bundle has no 'submitted' event to compare with")
        return
    recorded = event["detail"].get(key)
    if recorded is None:
        verdict.add(name, None, f"event {event['id']} predates hashes of the {what}")
        return
    actual = content_hash(value)
    if actual == recorded:
        verdict.add(name, True, f"matches the hash held by event {event['id']} (submitted)")
    else:
        verdict.add(
            name,
            False,
            f"the {what} hashes to {_short(actual)}, but event {event['id']} (submitted) "
            f"recorded {_short(recorded)}: the {what} was changed",
        )


def _seed(bundle: dict, submitted: dict | None, verdict: Verdict) -> None:
    seed = bundle.get("seed")
    found = []
    if submitted is not None and "seed" in submitted["detail"]:
        found.append((f"event {submitted['id']} (submitted)", submitted["detail"]["seed"]))
    record_seed = (bundle["record"].get("reproducibility") or {}).get("seed")
    found.append(("the record", record_seed))
    wrong = [f"{where} says {value!r}" for where, value in found if value != seed]
    if wrong:
        verdict.add("seed", False, f"the bundle's seed {seed!r} differs: " + "; ".join(wrong))
    else:
        verdict.add("seed", True, f"{seed!r}, as the submitted event and the record say")


def _result_event(bundle: dict, actual: str, verdict: Verdict) -> None:
    computed = _first(bundle["audit"]["events"], "computed")
    if computed is None:
        verdict.add("result event", False, "the bundle has no 'computed' event")
        return
    recorded = computed["detail"].get("record_sha256")
    if recorded == actual:
        verdict.add(
            "result event", True, f"event {computed['id']} (computed) holds the record hash"
        )
    else:
        verdict.add(
            "result event",
            False,
            f"event {computed['id']} (computed) recorded {_short(recorded)}, not the record's "
            f"hash {_short(actual)}",
        )


def exported_event_hash(event: dict) -> str:
    """The chain hash of an event as the bundle holds it (the store's own formula)."""
    return chain_hash(
        event.get("prev_sha256"),
        event["id"],
        event["request_id"],
        event["actor"],
        event["action"],
        event["detail"],
        event["created_at"],
    )


def _events(bundle: dict, verdict: Verdict) -> None:
    request_id = bundle["request"]["id"]
    bad = []
    for event in bundle["audit"]["events"]:
        label = f"event {event['id']} ({event['action']})"
        if event["request_id"] != request_id:
            bad.append(f"{label} belongs to request {event['request_id']!r}")
            continue
        actual = exported_event_hash(event)
        if actual != event["sha256"]:
            bad.append(
                f"{label}: its content hashes to {_short(actual)}, not its sha256 "
                f"{_short(event['sha256'])}: the event was changed"
            )
    count = len(bundle["audit"]["events"])
    if bad:
        verdict.add("audit events", False, "; ".join(bad))
    elif count == 0:
        verdict.add("audit events", False, "the bundle holds no audit event")
    else:
        verdict.add("audit events", True, f"{count} events, each matching its chain hash")


def _chain(bundle: dict, verdict: Verdict) -> None:
    events, chain = bundle["audit"]["events"], bundle["audit"]["chain"]
    problems = []
    links = {link["id"]: link for link in chain}
    for event in events:
        link = links.get(event["id"])
        if link is None:
            problems.append(f"event {event['id']} is missing from the chain segment")
        elif (link.get("prev_sha256"), link["sha256"]) != (
            event.get("prev_sha256"),
            event["sha256"],
        ):
            problems.append(f"event {event['id']} has other hashes in the chain segment")
    for before, after in zip(chain, chain[1:], strict=False):
        if after["id"] <= before["id"]:
            problems.append(f"event {after['id']} follows event {before['id']} out of order")
        elif after.get("prev_sha256") != before["sha256"]:
            problems.append(
                f"link broken between event {before['id']} and event {after['id']}: event "
                f"{after['id']}'s prev_sha256 {_short(after.get('prev_sha256'))} is not event "
                f"{before['id']}'s sha256 {_short(before['sha256'])}"
            )
    if (
        events
        and chain
        and (chain[0]["id"], chain[-1]["id"]) != (events[0]["id"], events[-1]["id"])
    ):
        problems.append(
            f"the segment runs from event {chain[0]['id']} to {chain[-1]['id']}, not from the "
            f"request's first event {events[0]['id']} to its last {events[-1]['id']}"
        )
    if problems:
        verdict.add("chain links", False, "; ".join(problems))
    elif chain:
        verdict.add(
            "chain links",
            True,
            f"{len(chain) - 1} links from event {chain[0]['id']} to event {chain[-1]['id']}",
        )
    else:
        verdict.add("chain links", False, "the bundle holds no chain segment")


def _recompute(bundle: dict, verdict: Verdict, progress: Callable[[float], None] | None) -> None:
    try:
        again = compute(bundle["question"], progress=progress)
    except EngineError as exc:
        verdict.add("recomputed", False, f"the engine could not answer the question: {exc}")
        verdict.differences = ["$"]
        return
    verdict.differences = differences(bundle["record"], again)
    verdict.identical = canonical_json(bundle["record"]) == canonical_json(again)


def verify_bundle(bundle: Any, progress: Callable[[float], None] | None = None) -> Verdict:
    """Check every hash of ``bundle`` and recompute its record; BundleError if it is no bundle."""
    check_shape(bundle)
    verdict = Verdict(
        computed_with=_mapping(bundle["environment"].get("computed_with")),
        verified_with=environment(),
    )
    actual = _record_hash(bundle, verdict)
    submitted = _first(bundle["audit"]["events"], "submitted")
    _stored_hash(verdict, "question", submitted, "question_sha256", bundle["question"], "question")
    _stored_hash(
        verdict, "submission", submitted, "submission_sha256", bundle["submission"], "submission"
    )
    _seed(bundle, submitted, verdict)
    _result_event(bundle, actual, verdict)
    _events(bundle, verdict)
    _chain(bundle, verdict)
    _recompute(bundle, verdict, progress)
    return verdict
