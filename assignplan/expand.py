"""From a batch document to the checked batch: counts expanded, times read, cross-field checks.

Everything downstream receives an `ExpandedBatch` (one entry per node and per job, names
resolved, every time in hours from the window start whichever form the document used, every
cross-field rule already checked, doubtful values as warnings).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from datetime import datetime
from functools import cached_property
from pathlib import Path
from typing import Any

import networkx as nx
import numpy as np

from assignplan.documents import CALENDAR_HELP, Batch
from assignplan.errors import InputError
from assignplan.reading import calendar_hours, parse_batch_text, read_text
from assignplan.units import (
    MAX_OFFSET_HOURS,
    MAX_RESOURCE_MINUTES,
    ceil_minutes,
    clock,
    counted,
    duration_minutes,
    floor_minutes,
    memory_mib,
    number,
)
from assignplan.whatif import Change, Without, apply_node_changes


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
    limit_h: float | None = None  # hard run-time limit (wall hours), for risk replays


@dataclass(frozen=True)
class JobSpec:
    """One job group of the batch, expanded: what its members share, and their names.

    ``first``: the member index of its first job (members are numbered in document order);
    ``follows``: the member indices every member waits for.
    """

    doc_index: int
    group: str
    names: tuple[str, ...]
    first: int
    cores: int
    memory_mib: int
    gpus: int
    hours: float
    needs: frozenset[str]
    follows: tuple[int, ...]
    ready_h: float
    due_h: float | None
    weight: float
    limit_h: float | None = None


@dataclass(frozen=True)
class ExpandedBatch:
    """The batch after count expansion and cross-field checks.

    Jobs are kept per group (`specs`: a 50,000-job batch of sweeps is a few thousand of
    them); `jobs` gives one `Job` per member, built on first use, for readers that want
    them one by one (the checker). Every time is in hours from the window start, whichever
    form the document used. `warnings`: doubtful but valid input, one line each with its
    JSON path. `members` replaces the jobs built from `specs` (a replayed future's run
    times, for the checker). `changes`: the inventory changes applied (`whatif`), one line
    each for the summary.
    """

    window_start: datetime
    window_hours: float
    nodes: tuple[Node, ...]
    specs: tuple[JobSpec, ...]
    warnings: tuple[str, ...] = ()
    members: tuple[Job, ...] | None = None
    changes: tuple[str, ...] = ()

    @cached_property
    def n_jobs(self) -> int:
        return sum(len(spec.names) for spec in self.specs)

    @cached_property
    def jobs(self) -> tuple[Job, ...]:
        if self.members is not None:
            return self.members
        names = [n for spec in self.specs for n in spec.names]
        return tuple(
            Job(name, spec.group, spec.doc_index, spec.cores, spec.memory_mib, spec.gpus,
                spec.hours, spec.needs, tuple(names[p] for p in spec.follows), spec.ready_h,
                spec.due_h, spec.weight, spec.limit_h)
            for spec in self.specs for name in spec.names)


def member_names(name: str, count: int) -> list[str]:
    """`count` expansion: `gpu` x 12 -> gpu-01 .. gpu-12 (zero-padded to the width of count)."""
    if count == 1:
        return [name]
    width = len(str(count))
    return [f"{name}-{k:0{width}d}" for k in range(1, count + 1)]


def load_batch(path: Path | str, changes: Sequence[Change] = ()) -> ExpandedBatch:
    """Read, validate and expand a batch file (the one entry point for batch input), with
    the inventory `changes` applied (`whatif`)."""
    return expand_batch(parse_batch_text(read_text(path), str(path)), source=str(path),
                        changes=changes)


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
    offset = calendar_hours(when, start, path, problems)
    if offset is None:
        return None
    if when.tzinfo is None:  # show it as it was read
        when = when.replace(tzinfo=start.tzinfo)
    if offset < 0:
        problems.append(f"{path}: {when.isoformat()} is before the window starts"
                        f" ({start.isoformat()})")
    elif offset > MAX_OFFSET_HOURS:
        problems.append(f"{path}: {when.isoformat()} is more than"
                        f" {number(MAX_OFFSET_HOURS, None)} h after the window start")
    else:
        return offset
    return None


def expand_batch(batch: Batch, source: str = "<batch>",
                 changes: Sequence[Change] = ()) -> ExpandedBatch:
    """Expand counts, read every time as hours from the window start and run every cross-field
    check; all problems are reported together, doubtful values come back as warnings.

    The inventory `changes` (`whatif`) are applied here, to the expanded node list before any
    check that reads it: the one place they happen, whichever command reads the batch.
    Problems of a change name the change (`--change ...` or its file and path), not `source`.
    """
    problems: list[str] = []
    warnings: list[str] = []
    nodes = expand_nodes(batch, problems)
    before = nodes
    change_problems: list[str] = []
    notes: list[str] = []
    if changes:
        nodes, notes = _apply_changes(batch, nodes, list(changes), change_problems)
    specs = _expand_jobs(batch, problems, warnings)
    blamed = _check_removals(list(changes), before, nodes, specs, change_problems)
    _check_capacity(batch, nodes, specs, problems, skip=blamed)
    _check_cycles(specs, problems)
    _check_totals(batch, nodes, problems)
    if problems or change_problems:
        raise InputError([f"{source}: {p}" for p in problems] + change_problems)
    return ExpandedBatch(batch.window.start, batch.window.hours, tuple(nodes), tuple(specs),
                         tuple(warnings), changes=tuple(notes))


def _apply_changes(batch: Batch, nodes: list[Node], changes: list[Change],
                   problems: list[str]) -> tuple[list[Node], list[str]]:
    """`whatif.apply_node_changes` with members made like the group's own."""
    template: dict[int, Node] = {}
    for n in nodes:
        template.setdefault(n.doc_index, n)

    def make_node(gi: int, name: str) -> Node:
        if gi in template:
            return replace(template[gi], name=name)
        g = batch.nodes[gi]  # a group whose members all failed to expand: no windows to copy
        return Node(name, g.name, gi, g.cores, memory_mib(g.memory_gib), g.gpus, g.speed,
                    frozenset(g.tags), ())

    return apply_node_changes(list(batch.nodes), nodes, changes, batch.window.start, problems,
                              make_node)


def _check_removals(changes: list[Change], before: list[Node], after: list[Node],
                    specs: list[JobSpec], problems: list[str]) -> set[int]:
    """Job groups that some node could hold before the changes and none can after: one line
    each naming the jobs and the removals; returns their document indices."""
    removals = [c.where for c in changes if isinstance(c, Without)]
    if not removals or not before or not specs:
        return set()
    _, kind_before, ok_before, _ = hosts(before, specs)
    held_before = ok_before.any(axis=1)[kind_before]
    if after:
        _, kind_after, ok_after, _ = hosts(after, specs)
        held_after = ok_after.any(axis=1)[kind_after]
    else:
        held_after = np.zeros(len(specs), dtype=bool)
    out: set[int] = set()
    for gi in np.flatnonzero(held_before & ~held_after).tolist():
        spec = specs[gi]
        out.add(spec.doc_index)
        names = spec.names
        shown = ", ".join(names) if len(names) <= 3 else f"{names[0]} ... {names[-1]}"
        problems.append(f"{'; '.join(removals)}: no node left can hold"
                        f" {counted(len(names), 'job')} of jobs[{spec.doc_index}] ({shown}):"
                        f" each needs {_needs(spec)}, and only nodes taken out have that")
    return out


def _needs(job: Job | JobSpec) -> str:
    """What a job asks of a node, in words: '16 cores, 128 GiB, 2 GPUs, tags accel'."""
    out = [counted(job.cores, "core"), f"{job.memory_mib / 1024:g} GiB"]
    if job.gpus:
        out.append(counted(job.gpus, "GPU"))
    if job.needs:
        out.append("tags " + ", ".join(sorted(job.needs)))
    return ", ".join(out)


def expand_nodes(batch: Any, problems: list[str]) -> list[Node]:
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


def _expand_jobs(batch: Batch, problems: list[str], warnings: list[str]) -> list[JobSpec]:
    """One `JobSpec` per job group: members named and numbered, follows resolved to member
    indices (a group named in `follows` means every member), times read as hours."""
    index: dict[str, int] = {}  # member name -> member index
    groups: dict[str, list[int]] = {}  # group name -> member indices
    named: list[tuple[str, ...]] = []
    base = 0
    for gi, g in enumerate(batch.jobs):
        names = tuple(member_names(g.name, g.count))
        named.append(names)
        for k, name in enumerate(names):
            if name in index:
                problems.append(
                    f"jobs[{gi}].name: job '{name}' duplicates a job of"
                    f" jobs[{_doc_of(named, index[name])}] (names are compared after count"
                    " expansion)")
            else:
                index[name] = base + k
        groups.setdefault(g.name, []).extend(range(base, base + len(names)))
        base += len(names)
    all_tags = {t for g in batch.nodes for t in g.tags}
    specs: list[JobSpec] = []
    base = 0
    for gi, g in enumerate(batch.jobs):
        if g.limit_h is not None and g.limit_h < g.hours:
            problems.append(f"jobs[{gi}].limit_h: {g.limit_h:g} h is below the job's own"
                            f" estimate of {g.hours:g} h")
        for k, tag in enumerate(g.needs):
            if tag not in all_tags:
                problems.append(f"jobs[{gi}].needs[{k}]: no node has tag '{tag}'")
        follows: dict[int, None] = {}  # ordered, without repeats
        for k, ref in enumerate(g.follows):
            if ref in groups:
                follows.update(dict.fromkeys(groups[ref]))
            elif ref in index:
                follows[index[ref]] = None
            else:
                problems.append(f"jobs[{gi}].follows[{k}]: no job or job group named '{ref}'")
        origin = batch.window.start
        ready = _input_hours(g.ready_h, g.ready, f"jobs[{gi}].ready", origin, problems,
                             required=False)
        due = _input_hours(g.due_h, g.due, f"jobs[{gi}].due", origin, problems, required=False)
        ready = 0.0 if ready is None else ready
        specs.append(JobSpec(gi, g.name, named[gi], base, g.cores, memory_mib(g.memory_gib),
                             g.gpus, g.hours, frozenset(g.needs), tuple(follows), ready, due,
                             g.weight, g.limit_h))
        base += len(named[gi])
    warnings.extend(_time_warnings(batch, specs))
    return specs


def _doc_of(named: list[tuple[str, ...]], member: int) -> int:
    """The job group (document index) member number `member` belongs to."""
    total = 0
    for gi, names in enumerate(named):
        total += len(names)
        if member < total:
            return gi
    return len(named) - 1


def _time_warnings(batch: Batch, specs: list[JobSpec]) -> list[str]:
    """Valid but doubtful times: due before ready, ready past the window (per job group,
    computed for all groups at once)."""
    if not specs:
        return []
    origin = batch.window.start
    ready_min = ceil_minutes(np.array([s.ready_h for s in specs]) * 60)
    end_min = ceil_minutes(batch.window.hours * 60)
    due = np.array([np.nan if s.due_h is None else s.due_h for s in specs])
    ready = np.array([s.ready_h for s in specs])
    out = []
    for gi in np.flatnonzero((due < ready) | (ready_min >= end_min)).tolist():
        g, spec = batch.jobs[gi], specs[gi]
        if spec.due_h is not None and spec.due_h < spec.ready_h:
            out.append(f"jobs[{gi}].{'due' if g.due is not None else 'due_h'}: due at"
                       f" {clock(origin, floor_minutes(spec.due_h * 60))} before it is ready at"
                       f" {clock(origin, int(ready_min[gi]))}, so it will be late")
        if ready_min[gi] >= end_min:
            path = f"jobs[{gi}].{'ready' if g.ready is not None else 'ready_h'}"
            out.append(f"{path}: ready at {clock(origin, int(ready_min[gi]))}, when the window"
                       f" has ended ({clock(origin, end_min)}); it can only run past the window")
    return out


def can_hold(node: Node, job: Job | JobSpec) -> bool:
    """True when the node has the cores, memory, GPUs and tags the job needs."""
    return (
        job.cores <= node.cores
        and job.memory_mib <= node.memory_mib
        and job.gpus <= node.gpus
        and job.needs <= node.tags
    )


def _shortfall(node: Node, job: Job | JobSpec) -> list[str]:
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


def hosts(nodes: list[Node] | tuple[Node, ...], specs: list[JobSpec] | tuple[JobSpec, ...]
          ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(node_type int64[N], spec_kind int64[G], ok bool[K, T], type_node int64[T]): nodes
    that no job tells apart (same cores, memory, GPUs and tags) share a type, job groups with
    the same demand and needs share a kind, and ok says which kinds each type can hold;
    type_node is each type's first node. Broadcast over kinds x types, never jobs x nodes."""
    type_key: dict = {}
    node_type = np.array([type_key.setdefault((n.cores, n.memory_mib, n.gpus, n.tags),
                                              len(type_key)) for n in nodes], dtype=np.int64)
    kind_key: dict = {}
    spec_kind = np.array([kind_key.setdefault((s.cores, s.memory_mib, s.gpus, s.needs),
                                              len(kind_key)) for s in specs], dtype=np.int64)
    cap = np.array([k[:3] for k in type_key], dtype=np.int64).reshape(-1, 3)
    need = np.array([k[:3] for k in kind_key], dtype=np.int64).reshape(-1, 3)
    ok = np.all(need[:, None, :] <= cap[None, :, :], axis=2)
    tags = [k[3] for k in type_key]
    for k, key in enumerate(kind_key):
        if key[3]:
            ok[k] &= [key[3] <= t for t in tags]
    type_node = np.zeros(len(type_key), dtype=np.int64)
    type_node[node_type[::-1]] = np.arange(len(nodes))[::-1]  # first node of each type
    return node_type, spec_kind, ok, type_node


def _check_capacity(batch: Batch, nodes: list[Node], specs: list[JobSpec],
                    problems: list[str], skip: set[int] | None = None) -> None:
    """Every job group needs a node type that can hold it (checked per group and type);
    groups in `skip` (document indices) are already reported."""
    if not nodes or not specs:
        return
    _, spec_kind, ok, type_node = hosts(nodes, specs)
    for gi in np.flatnonzero(~ok.any(axis=1)[spec_kind]).tolist():
        job = specs[gi]
        if job.doc_index in (skip or ()):
            continue
        # The closest node is the one with the fewest things missing, then the smallest relative
        # shortfall: that is the node the admin most likely meant.
        def distance(n: Node, job: JobSpec = job) -> tuple[int, float]:
            rel = (
                max(0, job.cores - n.cores) / job.cores
                + max(0, job.memory_mib - n.memory_mib) / job.memory_mib
                + (max(0, job.gpus - n.gpus) / job.gpus if job.gpus else 0.0)
            )
            return (len(_shortfall(n, job)), rel)

        closest = min((nodes[i] for i in type_node.tolist()), key=distance)
        problems.append(
            f"jobs[{job.doc_index}]: no node can hold job '{job.names[0]}' (needs {job.cores}"
            f" cores, {job.memory_mib / 1024:g} GiB, {job.gpus} GPUs"
            + (f", tags {', '.join(sorted(job.needs))}" if job.needs else "")
            + f"); closest node '{closest.name}' is short of {', '.join(_shortfall(closest, job))}"
        )


def _check_cycles(specs: list[JobSpec], problems: list[str]) -> None:
    """`follows` must not loop. Members of a group share their follows, so a loop between
    members is a loop between their groups and back: the check runs on groups."""
    group_of = np.repeat(np.arange(len(specs)), [len(s.names) for s in specs])
    graph = nx.DiGraph()
    graph.add_nodes_from(range(len(specs)))
    graph.add_edges_from((int(g), s) for s, spec in enumerate(specs) if spec.follows
                         for g in set(group_of[list(spec.follows)].tolist()))
    for component in nx.strongly_connected_components(graph):
        if len(component) == 1:
            (only,) = component
            if not graph.has_edge(only, only):
                continue
        cycle = nx.find_cycle(graph.subgraph(component))
        names = [specs[u].group for u, _v in cycle] + [specs[cycle[0][0]].group]
        problems.append(
            f"jobs[{specs[cycle[0][0]].doc_index}].follows: dependency cycle"
            f" {' -> '.join(names)} (each must end before the next starts)"
        )


_RESOURCE_UNITS = (("cores", "core"), ("memory", "MiB"), ("GPUs", "GPU"))


def _check_totals(batch: Batch, nodes: list[Node], problems: list[str]) -> None:
    """Every job's resource-minutes on the slowest node, summed per resource, must stay within
    MAX_RESOURCE_MINUTES, so no sum or time the planner forms can overflow (see units)."""
    if not nodes or not batch.jobs:
        return
    slowest = min(n.speed for n in nodes)
    longest = duration_minutes(np.array([g.hours for g in batch.jobs]), slowest).tolist()
    totals = [0, 0, 0]  # Python integers: exact however large
    for g, minutes in zip(batch.jobs, longest, strict=True):
        for r, demand in enumerate((g.cores, memory_mib(g.memory_gib), g.gpus)):
            totals[r] += g.count * demand * minutes
    for (resource, unit), total in zip(_RESOURCE_UNITS, totals, strict=True):
        if total > MAX_RESOURCE_MINUTES:
            problems.append(
                f"jobs: together the jobs need {total:.3g} {unit}-minutes of {resource} on the"
                f" slowest node (speed {slowest:g}), more than the planner can count"
                f" ({MAX_RESOURCE_MINUTES:.3g}); plan the batch in parts or shorten its"
                " longest jobs")
