"""Validation errors shared by the API and the CLI.

ValueError
└── QuestionInvalid     the posted question failed validation; ``errors`` maps dotted
                        field paths (``"effect.sd"``) to lists of readable messages
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

# Where the errors of the question itself are reported when it stands alone (the CLI).
ROOT = "question"


class QuestionInvalid(ValueError):
    """The posted question failed validation; ``errors`` is keyed by dotted field path.

    ``messages`` holds the same errors nested as marshmallow gives them, relative to the
    question (``_schema`` for the question itself), so a schema that holds the question as a
    member nests them under that member's own path.
    """

    def __init__(self, errors: dict[str, list[str]], messages: Any = None):
        self.errors = {k: list(v) for k, v in errors.items()}
        self.messages = messages if messages is not None else _nested(self.errors)
        super().__init__(format_errors(self.errors))


def _nested(errors: dict[str, list[str]]) -> dict[str, list[str]]:
    """Flat errors as marshmallow messages: the question's own (``question``) as ``_schema``."""
    return {("_schema" if k == ROOT else k): list(v) for k, v in errors.items()}


def format_errors(errors: dict[str, list[str]]) -> str:
    """Render field-keyed errors as one line per message, sorted by field path."""
    lines = [f"{path}: {msg}" for path in sorted(errors) for msg in errors[path]]
    return "\n".join(lines) if lines else "invalid question"


def flatten_errors(messages: Any, prefix: str = "") -> dict[str, list[str]]:
    """Turn marshmallow's nested error messages into ``{"dotted.path": [messages]}``.

    Every key, whatever its characters, is reported at its own path (``effect.a b``); the
    messages of the question itself (no prefix) at ``question``, those of a prefixed object at
    the prefix.
    """
    out: dict[str, list[str]] = {}

    def walk(node: Any, path: str | None) -> None:
        if isinstance(node, Mapping):
            for key, sub in node.items():
                key = str(key)
                if key == "_schema":
                    walk(sub, path)
                else:
                    walk(sub, key if path is None else f"{path}.{key}")
        elif isinstance(node, (list, tuple)):
            for item in node:
                if isinstance(item, (Mapping, list, tuple)):
                    walk(item, path)
                else:
                    out.setdefault(ROOT if path is None else path, []).append(str(item))
        else:
            out.setdefault(ROOT if path is None else path, []).append(str(node))

    walk(messages, prefix or None)
    return out
