"""The one result type every method returns, its objective, and its plan document."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import timedelta

import numpy as np

from assignplan.instance import NO_DUE, Instance
from assignplan.model import (
    Assignment,
    HistoryRow,
    Objective,
    ObjectiveGaps,
    PlanDoc,
    Turnaround,
)


def objective(inst: Instance, end: np.ndarray) -> tuple[int, float, float]:
    """Lexicographic objective of a schedule, in minutes.

    1. makespan            C_max = max_j end_j
    2. weighted tardiness  T_w = sum_j w_j * max(0, end_j - due_j)   (jobs without due: 0)
    3. weighted completion C_w = sum_j w_j * end_j
    """
    end = np.asarray(end, dtype=np.int64)
    has_due = inst.due != NO_DUE
    tardy = np.where(has_due, np.maximum(0, end - inst.due), 0)
    return (
        int(end.max()) if len(end) else 0,
        float(np.dot(inst.weight, tardy)),
        float(np.dot(inst.weight, end)),
    )


def gap_pct(makespan: int, lower_bound: int) -> float:
    """Relative gap of a makespan to a lower bound, in percent: 100 * (C - LB) / LB."""
    if lower_bound <= 0:
        return 0.0
    return 100.0 * (makespan - lower_bound) / lower_bound


def term_gap_pct(value: float, bound: float) -> float | None:
    """Relative gap of an objective term to its lower bound, in percent: 100 (v - b) / b.

    A zero bound (weighted tardiness when every job can meet its due time alone) has no
    relative gap: 0.0 when the value is zero too, else None, and the excess v - b in hours
    is the figure to read.
    """
    if bound > 0:
        return 100.0 * (value - bound) / bound
    return 0.0 if value <= 0 else None


BSLD_THRESHOLD = 10  # minutes: runs shorter than this count as this long in bounded slowdown


def turnaround(inst: Instance, start: np.ndarray, end: np.ndarray) -> dict[str, float]:
    """The figures admins read off a schedule, in hours and plain ratios.

    wait_j = start_j - ready_j (the job's own ready time, so time spent waiting for the jobs
    it follows counts as waiting); bounded slowdown
    bsld_j = max(1, (wait_j + run_j) / max(run_j, BSLD_THRESHOLD)) (D. G. Feitelson,
    L. Rudolph, U. Schwiegelshohn, K. C. Sevcik, P. Wong, "Theory and practice in parallel
    job scheduling", JSSPP 1997: there the threshold is about 10 s for interactive jobs; our
    durations are whole minutes of batch work, so 10 minutes). Means over jobs, unweighted;
    P90 by linear interpolation.
    """
    start = np.asarray(start, dtype=np.int64)
    run = np.asarray(end, dtype=np.int64) - start
    wait = start - inst.ready
    if len(wait) == 0:
        return {"mean_wait_h": 0.0, "p90_wait_h": 0.0, "mean_bounded_slowdown": 1.0}
    slowdown = np.maximum(1.0, (wait + run) / np.maximum(run, BSLD_THRESHOLD))
    return {"mean_wait_h": float(wait.mean()) / 60,
            "p90_wait_h": float(np.percentile(wait, 90)) / 60,
            "mean_bounded_slowdown": float(slowdown.mean())}


@dataclass(frozen=True, eq=False)
class PlanResult:
    """A plan: node and start minute per job, plus how it was found.

    ``assign``: int64[J] node index; ``start``/``end``: int64[J] minutes from window start.
    ``lower_bound``: minutes (the provable bound of `bounds.lower_bound`, or a method's own
    better bound such as a proven optimum). ``status``: optimal | feasible | unknown.
    ``bound_parts``: minutes of each part of `bounds.lower_bound` (empty when not computed),
    so a reader can see which argument sets the bound. ``tardiness_bound`` and
    ``completion_bound``: lower bounds on the weighted tardiness and the weighted completion
    time in weighted minutes (`bounds.completion`; None when not computed), the latter with
    its ``completion_parts``.
    """

    method: str
    assign: np.ndarray
    start: np.ndarray
    end: np.ndarray
    lower_bound: int
    status: str = "feasible"
    seed: int | None = None
    seconds: float = 0.0
    history: list[HistoryRow] = field(default_factory=list)
    solver_bound: int | None = None
    bound_parts: dict[str, int] = field(default_factory=dict)
    tardiness_bound: float | None = None
    completion_bound: float | None = None
    completion_parts: dict[str, float] = field(default_factory=dict)

    @property
    def makespan(self) -> int:
        return int(self.end.max()) if len(self.end) else 0

    @property
    def gap_pct(self) -> float:
        return gap_pct(self.makespan, self.lower_bound)


def make_result(inst: Instance, method: str, assign: np.ndarray, start: np.ndarray,
                lower_bound: int, **kwargs) -> PlanResult:
    """Build a PlanResult, deriving end times from the durations on the chosen nodes."""
    assign = np.asarray(assign, dtype=np.int64)
    start = np.asarray(start, dtype=np.int64)
    end = inst.end_times(assign, start)
    return PlanResult(method, assign, start, end, int(lower_bound), **kwargs)


def to_plan_doc(inst: Instance, result: PlanResult) -> PlanDoc:
    """The JSON plan document: hours as floats (exact multiples of 1/60), names not indices."""
    mk, tard, compl = objective(inst, result.end)
    bounds = gaps = None
    if result.tardiness_bound is not None and result.completion_bound is not None:
        bounds = Objective(makespan_h=result.lower_bound / 60,
                           weighted_tardiness_h=result.tardiness_bound / 60,
                           weighted_completion_h=result.completion_bound / 60)
        gaps = ObjectiveGaps(
            makespan_pct=round(result.gap_pct, 4),
            weighted_tardiness_pct=_rounded(term_gap_pct(tard, result.tardiness_bound)),
            weighted_tardiness_excess_h=(tard - result.tardiness_bound) / 60,
            weighted_completion_pct=_rounded(term_gap_pct(compl, result.completion_bound)))
    return PlanDoc(
        method=result.method,
        status=result.status,
        seed=result.seed,
        window_start=inst.window_start,
        makespan_h=mk / 60,
        lower_bound_h=result.lower_bound / 60,
        lower_bound_parts_h={k: v / 60 for k, v in result.bound_parts.items()},
        gap_pct=round(result.gap_pct, 4),
        objective=Objective(
            makespan_h=mk / 60, weighted_tardiness_h=tard / 60, weighted_completion_h=compl / 60
        ),
        objective_bounds=bounds,
        gaps_pct=gaps,
        turnaround=Turnaround(**turnaround(inst, result.start, result.end),
                              bounded_slowdown_threshold_min=BSLD_THRESHOLD),
        seconds=round(result.seconds, 3),
        assignments=[
            Assignment(
                job=inst.job_names[j],
                node=inst.node_names[int(result.assign[j])],
                start_h=int(result.start[j]) / 60,
                end_h=int(result.end[j]) / 60,
            )
            for j in range(inst.n_jobs)
        ],
        history=list(result.history),
    )


def _rounded(pct: float | None) -> float | None:
    return None if pct is None else round(pct, 4)


def calendar_time(inst: Instance, minute: int, *, short: bool = False) -> str:
    """Minute offset as a calendar time from the window start, to the minute.

    Long form `Thu 2026-12-10 00:00`; short form `Thu 10 Dec 00:00` for table cells.
    """
    fmt = "%a %d %b %H:%M" if short else "%a %Y-%m-%d %H:%M"
    return (inst.window_start + timedelta(minutes=int(minute))).strftime(fmt)


def result_from_doc(inst: Instance, doc: PlanDoc) -> PlanResult:
    """Read a plan document back into a PlanResult (for `report` and re-checking).

    Raises InputError naming the first unknown job or node, or a job without a row; a plan
    that is merely infeasible is still read (the checker is what judges it).
    """
    from assignplan.errors import InputError

    job_index = {n: k for k, n in enumerate(inst.job_names)}
    node_index = {n: k for k, n in enumerate(inst.node_names)}
    assign = np.full(inst.n_jobs, -1, dtype=np.int64)
    start = np.zeros(inst.n_jobs, dtype=np.int64)
    end = np.zeros(inst.n_jobs, dtype=np.int64)
    problems = []
    for k, a in enumerate(doc.assignments):
        if a.job not in job_index:
            problems.append(f"assignments[{k}].job: no job named '{a.job}' in the batch")
        elif a.node not in node_index:
            problems.append(f"assignments[{k}].node: no node named '{a.node}' in the batch")
        else:
            j = job_index[a.job]
            assign[j] = node_index[a.node]
            start[j], end[j] = round(a.start_h * 60), round(a.end_h * 60)
    missing = [inst.job_names[j] for j in np.flatnonzero(assign < 0)]
    if missing:
        problems.append(f"assignments: {len(missing)} jobs have no row, e.g. '{missing[0]}'")
    if problems:
        raise InputError(problems)
    bounds = doc.objective_bounds
    return PlanResult(doc.method, assign, start, end, round(doc.lower_bound_h * 60),
                      status=doc.status, seed=doc.seed, seconds=doc.seconds,
                      history=list(doc.history),
                      bound_parts={k: round(v * 60) for k, v in doc.lower_bound_parts_h.items()},
                      tardiness_bound=None if bounds is None else bounds.weighted_tardiness_h * 60,
                      completion_bound=None if bounds is None
                      else bounds.weighted_completion_h * 60)
