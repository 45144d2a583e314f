"""What-if changes to the node inventory: nodes taken out, taken down for a while, or added.

Three kinds of change, spelt the same way everywhere a batch is read (`solve`, `replan`,
`risk`, `compare`; options, each repeatable, or an overlay file `--changes FILE`):

- ``--without NAME``: take out a node, or every member of a group (``NAME`` may be a glob
  pattern such as ``gpu-*``);
- ``--down NAME@FROM..TO``: a maintenance window on a node or group (times as calendar
  times or hours from the window start; no ``TO``: down until further notice);
- ``--add GROUP=COUNT``: COUNT more members of an existing node group, named on from its
  last member (``gpu-09``, ``gpu-10`` after ``gpu-08``).

They are applied in one place, `apply_node_changes`, while the batch is expanded and before
any cross-field check, so every command sees the same inventory and every later check (a job
no node can hold any more) speaks of the changed one. Member names never change: a plan of
the batch still names the nodes it used.
"""

from __future__ import annotations

import fnmatch
import re
from collections.abc import Sequence
from dataclasses import dataclass, replace
from datetime import datetime
from typing import Annotated, Any

from pydantic import BaseModel, ConfigDict, Field

from assignplan.documents import CalendarTime, NodeGroup
from assignplan.errors import InputError
from assignplan.reading import calendar_hours, read_text, validate_json
from assignplan.units import MAX_OFFSET_HOURS, clock, counted, number

NAME_CHARS = r"[A-Za-z0-9_.:+\-*?\[\]!]{1,200}"
NamePattern = Annotated[str, Field(min_length=1, max_length=200, pattern=f"^{NAME_CHARS}$")]


@dataclass(frozen=True)
class Without:
    """Take out every node whose name or group matches `pattern`."""

    pattern: str
    where: str  # how the user wrote it, for messages


@dataclass(frozen=True)
class Down:
    """A window [start, end) on every node whose name or group matches `pattern`; a time is
    hours from the window start (float) or a calendar time; end None: open-ended."""

    pattern: str
    start: float | datetime
    end: float | datetime | None
    where: str
    where_end: str = ""  # the end's own path in a document ("" : as `where`)
    required_end: bool = False  # maintenance: an end is required


@dataclass(frozen=True)
class Add:
    """`count` more members of node group `group`."""

    group: str
    count: int
    where: str


Change = Without | Down | Add


# --------------------------------------------------------------------------- spelling


def parse_changes(without: Sequence[str] = (), down: Sequence[str] = (),
                  add: Sequence[str] = (), overlay: Any = None) -> list[Change]:
    """The changes of the command-line options (`--without`, `--down`, `--add`, each
    repeatable) and of an overlay file, in the order without, add, down (file first);
    InputError with one line per value that is none of the spellings."""
    out: list[Change] = [] if overlay is None else load_changes(overlay)
    problems: list[str] = []
    for kind, values in (("without", without), ("add", add), ("down", down)):
        for text in values:
            try:
                out.append(parse_change(kind, text))
            except InputError as err:
                problems += err.problems
    if problems:
        raise InputError(problems)
    return out


def parse_change(kind: str, text: str) -> Change:
    """One option value: `--without NAME`, `--add GROUP=COUNT` or `--down NAME@FROM..TO`."""
    where = f"--{kind} {text}"
    if kind == "without":
        if not text or not re.fullmatch(NAME_CHARS, text):
            raise InputError(f"{where}: write --without NAME (a node, a group or a glob such"
                             " as gpu-*)")
        return Without(text, where)
    if kind == "add":
        group, eq, count = text.partition("=")
        if not eq or not group or not count.strip().isdigit() or int(count) < 1:
            raise InputError(f"{where}: write --add GROUP=COUNT with COUNT a whole number of"
                             " at least 1")
        return Add(group, int(count), where)
    name, at, span = text.partition("@")
    first, dots, last = span.partition("..")
    if not at or not name or not dots or not first:
        raise InputError(f"{where}: write --down NAME@FROM..TO (times as hours from the"
                         " window start or ISO 8601 calendar times; TO may be left out)")
    return Down(name, _time_text(first, where), _time_text(last, where) if last else None,
                where)


def _time_text(text: str, where: str) -> float | datetime:
    """FROM or TO of a `down:` change: hours from the window start, or a calendar time."""
    try:
        return float(text)
    except ValueError:
        pass
    try:
        return datetime.fromisoformat(text)
    except ValueError:
        raise InputError(f"{where}: '{text}' is neither hours from the window start nor an ISO"
                         " 8601 calendar time such as 2026-12-09T12:00") from None


class _Window(BaseModel):
    """A window on some nodes: [start, end), each as hours or as a calendar time."""

    model_config = ConfigDict(strict=True, extra="forbid", frozen=True, allow_inf_nan=False)
    node: NamePattern = Field(title="Node", description="A node, a node group, or a glob "
                              "pattern (`gpu-*`) over node and group names.")
    start_h: float | None = Field(default=None, ge=0, le=MAX_OFFSET_HOURS,
                                  title="Start (h from window start)",
                                  description="Start, in hours from the window start.")
    end_h: float | None = Field(default=None, ge=0, le=MAX_OFFSET_HOURS,
                                title="End (h from window start)",
                                description="End (exclusive), in hours from the window start;"
                                            " none: down until further notice.")
    start: CalendarTime | None = Field(default=None, title="Start (calendar time)",
                                       description="Start as a calendar time.")
    end: CalendarTime | None = Field(default=None, title="End (calendar time)",
                                     description="End as a calendar time.")


class _Addition(BaseModel):
    model_config = ConfigDict(strict=True, extra="forbid", frozen=True)
    group: NamePattern = Field(title="Group", description="An existing node group.")
    count: int = Field(ge=1, le=100_000, title="Count", description="Members to add.")


class ChangesDoc(BaseModel):
    """An overlay of inventory changes (`--changes FILE`), applied in the order without, add,
    down."""

    model_config = ConfigDict(strict=True, extra="forbid", frozen=True)
    without: list[NamePattern] = Field(default_factory=list, title="Without",
                                       description="Nodes or groups to take out (globs "
                                                   "allowed).")
    add: list[_Addition] = Field(default_factory=list, title="Add",
                                 description="More members of existing node groups.")
    down: list[_Window] = Field(default_factory=list, title="Down",
                                description="Maintenance windows to add.")


def load_changes(path: Any) -> list[Change]:
    """The changes of an overlay file (JSON, schema `changes.schema.json`)."""
    doc = validate_json(ChangesDoc, read_text(path), str(path))
    out: list[Change] = [Without(p, f"{path}: without[{k}]") for k, p in enumerate(doc.without)]
    out += [Add(a.group, a.count, f"{path}: add[{k}]") for k, a in enumerate(doc.add)]
    out += [window_change(w, f"{path}: down[{k}]") for k, w in enumerate(doc.down)]
    return out


def window_change(w: Any, where: str, *, required_end: bool = False) -> Down:
    """A `Down` from a document's window entry (fields node, start(_h), end(_h))."""
    problems = []
    for name in ("start", "end"):
        if getattr(w, name) is not None and getattr(w, f"{name}_h") is not None:
            problems.append(f"{where}.{name}: give {name} (a calendar time) or {name}_h (hours"
                            " from the window start), not both")
    start = w.start if w.start is not None else w.start_h
    if start is None:
        problems.append(f"{where}.start_h: required field is missing (or give start as a"
                        " calendar time)")
    if problems:
        raise InputError(problems)
    return Down(w.node, start, w.end if w.end is not None else w.end_h, where,
                where_end=f"{where}.end", required_end=required_end)


# --------------------------------------------------------------------------- applying


def apply_node_changes(groups: list[NodeGroup], nodes: list, changes: list[Change],
                       window_start: datetime, problems: list[str],
                       make_node: Any) -> tuple[list, list[str]]:
    """The expanded node list after `changes`, in order, and one line per change for the
    summary. `groups`: the batch's node groups (templates for added members); `make_node`
    (group index, name) -> a node of that group. Every problem goes to `problems`."""
    notes: list[str] = []
    for change in changes:
        if isinstance(change, Without):
            hit = _matching(nodes, change.pattern)
            if not hit:
                problems.append(f"{change.where}: no node or node group matches"
                                f" '{change.pattern}'")
                continue
            nodes = [n for n in nodes if n.name not in hit]
            notes.append(f"without {_names(hit)}")
        elif isinstance(change, Add):
            made = _added(groups, nodes, change, problems, make_node)
            if made:
                nodes = nodes + made
                notes.append(f"added {_names([n.name for n in made])} to group {change.group}")
        else:
            nodes = _down(nodes, change, window_start, problems, notes)
    return nodes, notes


def _matching(nodes: list, pattern: str) -> list[str]:
    return [n.name for n in nodes
            if fnmatch.fnmatchcase(n.name, pattern) or fnmatch.fnmatchcase(n.group, pattern)]


def _names(names: list[str]) -> str:
    """'gpu-01', 'gpu-01, gpu-02' or 'gpu-01 ... gpu-08 (8 nodes)'."""
    if len(names) <= 3:
        return ", ".join(names)
    return f"{names[0]} ... {names[-1]} ({counted(len(names), 'node')})"


def _added(groups: list[NodeGroup], nodes: list, change: Add, problems: list[str],
           make_node: Any) -> list:
    index = next((k for k, g in enumerate(groups) if g.name == change.group), None)
    if index is None:
        problems.append(f"{change.where}: no node group named '{change.group}'; the groups are"
                        f" {', '.join(g.name for g in groups)}")
        return []
    g = groups[index]
    width = len(str(g.count)) if g.count > 1 else 1
    prefix = f"{g.name}-"
    # on from the highest member number so far: never a removed member's name again
    last = max([g.count] + [int(n.name[len(prefix):]) for n in nodes if n.group == g.name
                            and n.name.startswith(prefix) and n.name[len(prefix):].isdigit()])
    taken = {n.name for n in nodes}
    made = []
    for k in range(last + 1, last + change.count + 1):
        name = f"{prefix}{k:0{width}d}"
        if name in taken:
            problems.append(f"{change.where}: a new member of {g.name} would be named '{name}',"
                            " which another node already is")
            return []
        made.append(make_node(index, name))
    return made


def _down(nodes: list, change: Down, window_start: datetime, problems: list[str],
          notes: list[str]) -> list:
    hit = set(_matching(nodes, change.pattern))
    end_where = change.where_end or change.where
    start = _hours(change.start, change.where, window_start, problems)
    end = None if change.end is None else _hours(change.end, end_where, window_start, problems)
    if change.end is None and change.required_end:
        problems.append(f"{end_where}: required for a maintenance window (a node down until"
                        " further notice is 'down')")
        return nodes
    if not hit:
        problems.append(f"{change.where}: no node or node group matches '{change.pattern}'")
    if start is None or (change.end is not None and end is None) or not hit:
        return nodes
    if end is not None and end <= start:
        problems.append(f"{end_where}: ends at {clock(window_start, round(end * 60))}, not after"
                        f" it starts ({clock(window_start, round(start * 60))})")
        return nodes
    stop = MAX_OFFSET_HOURS if end is None else end
    notes.append(f"{_names(sorted(hit))} down from {clock(window_start, round(start * 60))}"
                 + ("" if end is None else f" until {clock(window_start, round(end * 60))}"))
    return [replace(n, maintenance=_merged(n.maintenance, (start, stop))) if n.name in hit
            else n for n in nodes]


def _hours(value: float | datetime, where: str, window_start: datetime,
           problems: list[str]) -> float | None:
    """A change's time in hours from the window start, inside the model's limits."""
    if isinstance(value, datetime):
        when, value = value, calendar_hours(value, window_start, where, problems)
        if value is None:
            return None
        if value < 0:
            problems.append(f"{where}: {when.isoformat()} is before the window starts"
                            f" ({window_start.isoformat()})")
            return None
    if not 0 <= value <= MAX_OFFSET_HOURS:
        problems.append(f"{where}: {number(value, None)} h is outside the window's range (0 to"
                        f" {number(MAX_OFFSET_HOURS, None)} h from its start)")
        return None
    return float(value)


def _merged(windows: tuple[tuple[float, float], ...], new: tuple[float, float]
            ) -> tuple[tuple[float, float], ...]:
    """Windows with `new` added, overlapping or touching ones joined (the bounds subtract
    each window once, so two must never cover the same minute)."""
    out: list[list[float]] = []
    for s, e in sorted((*windows, new)):
        if out and s <= out[-1][1]:
            out[-1][1] = max(out[-1][1], e)
        else:
            out.append([s, e])
    return tuple((s, e) for s, e in out)

