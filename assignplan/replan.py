"""Replan the week from where it stands: the state read against the batch and the old plan,
the jobs not yet started planned again by the chosen method, churn kept low.

`load_replan` reads the three documents (batch with the state's new jobs and windows and
any what-if changes, the plan being replaced, the state) and checks them together, one line
per problem; `replan` plans the jobs still to plan on the one solve API (`solve.solve`) with
the running jobs as reservations and `now` as a global ready time (`pinning`), breaks ties
of the objective by churn (`churn.least_churn`, unless `free`), and puts the pinned jobs
back (`pinning.merge`).
"""

from __future__ import annotations

import re
import time
from collections.abc import Sequence
from dataclasses import dataclass, replace
from datetime import datetime
from pathlib import Path

from pydantic import BaseModel

from assignplan.bounds import lower_bound
from assignplan.churn import Churn, baseline, churn_of, keep_old, least_churn
from assignplan.diff import Row, Rows, rows_of_result
from assignplan.errors import InputError
from assignplan.expand import ExpandedBatch, can_hold, expand_batch
from assignplan.instance import NO_DUE, Instance, build_instance
from assignplan.pinning import free_instance, merge, replan_bound
from assignplan.plan import PlanResult
from assignplan.priority import DEFAULT, Priority
from assignplan.reading import load_plan, parse_batch_text, plan_hours, read_text
from assignplan.state import (
    JobState,
    OldRow,
    Pins,
    StateDoc,
    read_state,
    resolve_state,
    state_now,
)
from assignplan.units import duration_minutes
from assignplan.whatif import Change, window_change

CHURN_SHARE = 0.1  # of the budget kept for the churn tie-break (the method gets the rest)


@dataclass(frozen=True)
class ReplanInput:
    """The documents of a replan, read and checked together: the batch as it now stands,
    the old plan's rows by job name, the pins, and the lines to say about them."""

    batch: ExpandedBatch
    old: Rows
    pins: Pins
    assumed: int = 0  # jobs taken as the old plan has them (`as_planned`)


def load_replan(batch_path: Path | str, plan_path: Path | str, state_path: Path | str, *,
                now: datetime | float | None, changes: Sequence[Change] = (),
                as_planned: bool = False) -> ReplanInput:
    """Read and check a replan's documents; InputError with every problem, one line each."""
    source = str(state_path)
    state = read_state(state_path)
    doc = parse_batch_text(read_text(batch_path), str(batch_path))
    n_groups = len(doc.jobs)
    if state.new_jobs:
        doc = doc.model_copy(update={"jobs": [*doc.jobs, *state.new_jobs]})
    windows: list[Change] = []
    problems: list[str] = []
    for k, w in enumerate(state.nodes):
        try:
            windows.append(window_change(w, f"{source}: nodes[{k}]",
                                         required_end=w.status == "maintenance"))
        except InputError as err:
            problems += err.problems
    if problems:
        raise InputError(problems)
    try:
        batch = expand_batch(doc, str(batch_path), [*changes, *windows])
    except InputError as err:  # a new job's problem is the state's, at its own path
        raise InputError([_new_job_path(p, str(batch_path), source, n_groups)
                          for p in err.problems]) from None
    old = _old_rows(plan_path, batch)
    minute = state_now(state, now, batch.window_start, source)
    assumed = 0
    if as_planned:
        extra = as_planned_entries(state, batch, old, minute)
        assumed = len(extra)
        state = state.model_copy(update={"jobs": [*state.jobs, *extra]})
    pins = resolve_state(state, source, batch,
                         minute, {n: OldRow(r.node, r.start, r.end) for n, r in old.items()})
    return ReplanInput(batch, old, pins, assumed)


def _new_job_path(problem: str, batch_source: str, state_source: str, n_groups: int) -> str:
    """'BATCH: jobs[12].hours: ...' -> 'STATE: new_jobs[2].hours: ...' for an added job."""
    match = re.match(rf"^{re.escape(batch_source)}: jobs\[(\d+)\](.*)$", problem, re.S)
    if match is None or int(match.group(1)) < n_groups:
        return problem
    return f"{state_source}: new_jobs[{int(match.group(1)) - n_groups}]{match.group(2)}"


def _old_rows(plan_path: Path | str, batch: ExpandedBatch) -> Rows:
    """The old plan's rows by job name. Its jobs must be jobs of the batch; a node it names
    that the batch no longer has (a what-if removal) is kept by name: those jobs move."""
    source = str(plan_path)
    doc = load_plan(plan_path)
    try:
        times = plan_hours(doc, batch.window_start)
    except InputError as err:
        raise InputError([f"{source}: {p}" for p in err.problems]) from None
    jobs = {j.name: j for j in batch.jobs}
    speed = {n.name: n.speed for n in batch.nodes}
    out: Rows = {}
    problems = []
    for k, (a, (start_h, end_h)) in enumerate(zip(doc.assignments, times, strict=True)):
        if a.job not in jobs:
            problems.append(f"{source}: assignments[{k}].job: no job named '{a.job}' in the"
                            " batch")
            continue
        start = round(start_h * 60)
        if end_h is not None:
            end = round(end_h * 60)
        else:
            end = start + duration_minutes(jobs[a.job].hours, speed.get(a.node, 1.0))
        out[a.job] = Row(a.node, start, end)
    if problems:
        raise InputError(problems)
    return out


def as_planned_entries(state: StateDoc, batch: ExpandedBatch, old: Rows,
                       now: int) -> list[JobState]:
    """Jobs the state does not list but the old plan started before `now`, taken to have run
    as planned: done if planned to end by now, else running. A job is left out (not started)
    when its node is gone or cannot hold it, when a job it follows had not ended by its
    planned start, or when it would not fit its node beside the jobs running there."""
    listed = {s.job: s for s in state.jobs}
    jobs = {j.name: j for j in batch.jobs}
    nodes = {n.name: n for n in batch.nodes}
    ended: dict[str, float] = {}  # job -> end hours, for done jobs (listed or assumed)
    running: dict[str, list[int]] = {}  # node -> resources held by running jobs at now
    for s in state.jobs:
        if s.status == "done" and s.end_h is not None:
            ended[s.job] = s.end_h
        elif s.status == "running":
            node = s.node or (old[s.job].node if s.job in old else None)
            j = jobs.get(s.job)
            if node is not None and j is not None:
                held = running.setdefault(node, [0, 0, 0])
                for r, d in enumerate((j.cores, j.memory_mib, j.gpus)):
                    held[r] += d
    out = []
    for name, row in sorted(old.items(), key=lambda kv: kv[1].start):
        if name in listed or row.start >= now or name not in jobs:
            continue
        job, node = jobs[name], nodes.get(row.node)
        if node is None or not can_hold(node, job):
            continue
        if any(ended.get(p, float("inf")) * 60 > row.start + 1e-6 for p in job.follows):
            continue
        if row.end <= now:
            ended[name] = row.end / 60
            out.append(JobState(job=name, status="done", node=row.node,
                                start_h=row.start / 60, end_h=row.end / 60))
            continue
        held = running.setdefault(row.node, [0, 0, 0])
        need = (job.cores, job.memory_mib, job.gpus)
        if any(h + d > c for h, d, c in zip(held, need, (node.cores, node.memory_mib,
                                                         node.gpus), strict=True)):
            continue
        for r, d in enumerate(need):
            held[r] += d
        out.append(JobState(job=name, status="running", node=row.node,
                            start_h=row.start / 60, end_h=row.end / 60))
    return out


@dataclass(frozen=True, eq=False)
class Replanned:
    """A replan's outcome: the whole batch's instance and plan (pinned jobs included), its
    churn against the old plan over the jobs that were planned again, and the pins."""

    inst: Instance
    result: PlanResult
    churn: Churn
    pins: Pins
    replanned: int  # jobs planned again (not pinned)


def replan(given: ReplanInput, method: str = "ga", *, seed: int = 0, budget: float = 30.0,
           settings: BaseModel | None = None, free: bool = False,
           fewer_moves: bool = False, progress=None,
           priority: Priority = DEFAULT) -> Replanned:
    """Plan the jobs of `given` not yet started (see the module docstring) within `budget`
    seconds; `free`: no churn tie-break (plan them as from scratch); `fewer_moves`: churn
    ranks before the weighted completion time (after makespan and weighted tardiness);
    `priority`: how the objective's terms are read, by the method and by the churn
    tie-break (`assignplan.priority`)."""
    from assignplan.solve import solve

    t0 = time.perf_counter()
    deadline = t0 + budget
    batch, pins = given.batch, given.pins
    inst = build_instance(batch)
    part = free_instance(batch, pins)
    result = None
    churn = Churn(0, 0)
    free_bound = None
    if part.inst is not None:
        free_bound = lower_bound(part.inst, deadline=deadline)
        base = baseline(part.inst, [_old_row(given.old.get(n)) for n in part.inst.job_names],
                        {n: i for i, n in enumerate(part.inst.node_names)})
        churn_counts = not free and bool(given.old)
        share = 1.0 - CHURN_SHARE if churn_counts else 1.0
        # The old plan, kept where it can be, is a plan to start from, unless the week is
        # unchanged (nothing pinned, now at the window start): then the replan is the solve.
        changed = bool(pins.jobs) or pins.now > 0
        hint = keep_old(part.inst, base) if churn_counts and changed else None
        result = solve(part.inst, method, seed=seed,
                       budget=max(0.0, share * (deadline - time.perf_counter())),
                       settings=settings, progress=progress, bound=free_bound, hint=hint,
                       priority=priority)
        if churn_counts:
            result = least_churn(part.inst, result, base,
                                 deadline=max(deadline, time.perf_counter() + 1.0),
                                 terms=2 if fewer_moves else 3, priority=priority)
        churn = churn_of(base, result.assign, result.start)
    bound = replan_bound(free_bound, pins)
    whole = merge(inst, part, result, pins, bound)
    whole = replace(whole, **_term_bounds(inst, result, pins),
                    seconds=time.perf_counter() - t0, priority=priority)
    return Replanned(inst, whole, churn, pins, len(part.jobs))


def _old_row(row: Row | None) -> OldRow | None:
    return None if row is None else OldRow(row.node, row.start, row.end)


def _term_bounds(inst: Instance, result: PlanResult | None, pins: Pins) -> dict:
    """Bounds of the whole plan's tardiness and completion: the free part's bounds plus what
    the pinned jobs contribute (fixed: their ends are known); every job pinned: exactly
    theirs."""
    if result is not None and (result.tardiness_bound is None
                               or result.completion_bound is None):
        return {}
    index = {n: j for j, n in enumerate(inst.job_names)}
    tard = compl = 0.0
    for name, pin in pins.jobs.items():
        j = index[name]
        w = float(inst.weight[j])
        compl += w * pin.end
        if inst.due[j] != NO_DUE:
            tard += w * max(0, pin.end - int(inst.due[j]))
    if result is None:
        return {"tardiness_bound": tard, "completion_bound": compl}
    return {"tardiness_bound": result.tardiness_bound + tard,
            "completion_bound": result.completion_bound + compl,
            "completion_parts": dict(result.completion_parts)}


def replan_rows(out: Replanned) -> Rows:
    return rows_of_result(out.inst, out.result.assign, out.result.start, out.result.end)


def stopped_lines(pins: Pins) -> list[str]:
    """What the output says about the state: jobs whose progress was lost, and notes."""
    return list(pins.lost.values()) + list(pins.notes)
