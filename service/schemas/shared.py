"""One schema instance per (class, options), reused by every request of the process.

Building a schema copies its declared fields (deep copies of every field and nested schema), which
cost more than loading a question with it. A schema's ``load`` keeps no state on the instance, so
one instance serves every thread.
"""

from __future__ import annotations

import copy
from collections.abc import Callable
from functools import lru_cache, wraps
from typing import Any, TypeVar

from marshmallow import Schema

S = TypeVar("S", bound=Schema)


@lru_cache(maxsize=256)
def _instance(cls: type[Schema], options: tuple[tuple[str, Any], ...]) -> Schema:
    return cls(**dict(options))


def shared(cls: type[S], **options: Any) -> S:
    """The process's instance of ``cls(**options)`` (options must be hashable)."""
    return _instance(cls, tuple(sorted(options.items())))  # type: ignore[return-value]


@lru_cache(maxsize=64)
def _defaults(cls: type[Schema]) -> Any:
    return shared(cls).load({})


def defaults(cls: type[Schema]) -> Any:
    """What ``shared(cls).load({})`` returns (the block's defaults), loaded once per process.

    Normalization asks for the hypothesis and adjustments defaults several times per question;
    each caller gets its own deep copy, so changing it never reaches the next question.
    """
    return copy.deepcopy(_defaults(cls))


def per_design(build: Callable[..., S]) -> Callable[..., S]:
    """Cache ``build(design, *args)`` per design object (designs hold dicts: not hashable).

    The entry keeps its design alive and is checked by identity, so a replaced registration
    (a test's toy design registered again) builds afresh.
    """
    cache: dict[tuple, tuple[Any, Any]] = {}

    @wraps(build)
    def cached(design: Any, *args: Any) -> S:
        key = (id(design), *args)
        hit = cache.get(key)
        if hit is None or hit[0] is not design:
            hit = (design, build(design, *args))
            cache[key] = hit
        return hit[1]

    return cached
