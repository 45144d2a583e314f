"""Pydantic models of the batch and plan documents, count expansion and cross-field checks.

This is the only module that sees user JSON. Everything downstream receives an `ExpandedBatch`
(one entry per node and per job, names resolved, every cross-field rule already checked).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Annotated, Any

import networkx as nx
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from assignplan.errors import InputError
from assignplan.units import (  # noqa: F401  (the contract helpers, re-exported)
    ceil_minutes,
    duration_minutes,
    floor_minutes,
    memory_mib,
)

Name = Annotated[str, Field(min_length=1, max_length=200, pattern=r"^[A-Za-z0-9_.:+\-]+$")]
Hours = Annotated[float, Field(ge=0)]

_STRICT = ConfigDict(strict=True, extra="forbid", frozen=True)

class Window(BaseModel):
    """The planning window: the week the batch is planned for."""

    model_config = _STRICT
    start: datetime = Field(description="Calendar time of minute 0 (ISO 8601).")
    hours: float = Field(default=168.0, gt=0, description="Length of the window in hours.")


class Maintenance(BaseModel):
    """A half-open interval [start_h, end_h) during which nothing may run on the node."""

    model_config = _STRICT
    start_h: Hours
    end_h: Hours


class NodeGroup(BaseModel):
    """One node, or `count` identical nodes named `<name>-<k>`."""

    model_config = _STRICT
    name: Name
    count: int = Field(default=1, ge=1, le=100_000)
    cores: int = Field(gt=0)
    memory_gib: float = Field(gt=0)
    gpus: int = Field(default=0, ge=0)
    speed: float = Field(default=1.0, gt=0, description="Relative speed; 1.0 = reference node.")
    tags: list[Name] = Field(default_factory=list)
    maintenance: list[Maintenance] = Field(default_factory=list)


class JobGroup(BaseModel):
    """One job, or `count` identical jobs named `<name>-<k>` (a parameter sweep)."""

    model_config = _STRICT
    name: Name
    count: int = Field(default=1, ge=1, le=1_000_000)
    cores: int = Field(gt=0)
    memory_gib: float = Field(gt=0)
    hours: float = Field(gt=0, description="Run time on a reference node (speed 1.0).")
    gpus: int = Field(default=0, ge=0)
    needs: list[Name] = Field(default_factory=list, description="Node tags the job requires.")
    follows: list[Name] = Field(
        default_factory=list, description="Jobs or job groups that must end before this starts."
    )
    ready_h: Hours = 0.0
    due_h: Hours | None = None
    weight: float = Field(default=1.0, ge=0)


class Batch(BaseModel):
    """The input document: a window, the node inventory and the job list."""

    model_config = _STRICT
    window: Window
    nodes: list[NodeGroup] = Field(min_length=1)
    jobs: list[JobGroup] = Field(min_length=1)


class Assignment(BaseModel):
    """Where and when one job runs."""

    model_config = ConfigDict(strict=True, extra="forbid")
    job: Name
    node: Name
    start_h: float
    end_h: float


class Objective(BaseModel):
    """The lexicographic objective of a plan, in hours."""

    model_config = ConfigDict(strict=True, extra="forbid")
    makespan_h: float
    weighted_tardiness_h: float
    weighted_completion_h: float


class ObjectiveGaps(BaseModel):
    """Each term's gap to its lower bound, in percent; a zero tardiness bound has no relative
    gap (null when the plan is late at all: read the excess, in weighted hours)."""

    model_config = ConfigDict(strict=True, extra="forbid")
    makespan_pct: float
    weighted_tardiness_pct: float | None
    weighted_tardiness_excess_h: float
    weighted_completion_pct: float | None


class Turnaround(BaseModel):
    """Mean and 90th percentile wait (start - ready), mean bounded slowdown and its threshold."""

    model_config = ConfigDict(strict=True, extra="forbid")
    mean_wait_h: float
    p90_wait_h: float
    mean_bounded_slowdown: float
    bounded_slowdown_threshold_min: int


class HistoryRow(BaseModel):
    """One generation of an iterative method: best and median fitness."""

    model_config = ConfigDict(strict=True, extra="forbid")
    generation: int
    evaluations: int
    best_makespan_h: float
    median_makespan_h: float
    best_tardiness_h: float = 0.0


class PlanDoc(BaseModel):
    """The plan document written by `solve --out` and read by `check` and `report`."""

    model_config = ConfigDict(strict=True, extra="forbid")
    method: str
    status: str = "feasible"
    seed: int | None = None
    window_start: datetime | None = None
    makespan_h: float
    lower_bound_h: float
    lower_bound_parts_h: dict[str, float] = Field(
        default_factory=dict,
        description="Each part of the provable lower bound (hours); the largest is the bound "
                    "unless the method proved a better one.")
    gap_pct: float
    objective: Objective | None = None
    objective_bounds: Objective | None = Field(
        default=None, description="A lower bound on each term of the objective (hours).")
    gaps_pct: ObjectiveGaps | None = None
    turnaround: Turnaround | None = None
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
    maintenance: tuple[tuple[float, float], ...]


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
    """The batch after count expansion and cross-field checks: one entry per node and job."""

    window_start: datetime
    window_hours: float
    nodes: tuple[Node, ...]
    jobs: tuple[Job, ...]


def member_names(name: str, count: int) -> list[str]:
    """`count` expansion: `gpu` x 12 -> gpu-01 .. gpu-12 (zero-padded to the width of count)."""
    if count == 1:
        return [name]
    width = len(str(count))
    return [f"{name}-{k:0{width}d}" for k in range(1, count + 1)]


def _format_loc(loc: tuple[Any, ...]) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out or "(document)"


def _format_validation_error(err: ValidationError) -> list[str]:
    lines = []
    for e in err.errors():
        msg = e["msg"]
        if e["type"] == "extra_forbidden":
            msg = "unknown field"
        elif e["type"] == "missing":
            msg = "required field is missing"
        elif msg.startswith("Input should be"):
            msg = "must be" + msg[len("Input should be") :]
        elif e["type"] == "json_invalid":
            msg = "not valid JSON: " + msg.removeprefix("Invalid JSON: ")
        lines.append(f"{_format_loc(tuple(e['loc']))}: {msg}")
    return lines


def parse_batch_text(text: str | bytes, source: str = "<batch>") -> Batch:
    """Validate a batch document's JSON text; raise InputError with one line per problem."""
    try:
        return Batch.model_validate_json(text)
    except ValidationError as err:
        raise InputError([f"{source}: {line}" for line in _format_validation_error(err)]) from None


def read_text(path: Path | str) -> str:
    """Read a UTF-8 input file, turning OS errors into an InputError naming the file."""
    p = Path(path)
    try:
        return p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{p}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{p}: is a directory, not a JSON file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{p}: cannot read ({exc.__class__.__name__}: {exc})") from None


def load_batch(path: Path | str) -> ExpandedBatch:
    """Read, validate and expand a batch file (the one entry point for batch input)."""
    return expand_batch(parse_batch_text(read_text(path), str(path)), source=str(path))


def load_plan(path: Path | str) -> PlanDoc:
    """Read and validate a plan document."""
    try:
        return PlanDoc.model_validate_json(read_text(path))
    except ValidationError as err:
        raise InputError([f"{path}: {line}" for line in _format_validation_error(err)]) from None


# --------------------------------------------------------------------------- cross-field checks


def expand_batch(batch: Batch, source: str = "<batch>") -> ExpandedBatch:
    """Expand counts and run every cross-field check; all problems are reported together."""
    problems: list[str] = []
    nodes = _expand_nodes(batch, problems)
    jobs = _expand_jobs(batch, problems)
    _check_capacity(batch, nodes, jobs, problems)
    _check_cycles(batch, jobs, problems)
    if problems:
        raise InputError([f"{source}: {p}" for p in problems])
    return ExpandedBatch(batch.window.start, batch.window.hours, tuple(nodes), tuple(jobs))


def _expand_nodes(batch: Batch, problems: list[str]) -> list[Node]:
    nodes: list[Node] = []
    seen: dict[str, int] = {}
    for gi, g in enumerate(batch.nodes):
        windows = sorted(((m.start_h, m.end_h, k) for k, m in enumerate(g.maintenance)))
        for k, m in enumerate(g.maintenance):
            if m.end_h <= m.start_h:
                problems.append(
                    f"nodes[{gi}].maintenance[{k}]: ends at {m.end_h} h, not after it starts"
                    f" ({m.start_h} h)"
                )
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
                    frozenset(g.tags), tuple((m.start_h, m.end_h) for m in g.maintenance),
                )
            )
    return nodes


def _expand_jobs(batch: Batch, problems: list[str]) -> list[Job]:
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
        for name in member_names(g.name, g.count):
            jobs.append(
                Job(
                    name, g.name, gi, g.cores, memory_mib(g.memory_gib), g.gpus, g.hours,
                    frozenset(g.needs), tuple(follows), g.ready_h, g.due_h, g.weight,
                )
            )
    return jobs


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
