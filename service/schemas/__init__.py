"""marshmallow schemas: the one validation layer, used by the CLI and the API."""

from .catalogue import catalogue
from .errors import QuestionInvalid, format_errors
from .question import (
    EFFECT_SCHEMAS,
    QuestionSchema,
    flatten_errors,
    load_question,
    register_openapi_types,
)

__all__ = [
    "EFFECT_SCHEMAS",
    "QuestionInvalid",
    "QuestionSchema",
    "catalogue",
    "flatten_errors",
    "format_errors",
    "load_question",
    "register_openapi_types",
]
