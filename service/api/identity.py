"""Who is acting: the one place views read the caller's identity (set by service.api.auth)."""

from __future__ import annotations

from dataclasses import dataclass

from flask import g


@dataclass(frozen=True)
class Caller:
    """The verified bearer token of the current request."""

    token_id: str
    name: str
    role: str

    @property
    def actor(self) -> str:
        """The audit actor: the token's name and role, e.g. 'a.okafor (intake)'."""
        return f"{self.name} ({self.role})"


def current_caller() -> Caller:
    """Return the verified caller; the auth hook has refused the request before a view runs."""
    caller = g.get("caller")
    if caller is None:
        # Only reachable if a route escaped the access table: fail closed, never as 'anonymous'.
        raise RuntimeError("no verified caller on this request; is the route in auth.ACCESS?")
    return caller


def current_actor() -> str:
    """Return the audit actor of the current request: the token's name and role."""
    return current_caller().actor


def submitter() -> str:
    """Return what is stored as ``submitted_by`` for a new request: the caller's token id."""
    return current_caller().token_id


def visible_submitter() -> str | None:
    """Return the token id a listing is limited to (intake sees only its own), or None for all."""
    caller = current_caller()
    return caller.token_id if caller.role == "intake" else None
