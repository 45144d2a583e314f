"""Independent plan checker: verifies a plan document against the batch, listing every violation.

It shares no code with the schedule builder or the array instance: it reads the expanded batch
and the plan document and uses only the model's contract helpers (the minute-rounding rule,
memory units, `can_hold`). A job is taken to run from its planned start for its model
duration ``ceil(hours * 60 / speed)`` minutes, whatever end the plan states (a wrong stated end
is a "duration" violation); intervals are half-open ``[start, end)``.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from datetime import datetime, timedelta

import numpy as np

from assignplan.model import (
    ExpandedBatch,
    Job,
    Node,
    PlanDoc,
    can_hold,
    ceil_minutes,
    duration_minutes,
    floor_minutes,
)

KINDS = (
    "missing_job", "duplicate_job", "unknown_job", "unknown_node", "cannot_hold", "capacity",
    "dependency", "maintenance", "before_ready", "duration", "negative_start", "off_minute",
    "makespan",
)
RESOURCE_NAMES = ("cores", "memory", "GPUs")
_TOL = 1e-6  # minutes: float noise of hours * 60 that still counts as a whole minute
_MAX_NAMED = 4  # jobs named in one capacity message


@dataclass(frozen=True)
class Violation:
    """One broken rule of the model, with the job, node and minute it concerns where known."""

    kind: str
    message: str
    job: str | None = None
    node: str | None = None
    minute: int | None = None


@dataclass(frozen=True)
class _Row:
    """A usable assignment row: first row of a known job on a known node."""

    job: Job
    node: Node
    start: int  # minutes, round(start_h * 60)
    end: int  # start + model duration (not the stated end)
    fits: bool  # `can_hold`: resources and tags
    alone_fits: bool  # resources alone; a job too big by itself is not also a capacity stretch


def _clock(minute: int) -> str:
    """Minutes as hours:minutes from window start, e.g. 690 -> '11:30 h'."""
    sign = "-" if minute < 0 else ""
    return f"{sign}{abs(minute) // 60}:{abs(minute) % 60:02d} h"


def _when(start: datetime, minute: int) -> str:
    """'minute 1440 (Tue 2026-12-08 00:00)': the offset and the calendar time it falls on."""
    return f"minute {minute} ({(start + timedelta(minutes=minute)).strftime('%a %Y-%m-%d %H:%M')})"


def _amount(resource: int, value: int) -> str:
    if resource == 1:
        return f"{value / 1024:g} GiB"
    return f"{value} {RESOURCE_NAMES[resource]}"


def check_plan(batch: ExpandedBatch, plan: PlanDoc) -> list[Violation]:
    """Every violation of `plan` against `batch`, in a stable order (rows, follows, capacity)."""
    out: list[Violation] = []
    rows = _read_rows(batch, plan, out)
    for row, stated_start, stated_end in rows:
        out.extend(_row_violations(row, stated_start, stated_end))
    placed = {row.job.name: row for row, _, _ in rows}
    out.extend(_dependency_violations(batch, placed))
    out.extend(_capacity_violations(batch, [r for r in placed.values() if r.alone_fits]))
    if placed:
        last = max(row.end for row in placed.values())
        if plan.makespan_h * 60 < last - _TOL:
            out.append(Violation(
                "makespan", f"plan states makespan {plan.makespan_h:g} h but its last job ends"
                f" at {_clock(last)}", minute=last,
            ))
    return out


def _read_rows(batch: ExpandedBatch, plan: PlanDoc,
               out: list[Violation]) -> list[tuple[_Row, float, float]]:
    """Resolve names; report unknown, duplicate and missing jobs and unknown nodes."""
    jobs = {j.name: j for j in batch.jobs}
    nodes = {n.name: n for n in batch.nodes}
    first_row: dict[str, int] = {}
    rows = []
    for r, a in enumerate(plan.assignments):
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
        start = int(round(a.start_h * 60))
        end = start + duration_minutes(job.hours, node.speed)
        alone = (job.cores <= node.cores and job.memory_mib <= node.memory_mib
                 and job.gpus <= node.gpus)
        rows.append((_Row(job, node, start, end, can_hold(node, job), alone), a.start_h, a.end_h))
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


def _row_violations(row: _Row, start_h: float, end_h: float) -> list[Violation]:
    """The checks that concern one job on its node alone."""
    job, node, s, e = row.job.name, row.node.name, row.start, row.end
    out = []

    def add(kind: str, message: str, minute: int = s) -> None:
        out.append(Violation(kind, message, job=job, node=node, minute=minute))

    if abs(start_h * 60 - s) > _TOL:
        add("off_minute", f"job {job} starts at {start_h:.6g} h, not on a whole minute")
    if start_h * 60 < -_TOL:
        add("negative_start", f"job {job} starts at {start_h:g} h, before the window opens")
    if not row.fits:
        add("cannot_hold", f"node {node} cannot hold job {job} (short of"
            f" {_shortfall(row.node, row.job)})")
    if abs(end_h * 60 - e) > _TOL:
        add("duration", f"job {job} is stated to end at {end_h:.6g} h but runs {e - s} min on"
            f" node {node} (speed {row.node.speed:g}), so it ends at {_clock(e)}", e)
    ready = ceil_minutes(row.job.ready_h * 60)
    if s < ready and start_h * 60 >= -_TOL:  # a negative start is reported as such alone
        add("before_ready", f"job {job} starts at {_clock(s)} before its ready time"
            f" {_clock(ready)}")
    for m_start_h, m_end_h in row.node.maintenance:
        # Whole-minute runs meet [a, b) exactly when they meet [floor a, ceil b).
        if s < ceil_minutes(m_end_h * 60) and floor_minutes(m_start_h * 60) < e:
            add("maintenance", f"job {job} [{_clock(s)}, {_clock(e)}) overlaps maintenance"
                f" [{m_start_h:g} h, {m_end_h:g} h) on node {node}")
    return out


def _dependency_violations(batch: ExpandedBatch, placed: dict[str, _Row]) -> list[Violation]:
    """A job must not start before every job it follows has ended (unplaced ones are skipped)."""
    out = []
    for job in batch.jobs:
        row = placed.get(job.name)
        if row is None:
            continue
        for name in job.follows:
            pred = placed.get(name)
            if pred is not None and row.start < pred.end:
                out.append(Violation(
                    "dependency", f"job {job.name} starts at {_clock(row.start)} before its"
                    f" predecessor {name} ends at {_clock(pred.end)}", job=job.name,
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
    return Violation(
        "capacity", f"capacity exceeded on node {name} at {_when(batch.window_start, begin)} for"
        f" {RESOURCE_NAMES[resource]} by {_amount(resource, peak)} until minute {end}"
        f" (running: {named})", node=name, minute=begin,
    )


def summary_line(violations: list[Violation], plan: PlanDoc) -> str:
    """One line for the terminal: 'plan OK: ...' or the violation count by kind."""
    n_jobs = len({a.job for a in plan.assignments})
    n_nodes = len({a.node for a in plan.assignments})
    makespan = max((a.end_h for a in plan.assignments), default=0.0)
    scope = (f"{n_jobs} job{'s' * (n_jobs != 1)} on {n_nodes} node{'s' * (n_nodes != 1)},"
             f" makespan {round(makespan, 2):g} h")
    if not violations:
        return f"plan OK: {scope}, no violations"
    counts = Counter(v.kind for v in violations)
    by_kind = ", ".join(f"{kind} {n}" for kind, n in sorted(counts.items(),
                                                            key=lambda kv: (-kv[1], kv[0])))
    plural = "" if len(violations) == 1 else "s"
    return f"{len(violations)} violation{plural} ({by_kind}): {scope}"
