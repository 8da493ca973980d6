"""The audit trail is a hash chain: consistent when untouched, broken by any edit."""

from __future__ import annotations

from sqlalchemy import update

from service.store.audit import append_event, events_for, verify_chain
from service.store.db import make_engine, make_sessionmaker, session_scope
from service.store.models import AuditEvent


def test_chain_links_each_event_to_the_previous(settings):
    engine = make_engine(settings["DATABASE_URL"])
    factory = make_sessionmaker(engine)
    try:
        # Separate transactions, as the API and the workers append them.
        for i in range(4):
            with session_scope(factory) as session:
                append_event(
                    session,
                    request_id="a" * 32,
                    actor="reviewer",
                    action="comment",
                    detail={"text": f"note {i}", "ü": [1, 2.5]},
                )
        with session_scope(factory) as session:
            events = events_for(session, "a" * 32)
            assert [e.prev_sha256 for e in events[1:]] == [e.sha256 for e in events[:-1]]
            assert events[0].prev_sha256 is None
            assert verify_chain(session) == []
            target = events[1].id
            # Tampering with one stored detail breaks that event's hash.
            session.execute(
                update(AuditEvent).where(AuditEvent.id == target).values(detail={"text": "edited"})
            )
            session.expire_all()
            assert verify_chain(session) == [target]
            session.rollback()
    finally:
        engine.dispose()
