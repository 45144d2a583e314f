"""Schedule builder: start times from an assignment (serial SGS), for one plan or a population.

A thin, checked face over `kernels.sgs_population`; every array is handed over in the one
dtype/layout the kernel was compiled for, so numba keeps a single cached specialisation.
"""

from __future__ import annotations

import numpy as np

from assignplan import kernels
from assignplan.instance import Instance
from assignplan.plan import PlanResult, make_result


def check_order(inst: Instance, order: np.ndarray | None) -> np.ndarray:
    """`order` (default inst.order) as int64[J], checked to be a permutation respecting follows."""
    if order is None:
        return inst.order
    order = np.ascontiguousarray(order, dtype=np.int64)
    n = inst.n_jobs
    if order.shape != (n,) or not np.array_equal(np.sort(order), np.arange(n)):
        raise ValueError(f"order must be a permutation of the {n} job indices")
    pos = np.empty(n, dtype=np.int64)
    pos[order] = np.arange(n)
    succ = np.repeat(np.arange(n), np.diff(inst.pred_ptr))
    if np.any(pos[inst.pred_idx] >= pos[succ]):
        raise ValueError("order puts a job before a job it follows")
    return order


def check_assign(inst: Instance, assign: np.ndarray) -> np.ndarray:
    """`assign` as C-contiguous int64[..., J], checked: every job on a node that can hold it."""
    assign = np.ascontiguousarray(assign, dtype=np.int64)
    if assign.shape[-1] != inst.n_jobs:
        raise ValueError(f"assignment has {assign.shape[-1]} jobs, the batch {inst.n_jobs}")
    if assign.size and (assign.min() < 0 or assign.max() >= inst.n_nodes):
        raise ValueError("assignment names a node index out of range")
    if not inst.eligible[np.arange(inst.n_jobs), assign].all():
        raise ValueError("assignment puts a job on a node that cannot hold it")
    return assign


def _run(inst: Instance, assign2d: np.ndarray, order: np.ndarray,
         keep_starts: bool) -> tuple[np.ndarray, np.ndarray]:
    n_pop = assign2d.shape[0]
    start = np.empty((n_pop, inst.n_jobs if keep_starts else 0), dtype=np.int64)
    fitness = np.empty((n_pop, 3), dtype=np.float64)
    kernels.sgs_population(
        assign2d, order, inst.demand, inst.duration, inst.ready, inst.due, inst.weight,
        inst.pred_ptr, inst.pred_idx, inst.capacity, inst.maint_ptr, inst.maint_start,
        inst.maint_end, start, fitness,
    )
    return start, fitness


def build_schedule(inst: Instance, assign: np.ndarray,
                   order: np.ndarray | None = None) -> np.ndarray:
    """Start minute int64[J] of every job for node assignment int64[J] (serial SGS).

    Jobs go in `order` (default inst.order); each starts at the earliest minute
    s >= max(ready_j, max end of its predecessors) at which its node has the job's cores,
    memory and GPUs free throughout [s, s + duration) and no maintenance window meets it.
    """
    assign = check_assign(inst, assign)
    start, _ = _run(inst, assign[None, :], check_order(inst, order), keep_starts=True)
    return start[0]


def evaluate_population(inst: Instance, assign2d: np.ndarray,
                        order: np.ndarray | None = None) -> np.ndarray:
    """Fitness float64[P, 3] of assignments int64[P, J], in minutes (see `plan.objective`).

    Columns: makespan max_j C_j, weighted tardiness sum_j w_j max(0, C_j - d_j) (jobs with a
    due time), weighted completion sum_j w_j C_j; lower is better, lexicographically.
    Individuals are built in parallel (numba threads).
    """
    assign2d = check_assign(inst, assign2d)
    if assign2d.ndim != 2:
        raise ValueError("population must be a 2-D array [pop_size, n_jobs]")
    _, fitness = _run(inst, assign2d, check_order(inst, order), keep_starts=False)
    return fitness


def schedule_result(inst: Instance, assign: np.ndarray, method: str, lower_bound: int,
                    order: np.ndarray | None = None, **kw) -> PlanResult:
    """The PlanResult of an assignment: its SGS start times, end times and the given bound."""
    start = build_schedule(inst, assign, order)
    return make_result(inst, method, assign, start, lower_bound, **kw)
