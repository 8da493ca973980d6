"""marshmallow schemas: the one validation layer, used by the CLI and the API.

The question's cell-specific parts are generated from the designs' declared fields
(``service.engine.designs``): the marshmallow blocks (``declared``, ``cell``), the catalogue
(``catalogue``) and the JSON Schema of the question (``json_schema``).
"""

from .catalogue import catalogue
from .errors import QuestionInvalid, flatten_errors, format_errors
from .json_schema import question_json_schema
from .question import QuestionSchema, load_question, register_openapi_types

__all__ = [
    "QuestionInvalid",
    "QuestionSchema",
    "catalogue",
    "flatten_errors",
    "format_errors",
    "load_question",
    "question_json_schema",
    "register_openapi_types",
]
