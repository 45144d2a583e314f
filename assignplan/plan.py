"""The one result type every method returns, its objective, and its plan document."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from assignplan.documents import (
    Assignment,
    HistoryRow,
    Objective,
    ObjectiveGaps,
    PlanDoc,
    PlanPriority,
    Turnaround,
)
from assignplan.instance import NO_DUE, Instance
from assignplan.priority import DEFAULT, Priority
from assignplan.reading import plan_hours
from assignplan.units import calendar, counted, hours_of, offset_text


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
    its ``completion_parts``. ``priority``: how the method compared plans
    (`assignplan.priority`; None for a plan read from a document that does not say).
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
    priority: Priority | None = DEFAULT

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
    """The JSON plan document: names, not indices; every time both as hours from the window
    start on the minute grid (`units.hours_of`) and as an ISO 8601 calendar time."""
    mk, tard, compl = objective(inst, result.end)
    origin = inst.window_start
    bounds = gaps = None
    if result.tardiness_bound is not None and result.completion_bound is not None:
        bounds = Objective(makespan_h=hours_of(result.lower_bound),
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
        window_start=origin,
        makespan_h=hours_of(mk),
        lower_bound_h=hours_of(result.lower_bound),
        lower_bound_parts_h={k: hours_of(v) for k, v in result.bound_parts.items()},
        gap_pct=round(result.gap_pct, 4),
        objective=Objective(
            makespan_h=hours_of(mk), weighted_tardiness_h=hours_of(tard),
            weighted_completion_h=hours_of(compl),
        ),
        priority=None if result.priority is None else PlanPriority(
            name=result.priority.name, weights=result.priority.weights),
        objective_bounds=bounds,
        gaps_pct=gaps,
        turnaround=Turnaround(**turnaround(inst, result.start, result.end),
                              bounded_slowdown_threshold_min=BSLD_THRESHOLD),
        seconds=round(result.seconds, 3),
        assignments=[
            Assignment(
                job=inst.job_names[j],
                node=inst.node_names[int(result.assign[j])],
                start_h=hours_of(int(result.start[j])),
                end_h=hours_of(int(result.end[j])),
                start=calendar(origin, int(result.start[j])),
                end=calendar(origin, int(result.end[j])),
            )
            for j in range(inst.n_jobs)
        ],
        history=list(result.history),
    )


def _rounded(pct: float | None) -> float | None:
    return None if pct is None else round(pct, 4)


def calendar_time(inst: Instance, minute: int, *, short: bool = False) -> str:
    """Minute offset as a calendar time from the window start, to the minute.

    Long form `Thu 2026-12-10 00:00`; short form `Thu 10 Dec 00:00` for table cells; an
    offset (`+1,000,000.0 h`) beyond the calendar's last year.
    """
    when = calendar(inst.window_start, minute)
    if when is None:
        return offset_text(minute)
    return when.strftime("%a %d %b %H:%M" if short else "%a %Y-%m-%d %H:%M")


def result_from_doc(inst: Instance, doc: PlanDoc) -> PlanResult:
    """Read a plan document back into a PlanResult (for `report` and re-checking).

    Times may be hours (`start_h`) or calendar times (`start`); an end the plan does not state
    is the start plus the job's duration on its node, and a lower bound it does not state is
    computed. Raises InputError naming the first unknown job or node, or a job without a row;
    a plan that is merely infeasible is still read (the checker is what judges it).
    """
    from assignplan.errors import InputError

    job_index = {n: k for k, n in enumerate(inst.job_names)}
    node_index = {n: k for k, n in enumerate(inst.node_names)}
    assign = np.full(inst.n_jobs, -1, dtype=np.int64)
    start = np.zeros(inst.n_jobs, dtype=np.int64)
    end = np.zeros(inst.n_jobs, dtype=np.int64)
    problems = []
    times = plan_hours(doc, inst.window_start)
    for k, (a, (start_h, end_h)) in enumerate(zip(doc.assignments, times, strict=True)):
        if a.job not in job_index:
            problems.append(f"assignments[{k}].job: no job named '{a.job}' in the batch")
        elif a.node not in node_index:
            problems.append(f"assignments[{k}].node: no node named '{a.node}' in the batch")
        else:
            j, i = job_index[a.job], node_index[a.node]
            assign[j] = i
            start[j] = round(start_h * 60)
            end[j] = start[j] + inst.duration_on(j, i) if end_h is None else round(end_h * 60)
    missing = [inst.job_names[j] for j in np.flatnonzero(assign < 0)]
    if missing:
        problems.append(f"assignments: {counted(len(missing), 'job')} without a row,"
                        f" e.g. '{missing[0]}'")
    if problems:
        raise InputError(problems)
    bounds = doc.objective_bounds
    tardiness_bound = None if bounds is None else bounds.weighted_tardiness_h * 60
    completion_bound = None if bounds is None else bounds.weighted_completion_h * 60
    if doc.lower_bound_h is None:
        # a hand-written plan: every term's bound computed here, as solve would
        from assignplan.bounds import lower_bound

        bound = lower_bound(inst)
        lower, parts = bound.value, dict(bound.parts)
        tardiness_bound, completion_bound = bound.tardiness, bound.completion
    else:
        lower = round(doc.lower_bound_h * 60)
        parts = {k: round(v * 60) for k, v in doc.lower_bound_parts_h.items()}
    priority = None if doc.priority is None else Priority(doc.priority.name,
                                                          doc.priority.weights)
    return PlanResult(doc.method or "hand-written", assign, start, end, lower,
                      status=doc.status, seed=doc.seed, seconds=doc.seconds,
                      history=list(doc.history), bound_parts=parts,
                      tardiness_bound=tardiness_bound, completion_bound=completion_bound,
                      priority=priority)
