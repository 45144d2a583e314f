"""Greedy list scheduling: longest job first, each to the eligible node where it ends earliest.

Published basis: Graham's LPT rule (R. L. Graham, "Bounds on multiprocessing timing
anomalies", SIAM J. Appl. Math. 17(2), 1969): on m identical machines it guarantees
C_max(LPT) <= (4/3 - 1/(3m)) C_max(OPT). `inst.order` is already longest-first within the
`follows` order; here "earliest finish" also counts speed, capacity sharing, maintenance,
ready times and predecessors.
"""

from __future__ import annotations

import time

import numpy as np

from assignplan import kernels
from assignplan.errors import SolveError
from assignplan.instance import Eligibility, Instance
from assignplan.plan import PlanResult, make_result
from assignplan.schedule import check_order


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
    ok = kernels.greedy_list(inst.arrays, order, e.job_class, e.ptr, e.nodes, assign, start)
    if not ok:  # cannot happen for a checked batch: every job has an eligible node
        raise SolveError("greedy: a job has no node that can hold it")
    return assign, start


def solve_greedy(inst: Instance, *, lower_bound: int,
                 seconds_start: float | None = None) -> PlanResult:
    """The greedy plan as a PlanResult (method "greedy", status "feasible").

    `seconds_start`: a `time.perf_counter()` reading to count seconds from (default: now).
    """
    t0 = time.perf_counter() if seconds_start is None else seconds_start
    assign, start = greedy_assign(inst)
    return make_result(inst, "greedy", assign, start, lower_bound, status="feasible",
                       seconds=time.perf_counter() - t0)
