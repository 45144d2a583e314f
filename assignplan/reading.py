"""Reading documents: UTF-8 files, repeated keys, JSON syntax, and every problem in our words.

Every problem is one line, `<file>: <json.path>: <what is wrong and what is allowed>`; no
wording of the validating library or of the JSON parser reaches the user.
"""

from __future__ import annotations

import json
import re
from collections import Counter
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

from pydantic import (
    BaseModel,
    ValidationError,
)

from assignplan.documents import CALENDAR_HELP, Batch, PlanDoc
from assignplan.errors import InputError
from assignplan.units import (
    MINUTE_TOLERANCE,
    counted,
    number,
    offset_text,
)


def format_loc(loc: tuple[Any, ...]) -> str:
    """`jobs[3].cores`; a key that is not a plain name is quoted: `jobs[3]["my key"]`."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif _PLAIN_KEY.fullmatch(str(part)):
            out += f".{part}" if out else str(part)
        else:
            out += f"[{_quoted(str(part))}]"
    return out or "(document)"


_PLAIN_KEY = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


def _quoted(text: str) -> str:
    """Text in double quotes, on one line: JSON escapes, and \\uXXXX for anything a terminal
    would not print as one visible character."""
    quoted = json.dumps(text, ensure_ascii=False)
    return "".join(c if c.isprintable() else f"\\u{ord(c):04x}" for c in quoted)


def _shown(value: Any) -> str:
    """The offending input in a few words: the text "4", 1e+09, NaN, a list."""
    if isinstance(value, bool) or value is None:
        return json.dumps(value)
    if isinstance(value, int):
        if value.bit_length() > 200:  # str() of a huge int is slow, then refused
            return f"a whole number of about {int(value.bit_length() * 0.30103) + 1} digits"
        return str(value)
    if isinstance(value, float):
        if value != value:
            return "NaN"
        if value in (float("inf"), float("-inf")):
            return "Infinity" if value > 0 else "-Infinity"
        return f"{value:g}"
    if isinstance(value, str):
        text = _quoted(value[:40])
        return "the text " + (text[:-1] + '…"' if len(value) > 40 else text)
    if isinstance(value, list | tuple):
        return "a list"
    if isinstance(value, dict):
        return "an object"
    return type(value).__name__


def _model_at(model: type[BaseModel] | None, loc: tuple[Any, ...]) -> type[BaseModel] | None:
    """The document model that holds the value at `loc` (list indices skipped)."""
    for part in loc:
        if isinstance(part, int):
            continue
        info = model.model_fields.get(part) if model is not None else None
        if info is None:
            return None
        model = _model_in(info.annotation)
    return model


def _model_in(annotation: Any) -> type[BaseModel] | None:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in getattr(annotation, "__args__", ()):
        found = _model_in(arg)
        if found is not None:
            return found
    return None


_LIMIT_WORDS = (("gt", "greater than"), ("ge", "at least"), ("lt", "less than"),
                ("le", "at most"))


def _allowed_range(model: type[BaseModel] | None, loc: tuple[Any, ...]) -> str | None:
    """'greater than 0 and at most 10,000 h': the limits of the field at `loc`, with its unit."""
    holder = _model_at(model, loc[:-1]) if loc else None
    info = holder.model_fields.get(loc[-1]) if holder is not None and loc else None
    if info is None:
        return None
    words = []
    for limit in info.metadata:
        for attr, text in _LIMIT_WORDS:
            if getattr(limit, attr, None) is not None:
                words.append(f"{text} {number(getattr(limit, attr), None)}")
    if not words:
        return None
    name = str(loc[-1])
    unit = {"hours": " h", "memory_gib": " GiB"}.get(name, " h" if name.endswith("_h") else "")
    return " and ".join(words) + unit


_NAME_CHARS = "letters a-z and A-Z, digits and . _ : + -"


_TYPE_WORDS = {
    "int_type": "a whole number", "int_parsing": "a whole number",
    "int_from_float": "a whole number", "int_parsing_size": "a whole number",
    "float_type": "a number", "float_parsing": "a number", "bool_type": "true or false",
    "bool_parsing": "true or false", "string_type": "text in double quotes",
    "list_type": "a list [...]", "model_type": "an object {...}", "dict_type": "an object {...}",
    "model_attributes_type": "an object {...}", "datetime_type": CALENDAR_HELP,
    "datetime_parsing": CALENDAR_HELP, "datetime_from_date_parsing": CALENDAR_HELP,
    "datetime_object_invalid": CALENDAR_HELP,
}


_RANGE_TYPES = ("greater_than", "greater_than_equal", "less_than", "less_than_equal")


def problem_words(e: dict[str, Any], model: type[BaseModel] | None) -> str:
    """One pydantic error in our words: what is wrong and what is allowed."""
    kind, loc, ctx, value = e["type"], tuple(e["loc"]), e.get("ctx") or {}, e.get("input")
    if kind == "missing":
        return "required field is missing"
    if kind == "extra_forbidden":
        holder = _model_at(model, loc[:-1])
        fields = f"; the fields here are {', '.join(holder.model_fields)}" if holder else ""
        return "unknown field" + fields
    if kind == "json_invalid":  # `validate_json` says where and what, from the text itself
        deep = "recursion limit" in str(ctx.get("error", e["msg"]))
        return "not valid JSON" + (": nested too deeply" if deep else "")
    if kind in _TYPE_WORDS:
        return f"must be {_TYPE_WORDS[kind]} (got {_shown(value)})"
    if kind == "calendar_time":
        return f"must be {CALENDAR_HELP} (got {_shown(value)})"
    if kind == "finite_number":
        allowed = _allowed_range(model, loc)
        return f"not a finite number (got {_shown(value)})" + (
            f"; must be {allowed}" if allowed else "")
    if kind in _RANGE_TYPES:
        allowed = _allowed_range(model, loc) or " and ".join(
            f"{text} {number(ctx[attr], None)}" for attr, text in _LIMIT_WORDS if attr in ctx)
        return f"must be {allowed} (got {_shown(value)})"
    if kind == "string_pattern_mismatch":
        bad = next((c for c in str(value) if not (c.isascii() and (c.isalnum() or c in "_.:+-"))),
                   "")
        what = "a space" if bad == " " else repr(bad)
        return f"may contain only {_NAME_CHARS} ({_quoted(str(value)[:40])} has {what})"
    if kind == "string_too_short":
        return "must not be empty"
    if kind == "string_too_long":
        return (f"must be at most {ctx.get('max_length')} characters"
                f" (got {len(str(value)):,})")
    if kind == "too_short":
        noun = {"jobs": "job", "nodes": "node"}.get(str(loc[-1]) if loc else "", "item")
        empty = " (the list is empty)" if not value else ""
        return f"must list at least {counted(int(ctx.get('min_length', 1)), noun)}{empty}"
    if kind == "literal_error":
        return f"must be one of {ctx.get('expected')} (got {_shown(value)})"
    msg = e["msg"].removeprefix("Value error, ")
    if msg.startswith("Input should be"):
        msg = "must be" + msg[len("Input should be"):]
    return msg[:1].lower() + msg[1:]


def validation_problems(err: ValidationError,
                             model: type[BaseModel] | None = None) -> list[str]:
    """`<json.path>: <problem in our words>`, one line per pydantic error.

    `model`, the document's model, lets a line name a field's allowed range and fields.
    """
    return [f"{format_loc(tuple(e['loc']))}: {problem_words(e, model)}" for e in err.errors()]


class _JsonObject(dict):
    """A JSON object that remembers which keys it saw more than once (and how often)."""

    repeated: dict[str, int]


def _object_of(pairs: list[tuple[str, Any]]) -> _JsonObject:
    obj = _JsonObject(pairs)
    obj.repeated = {k: n for k, n in Counter(k for k, _ in pairs).items() if n > 1}
    return obj


def duplicate_keys(text: str | bytes) -> list[str]:
    """`jobs[3]: key 'cores' appears twice` for every repeated key of every JSON object.

    JSON readers (pydantic's too) silently keep the last value; this pass finds the repeats.
    Text Python cannot read is left to pydantic, which says what is wrong with it.
    """
    def ignore(_: str) -> int:  # values are not needed, and this skips the digit limits
        return 0

    try:
        root = json.loads(text, object_pairs_hook=_object_of, parse_int=ignore,
                          parse_float=ignore, parse_constant=ignore)
    except (ValueError, RecursionError):
        return []
    problems = []
    stack: list[tuple[tuple[Any, ...], Any]] = [((), root)]
    while stack:  # depth first, without recursion: nesting depth is the user's choice
        loc, value = stack.pop()
        if isinstance(value, dict):
            for key, n in getattr(value, "repeated", {}).items():
                times = "twice" if n == 2 else f"{n} times"
                shown = f"'{key}'" if _PLAIN_KEY.fullmatch(key) else _quoted(key)
                problems.append(f"{format_loc(loc)}: key {shown} appears {times}")
            stack.extend(((*loc, k), v) for k, v in reversed(value.items()))
        elif isinstance(value, list):
            stack.extend(((*loc, k), v) for k, v in reversed(list(enumerate(value))))
    return problems


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


def json_syntax_problem(text: str | bytes) -> str | None:
    """The first JSON syntax problem of `text` in our words, with its line and column
    (`line 3 column 7: not valid JSON: a comma is missing between two entries`), or None
    when the text is JSON (NaN and Infinity tokens included: the number checks say those)."""
    if isinstance(text, bytes):
        text = text.decode("utf-8", errors="replace")
    try:
        json.loads(text)
    except json.JSONDecodeError as exc:
        reason = next((ours for theirs, ours in _JSON_SYNTAX if exc.msg.startswith(theirs)),
                      "not JSON here")
        if exc.pos >= len(text.rstrip()):
            reason = "the text ends before the document does (a '}' or ']' is missing)"
        return f"line {exc.lineno} column {exc.colno}: not valid JSON: {reason}"
    except RecursionError:
        return "not valid JSON: nested too deeply"
    return None


def validate_json(model: type[BaseModel], text: str | bytes, source: str) -> Any:
    """Validate a document's JSON text with `model`; InputError with one line per problem."""
    problems = duplicate_keys(text)
    try:
        doc = model.model_validate_json(text)
    except ValidationError as err:
        syntax = json_syntax_problem(text)
        problems += [syntax] if syntax else validation_problems(err, model)
    if problems:
        raise InputError([f"{source}: {line}" for line in problems])
    return doc


def parse_batch_text(text: str | bytes, source: str = "<batch>") -> Batch:
    """Validate a batch document's JSON text; raise InputError with one line per problem."""
    return validate_json(Batch, text, source)


def read_bytes(path: Path | str) -> bytes:
    """The file's bytes; a file that cannot be read is one line naming it and why."""
    p = Path(path)
    try:
        return p.read_bytes()
    except FileNotFoundError:
        raise InputError(f"{p}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{p}: is a folder, not a file") from None
    except PermissionError:
        raise InputError(f"{p}: cannot read: permission denied") from None
    except OSError as exc:
        raise InputError(f"{p}: cannot read: {exc.strerror or exc}") from None


def decode_text(data: bytes, path: Path | str) -> str:
    """UTF-8 text (a leading byte-order mark is allowed); otherwise one line saying where the
    first byte that is not UTF-8 sits, or that the file is UTF-16."""
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
            reason = "not UTF-8 text but UTF-16; save it as UTF-8"
        else:
            line = data.count(b"\n", 0, exc.start) + 1
            column = exc.start - (data.rfind(b"\n", 0, exc.start) + 1) + 1
            reason = (f"not UTF-8 text: byte 0x{data[exc.start]:02x} at line {line}, column"
                      f" {column} is not UTF-8; save the file as UTF-8")
        raise InputError(f"{path}: {reason}") from None


def read_text(path: Path | str) -> str:
    """A UTF-8 input file's text; every problem one line naming the file."""
    return decode_text(read_bytes(path), path)


def load_plan(path: Path | str) -> PlanDoc:
    """Read and validate a plan document."""
    return validate_json(PlanDoc, read_text(path), str(path))


def calendar_hours(when: datetime, start: datetime, path: str,
                    problems: list[str]) -> float | None:
    """Hours from `start` to the calendar time `when` under the time-zone rule (TIME_RULE)."""
    if when.tzinfo is not None and start.tzinfo is None:
        problems.append(f"{path}: {when.isoformat()} has a UTC offset but the window start"
                        f" ({start.isoformat()}) has none; give both an offset or neither")
        return None
    if when.tzinfo is None and start.tzinfo is not None:
        when = when.replace(tzinfo=start.tzinfo)
    return (when - start) / timedelta(hours=1)


def plan_hours(plan: PlanDoc, window_start: datetime) -> list[tuple[float, float | None]]:
    """Each assignment's start and stated end (None if not stated) in hours from the window
    start, read from `start_h`/`end_h` or from the calendar times `start`/`end`.

    Raises InputError (one line per problem, with its JSON path) for a row without a start, a
    calendar time against the time-zone rule, or two forms of one time that disagree.
    """
    problems: list[str] = []
    out = []
    for k, a in enumerate(plan.assignments):
        path = f"assignments[{k}]"
        start = _stated_hours(a.start_h, a.start, f"{path}.start", window_start, problems)
        end = _stated_hours(a.end_h, a.end, f"{path}.end", window_start, problems)
        if start is None and a.start_h is None and a.start is None:
            problems.append(f"{path}.start_h: required field is missing (or give start as"
                            f" {CALENDAR_HELP})")
        out.append((start if start is not None else 0.0, end))
    if problems:
        raise InputError(problems)
    return out


def _stated_hours(hours: float | None, when: datetime | None, path: str, window_start: datetime,
                  problems: list[str]) -> float | None:
    """A plan time in hours from `hours` or `when`; both may be given if they agree."""
    if when is None:
        return hours
    offset = calendar_hours(when, window_start, path, problems)
    if offset is None or hours is None:
        return offset
    if abs(offset - hours) * 60 > MINUTE_TOLERANCE:
        problems.append(f"{path}: {when.isoformat()} is {offset_text(offset * 60)} from the"
                        f" window start but {path.rsplit('.', 1)[-1]}_h says {hours:g} h;"
                        " give one of them, or make them agree")
        return None
    return hours
