"""Validation errors shared by the API and the CLI.

ValueError
└── QuestionInvalid     the posted question failed validation; ``errors`` maps dotted
                        field paths (``"effect.sd"``) to lists of readable messages
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any


class QuestionInvalid(ValueError):
    """The posted question failed validation; ``errors`` is keyed by dotted field path."""

    def __init__(self, errors: dict[str, list[str]]):
        self.errors = {k: list(v) for k, v in errors.items()}
        super().__init__(format_errors(self.errors))


def format_errors(errors: dict[str, list[str]]) -> str:
    """Render field-keyed errors as one line per message, sorted by field path."""
    lines = [f"{path}: {msg}" for path in sorted(errors) for msg in errors[path]]
    return "\n".join(lines) if lines else "invalid question"


def flatten_errors(messages: Any, prefix: str = "") -> dict[str, list[str]]:
    """Turn marshmallow's nested error messages into ``{"dotted.path": [messages]}``."""
    out: dict[str, list[str]] = {}

    def walk(node: Any, path: str) -> None:
        if isinstance(node, Mapping):
            for key, sub in node.items():
                key = str(key)
                if key == "_schema":
                    walk(sub, path)
                else:
                    walk(sub, f"{path}.{key}" if path else key)
        elif isinstance(node, (list, tuple)):
            for item in node:
                if isinstance(item, (Mapping, list, tuple)):
                    walk(item, path)
                else:
                    out.setdefault(path or "question", []).append(str(item))
        else:
            out.setdefault(path or "question", []).append(str(node))

    walk(messages, prefix)
    return out
