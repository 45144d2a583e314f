"""Validation and JSON syntax problems of imported files, in the model's words.

Each problem says what is wrong and what is allowed, with its JSON path; nothing of the
validating library's or the JSON parser's own wording reaches the user.
"""

from __future__ import annotations

import re
from typing import Any

from pydantic import BaseModel, ValidationError

from assignplan.reading import format_loc, problem_words
from assignplan.reading import json_syntax_problem as model_syntax_problem

_DECIMAL_COMMA = re.compile(r"[+-]?\d*,\d+")


def json_syntax_problem(text: str, source: str) -> str | None:
    """The first JSON syntax problem of `text` as one line with its file, line and column, or
    None (in the words of `reading.json_syntax_problem`)."""
    problem = model_syntax_problem(text)
    return None if problem is None else (
        f"{source}:{problem}" if problem.startswith("line ") else f"{source}: {problem}")


def validation_problems(err: ValidationError, model: type[BaseModel]) -> list[str]:
    """One line per problem, ``path: what is wrong; what is allowed``, for a `model` document:
    the documents' own words (`reading.problem_words`), with a hint for a spreadsheet's decimal
    comma ('1,5'), which a cell of text can hold and a JSON number cannot."""
    return [f"{format_loc(tuple(e['loc']))}: {_decimal_comma(e) or problem_words(e, model)}"
            for e in err.errors()]


def _decimal_comma(error: dict[str, Any]) -> str | None:
    value = error.get("input")
    if error["type"] == "float_type" and isinstance(value, str) \
            and _DECIMAL_COMMA.fullmatch(value):
        return f"{value!r} is not a number: use a point for decimals and no thousands separator"
    return None


