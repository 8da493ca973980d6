"""Validation errors shared by the API and the CLI.

ValueError
└── QuestionInvalid     the posted question failed validation; ``errors`` maps dotted
                        field paths (``"effect.sd"``) to lists of readable messages
"""

from __future__ import annotations


class QuestionInvalid(ValueError):
    """The posted question failed validation; ``errors`` is keyed by dotted field path."""

    def __init__(self, errors: dict[str, list[str]]):
        self.errors = {k: list(v) for k, v in errors.items()}
        super().__init__(format_errors(self.errors))


def format_errors(errors: dict[str, list[str]]) -> str:
    """Render field-keyed errors as one line per message, sorted by field path."""
    lines = [f"{path}: {msg}" for path in sorted(errors) for msg in errors[path]]
    return "\n".join(lines) if lines else "invalid question"
