"""Pydantic models of the batch and plan documents, count expansion and cross-field checks.

This is the only module that sees user JSON. It reads files as UTF-8, refuses repeated keys,
and words every problem itself (`<json.path>: <what is wrong and what is allowed>`). Everything
downstream receives an `ExpandedBatch` (one entry per node and per job, names resolved, every
time in hours from the window start whichever form the document used, every cross-field rule
already checked).
"""

from __future__ import annotations

import json
import re
from collections import Counter
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path
from typing import Annotated, Any

import networkx as nx
from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    WithJsonSchema,
)
from pydantic_core import PydanticCustomError

from assignplan.errors import InputError
from assignplan.units import (  # noqa: F401  (the contract helpers, re-exported)
    MAX_CORES,
    MAX_GPUS,
    MAX_JOB_HOURS,
    MAX_MEMORY_GIB,
    MAX_OFFSET_HOURS,
    MAX_RESOURCE_MINUTES,
    MAX_SPEED,
    MAX_WEIGHT,
    MIN_JOB_HOURS,
    MIN_SPEED,
    MINUTE_TOLERANCE,
    ceil_minutes,
    clock,
    counted,
    duration_minutes,
    floor_minutes,
    memory_mib,
    offset_text,
)

CALENDAR_HELP = "an ISO 8601 calendar time such as 2026-12-07T08:00 or 2026-12-07"


def _calendar_time(value: Any) -> Any:
    """ISO 8601 text -> datetime, in JSON and in Python input alike; a date alone is midnight.

    Anything that is not text is left to pydantic's strict datetime check, which refuses it.
    """
    if isinstance(value, str):
        try:
            return datetime.fromisoformat(value)
        except ValueError:
            raise PydanticCustomError("calendar_time", "must be {help}",
                                      {"help": CALENDAR_HELP}) from None
    return value


CalendarTime = Annotated[
    datetime,
    BeforeValidator(_calendar_time),
    WithJsonSchema({"type": "string", "anyOf": [{"format": "date-time"}, {"format": "date"}]}),
]
Name = Annotated[str, Field(min_length=1, max_length=200, pattern=r"^[A-Za-z0-9_.:+\-]+$")]

# No NaN or Infinity anywhere: a number that is not finite has no place in a plan.
_STRICT = ConfigDict(strict=True, extra="forbid", frozen=True, allow_inf_nan=False)
_PLAN = ConfigDict(strict=True, extra="forbid", allow_inf_nan=False)
# Offsets a plan may state (either sign): no plan of a valid batch ends later, its horizon
# being below MAX_RESOURCE_MINUTES (1.9e16 h), and in minutes they still fit int64 (9.2e18).
MAX_PLAN_HOURS = 1e17

TIME_RULE = (
    "Each time is given either as `<name>_h`, hours from the window start, or as `<name>`, an"
    " ISO 8601 calendar time (a date alone is midnight), not both. A calendar time without a"
    " UTC offset is read in the window start's offset; one with an offset needs a window start"
    " with an offset too."
)


def _offset(description: str) -> Any:
    return Field(default=None, ge=0, le=MAX_OFFSET_HOURS, description=description)


def _calendar(description: str) -> Any:
    return Field(default=None, description=description)


class Window(BaseModel):
    """The planning window: the week the batch is planned for."""

    model_config = _STRICT
    start: CalendarTime = Field(
        description="Calendar time of minute 0 (ISO 8601; a date alone is midnight).")
    hours: float = Field(default=168.0, gt=0, le=MAX_OFFSET_HOURS,
                         description="Length of the window in hours.")


class Maintenance(BaseModel):
    """A half-open interval [start, end) during which nothing may run on the node."""

    model_config = ConfigDict(**_STRICT, json_schema_extra={
        "description": "A half-open interval [start, end) during which nothing may run on the"
                       " node. " + TIME_RULE,
        "allOf": [{"oneOf": [{"required": ["start_h"]}, {"required": ["start"]}]},
                  {"oneOf": [{"required": ["end_h"]}, {"required": ["end"]}]}]})
    start_h: float | None = _offset("Start, in hours from the window start.")
    end_h: float | None = _offset("End (exclusive), in hours from the window start.")
    start: CalendarTime | None = _calendar("Start as a calendar time (instead of start_h).")
    end: CalendarTime | None = _calendar("End as a calendar time (instead of end_h).")


class NodeGroup(BaseModel):
    """One node, or `count` identical nodes named `<name>-<k>`."""

    model_config = _STRICT
    name: Name
    count: int = Field(default=1, ge=1, le=100_000)
    cores: int = Field(gt=0, le=MAX_CORES)
    memory_gib: float = Field(gt=0, le=MAX_MEMORY_GIB)
    gpus: int = Field(default=0, ge=0, le=MAX_GPUS)
    speed: float = Field(default=1.0, ge=MIN_SPEED, le=MAX_SPEED,
                         description="Relative speed; 1.0 = reference node.")
    tags: list[Name] = Field(default_factory=list)
    maintenance: list[Maintenance] = Field(default_factory=list)


class JobGroup(BaseModel):
    """One job, or `count` identical jobs named `<name>-<k>` (a parameter sweep)."""

    model_config = ConfigDict(**_STRICT, json_schema_extra={
        "description": "One job, or `count` identical jobs named `<name>-<k>` (a parameter"
                       " sweep). " + TIME_RULE,
        "not": {"anyOf": [{"required": ["ready", "ready_h"]}, {"required": ["due", "due_h"]}]}})
    name: Name
    count: int = Field(default=1, ge=1, le=1_000_000)
    cores: int = Field(gt=0, le=MAX_CORES)
    memory_gib: float = Field(gt=0, le=MAX_MEMORY_GIB)
    hours: float = Field(ge=MIN_JOB_HOURS, le=MAX_JOB_HOURS,
                         description="Run time on a reference node (speed 1.0).")
    gpus: int = Field(default=0, ge=0, le=MAX_GPUS)
    needs: list[Name] = Field(default_factory=list, description="Node tags the job requires.")
    follows: list[Name] = Field(
        default_factory=list, description="Jobs or job groups that must end before this starts."
    )
    ready_h: float | None = _offset("Earliest start, in hours from the window start (default 0).")
    due_h: float | None = _offset("Due time, in hours from the window start.")
    weight: float = Field(default=1.0, ge=0, le=MAX_WEIGHT)
    ready: CalendarTime | None = _calendar("Earliest start as a calendar time (instead of"
                                           " ready_h).")
    due: CalendarTime | None = _calendar("Due time as a calendar time (instead of due_h).")


class Batch(BaseModel):
    """The input document: a window, the node inventory and the job list."""

    model_config = _STRICT
    window: Window
    nodes: list[NodeGroup] = Field(min_length=1)
    jobs: list[JobGroup] = Field(min_length=1)


def _plan_offset(description: str) -> Any:
    return Field(default=None, ge=-MAX_PLAN_HOURS, le=MAX_PLAN_HOURS, description=description)


PlanHours = Annotated[float, Field(ge=-MAX_PLAN_HOURS, le=MAX_PLAN_HOURS)]


class Assignment(BaseModel):
    """Where and when one job runs: its start as `start_h` or `start` (or both, agreeing)."""

    model_config = _PLAN
    job: Name
    node: Name
    start_h: float | None = _plan_offset("Start, in hours from the window start.")
    end_h: float | None = _plan_offset(
        "End, in hours from the window start; optional (the model's duration gives it).")
    start: CalendarTime | None = _calendar("Start as a calendar time (ISO 8601).")
    end: CalendarTime | None = _calendar("End as a calendar time (ISO 8601); optional.")


class Objective(BaseModel):
    """The lexicographic objective of a plan, in hours."""

    model_config = _PLAN
    makespan_h: float
    weighted_tardiness_h: float
    weighted_completion_h: float


class HistoryRow(BaseModel):
    """One generation of an iterative method: best and median fitness."""

    model_config = _PLAN
    generation: int
    evaluations: int
    best_makespan_h: float
    median_makespan_h: float
    best_tardiness_h: float = 0.0


class PlanDoc(BaseModel):
    """The plan document written by `solve --out` and read by `check` and `report`.

    Only `assignments` is required, so a hand-written plan of job, node and start is a plan.
    """

    model_config = _PLAN
    method: str | None = None
    status: str = "feasible"
    seed: int | None = None
    window_start: CalendarTime | None = None
    makespan_h: float | None = _plan_offset("Stated makespan (hours); checked when given.")
    lower_bound_h: float | None = _plan_offset(
        "Provable lower bound on the makespan (hours); computed when not given.")
    lower_bound_parts_h: dict[str, PlanHours] = Field(
        default_factory=dict,
        description="Each part of the provable lower bound (hours); the largest is the bound "
                    "unless the method proved a better one.")
    gap_pct: float | None = None
    objective: Objective | None = None
    seconds: float = 0.0
    assignments: list[Assignment]
    history: list[HistoryRow] = Field(default_factory=list)


# --------------------------------------------------------------------------- expansion


@dataclass(frozen=True)
class Node:
    name: str
    group: str
    doc_index: int
    cores: int
    memory_mib: int
    gpus: int
    speed: float
    tags: frozenset[str]
    maintenance: tuple[tuple[float, float], ...]  # hours from the window start


@dataclass(frozen=True)
class Job:
    name: str
    group: str
    doc_index: int
    cores: int
    memory_mib: int
    gpus: int
    hours: float
    needs: frozenset[str]
    follows: tuple[str, ...]  # resolved to member job names
    ready_h: float
    due_h: float | None
    weight: float


@dataclass(frozen=True)
class ExpandedBatch:
    """The batch after count expansion and cross-field checks: one entry per node and job.

    Every time is in hours from the window start, whichever form the document used.
    `warnings`: doubtful but valid input, one line each with its JSON path.
    """

    window_start: datetime
    window_hours: float
    nodes: tuple[Node, ...]
    jobs: tuple[Job, ...]
    warnings: tuple[str, ...] = ()


def member_names(name: str, count: int) -> list[str]:
    """`count` expansion: `gpu` x 12 -> gpu-01 .. gpu-12 (zero-padded to the width of count)."""
    if count == 1:
        return [name]
    width = len(str(count))
    return [f"{name}-{k:0{width}d}" for k in range(1, count + 1)]


# --------------------------------------------------------------------------- problems in words


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


def _number(x: float) -> str:
    """A limit as a person reads it: 10,000 and 0.01, not 10000.0 and 1e-02."""
    if float(x).is_integer() and abs(x) < 1e12:
        return f"{int(x):,}"
    return f"{x:g}"


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
                words.append(f"{text} {_number(getattr(limit, attr))}")
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
            f"{text} {_number(ctx[attr])}" for attr, text in _LIMIT_WORDS if attr in ctx)
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


def read_text(path: Path | str) -> str:
    """Read a UTF-8 input file (a leading byte-order mark is allowed), turning OS and decoding
    errors into an InputError naming the file."""
    p = Path(path)
    try:
        return p.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{p}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{p}: is a directory, not a JSON file") from None
    except PermissionError:
        raise InputError(f"{p}: cannot read: permission denied") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{p}: {_not_utf8(exc)}") from None
    except OSError as exc:
        raise InputError(f"{p}: cannot read: {exc.strerror or exc}") from None


def _not_utf8(exc: UnicodeDecodeError) -> str:
    data = bytes(exc.object)
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        return "not UTF-8 text but UTF-16; save it as UTF-8"
    line = data.count(b"\n", 0, exc.start) + 1
    column = exc.start - (data.rfind(b"\n", 0, exc.start) + 1) + 1
    return (f"not UTF-8 text: byte 0x{data[exc.start]:02x} at line {line}, column {column}"
            " is not UTF-8; save the file as UTF-8")


def load_batch(path: Path | str) -> ExpandedBatch:
    """Read, validate and expand a batch file (the one entry point for batch input)."""
    return expand_batch(parse_batch_text(read_text(path), str(path)), source=str(path))


def load_plan(path: Path | str) -> PlanDoc:
    """Read and validate a plan document."""
    return validate_json(PlanDoc, read_text(path), str(path))


# --------------------------------------------------------------------------- times


def _calendar_hours(when: datetime, start: datetime, path: str,
                    problems: list[str]) -> float | None:
    """Hours from `start` to the calendar time `when` under the time-zone rule (TIME_RULE)."""
    if when.tzinfo is not None and start.tzinfo is None:
        problems.append(f"{path}: {when.isoformat()} has a UTC offset but the window start"
                        f" ({start.isoformat()}) has none; give both an offset or neither")
        return None
    if when.tzinfo is None and start.tzinfo is not None:
        when = when.replace(tzinfo=start.tzinfo)
    return (when - start) / timedelta(hours=1)


def _input_hours(hours: float | None, when: datetime | None, path: str, start: datetime | None,
                 problems: list[str], *, required: bool) -> float | None:
    """A batch time given as `<name>_h` or as calendar time `<name>` (at `path`), in hours.

    None when not given, when wrong (a problem is added) or when there is no window start yet
    to read a calendar time against (a node file without a window: checked in the batch).
    """
    name = path.rsplit(".", 1)[-1]
    if hours is not None and when is not None:
        problems.append(f"{path}: give {name} (a calendar time) or {name}_h (hours from the"
                        " window start), not both")
        return None
    if when is None:
        if hours is None and required:
            problems.append(f"{path}_h: required field is missing (or give {name} as"
                            f" {CALENDAR_HELP})")
        return hours
    if start is None:
        return None
    offset = _calendar_hours(when, start, path, problems)
    if offset is None:
        return None
    if when.tzinfo is None:  # show it as it was read
        when = when.replace(tzinfo=start.tzinfo)
    if offset < 0:
        problems.append(f"{path}: {when.isoformat()} is before the window starts"
                        f" ({start.isoformat()})")
    elif offset > MAX_OFFSET_HOURS:
        problems.append(f"{path}: {when.isoformat()} is more than {_number(MAX_OFFSET_HOURS)} h"
                        " after the window start")
    else:
        return offset
    return None


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
    offset = _calendar_hours(when, window_start, path, problems)
    if offset is None or hours is None:
        return offset
    if abs(offset - hours) * 60 > MINUTE_TOLERANCE:
        problems.append(f"{path}: {when.isoformat()} is {offset_text(offset * 60)} from the"
                        f" window start but {path.rsplit('.', 1)[-1]}_h says {hours:g} h;"
                        " give one of them, or make them agree")
        return None
    return hours


# --------------------------------------------------------------------------- cross-field checks


def expand_batch(batch: Batch, source: str = "<batch>") -> ExpandedBatch:
    """Expand counts, read every time as hours from the window start and run every cross-field
    check; all problems are reported together, doubtful values come back as warnings."""
    problems: list[str] = []
    warnings: list[str] = []
    nodes = _expand_nodes(batch, problems)
    jobs = _expand_jobs(batch, problems, warnings)
    _check_capacity(batch, nodes, jobs, problems)
    _check_cycles(batch, jobs, problems)
    _check_totals(batch, nodes, problems)
    if problems:
        raise InputError([f"{source}: {p}" for p in problems])
    return ExpandedBatch(batch.window.start, batch.window.hours, tuple(nodes), tuple(jobs),
                         tuple(warnings))


def _expand_nodes(batch: Any, problems: list[str]) -> list[Node]:
    """Node members with maintenance in hours. `batch` may be a node file without a window:
    its calendar times are then checked when the batch is put together."""
    window = getattr(batch, "window", None)
    origin = window.start if window is not None else None
    nodes: list[Node] = []
    seen: dict[str, int] = {}
    for gi, g in enumerate(batch.nodes):
        spans: list[tuple[float, float, int]] = []
        for k, m in enumerate(g.maintenance):
            path = f"nodes[{gi}].maintenance[{k}]"
            s = _input_hours(m.start_h, m.start, f"{path}.start", origin, problems, required=True)
            e = _input_hours(m.end_h, m.end, f"{path}.end", origin, problems, required=True)
            if s is None or e is None:
                continue
            if e <= s:
                problems.append(f"{path}: ends at {e} h, not after it starts ({s} h)")
            spans.append((s, e, k))
        windows = sorted(spans)
        for (_s0, e0, k0), (s1, _e1, k1) in zip(windows, windows[1:], strict=False):
            if s1 < e0:
                problems.append(
                    f"nodes[{gi}].maintenance[{k1}]: overlaps maintenance[{k0}]"
                    f" ([{s1}, ..) starts before {e0} h)"
                )
        for name in member_names(g.name, g.count):
            if name in seen:
                problems.append(
                    f"nodes[{gi}].name: node '{name}' duplicates a node of nodes[{seen[name]}]"
                )
                continue
            seen[name] = gi
            nodes.append(
                Node(
                    name, g.name, gi, g.cores, memory_mib(g.memory_gib), g.gpus, g.speed,
                    frozenset(g.tags), tuple((s, e) for s, e, _ in spans),
                )
            )
    return nodes


def _expand_jobs(batch: Batch, problems: list[str], warnings: list[str]) -> list[Job]:
    members: dict[str, list[str]] = {}  # job or group name -> member names
    seen: dict[str, int] = {}
    for gi, g in enumerate(batch.jobs):
        names = member_names(g.name, g.count)
        for name in names:
            if name in seen:
                problems.append(
                    f"jobs[{gi}].name: job '{name}' duplicates a job of jobs[{seen[name]}]"
                    " (names are compared after count expansion)"
                )
            seen.setdefault(name, gi)
        members.setdefault(g.name, []).extend(n for n in names if n not in members.get(g.name, []))
        for name in names:
            members.setdefault(name, [name])
    all_tags = {t for g in batch.nodes for t in g.tags}
    jobs: list[Job] = []
    for gi, g in enumerate(batch.jobs):
        for k, tag in enumerate(g.needs):
            if tag not in all_tags:
                problems.append(f"jobs[{gi}].needs[{k}]: no node has tag '{tag}'")
        follows: list[str] = []
        for k, ref in enumerate(g.follows):
            if ref not in members:
                problems.append(f"jobs[{gi}].follows[{k}]: no job or job group named '{ref}'")
                continue
            follows.extend(m for m in members[ref] if m not in follows)
        origin = batch.window.start
        ready = _input_hours(g.ready_h, g.ready, f"jobs[{gi}].ready", origin, problems,
                             required=False)
        due = _input_hours(g.due_h, g.due, f"jobs[{gi}].due", origin, problems, required=False)
        ready = 0.0 if ready is None else ready
        warnings.extend(_time_warnings(batch, gi, ready, due))
        for name in member_names(g.name, g.count):
            jobs.append(
                Job(
                    name, g.name, gi, g.cores, memory_mib(g.memory_gib), g.gpus, g.hours,
                    frozenset(g.needs), tuple(follows), ready, due, g.weight,
                )
            )
    return jobs


def _time_warnings(batch: Batch, gi: int, ready: float, due: float | None) -> list[str]:
    """Valid but doubtful times of job group `gi`: due before ready, ready past the window."""
    g, origin = batch.jobs[gi], batch.window.start
    ready_min, end_min = ceil_minutes(ready * 60), ceil_minutes(batch.window.hours * 60)
    ready_path = f"jobs[{gi}].{'ready' if g.ready is not None else 'ready_h'}"
    out = []
    if due is not None and due < ready:
        out.append(f"jobs[{gi}].{'due' if g.due is not None else 'due_h'}: due at"
                   f" {clock(origin, floor_minutes(due * 60))} before it is ready at"
                   f" {clock(origin, ready_min)}, so it will be late")
    if ready_min >= end_min:
        out.append(f"{ready_path}: ready at {clock(origin, ready_min)}, when the window has"
                   f" ended ({clock(origin, end_min)}); it can only run past the window")
    return out


def can_hold(node: Node, job: Job) -> bool:
    """True when the node has the cores, memory, GPUs and tags the job needs."""
    return (
        job.cores <= node.cores
        and job.memory_mib <= node.memory_mib
        and job.gpus <= node.gpus
        and job.needs <= node.tags
    )


def _shortfall(node: Node, job: Job) -> list[str]:
    short = []
    if job.cores > node.cores:
        short.append(f"{job.cores - node.cores} cores")
    if job.memory_mib > node.memory_mib:
        short.append(f"{(job.memory_mib - node.memory_mib) / 1024:g} GiB memory")
    if job.gpus > node.gpus:
        short.append(f"{job.gpus - node.gpus} GPUs")
    missing = sorted(job.needs - node.tags)
    if missing:
        short.append("tags " + ", ".join(missing))
    return short


def _check_capacity(
    batch: Batch, nodes: list[Node], jobs: list[Job], problems: list[str]
) -> None:
    reported: set[int] = set()
    for job in jobs:
        if job.doc_index in reported or any(can_hold(n, job) for n in nodes):
            continue
        reported.add(job.doc_index)
        # The closest node is the one with the fewest things missing, then the smallest relative
        # shortfall: that is the node the admin most likely meant.
        def distance(n: Node, job: Job = job) -> tuple[int, float]:
            rel = (
                max(0, job.cores - n.cores) / job.cores
                + max(0, job.memory_mib - n.memory_mib) / job.memory_mib
                + (max(0, job.gpus - n.gpus) / job.gpus if job.gpus else 0.0)
            )
            return (len(_shortfall(n, job)), rel)

        closest = min(nodes, key=distance)
        problems.append(
            f"jobs[{job.doc_index}]: no node can hold job '{job.name}' (needs {job.cores} cores,"
            f" {job.memory_mib / 1024:g} GiB, {job.gpus} GPUs"
            + (f", tags {', '.join(sorted(job.needs))}" if job.needs else "")
            + f"); closest node '{closest.name}' is short of {', '.join(_shortfall(closest, job))}"
        )


def _check_cycles(batch: Batch, jobs: list[Job], problems: list[str]) -> None:
    graph = nx.DiGraph()
    graph.add_nodes_from(j.name for j in jobs)
    graph.add_edges_from((p, j.name) for j in jobs for p in j.follows)
    index = {j.name: j.doc_index for j in jobs}
    reported: set[frozenset[str]] = set()
    for component in nx.strongly_connected_components(graph):
        if len(component) == 1:
            (only,) = component
            if not graph.has_edge(only, only):
                continue
        cycle = nx.find_cycle(graph.subgraph(component))
        names = [u for u, _v in cycle] + [cycle[0][0]]
        key = frozenset(names)
        if key in reported:
            continue
        reported.add(key)
        problems.append(
            f"jobs[{index[names[0]]}].follows: dependency cycle {' -> '.join(names)}"
            " (each must end before the next starts)"
        )


_RESOURCE_UNITS = (("cores", "core"), ("memory", "MiB"), ("GPUs", "GPU"))


def _check_totals(batch: Batch, nodes: list[Node], problems: list[str]) -> None:
    """Every job's resource-minutes on the slowest node, summed per resource, must stay within
    MAX_RESOURCE_MINUTES, so no sum or time the planner forms can overflow (see units)."""
    if not nodes:
        return
    slowest = min(n.speed for n in nodes)
    totals = [0, 0, 0]  # Python integers: exact however large
    for g in batch.jobs:
        longest = int(duration_minutes(g.hours, slowest))
        for r, demand in enumerate((g.cores, memory_mib(g.memory_gib), g.gpus)):
            totals[r] += g.count * demand * longest
    for (resource, unit), total in zip(_RESOURCE_UNITS, totals, strict=True):
        if total > MAX_RESOURCE_MINUTES:
            problems.append(
                f"jobs: together the jobs need {total:.3g} {unit}-minutes of {resource} on the"
                f" slowest node (speed {slowest:g}), more than the planner can count"
                f" ({MAX_RESOURCE_MINUTES:.3g}); plan the batch in parts or shorten its"
                " longest jobs")
