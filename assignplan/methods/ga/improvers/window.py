"""Time-window repacking for the weighted completion time: free the jobs that lie inside a
window of the plan, on every node, and let CP-SAT re-assign and re-time them inside it
around the fixed rest (so the makespan cannot grow).

A large neighbourhood search (P. Shaw, CP 1998, from memory) whose neighbourhoods are time
windows, the relaxation CP-SAT's own scheduling search uses among others ("scheduling time
window" neighbourhoods of its LNS workers, OR-Tools reference documentation). It changes which
node a job runs on and in which order the jobs of a stretch of the plan run, several at once,
where the node-local moves of `resequence` only move one job at a time and stall in a local
optimum: on KTH-SP2 week 13 on 6 nodes they stopped at the same plan after 47 s.

The sub-model is the exact method's (`methods.cpsat`) on the freed jobs: each within its
release (window start, ready time, fixed predecessors' ends) and its deadline (fixed
successors' starts, the window's end, the makespan); per node and resource one cumulative of
the freed jobs' optional intervals, the fixed jobs that overlap the window and the
maintenance there; the freed jobs' own follows. Objective: weighted tardiness first (scaled
above anything the completion term can weigh), then weighted completion, both over the freed
jobs; the plan as it is satisfies the model (given as the hint), so CP-SAT returns nothing
worse, and the rebuilt plan is scored like any trial and kept only when better in the
objective's own order.
CP-SAT runs on one worker with a deterministic time limit and a seed from the run's
generator: the same run gives the same answers on any machine.
"""

from __future__ import annotations

import numpy as np
from ortools.sat.python import cp_model

from assignplan.instance import NO_DUE, Instance
from assignplan.methods.cpsat import NodeSlots, add_freed_jobs
from assignplan.methods.exact import WEIGHT_SCALE
from assignplan.methods.ga.improvers.repack import adopt
from assignplan.methods.ga.population import Evaluate, Key
from assignplan.priority import DEFAULT, Priority
from assignplan.schedule import build_schedule

_FOUND = (cp_model.OPTIMAL, cp_model.FEASIBLE)


def window_jobs(start: np.ndarray, end: np.ndarray, size: int, *,
                rng: np.random.Generator) -> np.ndarray:
    """int64[<= size] the jobs that lie wholly inside a window [a, a + L): a the start of a
    random job, L the longest of 1, 2, 4, ... minutes (up to the plan's length) that holds
    at most `size` of them."""
    a = int(start[int(rng.integers(len(start)))])
    inside = np.flatnonzero(start >= a)
    best = inside[:0]
    length = 1
    while length <= int(end.max()) - a:
        hold = inside[end[inside] <= a + length]
        if len(hold) > size:
            break
        best = hold
        length *= 2
    return np.sort(best)


def repack_window(inst: Instance, assign: np.ndarray, start: np.ndarray, freed: np.ndarray, *,
                  deterministic_time: float, seed: int
                  ) -> tuple[np.ndarray, np.ndarray] | None:
    """(assign, start) int64[J] with the `freed` jobs re-assigned and re-timed, or None when
    CP-SAT finds nothing better for them (see the module docstring); each freed job stays
    inside the window [first start, last end] of the freed jobs."""
    if len(freed) < 2:
        return None
    end = inst.end_times(assign, start)
    makespan = int(end.max())
    local = {int(j): r for r, j in enumerate(freed.tolist())}
    horizon = int(end[freed].max())
    opens = int(start[freed].min())
    m = cp_model.CpModel()
    slots = NodeSlots(inst.n_nodes)
    window = []
    for j in freed.tolist():
        preds = [int(p) for p in inst.predecessors(j).tolist() if p not in local]
        succs = [int(q) for q in inst.successors(j).tolist() if q not in local]
        window.append((max([opens, int(inst.ready[j])] + [int(end[p]) for p in preds]),
                       min([horizon, makespan] + [int(start[q]) for q in succs])))
    los = [lo for lo, _ in window]
    s_var, e_var, x_of = add_freed_jobs(
        m, inst, freed.tolist(), [inst.elig.nodes_of(j) for j in freed.tolist()], window,
        slots, (assign, start, end))
    _add_capacity(m, inst, assign, start, end, freed, slots, (min(los), horizon))
    w = np.maximum(np.rint(inst.weight[freed] * WEIGHT_SCALE).astype(np.int64), 0)
    late, coef = [], []
    for r, j in enumerate(freed.tolist()):
        if inst.due[j] != NO_DUE and inst.due[j] < horizon and w[r] > 0:
            t = m.new_int_var(0, horizon, f"t{j}")
            m.add(t >= e_var[r] - int(inst.due[j]))
            late.append(t)
            coef.append(int(w[r]))
    completion = cp_model.LinearExpr.weighted_sum(e_var, w.tolist())
    big = int(w.sum()) * (horizon + 1) + 1
    m.minimize(big * cp_model.LinearExpr.weighted_sum(late, coef) + completion if late
               else completion)
    solver = cp_model.CpSolver()
    solver.parameters.num_workers = 1
    solver.parameters.random_seed = int(seed)
    solver.parameters.max_deterministic_time = float(deterministic_time)
    status = solver.solve(m)
    if status not in _FOUND:
        return None
    new_assign, new_start = assign.copy(), start.copy()
    for r, j in enumerate(freed.tolist()):
        new_assign[j] = next(i for i, x in x_of[r].items() if solver.boolean_value(x))
        new_start[j] = solver.value(s_var[r])
    if np.array_equal(new_assign, assign) and np.array_equal(new_start, start):
        return None
    return new_assign, new_start


def _add_capacity(m: cp_model.CpModel, inst: Instance, assign: np.ndarray, start: np.ndarray,
                  end: np.ndarray, freed: np.ndarray, slots: NodeSlots,
                  span: tuple[int, int]) -> None:
    """Per node with freed jobs and per resource they ask for: one cumulative of the freed
    jobs' optional intervals, the fixed jobs overlapping `span` and the maintenance there."""
    is_freed = np.zeros(inst.n_jobs, dtype=bool)
    is_freed[freed] = True
    lo, hi = span
    for i in range(inst.n_nodes):
        jobs = slots.jobs[i]
        if not jobs:
            continue
        fixed = np.flatnonzero((assign == i) & ~is_freed & (start < hi) & (end > lo))
        windows = [(int(a), int(b)) for a, b in zip(
            inst.maint_start[inst.maint_ptr[i]:inst.maint_ptr[i + 1]].tolist(),
            inst.maint_end[inst.maint_ptr[i]:inst.maint_ptr[i + 1]].tolist(), strict=True)
            if a < hi and b > lo]
        blocked = [m.new_fixed_size_interval_var(int(start[f]), int(end[f] - start[f]),
                                                 f"fix{f}") for f in fixed.tolist()]
        maint = [m.new_fixed_size_interval_var(a, b - a, f"m{i}_{a}") for a, b in windows]
        # reservations (jobs pinned where they run, a replan) hold their share like a fixed job
        held = [k for k in range(inst.res_ptr[i], inst.res_ptr[i + 1])
                if inst.res_start[k] < hi and inst.res_end[k] > lo
                and inst.res_end[k] > max(inst.res_start[k], 0)]
        kept = [m.new_fixed_size_interval_var(
            int(max(inst.res_start[k], 0)), int(inst.res_end[k] - max(inst.res_start[k], 0)),
            f"r{i}_{k}") for k in held]
        for r in range(inst.capacity.shape[1]):
            asked = inst.demand[jobs, r]
            if not asked.any():
                continue
            cap = int(inst.capacity[i, r])
            m.add_cumulative(slots.intervals[i] + blocked + maint + kept,
                             [int(a) for a in asked] + [int(inst.demand[f, r]) for f in fixed]
                             + [cap] * len(maint) + [int(inst.res_demand[k, r]) for k in held],
                             cap)


def window_step(assign: np.ndarray, keys: np.ndarray | None, full: np.ndarray,
                inst: Instance, order: np.ndarray, evaluate: Evaluate, key: Key, *, size: int,
                deterministic_time: float, justify: bool, rng: np.random.Generator,
                priority: Priority = DEFAULT
                ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray] | None:
    """One time-window repacking of a ga plan (assign, its order keys or None, its scorer row
    `full`, decoded in `order`): the new (assign, keys, scorer row) when no worse under `key`,
    else None (the contract of `repack.repack_step`)."""
    start = build_schedule(inst, assign, order, justify=justify, priority=priority)
    freed = window_jobs(start, inst.end_times(assign, start), size, rng=rng)
    seed = int(rng.integers(2**31 - 1))
    found = repack_window(inst, assign, start, freed, deterministic_time=deterministic_time,
                          seed=seed)
    if found is None:
        return None
    return adopt(assign, full, *found, keys, inst, order, evaluate, key)
