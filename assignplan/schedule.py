"""Schedule builder: start times from an assignment (serial SGS), for one plan or a population.

A thin, checked face over `kernels.sgs_population`: the instance's arrays go over as one
structured argument (`Instance.arrays`), each in the one dtype/layout the kernel was compiled
for, so numba keeps a single cached specialisation.
"""

from __future__ import annotations

import numpy as np

from assignplan import kernels
from assignplan.instance import Instance
from assignplan.plan import PlanResult, make_result
from assignplan.priority import DEFAULT, Priority

JUSTIFY_ROUNDS = 3  # forward-backward rounds at most; most of the gain comes in the first
# Below this many job placements (individuals x jobs) a call runs on one thread: waking numba's
# pool costs milliseconds on a busy machine, more than building a few hundred-job plans.
SERIAL_BELOW = 20_000


def check_order(inst: Instance, order: np.ndarray | None) -> np.ndarray:
    """`order` (default inst.order) as int64[J] (or int64[P, J], one order per individual),
    checked: each row a permutation of the jobs that respects follows."""
    if order is None:
        return inst.order
    order = np.ascontiguousarray(order, dtype=np.int64)
    n = inst.n_jobs
    rows = order.reshape(-1, n) if order.ndim in (1, 2) and order.shape[-1] == n else None
    if rows is None or not np.array_equal(np.sort(rows, axis=1),
                                          np.broadcast_to(np.arange(n), rows.shape)):
        raise ValueError(f"order must be a permutation of the {n} job indices")
    pos = np.empty_like(rows)
    np.put_along_axis(pos, rows, np.arange(n)[None, :], axis=1)
    succ = np.repeat(np.arange(n), np.diff(inst.pred_ptr))
    if np.any(pos[:, inst.pred_idx] >= pos[:, succ]):
        raise ValueError("order puts a job before a job it follows")
    return order


def check_assign(inst: Instance, assign: np.ndarray) -> np.ndarray:
    """`assign` as C-contiguous int64[..., J], checked: every job on a node that can hold it."""
    assign = np.ascontiguousarray(assign, dtype=np.int64)
    if assign.shape[-1] != inst.n_jobs:
        raise ValueError(f"assignment has {assign.shape[-1]} jobs, the batch {inst.n_jobs}")
    if assign.size and (assign.min() < 0 or assign.max() >= inst.n_nodes):
        raise ValueError("assignment names a node index out of range")
    if not inst.elig.of(np.broadcast_to(np.arange(inst.n_jobs), assign.shape), assign).all():
        raise ValueError("assignment puts a job on a node that cannot hold it")
    return assign


def _run(inst: Instance, assign2d: np.ndarray, order: np.ndarray, keep_starts: bool,
         justify: bool, columns: int = 3, priority: Priority = DEFAULT
         ) -> tuple[np.ndarray, np.ndarray]:
    n_pop = assign2d.shape[0]
    if order.ndim == 2 and order.shape[0] not in (1, n_pop):
        raise ValueError(f"order has {order.shape[0]} rows, the population {n_pop}")
    start = np.empty((n_pop, inst.n_jobs if keep_starts else 0), dtype=np.int64)
    fitness = np.empty((n_pop, columns), dtype=np.float64)
    serial = n_pop * inst.n_jobs < SERIAL_BELOW
    kernel = kernels.sgs_population_serial if serial else kernels.sgs_population
    reading, weights = priority.kernel_arrays()
    kernel(inst.arrays, assign2d, order.reshape(-1, inst.n_jobs),
           JUSTIFY_ROUNDS if justify else 0, reading, weights, start, fitness)
    return start, fitness


def build_schedule(inst: Instance, assign: np.ndarray, order: np.ndarray | None = None, *,
                   justify: bool = False, priority: Priority = DEFAULT) -> np.ndarray:
    """Start minute int64[J] of every job for node assignment int64[J] (serial SGS).

    Jobs go in `order` (default inst.order); each starts at the earliest minute
    s >= max(ready_j, max end of its predecessors) at which its node has the job's cores,
    memory and GPUs free throughout [s, s + duration) and no maintenance window meets it.
    With `justify`, the schedule then goes through up to JUSTIFY_ROUNDS rounds of
    forward-backward improvement (`kernels._justify`): makespan never higher, and the best
    schedule seen as `priority` reads the objective is returned (by default the
    lexicographically best, makespan first).
    """
    assign = check_assign(inst, assign)
    order = check_order(inst, order)
    if order.ndim != 1:
        raise ValueError("build_schedule takes one order int64[J]")
    start, _ = _run(inst, assign[None, :], order, keep_starts=True, justify=justify,
                    priority=priority)
    return start[0]


def population_starts(inst: Instance, assign2d: np.ndarray, order2d: np.ndarray) -> np.ndarray:
    """Start minutes int64[P, J] of assignments int64[P, J], each decoded in its own order
    (int64[P, J]) by the serial SGS (`build_schedule` for a population, no justification)."""
    assign2d = check_assign(inst, assign2d)
    start, _ = _run(inst, assign2d, check_order(inst, order2d), keep_starts=True,
                    justify=False)
    return start


def evaluate_population(inst: Instance, assign2d: np.ndarray,
                        order: np.ndarray | None = None, *, justify: bool = False,
                        spread: bool = False, tail: bool = False,
                        priority: Priority = DEFAULT) -> np.ndarray:
    """Fitness float64[P, 3] of assignments int64[P, J], in minutes (see `plan.objective`).

    Columns: makespan max_j C_j, weighted tardiness sum_j w_j max(0, C_j - d_j) (jobs with a
    due time), weighted completion sum_j w_j C_j; lower is better, lexicographically.
    `order`: int64[J] shared, or int64[P, J] one decoding order per individual.
    `justify`: score the forward-backward improved schedule (see `build_schedule`; the best
    one as `priority` reads the objective).
    `spread`: add a fourth column, sum_i F_i^2 over the nodes' finish times F_i (minutes^2),
    a tie-break for plans of equal makespan (not part of the objective).
    `tail`: add `spread`'s column and a fifth, the area sum_j p_j * share_j of the jobs
    ending at the makespan (`kernels._tail_area`), another such tie-break.
    Individuals are built in parallel (numba threads).
    """
    assign2d = check_assign(inst, assign2d)
    if assign2d.ndim != 2:
        raise ValueError("population must be a 2-D array [pop_size, n_jobs]")
    _, fitness = _run(inst, assign2d, check_order(inst, order), keep_starts=False,
                      justify=justify, columns=5 if tail else 4 if spread else 3,
                      priority=priority)
    return fitness


def build_population(inst: Instance, assign2d: np.ndarray, order: np.ndarray | None = None, *,
                     justify: bool = False, priority: Priority = DEFAULT
                     ) -> tuple[np.ndarray, np.ndarray]:
    """Start minutes int64[P, J] of every schedule and its five score columns float64[P, 5]
    (those of `evaluate_population` with `tail`), for scorers that also need the starts."""
    assign2d = check_assign(inst, assign2d)
    if assign2d.ndim != 2:
        raise ValueError("population must be a 2-D array [pop_size, n_jobs]")
    return _run(inst, assign2d, check_order(inst, order), keep_starts=True, justify=justify,
                columns=5, priority=priority)


def schedule_result(inst: Instance, assign: np.ndarray, method: str, lower_bound: int,
                    order: np.ndarray | None = None, *, justify: bool = False,
                    **kw) -> PlanResult:
    """The PlanResult of an assignment: its SGS start times (forward-backward improved with
    `justify`, exactly as `evaluate_population` scored them under the result's `priority`),
    end times and the given bound."""
    start = build_schedule(inst, assign, order, justify=justify,
                           priority=kw.get("priority") or DEFAULT)
    return make_result(inst, method, assign, start, lower_bound, **kw)
