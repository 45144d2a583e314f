"""Differences between two plans of one batch: jobs that changed node, starts that moved more
than a threshold, the objective's change, and each node's load before and after.

Plans are compared by job name (`Rows`), so a plan that lacks some jobs (the plan a replan
replaces has no row for a job added since) still compares: such jobs are listed as only in
one plan. Times are minutes from the window start, as everywhere inside the code.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from assignplan.documents import PlanDoc
from assignplan.errors import InputError
from assignplan.instance import NO_DUE, Instance
from assignplan.reading import plan_hours
from assignplan.units import clock, counted, hours_of, iso, number

DEFAULT_SHIFT_MINUTES = 60  # a start that moved by more than an hour is listed as shifted


@dataclass(frozen=True)
class Row:
    """A job's place in a plan: node name, start and end minutes."""

    node: str
    start: int
    end: int


Rows = dict[str, Row]


def rows_of_doc(doc: PlanDoc, inst: Instance, source: str) -> Rows:
    """A plan document's rows by job name; an end the plan does not state is the start plus
    the job's duration on its node. Unknown jobs and nodes are InputErrors naming `source`."""
    jobs = {n: k for k, n in enumerate(inst.job_names)}
    nodes = {n: k for k, n in enumerate(inst.node_names)}
    out: Rows = {}
    problems = []
    try:
        times = plan_hours(doc, inst.window_start)
    except InputError as err:
        raise InputError([f"{source}: {p}" for p in err.problems]) from None
    for k, (a, (start_h, end_h)) in enumerate(zip(doc.assignments, times, strict=True)):
        if a.job not in jobs:
            problems.append(f"{source}: assignments[{k}].job: no job named '{a.job}' in the"
                            " batch")
        elif a.node not in nodes:
            problems.append(f"{source}: assignments[{k}].node: no node named '{a.node}' in"
                            " the batch")
        elif a.job in out:
            problems.append(f"{source}: assignments[{k}].job: job '{a.job}' has a row already")
        else:
            start = round(start_h * 60)
            end = start + int(inst.duration_on(jobs[a.job], nodes[a.node])) if end_h is None \
                else round(end_h * 60)
            out[a.job] = Row(a.node, start, end)
    if problems:
        raise InputError(problems)
    return out


def rows_of_result(inst: Instance, assign: np.ndarray, start: np.ndarray,
                   end: np.ndarray) -> Rows:
    return {inst.job_names[j]: Row(inst.node_names[int(assign[j])], int(start[j]), int(end[j]))
            for j in range(inst.n_jobs)}


@dataclass(frozen=True)
class NodeLoad:
    """A node's jobs and core-hours in plan A and in plan B."""

    node: str
    jobs_a: int
    jobs_b: int
    core_hours_a: float
    core_hours_b: float


@dataclass(frozen=True)
class PlanDiff:
    """What differs between plans A and B (see the module docstring).

    `moved`: (job, node in A, node in B); `shifted`: (job, start in A, start in B) with
    |start B - start A| > `threshold` minutes; `only_a`/`only_b`: jobs with a row in one plan
    only; `objective_a`/`objective_b`: (makespan, weighted tardiness) in minutes over the
    jobs each plan has; `nodes`: every node whose load changed."""

    threshold: int
    compared: int
    moved: list[tuple[str, str, str]]
    shifted: list[tuple[str, int, int]]
    only_a: list[str]
    only_b: list[str]
    objective_a: tuple[int, float]
    objective_b: tuple[int, float]
    nodes: list[NodeLoad]


def _objective(inst: Instance, rows: Rows, index: dict[str, int]) -> tuple[int, float]:
    if not rows:
        return 0, 0.0
    jobs = np.array([index[n] for n in rows], dtype=np.int64)
    end = np.array([r.end for r in rows.values()], dtype=np.int64)
    due = inst.due[jobs]
    tardy = np.where(due != NO_DUE, np.maximum(0, end - due), 0)
    return int(end.max()), float(np.dot(inst.weight[jobs], tardy))


def plan_diff(inst: Instance, a: Rows, b: Rows, *,
              threshold: int = DEFAULT_SHIFT_MINUTES) -> PlanDiff:
    """The differences of plan B against plan A, jobs in the batch's order."""
    index = {n: k for k, n in enumerate(inst.job_names)}
    both = [n for n in inst.job_names if n in a and n in b]
    moved = [(n, a[n].node, b[n].node) for n in both if a[n].node != b[n].node]
    shifted = [(n, a[n].start, b[n].start) for n in both
               if abs(b[n].start - a[n].start) > threshold]
    load: dict[str, list[float]] = {}
    for which, rows in enumerate((a, b)):
        for name, row in rows.items():
            cell = load.setdefault(row.node, [0, 0, 0.0, 0.0])
            cell[which] += 1
            cell[2 + which] += int(inst.demand[index[name], 0]) * (row.end - row.start) / 60
    nodes = [NodeLoad(node, int(c[0]), int(c[1]), c[2], c[3])
             for node in inst.node_names if (c := load.get(node)) is not None
             and (c[0] != c[1] or abs(c[2] - c[3]) > 1e-9)]
    return PlanDiff(threshold, len(both), moved, shifted,
                    [n for n in inst.job_names if n in a and n not in b],
                    [n for n in inst.job_names if n in b and n not in a],
                    _objective(inst, a, index), _objective(inst, b, index), nodes)


def diff_lines(inst: Instance, d: PlanDiff, *, limit: int = 10) -> list[str]:
    """The difference in a few lines for the terminal (the first `limit` jobs of each list)."""
    origin = inst.window_start
    (mk_a, td_a), (mk_b, td_b) = d.objective_a, d.objective_b
    out = [f"makespan {number(hours_of(mk_a), 2)} h -> {number(hours_of(mk_b), 2)} h"
           f" ({_signed(hours_of(mk_b - mk_a))} h); weighted tardiness"
           f" {number(td_a / 60, 2)} h -> {number(td_b / 60, 2)} h",
           f"{counted(len(d.moved), 'job')} of {d.compared:,} moved to another node;"
           f" {counted(len(d.shifted), 'start')} shifted by more than"
           f" {number(d.threshold / 60, None)} h"]
    out += [f"  moved {job}: {na} -> {nb}" for job, na, nb in d.moved[:limit]]
    if len(d.moved) > limit:
        out.append(f"  ... and {len(d.moved) - limit:,} more moved")
    out += [f"  shifted {job}: {clock(origin, sa)} -> {clock(origin, sb)}"
            f" ({_signed(hours_of(sb - sa))} h)" for job, sa, sb in d.shifted[:limit]]
    if len(d.shifted) > limit:
        out.append(f"  ... and {len(d.shifted) - limit:,} more shifted")
    if d.only_a:
        out.append(f"{counted(len(d.only_a), 'job')} only in the first plan, e.g. {d.only_a[0]}")
    if d.only_b:
        out.append(f"{counted(len(d.only_b), 'job')} only in the second plan, e.g."
                   f" {d.only_b[0]}")
    return out


def _signed(hours: float) -> str:
    return ("+" if hours >= 0 else "-") + number(abs(hours), 2)


def diff_record(inst: Instance, d: PlanDiff) -> dict:
    """The difference as JSON-ready data (hours and ISO times)."""
    origin = inst.window_start
    (mk_a, td_a), (mk_b, td_b) = d.objective_a, d.objective_b
    return {
        "shift_threshold_h": d.threshold / 60,
        "jobs_compared": d.compared,
        "makespan_h": {"a": hours_of(mk_a), "b": hours_of(mk_b),
                       "change": hours_of(mk_b - mk_a)},
        "weighted_tardiness_h": {"a": td_a / 60, "b": td_b / 60, "change": (td_b - td_a) / 60},
        "moved": [{"job": j, "node_a": na, "node_b": nb} for j, na, nb in d.moved],
        "shifted": [{"job": j, "start_a": iso(origin, sa), "start_b": iso(origin, sb),
                     "shift_h": hours_of(sb - sa)} for j, sa, sb in d.shifted],
        "only_in_a": d.only_a,
        "only_in_b": d.only_b,
        "nodes": [{"node": n.node, "jobs_a": n.jobs_a, "jobs_b": n.jobs_b,
                   "core_hours_a": round(n.core_hours_a, 4),
                   "core_hours_b": round(n.core_hours_b, 4)} for n in d.nodes],
    }


def write_diff_csv(folder, inst: Instance, a: Rows, b: Rows, d: PlanDiff) -> list[str]:
    """diff-jobs.csv (every job of either plan) and diff-nodes.csv into `folder`; returns the
    file names written."""
    import pandas as pd

    from assignplan.files import atomic_write, ensure_folder

    origin = inst.window_start
    moved = {j for j, _, _ in d.moved}
    shifted = {j for j, _, _ in d.shifted}
    jobs = pd.DataFrame([{
        "job": n,
        "node_a": a[n].node if n in a else "", "node_b": b[n].node if n in b else "",
        "start_a": iso(origin, a[n].start) if n in a else "",
        "start_b": iso(origin, b[n].start) if n in b else "",
        "shift_h": hours_of(b[n].start - a[n].start) if n in a and n in b else "",
        "moved": n in moved, "shifted": n in shifted,
    } for n in inst.job_names if n in a or n in b])
    nodes = pd.DataFrame([vars(n) for n in d.nodes],
                         columns=["node", "jobs_a", "jobs_b", "core_hours_a", "core_hours_b"])
    folder = ensure_folder(folder)
    atomic_write(folder / "diff-jobs.csv", lambda p: jobs.to_csv(p, index=False))
    atomic_write(folder / "diff-nodes.csv", lambda p: nodes.to_csv(p, index=False))
    return ["diff-jobs.csv", "diff-nodes.csv"]
