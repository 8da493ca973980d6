"""One schema instance per (class, options), reused by every request of the process.

Building a schema copies its declared fields (deep copies of every field and nested schema), which
cost more than loading a question with it. A schema's ``load`` keeps no state on the instance, so
one instance serves every thread.
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any, TypeVar

from marshmallow import Schema

S = TypeVar("S", bound=Schema)


@lru_cache(maxsize=256)
def _instance(cls: type[Schema], options: tuple[tuple[str, Any], ...]) -> Schema:
    return cls(**dict(options))


def shared(cls: type[S], **options: Any) -> S:
    """The process's instance of ``cls(**options)`` (options must be hashable)."""
    return _instance(cls, tuple(sorted(options.items())))  # type: ignore[return-value]
