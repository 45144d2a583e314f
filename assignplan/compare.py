"""Every method on one batch with the same time budget, measured against the bound and the best."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from assignplan.errors import AssignplanError
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
    from assignplan.bounds import lower_bound
    from assignplan.solve import EXACT_MAX_JOBS, exact_too_big, solve

    bound = lower_bound(inst)
    rows = []
    for method in methods:
        if method == "exact" and inst.n_jobs > EXACT_MAX_JOBS:
            rows.append(CompareRow(method, "skipped", None,
                                   exact_too_big(inst.n_jobs).removeprefix("exact: ")))
            continue
        try:
            result = solve(inst, method, seed=seed, budget=budget, bound=bound,
                           priority=priority)
        except AssignplanError as err:
            rows.append(CompareRow(method, "failed", None, "; ".join(err.problems)))
            continue
        rows.append(CompareRow(method, result.status, result))
    return rows


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
