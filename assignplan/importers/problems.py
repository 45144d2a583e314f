"""Validation and JSON syntax problems of imported files, in our words.

Each problem says what is wrong and what is allowed, with its JSON path; nothing of the
validating library's or the JSON parser's own wording reaches the user.
"""

from __future__ import annotations

import json
import math
import re
import types
import typing
from typing import Any

from pydantic import BaseModel, ValidationError

from assignplan.model import JobGroup, _format_loc

_NAME_PATTERN = JobGroup.model_fields["name"].metadata[-1].pattern
_NAME_RULE = "use only letters, digits and _ . : + - (no spaces)"
_ISO_EXAMPLE = "2025-03-03T08:00"
_DECIMAL_COMMA = re.compile(r"[+-]?\d*,\d+")

# Python's JSON parser names each syntax problem by the start of its message.
_JSON_SYNTAX = (
    ("Expecting value", "a value is missing here, or is not JSON (text goes in double quotes)"),
    ("Expecting property name", "a field name in double quotes is expected here (a comma"
                                " before '}' is one too many)"),
    ("Expecting ',' delimiter", "a comma is missing between two entries"),
    ("Expecting ':' delimiter", "a ':' is missing after a field name"),
    ("Unterminated string", "a text in double quotes is not closed"),
    ("Invalid control character", "a line break or control character inside double quotes"),
    ("Invalid \\", "a backslash escape that JSON does not know"),
    ("Extra data", "more text after the end of the document"),
)


def json_syntax_problem(text: str, source: str) -> str | None:
    """The first JSON syntax problem of `text` as one line with its line and column, or None."""
    try:
        json.loads(text)
    except json.JSONDecodeError as exc:
        reason = next((ours for theirs, ours in _JSON_SYNTAX if exc.msg.startswith(theirs)),
                      "not JSON here")
        if exc.pos >= len(text.rstrip()):
            reason = "the text ends before the document does (a '}' or ']' is missing)"
        return f"{source}:line {exc.lineno} column {exc.colno}: not valid JSON: {reason}"
    except RecursionError:
        return f"{source}: not valid JSON: nested too deeply"
    return None


def validation_problems(err: ValidationError, model: type[BaseModel]) -> list[str]:
    """One line per problem, ``path: what is wrong; what is allowed``, for a `model` document."""
    return [f"{_format_loc(tuple(e['loc']))}: {_plain(e, model)}" for e in err.errors()]


# Templates by the validator's problem kind; {shown} is the user's value, the rest its limits.
_TEMPLATES = {
    "int_type": "{shown} is not a whole number",
    "int_parsing": "{shown} is not a whole number",
    "int_from_float": "{shown} is not a whole number",
    "float_type": "{shown} is not a number",
    "float_parsing": "{shown} is not a number",
    "finite_number": "{shown} is not a number",
    "string_type": "{shown} is not text in double quotes",
    "list_type": "{shown} is not a list [...]",
    "model_type": "{shown} is not an object {{...}}",
    "dict_type": "{shown} is not an object {{...}}",
    "string_too_short": "must not be empty",
    "too_long": "lists {actual_length} entries; at most {max_length} are allowed",
    "greater_than": "must be greater than {gt}",
    "greater_than_equal": "must be at least {ge}",
    "less_than": "must be less than {lt}",
    "less_than_equal": "must be at most {le}",
}


def _plain(error: dict[str, Any], model: type[BaseModel]) -> str:
    kind, ctx, value = error["type"], error.get("ctx") or {}, error.get("input")
    shown = _shown(value)
    if kind == "missing":
        return "required field is missing"
    if kind == "extra_forbidden":
        allowed = _fields_at(model, tuple(error["loc"])[:-1])
        return "unknown field" + (f"; the fields here are {', '.join(allowed)}" if allowed else "")
    if isinstance(value, float) and math.isnan(value):
        return "NaN is not a number"
    if kind == "string_pattern_mismatch":
        if ctx.get("pattern") == _NAME_PATTERN:
            return f"{shown} is not a valid name: {_NAME_RULE}"
        return f"{shown} does not have the required form"
    if kind == "float_type" and isinstance(value, str) and _DECIMAL_COMMA.fullmatch(value):
        return f"{shown} is not a number: use a point for decimals and no thousands separator"
    if kind.startswith(("datetime", "date")):
        return f"{shown} is not an ISO 8601 date and time ({_ISO_EXAMPLE})"
    if kind == "too_short":
        need = ctx.get("min_length", 1)
        return ("an empty list; at least one entry is needed" if need == 1
                else f"lists {ctx.get('actual_length')}; at least {need} entries are needed")
    if kind == "string_too_long":
        length, most = len(str(value)), ctx.get("max_length")
        return f"is {length:,} characters long; at most {most} are allowed"
    if kind in _TEMPLATES:
        limits = {k: f"{v:g}" if isinstance(v, float) else v for k, v in ctx.items()}
        return _TEMPLATES[kind].format(shown=shown, **limits)
    message = str(error["msg"])  # a kind not met so far: keep only the validator's gist
    if message.startswith("Input should be"):
        return "must be" + message[len("Input should be"):]
    return message[:1].lower() + message[1:]


def _shown(value: Any) -> str:
    """A user's value as they wrote it, cut short: 'two', 1.5, {...}."""
    if isinstance(value, str):
        return repr(value if len(value) <= 40 else value[:37] + "...")
    if isinstance(value, dict):
        return "{...}"
    if isinstance(value, list):
        return "[...]"
    if isinstance(value, float) and not math.isfinite(value):
        return "NaN" if math.isnan(value) else ("Infinity" if value > 0 else "-Infinity")
    return json.dumps(value)


def _fields_at(model: type[BaseModel], loc: tuple[Any, ...]) -> list[str]:
    """Field names of the object at `loc` inside a `model` document ([] if not an object)."""
    current: Any = model
    for part in loc:
        if isinstance(part, int):
            args = [a for a in typing.get_args(current) if a is not type(None)]
            current = args[0] if args else None
        elif isinstance(current, type) and issubclass(current, BaseModel):
            field = current.model_fields.get(part)
            current = field.annotation if field else None
        else:
            return []
        current = _unwrap_optional(current)
    if isinstance(current, type) and issubclass(current, BaseModel):
        return list(current.model_fields)
    return []


def _unwrap_optional(annotation: Any) -> Any:
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(annotation) if a is not type(None)]
        return args[0] if len(args) == 1 else annotation
    return annotation
