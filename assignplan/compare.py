"""Every method on one batch with the same time budget, measured against the bound and the best."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from assignplan.errors import AssignplanError
from assignplan.executor import Executor, InProcess
from assignplan.instance import NO_DUE, Instance
from assignplan.metrics import summary
from assignplan.plan import PlanResult, gap_pct, objective
from assignplan.priority import DEFAULT, Priority


@dataclass(frozen=True)
class CompareRow:
    """One method's outcome; `result` is None when it was skipped or failed (see `note`)."""

    method: str
    status: str
    result: PlanResult | None
    note: str = ""


def compare_methods(inst: Instance, methods: tuple[str, ...], *, seed: int,
                    budget: float, priority: Priority = DEFAULT) -> list[CompareRow]:
    """Run each method with the same budget, the one lower bound (computed once) and the
    one `priority`; exact is skipped above its size guard, with the reason in `note`."""
    return compare_batches((inst,), methods, seed=seed, budget=budget, priority=priority)[0]


@dataclass(frozen=True, eq=False)
class BoundOf:
    """The lower bound of batch k (a task: plain data, sent to a worker once per run)."""

    instances: tuple[Instance, ...]

    def __call__(self, k: int):
        from assignplan.bounds import lower_bound

        return lower_bound(self.instances[k])


@dataclass(frozen=True)
class MethodTask:
    batch: int
    method: str

    def __str__(self) -> str:
        return f"batch {self.batch + 1}, {self.method}"


@dataclass(frozen=True, eq=False)
class RunMethod:
    """One method on one batch with its bound (a task, as `BoundOf`)."""

    instances: tuple[Instance, ...]
    bounds: tuple
    seed: int
    budget: float
    priority: Priority = DEFAULT

    def __call__(self, task: MethodTask) -> CompareRow:
        from assignplan.solve import EXACT_MAX_JOBS, exact_too_big, solve

        inst = self.instances[task.batch]
        if task.method == "exact" and inst.n_jobs > EXACT_MAX_JOBS:
            return CompareRow(task.method, "skipped", None,
                              exact_too_big(inst.n_jobs).removeprefix("exact: "))
        try:
            result = solve(inst, task.method, seed=self.seed, budget=self.budget,
                           bound=self.bounds[task.batch], priority=self.priority)
        except AssignplanError as err:
            return CompareRow(task.method, "failed", None, "; ".join(err.problems))
        return CompareRow(task.method, result.status, result)


def compare_batches(instances: Sequence[Instance], methods: tuple[str, ...], *, seed: int,
                    budget: float, executor: Executor | None = None,
                    priority: Priority = DEFAULT,
                    on_done: Callable[[MethodTask, CompareRow], None] | None = None
                    ) -> list[list[CompareRow]]:
    """`compare_methods` on every batch, each bound and then each (batch, method) pair one
    task on `executor` (default: one after the other here), every method with `budget`
    seconds and `priority`; the rows of each batch in the order of `methods`. `on_done` hears
    of each (batch, method) task as it finishes (a progress bar)."""
    executor = executor or InProcess()
    instances = tuple(instances)
    bounds: list = [None] * len(instances)
    for k, bound in executor.run(BoundOf(instances), range(len(instances))):
        bounds[k] = bound
    tasks = [MethodTask(b, m) for b in range(len(instances)) for m in methods]
    rows: list[list[CompareRow | None]] = [[None] * len(methods) for _ in instances]
    for k, row in executor.run(RunMethod(instances, tuple(bounds), seed, budget,
                                              priority), tasks):
        rows[tasks[k].batch][methods.index(tasks[k].method)] = row
        if on_done is not None:
            on_done(tasks[k], row)
    return [[row for row in batch if row is not None] for batch in rows]


def best_result(inst: Instance, rows: list[CompareRow],
                priority: Priority = DEFAULT) -> PlanResult | None:
    """The best plan of a comparison as `priority` reads the objective (by default
    lexicographic: makespan, weighted tardiness, weighted completion); ties go to the method
    listed first."""
    found = [r.result for r in rows if r.result is not None]
    return min(found, key=lambda r: priority.key(objective(inst, r.end)), default=None)


def compare_records(inst: Instance, rows: list[CompareRow]) -> list[dict]:
    """Plain records of a comparison (the `compare --json` output and the table's data).

    gap_pct is to the provable lower bound (the strongest any method proved); gap_best_pct to
    the best makespan found; gap_optimum_pct to the optimum when exact proved one;
    tardiness_gap_pct and completion_gap_pct to the bounds on those terms (see
    `plan.term_gap_pct`: against a zero tardiness bound, read tardiness_excess_h).
    """
    found = [r.result for r in rows if r.result is not None]
    bound = max((r.lower_bound for r in found), default=0)
    own = max((max(r.bound_parts.values()) for r in found if r.bound_parts), default=bound)
    best = min((r.makespan for r in found), default=None)
    optimum = next((r.makespan for r in found if r.status == "optimal"), None)
    records = []
    for row in rows:
        rec = {"method": row.method, "status": row.status, "note": row.note,
               "makespan_h": None, "lower_bound_h": bound / 60,
               "provable_bound_h": own / 60, "gap_pct": None,
               "gap_best_pct": None, "gap_optimum_pct": None, "core_utilisation_pct": None,
               "late_jobs": None, "weighted_tardiness_h": None, "tardiness_gap_pct": None,
               "tardiness_excess_h": None, "weighted_completion_h": None,
               "completion_gap_pct": None, "mean_wait_h": None, "p90_wait_h": None,
               "mean_bounded_slowdown": None, "seconds": None}
        if row.result is not None:
            r, s = row.result, summary(inst, row.result)
            rec.update(
                makespan_h=r.makespan / 60,
                gap_pct=round(gap_pct(r.makespan, bound), 2),
                gap_best_pct=round(gap_pct(r.makespan, best), 2),
                gap_optimum_pct=None if optimum is None else round(gap_pct(r.makespan, optimum), 2),
                core_utilisation_pct=s["core_utilisation_pct"],
                late_jobs=int(np.sum((inst.due != NO_DUE) & (r.end > inst.due))),
                weighted_tardiness_h=s["weighted_tardiness_h"],
                tardiness_gap_pct=s["weighted_tardiness_gap_pct"],
                tardiness_excess_h=s["weighted_tardiness_excess_h"],
                weighted_completion_h=s["weighted_completion_h"],
                completion_gap_pct=s["weighted_completion_gap_pct"],
                mean_wait_h=s["mean_wait_h"], p90_wait_h=s["p90_wait_h"],
                mean_bounded_slowdown=s["mean_bounded_slowdown"],
                seconds=round(r.seconds, 3),
            )
        records.append(rec)
    return records
