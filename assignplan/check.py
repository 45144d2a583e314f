"""Independent plan checker: verifies a plan document against the batch, listing every violation.

It shares no code with the schedule builder or the array instance: it reads the expanded batch
and the plan document and uses only the model's contract helpers (the minute-rounding rule,
memory units, `can_hold`, a plan's times in hours). A job is taken to run from its planned start
for its model duration ``ceil(hours * 60 / speed)`` minutes, whatever end the plan states (a
stated end is optional; a wrong one is a "duration" violation); intervals are half-open
``[start, end)``. Messages show calendar times from the window start (``Tue 08 Dec 13:00``).

A replanned plan is checked with its pins (`state.Pins`): a pinned job must sit exactly where
it ran or runs, on the interval the state gives it (not its model duration; what happened
before `now` is not judged again), a running one holds its node's capacity, and nothing else
starts before `now`.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from datetime import datetime

import numpy as np

from assignplan.documents import Assignment, PlanDoc
from assignplan.expand import ExpandedBatch, Job, Node, can_hold
from assignplan.reading import plan_hours
from assignplan.state import Pin, Pins
from assignplan.units import (
    MINUTE_TOLERANCE,
    ceil_minutes,
    clock,
    counted,
    duration_minutes,
    floor_minutes,
    offset_text,
)

KINDS = (
    "missing_job", "duplicate_job", "unknown_job", "unknown_node", "cannot_hold", "capacity",
    "dependency", "maintenance", "before_ready", "duration", "negative_start", "off_minute",
    "makespan", "pinned", "before_now",
)
RESOURCE_NAMES = ("cores", "memory", "GPUs")
# Minutes: an offset this close to a whole minute is that minute. It covers float noise of
# hours * 60 and the 4 decimals `units.hours_of` writes (0.003 min at most), and is far below
# half a minute, so no two minutes are confused.
_TOL = MINUTE_TOLERANCE
_MAX_NAMED = 4  # jobs named in one capacity message


@dataclass(frozen=True)
class Violation:
    """One broken rule of the model, with the job, node and minute it concerns where known.

    ``minute``: where the violation begins (minutes from the window start); ``until``: where
    an overloaded stretch ends (capacity violations only).
    """

    kind: str
    message: str
    job: str | None = None
    node: str | None = None
    minute: int | None = None
    until: int | None = None


@dataclass(frozen=True)
class _Row:
    """A usable assignment row: first row of a known job on a known node."""

    job: Job
    node: Node
    start: int  # minutes, the stated start rounded to the minute
    end: int  # start + model duration (not the stated end)
    fits: bool  # `can_hold`: resources and tags
    alone_fits: bool  # resources alone; a job too big by itself is not also a capacity stretch
    pin: Pin | None = None  # where the state fixes it (replans only)


@dataclass(frozen=True)
class _Stated:
    """What a row states, in hours from the window start (end None when not stated)."""

    row: Assignment
    start_h: float
    end_h: float | None


def _amount(resource: int, value: int) -> str:
    if resource == 1:
        return f"{value / 1024:g} GiB"
    return f"{value} {RESOURCE_NAMES[resource]}"


def check_plan(batch: ExpandedBatch, plan: PlanDoc, pins: Pins | None = None
               ) -> list[Violation]:
    """Every violation of `plan` against `batch`, in a stable order (rows, follows, capacity).

    `pins`: the state of a replanned week (pinned jobs, `now`), None for a plan from scratch.
    Raises InputError when the plan cannot be read against the batch: a row without a start,
    or a start (or end) given both as hours and as a calendar time that disagree.
    """
    out: list[Violation] = []
    rows = _read_rows(batch, plan, out, pins)
    for row, stated in rows:
        out.extend(_pin_violations(batch, row, stated, pins) if row.pin is not None
                   else _row_violations(batch, row, stated, pins))
    placed = {row.job.name: row for row, _ in rows}
    out.extend(_dependency_violations(batch, placed))
    # a done job ended by now, and nothing else starts before now: it can overlap nothing
    out.extend(_capacity_violations(batch, [r for r in placed.values() if r.alone_fits
                                            and (r.pin is None or r.pin.running)]))
    if placed and plan.makespan_h is not None:
        last = max(row.end for row in placed.values())
        if plan.makespan_h * 60 < last - _TOL:
            out.append(Violation(
                "makespan", f"plan states makespan {plan.makespan_h:g} h but its last job ends"
                f" at {clock(batch.window_start, last)} ({offset_text(last)})", minute=last,
            ))
    return out


def _read_rows(batch: ExpandedBatch, plan: PlanDoc, out: list[Violation],
               pins: Pins | None = None) -> list[tuple[_Row, _Stated]]:
    """Resolve names; report unknown, duplicate and missing jobs and unknown nodes. A pinned
    job's end is its pin's, not its start plus its model duration."""
    jobs = {j.name: j for j in batch.jobs}
    nodes = {n.name: n for n in batch.nodes}
    times = plan_hours(plan, batch.window_start)
    first_row: dict[str, int] = {}
    rows = []
    for r, (a, (start_h, end_h)) in enumerate(zip(plan.assignments, times, strict=True)):
        job, node = jobs.get(a.job), nodes.get(a.node)
        if job is None:
            out.append(Violation("unknown_job", f"assignment {r}: no job named '{a.job}' in the"
                                 " batch", job=a.job, node=a.node))
            continue
        if a.job in first_row:
            out.append(Violation("duplicate_job", f"assignment {r}: job {a.job} is assigned again"
                                 f" (first at assignment {first_row[a.job]})", job=a.job,
                                 node=a.node))
            continue
        first_row[a.job] = r
        if node is None:
            out.append(Violation("unknown_node", f"assignment {r}: job {a.job} is on '{a.node}',"
                                 " which is not a node of the batch", job=a.job, node=a.node))
            continue
        start = int(round(start_h * 60))
        pin = None if pins is None else pins.jobs.get(job.name)
        end = start + duration_minutes(job.hours, node.speed) if pin is None \
            else start + pin.end - pin.start
        alone = (job.cores <= node.cores and job.memory_mib <= node.memory_mib
                 and job.gpus <= node.gpus)
        rows.append((_Row(job, node, start, end, can_hold(node, job), alone, pin),
                     _Stated(a, start_h, end_h)))
    for job in batch.jobs:
        if job.name not in first_row:
            out.append(Violation("missing_job", f"job {job.name} has no assignment", job=job.name))
    return rows


def _shortfall(node: Node, job: Job) -> str:
    short = [_amount(r, need - have) for r, (need, have) in enumerate(
        [(job.cores, node.cores), (job.memory_mib, node.memory_mib), (job.gpus, node.gpus)]
    ) if need > have]
    missing = sorted(job.needs - node.tags)
    if missing:
        short.append("tags " + ", ".join(missing))
    return ", ".join(short)


def _stated_text(batch: ExpandedBatch, minutes: float, hours_field: float | None,
                 calendar_field: datetime | None) -> str:
    """A time a plan states, as it stated it when it is not on a whole minute."""
    if abs(minutes - round(minutes)) <= _TOL:
        return clock(batch.window_start, round(minutes))
    if hours_field is not None:
        return f"{hours_field:.6g} h from the window start"
    return calendar_field.isoformat()


def _pin_violations(batch: ExpandedBatch, row: _Row, stated: _Stated, pins: Pins
                    ) -> list[Violation]:
    """A pinned job: on its pin's node, from its pin's start, stated end (if any) its pin's."""
    pin, origin = row.pin, batch.window_start
    stated_end = None if stated.end_h is None else stated.end_h * 60
    if row.node.name == pin.node and abs(stated.start_h * 60 - pin.start) <= _TOL \
            and (stated_end is None or abs(stated_end - pin.end) <= _TOL):
        return []
    what = "done" if not pin.running else "running"
    return [Violation(
        "pinned", f"job {row.job.name} is {what} on {pin.node} from {clock(origin, pin.start)}"
        f" until {clock(origin, pin.end)}, but the plan has it on {row.node.name} from"
        f" {_stated_text(batch, stated.start_h * 60, stated.row.start_h, stated.row.start)}"
        + ("" if stated_end is None or abs(stated_end - pin.end) <= _TOL else
           f" until {_stated_text(batch, stated_end, stated.row.end_h, stated.row.end)}"),
        job=row.job.name, node=row.node.name, minute=row.start)]


def _row_violations(batch: ExpandedBatch, row: _Row, stated: _Stated,
                    pins: Pins | None = None) -> list[Violation]:
    """The checks that concern one job on its node alone (and `now`, in a replan)."""
    job, node, s, e = row.job.name, row.node.name, row.start, row.end
    origin, a = batch.window_start, stated.row
    out = []

    def add(kind: str, message: str, minute: int = s) -> None:
        out.append(Violation(kind, message, job=job, node=node, minute=minute))

    start_min = stated.start_h * 60
    if abs(start_min - s) > _TOL:
        add("off_minute", f"job {job} starts at"
            f" {_stated_text(batch, start_min, a.start_h, a.start)}, not on a whole minute")
    if start_min < -_TOL:
        add("negative_start", f"job {job} starts at {clock(origin, s)} ({offset_text(s)}),"
            f" before the window opens at {clock(origin, 0)}")
    if not row.fits:
        add("cannot_hold", f"node {node} cannot hold job {job} (short of"
            f" {_shortfall(row.node, row.job)})")
    if stated.end_h is not None and abs(stated.end_h * 60 - e) > _TOL:
        add("duration", f"job {job} is stated to end at"
            f" {_stated_text(batch, stated.end_h * 60, a.end_h, a.end)} but runs {e - s} min on"
            f" node {node} (speed {row.node.speed:g}), so it ends at {clock(origin, e)}", e)
    ready = ceil_minutes(row.job.ready_h * 60)
    if s < ready and start_min >= -_TOL:  # a negative start is reported as such alone
        add("before_ready", f"job {job} starts at {clock(origin, s)} before its ready time"
            f" {clock(origin, ready)}")
    if pins is not None and s < pins.now and start_min >= -_TOL:
        add("before_now", f"job {job} starts at {clock(origin, s)}, before now"
            f" ({clock(origin, pins.now)}), and is neither done nor running")
    for m_start_h, m_end_h in row.node.maintenance:
        # Whole-minute runs meet [a, b) exactly when they meet [floor a, ceil b).
        m_start, m_end = floor_minutes(m_start_h * 60), ceil_minutes(m_end_h * 60)
        if s < m_end and m_start < e:
            add("maintenance", f"job {job} [{clock(origin, s)}, {clock(origin, e)}) overlaps"
                f" maintenance [{clock(origin, m_start)}, {clock(origin, m_end)}) on node {node}")
    return out


def _dependency_violations(batch: ExpandedBatch, placed: dict[str, _Row]) -> list[Violation]:
    """A job must not start before every job it follows has ended (unplaced ones are skipped)."""
    out = []
    for job in batch.jobs:
        row = placed.get(job.name)
        if row is None or row.pin is not None:  # a pinned job has started: what was, was
            continue
        for name in job.follows:
            pred = placed.get(name)
            if pred is not None and row.start < pred.end:
                out.append(Violation(
                    "dependency", f"job {job.name} starts at"
                    f" {clock(batch.window_start, row.start)} before its predecessor {name} ends"
                    f" at {clock(batch.window_start, pred.end)}", job=job.name,
                    node=row.node.name, minute=row.start,
                ))
    return out


def _capacity_violations(batch: ExpandedBatch, rows: list[_Row]) -> list[Violation]:
    """Event sweep per node: each maximal overloaded stretch once per node and resource.

    Events are sorted by (node, time, kind) with ends before starts at equal times, since runs
    are half-open. The running sum of demands is the load; only the load after the last event
    of each (node, time) counts, as it holds on [time, next time of that node).
    """
    if not rows:
        return []
    node_index = {n.name: i for i, n in enumerate(batch.nodes)}
    cap = np.array([[n.cores, n.memory_mib, n.gpus] for n in batch.nodes], dtype=np.int64)
    nd = np.array([node_index[r.node.name] for r in rows], dtype=np.int64)
    t = np.array([[r.start for r in rows], [r.end for r in rows]], dtype=np.int64).ravel()
    dem = np.array([[r.job.cores, r.job.memory_mib, r.job.gpus] for r in rows], dtype=np.int64)
    nd2 = np.concatenate([nd, nd])
    is_start = np.repeat([1, 0], len(rows))
    order = np.lexsort((is_start, t, nd2))
    nd2, t = nd2[order], t[order]
    load = np.cumsum(np.concatenate([dem, -dem])[order], axis=0)
    last = np.ones(len(t), dtype=bool)
    last[:-1] = (nd2[1:] != nd2[:-1]) | (t[1:] != t[:-1])
    g_node, g_time, g_load = nd2[last], t[last], load[last]
    over = g_load - cap[g_node]
    same_prev = np.zeros(len(g_node), dtype=bool)
    same_prev[1:] = g_node[1:] == g_node[:-1]
    out = []
    for r in range(3):
        bad = over[:, r] > 0
        prev_bad = np.zeros_like(bad)
        prev_bad[1:] = bad[:-1]
        begins = np.flatnonzero(bad & ~(prev_bad & same_prev))
        idx = np.flatnonzero(bad)
        peaks = np.maximum.reduceat(over[idx, r], np.searchsorted(idx, begins)) if len(idx) else []
        ends = np.flatnonzero(bad & ~np.append(bad[1:] & same_prev[1:], False)) + 1
        for b, e, peak in zip(begins, ends, peaks, strict=True):
            out.append(_capacity_message(batch, rows, nd, int(g_node[b]), r, int(g_time[b]),
                                         int(g_time[e]), int(peak)))
    out.sort(key=lambda v: (v.node, v.minute))
    return out


def _capacity_message(batch: ExpandedBatch, rows: list[_Row], nd: np.ndarray, node: int,
                      resource: int, begin: int, end: int, peak: int) -> Violation:
    name = batch.nodes[node].name
    running = [rows[k].job.name for k in np.flatnonzero(nd == node)
               if rows[k].start <= begin < rows[k].end]
    named = ", ".join(running[:_MAX_NAMED])
    if len(running) > _MAX_NAMED:
        named += f" and {len(running) - _MAX_NAMED} more"
    origin = batch.window_start
    return Violation(
        "capacity", f"capacity exceeded on node {name} for {RESOURCE_NAMES[resource]} by"
        f" {_amount(resource, peak)} from {clock(origin, begin)} until {clock(origin, end)}"
        f" (running: {named})", node=name, minute=begin, until=end,
    )


def summary_line(violations: list[Violation], plan: PlanDoc,
                 batch: ExpandedBatch | None = None) -> str:
    """One line for the terminal: 'plan OK: ...' or the violation count by kind.

    The makespan is the model's (each job's start plus its duration on its node) when the
    batch is given, else the latest end the plan states.
    """
    n_jobs = len({a.job for a in plan.assignments})
    n_nodes = len({a.node for a in plan.assignments})
    scope = f"{counted(n_jobs, 'job')} on {counted(n_nodes, 'node')}"
    makespan = _makespan_h(plan, batch)
    if makespan is not None:
        scope += f", makespan {round(makespan, 2):g} h"
    if not violations:
        return f"plan OK: {scope}, no violations"
    counts = Counter(v.kind for v in violations)
    by_kind = ", ".join(f"{kind} {n}" for kind, n in sorted(counts.items(),
                                                            key=lambda kv: (-kv[1], kv[0])))
    return f"{counted(len(violations), 'violation')} ({by_kind}): {scope}"


def _makespan_h(plan: PlanDoc, batch: ExpandedBatch | None) -> float | None:
    if batch is not None:
        rows = _read_rows(batch, plan, [])
        return max((row.end for row, _ in rows), default=0) / 60
    ends = [a.end_h for a in plan.assignments if a.end_h is not None]
    return max(ends, default=0.0) if len(ends) == len(plan.assignments) else None
