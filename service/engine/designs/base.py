"""PROVISIONAL copy of the engine's design declarations (VOCAB §8) for the schema work; the
engine helper's base.py replaces it on merge."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Field:
    name: str
    block: str
    type: str
    help: str
    label: str
    unit: str | None = None
    minimum: float | None = None
    maximum: float | None = None
    exclusive_minimum: bool = False
    exclusive_maximum: bool = False
    choices: tuple[str, ...] = ()
    default: object = None
    min_items: int | None = None


@dataclass(frozen=True)
class Analysis:
    name: str
    label: str
    methods: tuple[str, ...]
    aims: tuple[str, ...]
    reference: str


@dataclass(frozen=True)
class Design:
    outcome: str
    layout: str
    label: str
    fields: tuple[Field, ...]
    forms: tuple[tuple[str, ...], ...]
    solved: str
    analyses: tuple[Analysis, ...]
    validate: Callable[[dict, str, bool], dict[str, list[str]]]
    default_analysis: Callable[[dict], str]
    groups: Callable[[dict], int]
    allocation: Callable[[dict], list[float]]
    derive: Callable[[dict], dict]
    solve_n: Any = None
    power: Any = None
    solve_effect: Any = None
    describe: Any = None
    warnings_for: Any = None
    simulation: Any = None
    phrases: Any = None
    example: str = ""
