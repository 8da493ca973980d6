"""A request's audit events as a timeline: who did what, when, and what they wrote."""

from __future__ import annotations

_ACTIONS = {
    "submitted": "Submitted",
    "assigned": "Assigned",
    "comment": "Comment",
    "approved": "Approved",
    "returned": "Returned to the requester",
    "cancelled": "Cancelled",
    "cancel_requested": "Asked to stop",
    "rerun_requested": "Rerun asked for",
    "report_link_issued": "Report link issued",
    "report_links_revoked": "Report links revoked",
    "running": "Computing",
    "computed": "Computed",
    "failed": "Failed",
    "published": "Sent to the workers",
}


def _text(action: str, detail: dict) -> str:
    if action == "assigned":
        previous = detail.get("previous")
        return f"to {detail.get('to')}" + (f" (was {previous})" if previous else "")
    for key in ("text", "note", "reason", "error"):
        if detail.get(key):
            return str(detail[key])
    if detail.get("status") and action not in _ACTIONS:
        return f"status {detail['status']}"
    return ""


def timeline(history: list[dict]) -> list[dict]:
    """Each event (oldest first) as ``{when, actor, what, text, action}`` for the page."""
    return [
        {
            "when": str(e.get("created_at") or "")[:19].replace("T", " ") + " UTC",
            "actor": e.get("actor") or "",
            "what": _ACTIONS.get(
                e.get("action"), str(e.get("action", "")).replace("_", " ").capitalize()
            ),
            "text": _text(e.get("action", ""), e.get("detail") or {}),
            "action": e.get("action", ""),
        }
        for e in history
    ]
