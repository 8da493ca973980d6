"""Refuse at submission what the worker could not compute.

``POST /v1/calculations`` answers through ``check_computable`` too, so both refuse a question
the engine cannot answer with a 422 naming the field (an overflow: the fields of extreme
magnitude; a solve that fails: what it solves for), never a generic failure. ``check_computable`` runs
the same engine checks before anything is stored: an analytic question is answered once, and
that record is returned so the API can store it as the request's answer without computing it
again; a simulated one has its formula counterpart evaluated when it has one, which is where a
non-finite effect shows.
"""

from __future__ import annotations

import copy
from typing import Any

from service.engine import EngineError, QuestionError, compute
from service.schemas.fields import extreme_fields

from .errors import ValidationFailed


def question_refused(exc: QuestionError) -> ValidationFailed:
    """The 422 for a question the engine refuses, keyed by the question's field paths."""
    return ValidationFailed(
        str(exc), errors={f"question.{k}": v for k, v in exc.as_errors().items()}
    )


def _numeric_failure(exc: EngineError) -> bool:
    """True when the engine failed on arithmetic (overflow, division by zero, a non-finite value)."""
    cause = exc.__cause__
    text = f"{exc} {cause or ''}"
    return isinstance(cause, ArithmeticError) or "not finite" in text or "numeric step" in text


def _refuse(question: dict, posted: Any, exc: EngineError) -> ValidationFailed:
    if not _numeric_failure(exc):
        return _unsolved(question, exc)
    # Named as posted when the posted document is at hand.
    fields = extreme_fields(posted) or extreme_fields(question) or [_solved_path(question)]
    message = (
        "the question cannot be computed: its numbers leave double precision (a quotient "
        "overflows or a division reaches zero); use values of ordinary magnitude, e.g. other units"
    )
    return ValidationFailed(message, errors={f: [message] for f in fields})


def _solved_path(question: dict) -> str:
    """The question path of what the engine solves for: the sample size, the power's inputs
    (the enrolled numbers) or the cell's solved effect field."""
    find = question.get("find")
    if (question.get("hypothesis") or {}).get("aim") == "estimation":
        # a precision question solves for the n of a half-width, or the half-width of an n
        return "question.hypothesis.half_width" if find == "sample_size" else "question.sample_size"
    if find == "power":
        return "question.sample_size"
    if find == "effect":
        try:
            from service.engine import designs

            design = designs.get(question["outcome"], question["layout"])
            block = next(f.block for f in design.fields if f.name == design.solved)
            return f"question.{block}.{design.solved}"
        except (KeyError, StopIteration):
            return "question.find"
    return "question.target_power"


def _unsolved(question: dict, exc: EngineError) -> ValidationFailed:
    message = f"the engine cannot answer this question as posed: {exc}"
    return ValidationFailed(message, errors={_solved_path(question): [message]})


def check_computable(question: dict, posted: Any = None) -> dict | None:
    """Raise ValidationFailed (422, field-keyed) when the engine cannot compute ``question``.

    ``posted`` is the question as posted, whose paths the refusal names. Returns the analytic
    question's record (the engine's answer: deterministic, so the same as any later compute of
    this question), None for a simulation.
    """
    simulated = question.get("method") == "simulation"
    if not simulated:
        try:
            return compute(question)
        except QuestionError as exc:
            raise question_refused(exc) from None
        except EngineError as exc:
            raise _refuse(question, posted, exc) from exc
    if not question.get("effect"):
        return None  # a data model only: its moments were checked by the schema
    analytic = copy.deepcopy(question)
    analytic["method"] = "analytic"
    analytic.pop("simulation", None)
    try:
        compute(analytic)
    except QuestionError:
        return None  # no formula counterpart for this simulation: nothing to compare against
    except EngineError as exc:
        if _numeric_failure(exc):
            raise _refuse(question, posted, exc) from exc
    return None
