"""Where the week stands: the state document a replan starts from, and what it pins.

A state says, per job, `done` (with its actual end) or `running` (its node, actual start
and, if known, a new expected end), nothing for a job not started; per node, `down` from a
time (until a time, or until further notice) or a new `maintenance` window; and it may add
new jobs (the batch's own fields). JSON (schema `state.schema.json`) or CSV (one row per job
or node: name, status, node, start, end). Every problem is one line with its path.

`resolve_state` checks the state against the batch as it now stands and the plan being
replaced, and returns `Pins`: each done or running job fixed to its node and interval, the
moment `now` before which nothing new may start, and the running jobs a node's window stops
(their progress lost: they are planned again from `now`).
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from assignplan.documents import (
    TIME_RULE,
    CalendarTime,
    JobGroup,
    Name,
)
from assignplan.errors import InputError
from assignplan.reading import (
    calendar_hours,
    format_loc,
    problem_words,
    read_text,
    validate_json,
)
from assignplan.units import MAX_OFFSET_HOURS, ceil_minutes, clock, duration_minutes
from assignplan.whatif import NamePattern

_STRICT = ConfigDict(strict=True, extra="forbid", frozen=True, allow_inf_nan=False)


def _hours_field(title: str, description: str):
    return Field(default=None, ge=0, le=MAX_OFFSET_HOURS, title=title, description=description)


def _calendar_field(title: str, description: str):
    return Field(default=None, title=title, description=description)


class JobState(BaseModel):
    """A job that has ended (`done`) or is running; a job not listed has not started."""

    model_config = ConfigDict(**_STRICT, json_schema_extra={
        "description": "A job that has ended (done) or is running; a job not listed has not"
                       " started. " + TIME_RULE})
    job: Name = Field(title="Job", description="A job of the batch (member name).")
    status: Literal["done", "running"] = Field(
        title="Status", description="done: it has ended (give its end); running: it has "
        "started (give its start) and holds its node until its end.")
    node: Name | None = Field(default=None, title="Node",
                              description="Where it ran or runs (default: the plan's node).")
    start_h: float | None = _hours_field("Start (h from window start)",
                                         "Actual start; required when running (default for "
                                         "a done job: the plan's start).")
    end_h: float | None = _hours_field("End (h from window start)",
                                       "Actual end when done (required); new expected end "
                                       "when running (default: start plus its run time).")
    start: CalendarTime | None = _calendar_field("Start (calendar time)",
                                                 "Actual start as a calendar time.")
    end: CalendarTime | None = _calendar_field("End (calendar time)",
                                               "End as a calendar time.")


class NodeState(BaseModel):
    """A node (or group, or glob pattern) down from a time, or a new maintenance window."""

    model_config = ConfigDict(**_STRICT, json_schema_extra={
        "description": "A node (or a group, or a glob pattern such as gpu-*) down from a time"
                       " (until a time, or until further notice), or a new maintenance"
                       " window. Jobs still running on it when the window starts are"
                       " stopped and planned again from now. " + TIME_RULE})
    node: NamePattern = Field(title="Node", description="A node, a node group, or a glob "
                              "pattern over node and group names.")
    status: Literal["down", "maintenance"] = Field(
        title="Status", description="down: out of service from `start` (until `end` if "
        "given); maintenance: a window [start, end) (end required).")
    start_h: float | None = _hours_field("Start (h from window start)", "Start of the window.")
    end_h: float | None = _hours_field("End (h from window start)",
                                       "End of the window (exclusive).")
    start: CalendarTime | None = _calendar_field("Start (calendar time)",
                                                 "Start as a calendar time.")
    end: CalendarTime | None = _calendar_field("End (calendar time)", "End as a calendar time.")


class StateDoc(BaseModel):
    """Where the week stands: jobs done or running, nodes down, new jobs."""

    model_config = ConfigDict(**_STRICT, json_schema_extra={
        "description": "Where the week stands: jobs done or running, nodes down or in new"
                       " maintenance, new jobs. " + TIME_RULE})
    now_h: float | None = _hours_field("Now (h from window start)",
                                       "The moment the state describes; `replan --now` "
                                       "gives or overrides it.")
    now: CalendarTime | None = _calendar_field("Now (calendar time)", "Now as a calendar time.")
    jobs: list[JobState] = Field(default_factory=list, title="Jobs",
                                 description="Jobs done or running.")
    nodes: list[NodeState] = Field(default_factory=list, title="Nodes",
                                   description="Nodes down, or in new maintenance windows.")
    new_jobs: list[JobGroup] = Field(default_factory=list, title="New jobs",
                                     description="Jobs added since the plan was made (the "
                                                 "batch's fields).")


@dataclass(frozen=True)
class Pin:
    """A job fixed where it ran or runs: node name, [start, end) in minutes."""

    node: str
    start: int
    end: int
    running: bool


@dataclass(frozen=True)
class Pins:
    """What a replan may not change: `now` (minutes from the window start) and the pinned
    jobs by name; `lost`: running jobs a node's window stopped, planned again (by name, with
    the line that says why)."""

    now: int
    jobs: dict[str, Pin] = field(default_factory=dict)
    lost: dict[str, str] = field(default_factory=dict)
    notes: tuple[str, ...] = ()


# --------------------------------------------------------------------------- reading


STATE_COLUMNS = ("name", "status", "node", "start", "end")
JOB_STATUS = ("done", "running")
NODE_STATUS = ("down", "maintenance")


def read_state(path: Path | str) -> StateDoc:
    """A state file: JSON by content (a '{' first), otherwise CSV."""
    text = read_text(path)
    if text.lstrip().startswith("{"):
        return validate_json(StateDoc, text, str(path))
    return _state_from_csv(text, str(path))


def _state_from_csv(text: str, source: str) -> StateDoc:
    """One row per job (status done or running) or node (down or maintenance); columns name,
    status, node, start, end (a number is hours from the window start, anything else a
    calendar time). New jobs and `now` need JSON (or `replan --now`)."""
    try:
        rows = list(csv.reader(io.StringIO(text.removeprefix("\ufeff"), newline=""),
                               delimiter=_separator(text), strict=True))
    except csv.Error:
        raise InputError(f"{source}: not readable as CSV (check its quotes), nor JSON (a"
                         " state in JSON starts with '{')") from None
    if not rows:
        raise InputError(f"{source}: empty; a state CSV has a header row"
                         f" ({', '.join(STATE_COLUMNS)})")
    header = [c.strip().lower() for c in rows[0]]
    problems = [f"{source}: column '{c}': unknown column; the columns are"
                f" {', '.join(STATE_COLUMNS)}" for c in header if c and c not in STATE_COLUMNS]
    problems += [f"{source}: column '{c}': required column is missing"
                 for c in ("name", "status") if c not in header]
    if problems:
        raise InputError(problems)
    jobs, nodes = [], []
    for k, row in enumerate(rows[1:], start=2):
        cells = {h: row[c].strip() for c, h in enumerate(header) if h and c < len(row)
                 and row[c].strip()}
        if not cells:
            continue
        status = cells.get("status", "")
        where = f"{source}:row {k}"
        if status not in JOB_STATUS + NODE_STATUS:
            problems.append(f"{where}.status: must be one of"
                            f" {', '.join(JOB_STATUS + NODE_STATUS)} (got '{status}')")
            continue
        doc: dict = {"status": status}
        if status in JOB_STATUS:
            doc["job"] = cells.get("name", "")
            if "node" in cells:
                doc["node"] = cells["node"]
        else:
            doc["node"] = cells.get("name", "")
            if "node" in cells:
                problems.append(f"{where}.node: a {status} row names its node in 'name'")
                continue
        for name in ("start", "end"):
            if name in cells:
                hours = _number(cells[name])
                if hours is None:
                    doc[name] = cells[name]
                else:
                    doc[f"{name}_h"] = hours
        model = JobState if status in JOB_STATUS else NodeState
        try:
            item = model.model_validate(doc)
        except ValidationError as err:
            problems += [f"{where}.{_csv_loc(e['loc'])}: {problem_words(e, model)}"
                         for e in err.errors()]
            continue
        (jobs if status in JOB_STATUS else nodes).append(item)
    if problems:
        raise InputError(problems)
    return StateDoc(jobs=jobs, nodes=nodes)


def _separator(text: str) -> str:
    first = next((line for line in text.splitlines() if line.strip()), "")
    return max((",", ";", "\t"), key=lambda sep: sum(
        c.strip().lower() in STATE_COLUMNS for c in first.split(sep)))


def _number(cell: str) -> float | None:
    try:
        value = float(cell)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _csv_loc(loc: tuple) -> str:
    """A CSV row's field: the column name (start_h and start are both the column start)."""
    text = format_loc(tuple(loc))
    return {"job": "name", "start_h": "start", "end_h": "end"}.get(text, text)


# --------------------------------------------------------------------------- resolving


def state_now(state: StateDoc, now: datetime | float | None, window_start: datetime,
              source: str) -> int:
    """`now` in whole minutes from the window start: `now` (from `--now`) or the state's."""
    problems: list[str] = []
    if state.now is not None and state.now_h is not None:
        problems.append(f"{source}: now: give now (a calendar time) or now_h, not both")
    given = now if now is not None else state.now if state.now is not None else state.now_h
    where = "--now" if now is not None else f"{source}: now"
    if given is None:
        problems.append("--now: required (or give now in the state file)")
    hours = None
    if not problems:
        hours = _offset(given, where, window_start, problems)
    if problems:
        raise InputError(problems)
    return ceil_minutes(hours * 60)


def _offset(value: datetime | float, where: str, window_start: datetime,
            problems: list[str]) -> float | None:
    """A state time in hours from the window start (problems for one before it)."""
    if isinstance(value, datetime):
        hours = calendar_hours(value, window_start, where, problems)
        if hours is None:
            return None
        if hours < 0:
            problems.append(f"{where}: {value.isoformat()} is before the window starts"
                            f" ({window_start.isoformat()})")
            return None
        return hours
    return float(value)


@dataclass(frozen=True)
class OldRow:
    """A job's row in the plan being replaced: node name, start and end minutes."""

    node: str
    start: int
    end: int


def resolve_state(state: StateDoc, source: str, batch, now: int,
                  old: dict[str, OldRow]) -> Pins:
    """The pins of `state` against `batch` (the expanded batch as it now stands, new jobs
    and windows included) and the rows of the old plan; InputError, one line per problem.

    Checked: each job known, listed once, on a node that exists and can hold it; a done job
    ends after it starts and no later than now; a running job starts no later than now and
    is expected to end after it; a pinned job's predecessors are done; the running jobs of a
    node fit it together. A running job whose node has a window (down or maintenance)
    starting before its expected end is not pinned but planned again from now (`lost`).
    """
    from assignplan.expand import can_hold

    jobs = {j.name: j for j in batch.jobs}
    nodes = {n.name: n for n in batch.nodes}
    origin = batch.window_start
    problems: list[str] = []
    seen: dict[str, int] = {}
    pins: dict[str, Pin] = {}
    lost: dict[str, str] = {}
    notes: list[str] = []
    for k, s in enumerate(state.jobs):
        where = f"{source}: jobs[{k}]"
        job = jobs.get(s.job)
        if job is None:
            problems.append(f"{where}.job: no job named '{s.job}' in the batch")
            continue
        if s.job in seen:
            problems.append(f"{where}: job '{s.job}' is listed again (first at jobs"
                            f"[{seen[s.job]}]); a job is done or running, not both")
            continue
        seen[s.job] = k
        pin = _pin(s, where, job, nodes, old.get(s.job), origin, now, problems, can_hold)
        if pin is None:
            continue
        if pin.running:
            window = _window_meeting(nodes[pin.node], pin.start, pin.end)
            if window is not None:
                lost[s.job] = (f"{s.job} was running on {pin.node}, which is out of service"
                               f" from {clock(origin, window)}: planned again from now, its"
                               " progress lost")
                continue
            if pin.end <= now:
                notes.append(f"{s.job} has run past its estimate ({clock(origin, pin.end)});"
                             " taken to end now: give its expected end in the state")
                pin = Pin(pin.node, pin.start, now, True)
        pins[s.job] = pin
    problems += _pin_order(pins, jobs, source, seen)
    problems += _running_fit(pins, jobs, nodes, source)
    if problems:
        raise InputError(problems)
    return Pins(now, pins, lost, tuple(notes))


def _pin(s: JobState, where: str, job, nodes: dict, old: OldRow | None, origin: datetime,
         now: int, problems: list[str], can_hold) -> Pin | None:
    """One job's pin, or None (a problem was added)."""
    before = len(problems)
    for name in ("start", "end"):
        if getattr(s, name) is not None and getattr(s, f"{name}_h") is not None:
            problems.append(f"{where}.{name}: give {name} (a calendar time) or {name}_h, not"
                            " both")
    node_name = s.node or (old.node if old is not None else None)
    if node_name is None:
        problems.append(f"{where}.node: required (the plan has no row for {s.job})")
    elif node_name not in nodes:
        problems.append(f"{where}.node: no node named '{node_name}' in the batch as it now"
                        " stands")
    elif not can_hold(nodes[node_name], job):
        problems.append(f"{where}.node: node '{node_name}' cannot hold job '{s.job}'")
    start = _minute(s.start if s.start is not None else s.start_h, f"{where}.start", origin,
                    problems)
    end = _minute(s.end if s.end is not None else s.end_h, f"{where}.end", origin, problems)
    if len(problems) > before:
        return None
    node = nodes[node_name]
    at = clock(origin, now)
    if s.status == "running":
        if start is None:
            problems.append(f"{where}.start: required for a running job (its actual start)")
            return None
        if start > now:
            problems.append(f"{where}.start: {clock(origin, start)} is after now ({at}); a job"
                            " that has not started is not listed")
            return None
        if end is not None and end <= now:
            problems.append(f"{where}.end: expected end {clock(origin, end)} is not after now"
                            f" ({at}); a job that has ended is done")
            return None
        if end is None:
            end = start + duration_minutes(job.hours, node.speed)
        return Pin(node_name, start, end, True)
    if end is None:
        problems.append(f"{where}.end: required for a done job (its actual end)")
        return None
    if end > now:
        problems.append(f"{where}.end: {clock(origin, end)} is after now ({at}); a job still"
                        " running is 'running'")
        return None
    if start is None:  # the plan's start if it ran where and (roughly) when planned
        planned = old is not None and old.node == node_name and old.start < end
        start = old.start if planned else max(0, end - duration_minutes(job.hours, node.speed))
    if end <= start:
        problems.append(f"{where}.end: {clock(origin, end)} is not after its start"
                        f" ({clock(origin, start)})")
        return None
    return Pin(node_name, start, end, False)


def _minute(value, where: str, origin: datetime, problems: list[str]) -> int | None:
    if value is None:
        return None
    hours = _offset(value, where, origin, problems)
    return None if hours is None else round(hours * 60)


def _window_meeting(node, start: int, end: int) -> int | None:
    """Start (minute) of the first window of `node` meeting [start, end), or None."""
    from assignplan.units import floor_minutes

    for a, b in node.maintenance:
        a_min, b_min = floor_minutes(a * 60), ceil_minutes(b * 60)
        if a_min < end and start < b_min:
            return max(a_min, start)
    return None


def _pin_order(pins: dict[str, Pin], jobs: dict, source: str, seen: dict[str, int]
               ) -> list[str]:
    """A pinned job's predecessors must be done (by its start, when it is running: a done
    job's start may be inferred)."""
    out = []
    for name, pin in pins.items():
        for p in jobs[name].follows:
            before = pins.get(p)
            if before is None or before.running or (pin.running and before.end > pin.start):
                out.append(f"{source}: jobs[{seen[name]}]: {name} has started but it follows"
                           f" {p}, which had not ended by then")
                break
    return out


def _running_fit(pins: dict[str, Pin], jobs: dict, nodes: dict, source: str) -> list[str]:
    """Running jobs all run at `now`: on each node they must fit together."""
    load: dict[str, list[int]] = {}
    for name, pin in pins.items():
        if pin.running:
            j = jobs[name]
            used = load.setdefault(pin.node, [0, 0, 0])
            for r, d in enumerate((j.cores, j.memory_mib, j.gpus)):
                used[r] += d
    out = []
    for node, used in load.items():
        n = nodes[node]
        over = [f"{used[0]} of {n.cores} cores"] * (used[0] > n.cores) \
            + [f"{used[1] / 1024:g} of {n.memory_mib / 1024:g} GiB"] * (used[1] > n.memory_mib) \
            + [f"{used[2]} of {n.gpus} GPUs"] * (used[2] > n.gpus)
        if over:
            out.append(f"{source}: jobs: the jobs running on {node} together need"
                       f" {', '.join(over)}")
    return out
