"""Greedy list scheduling: a few priority orders, each job to the eligible node where it ends
earliest, and the lexicographically best of the plans.

Published basis: Graham's LPT rule (R. L. Graham, "Bounds on multiprocessing timing
anomalies", SIAM J. Appl. Math. 17(2), 1969): on m identical machines it guarantees
C_max(LPT) <= (4/3 - 1/(3m)) C_max(OPT); and Smith's rule (W. E. Smith, Naval Research
Logistics Quarterly 3, 1956), shortest weighted duration first, optimal for the weighted
completion time on one machine. `inst.order` is already longest-first within the `follows`
order; here "earliest finish" also counts speed, capacity sharing, maintenance, ready times
and predecessors.
"""

from __future__ import annotations

import dataclasses
import time

import numpy as np

from assignplan import kernels, kernels_list
from assignplan.errors import SolveError
from assignplan.instance import Eligibility, Instance, priority_order
from assignplan.methods.orders import (
    LONG_SHARE,
    completion_order,
    critical_jobs,
    due_order,
    smith_keys,
)
from assignplan.plan import PlanResult, make_result, objective
from assignplan.priority import DEFAULT, Priority
from assignplan.schedule import build_schedule, check_order


def greedy_assign(inst: Instance, order: np.ndarray | None = None,
                  eligible: Eligibility | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(assign, start), both int64[J]: list scheduling of jobs in `order` (default inst.order).

    Each job goes to the eligible node with the earliest finish s_i + p_ji, s_i being its
    earliest feasible start there; ties to the earlier start, then the lower node index.
    `eligible` (inside `inst.elig`, with a node for every job) narrows the choice.
    """
    order = check_order(inst, order)
    assign = np.empty(inst.n_jobs, dtype=np.int64)
    start = np.empty(inst.n_jobs, dtype=np.int64)
    e = inst.elig if eligible is None else eligible
    ok = kernels_list.greedy_list(inst.arrays, order, e.job_class, e.ptr, e.nodes, assign,
                                  start)
    if not ok:  # cannot happen for a checked batch: every job has an eligible node
        raise SolveError("greedy: a job has no node that can hold it")
    return assign, start


def greedy_assign_pair(first: tuple[Instance, np.ndarray], second: tuple[Instance, np.ndarray]
                       ) -> tuple[tuple[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]:
    """`greedy_assign` of two (instance, order) pairs at once, on two threads: the second
    instance is the same batch seen another way (`mirrored`), with the same eligibility."""
    (a, order_a), (b, order_b) = first, second
    order_a, order_b = check_order(a, order_a), check_order(b, order_b)
    assign = np.empty((2, a.n_jobs), dtype=np.int64)
    start = np.empty((2, a.n_jobs), dtype=np.int64)
    ok = np.zeros(2, dtype=np.bool_)
    e = a.elig
    kernels_list.greedy_list_pair(a.arrays, order_a, b.arrays, order_b, e.job_class, e.ptr,
                                  e.nodes, assign, start, ok)
    if not ok.all():  # cannot happen for a checked batch: every job has an eligible node
        raise SolveError("greedy: a job has no node that can hold it")
    return (assign[0], start[0]), (assign[1], start[1])


def mirrored(inst: Instance, horizon: int) -> Instance:
    """The batch seen backwards from minute `horizon` (t' = horizon - t): maintenance
    mirrored (`kernels._mirror_windows`), successors as predecessors, no ready times, and a
    longest-chain-first order of the reversed `follows`."""
    m_start, m_end = np.empty_like(inst.maint_start), np.empty_like(inst.maint_end)
    kernels._mirror_windows(np.int64(horizon), inst.maint_ptr, inst.maint_start,
                            inst.maint_end, m_start, m_end)
    return dataclasses.replace(
        inst, ready=np.zeros(inst.n_jobs, dtype=np.int64), pred_ptr=inst.succ_ptr,
        pred_idx=inst.succ_idx, succ_ptr=inst.pred_ptr, succ_idx=inst.pred_idx,
        maint_start=m_start, maint_end=m_end,
        order=priority_order(inst.hours, inst.succ_ptr, inst.succ_idx, inst.pred_ptr,
                             inst.pred_idx))


def backward_assign(inst: Instance, horizon: int, order: np.ndarray | None = None
                    ) -> tuple[np.ndarray, np.ndarray]:
    """(assign, start), both int64[J]: list scheduling backwards from `horizon`, then forwards.

    Backwards: `greedy_assign` on the mirrored batch (`mirrored`) in `order` (default its
    longest chain first), so the first jobs end at the horizon and the last ones, the
    shortest, land at the start. Forwards: the serial schedule generation scheme on that
    assignment with the jobs by their mirrored-back start, ready times and maintenance
    honoured: a start order respects `follows` and starts no job later than the backward
    plan did where that plan was feasible. Longest first packs as tightly as LPT does, but
    from the end: the makespan of LPT with the short jobs first, which is where Smith's rule
    wants them.
    """
    back = mirrored(inst, horizon)
    return forwards(inst, back, horizon, *greedy_assign(back, order))


def forwards(inst: Instance, back: Instance, horizon: int, assign: np.ndarray,
             start_back: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """`backward_assign`'s second half: the mirrored plan (assign, start_back on `back`)
    rebuilt forwards by the serial scheme in its mirrored-back start order."""
    real = horizon - back.end_times(assign, start_back)
    by_start = np.lexsort((np.arange(inst.n_jobs), real))
    return assign, build_schedule(inst, assign, by_start)


def candidate_plans(inst: Instance, makespan_bound: int, priority: Priority = DEFAULT
                    ) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Greedy's plans by name, each (assign, start):

    - "longest": `inst.order`, longest chain first (Graham's LPT within `follows`);
    - "completion": the jobs that can set the makespan (`orders.critical_jobs` with
      LONG_SHARE) longest first, every other job by Smith's rule on duration / weight;
    - "smith": the same with only the jobs on a chain reaching the bound counted critical;
    - "backward": `backward_assign` from the end of the longest-first plan;
    - "due" (unless the makespan comes first in `priority`): earliest due date first within
      `follows` (`orders.due_order`), each job to the node where it ends earliest.

    Two at a time on two threads (`greedy_assign_pair`): longest with completion, then smith
    with backward, which needs the longest plan's end.
    """
    keys = smith_keys(inst)
    plans = {}
    plans["longest"], plans["completion"] = greedy_assign_pair(
        (inst, inst.order),
        (inst, completion_order(inst, critical_jobs(inst, makespan_bound, LONG_SHARE), keys)))
    longest_end = int(inst.end_times(*plans["longest"]).max())
    back = mirrored(inst, longest_end)
    plans["smith"], mirror_plan = greedy_assign_pair(
        (inst, completion_order(inst, critical_jobs(inst, makespan_bound, None), keys)),
        (back, back.order))
    plans["backward"] = forwards(inst, back, longest_end, *mirror_plan)
    if priority.name != "makespan":
        plans["due"] = greedy_assign(inst, due_order(inst))
    return plans


# The completion variants' grid: critical shares (1.01: no job is long enough) and exponents a
# of the Smith key (area^a * duration^(1-a) / weight), the most useful first (measured on the
# KTH-SP2 weeks on 6 nodes: the best plan at the best makespan came from 0.3 and from 1.01).
VARIANT_SHARES = (0.3, 1.01, 0.05, 0.5, 0.15, 0.2, 0.7, 0.1, 0.4)
VARIANT_MIXES = (0.5, 0.25, 0.75, 0.0, 1.0)


def completion_variants(inst: Instance, horizon: int, *, deadline: float | None = None
                        ) -> list[tuple[np.ndarray, np.ndarray]]:
    """(assign, start) plans of list scheduling in a grid of completion orders, each read
    forwards (`completion_order`, earliest finish) and backwards from `horizon`
    (`backward_assign`, critical jobs longest first at the end, the others by decreasing
    key before them): for each share s of VARIANT_SHARES the jobs at least s * horizon long
    are critical, for each a of VARIANT_MIXES the key is area^a * duration^(1-a) / weight.

    A plan that must keep a makespan and finish the rest early trades packing for order:
    Smith's rule on duration packs worst, on area (cores x hours) best, and which mix keeps
    a given makespan depends on the batch, so the ga tries all of them. `deadline` (a
    `time.perf_counter()` reading): no further variants past it (each costs one greedy run).
    """
    p = inst.min_duration().astype(np.float64)
    duration, area = smith_keys(inst), smith_keys(inst, "area")
    plans = []
    for share in VARIANT_SHARES:
        critical = p >= share * horizon
        for mix in VARIANT_MIXES:
            if deadline is not None and time.perf_counter() >= deadline:
                return plans
            with np.errstate(invalid="ignore"):
                key = np.nan_to_num(area**mix * duration ** (1.0 - mix), nan=np.inf)
            plans.append(greedy_assign(inst, completion_order(inst, critical, key)))
            back = np.lexsort((np.arange(inst.n_jobs), np.where(critical, -p, -key),
                               ~critical))
            plans.append(backward_assign(inst, horizon, reversed_topological(inst, back)))
    return plans


def reversed_topological(inst: Instance, order: np.ndarray) -> np.ndarray:
    """`order` made a topological order of the reversed `follows` (successors first),
    keeping it wherever it already is one: a job waits until all its successors are out."""
    if len(inst.pred_idx) == 0:
        return order
    pos = np.empty(inst.n_jobs, dtype=np.int64)
    pos[order] = np.arange(inst.n_jobs)
    reverse = dataclasses.replace(inst, pred_ptr=inst.succ_ptr, pred_idx=inst.succ_idx,
                                  succ_ptr=inst.pred_ptr, succ_idx=inst.pred_idx,
                                  order=priority_order(inst.hours, inst.succ_ptr,
                                                       inst.succ_idx, inst.pred_ptr,
                                                       inst.pred_idx))
    return completion_order(reverse, np.zeros(inst.n_jobs, dtype=bool), pos.astype(float))


def best_plan(inst: Instance, plans: dict[str, tuple[np.ndarray, np.ndarray]],
              priority: Priority = DEFAULT) -> str:
    """The name of the best plan as `priority` reads the objective (by default
    lexicographic: makespan, weighted tardiness, weighted completion); ties to the first
    listed."""
    return min(plans, key=lambda name: priority.key(objective(inst,
                                                              inst.end_times(*plans[name]))))


def solve_greedy(inst: Instance, *, lower_bound: int, seconds_start: float | None = None,
                 priority: Priority = DEFAULT) -> PlanResult:
    """The greedy plan as a PlanResult (method "greedy", status "feasible"): the best of
    `candidate_plans` as `priority` reads the objective, so never worse than any of them.

    `seconds_start`: a `time.perf_counter()` reading to count seconds from (default: now).
    """
    t0 = time.perf_counter() if seconds_start is None else seconds_start
    plans = candidate_plans(inst, lower_bound, priority)
    assign, start = plans[best_plan(inst, plans, priority)]
    return make_result(inst, "greedy", assign, start, lower_bound, status="feasible",
                       seconds=time.perf_counter() - t0)
