"""CP-SAT building blocks shared by the exact method and the ga's repacking: a job on one of
several nodes (the presence literals are the assignment matrix), and a node's capacity.

Written as OR-Tools' own scheduling samples are: one optional interval per (job, eligible
node) with its presence literal, `add_exactly_one` over a job's presences, one cumulative per
node and binding resource, maintenance as fixed intervals.
"""

from __future__ import annotations

import numpy as np
from ortools.sat.python import cp_model

from assignplan.instance import Instance


def node_resources(inst: Instance, i: int, demand: np.ndarray) -> list[int]:
    """Resources that need a cumulative on node i, given its eligible jobs' `demand` int64[k, 3].

    A resource can be skipped when the eligible jobs and the node's reservations together
    never exceed the capacity; cores (every job needs >= 1) are kept whenever the node has
    maintenance, since the maintenance windows ride in the cumulatives.
    """
    total = demand.sum(axis=0) + inst.res_demand[inst.res_ptr[i] : inst.res_ptr[i + 1]].sum(
        axis=0)
    keep = [r for r in range(inst.capacity.shape[1]) if total[r] > inst.capacity[i, r]]
    has_maint = inst.maint_ptr[i + 1] > inst.maint_ptr[i]
    if has_maint and not keep:
        keep = [0]
    return keep


class NodeSlots:
    """Per node: the jobs that may run there, their optional intervals and presence literals
    (filled by `add_job`, read by `add_node_capacity`)."""

    def __init__(self, n_nodes: int):
        self.jobs: dict[int, list[int]] = {i: [] for i in range(n_nodes)}
        self.intervals: dict[int, list[cp_model.IntervalVar]] = {i: [] for i in range(n_nodes)}
        self.presence: dict[int, list[cp_model.IntVar]] = {i: [] for i in range(n_nodes)}


def add_job(m: cp_model.CpModel, inst: Instance, j: int, nodes: np.ndarray, lo: int, hi: int,
            slots: NodeSlots) -> tuple[cp_model.IntVar, cp_model.IntVar,
                                       dict[int, cp_model.IntVar]]:
    """Job j on one of `nodes` (each able to hold it) within [lo, hi]: (s_j, e_j, {i: x_ji}).

    x_ji in {0,1}, sum_i x_ji = 1, an optional interval [s_j, s_j + d_ji) present iff x_ji
    (recorded in `slots`), e_j = s_j + sum_i d_ji x_ji, lo <= s_j, e_j <= hi.
    """
    s = m.new_int_var(lo, hi, f"s{j}")
    e = m.new_int_var(lo + 1, hi, f"e{j}")
    presence: dict[int, cp_model.IntVar] = {}
    for i in np.asarray(nodes).tolist():
        x = m.new_bool_var(f"x{j}_{i}")
        presence[i] = x
        slots.jobs[i].append(j)
        slots.presence[i].append(x)
        slots.intervals[i].append(m.new_optional_fixed_size_interval_var(
            s, int(inst.duration_on(j, i)), x, f"iv{j}_{i}"))
    m.add_exactly_one(presence.values())
    m.add(e == s + cp_model.LinearExpr.weighted_sum(
        list(presence.values()), [int(inst.duration_on(j, i)) for i in presence]))
    return s, e, presence


def add_freed_jobs(m: cp_model.CpModel, inst: Instance, freed: list[int],
                   nodes: list[np.ndarray], window: list[tuple[int, int]], slots: NodeSlots,
                   plan: tuple[np.ndarray, np.ndarray, np.ndarray]
                   ) -> tuple[list, list, list[dict[int, cp_model.IntVar]]]:
    """The jobs a repacking frees (`add_job` each, on its `nodes` within its `window`),
    hinted with their place in `plan` (assign, start, end), and the `follows` edges between
    two of them: (start vars, end vars, per job {node: presence}), in `freed` order."""
    assign, start, end = plan
    local = {j: r for r, j in enumerate(freed)}
    s_var, e_var, x_of = [], [], []
    for r, j in enumerate(freed):
        s, e, xs = add_job(m, inst, j, nodes[r], window[r][0], window[r][1], slots)
        for i, x in xs.items():
            m.add_hint(x, bool(assign[j] == i))
        m.add_hint(s, int(start[j]))
        m.add_hint(e, int(end[j]))
        s_var.append(s)
        e_var.append(e)
        x_of.append(xs)
    for j in freed:
        for p in inst.predecessors(j).tolist():
            if p in local:
                m.add(e_var[local[p]] <= s_var[local[j]])
    return s_var, e_var, x_of


def add_node_capacity(m: cp_model.CpModel, inst: Instance, i: int, jobs: list[int],
                       intervals: list[cp_model.IntervalVar], x: list[cp_model.IntVar],
                       makespan: cp_model.IntVar) -> None:
    """Capacity of node i over its eligible `jobs` (their `intervals` and presences `x`).

    cumulative(intervals + maintenance + reservations, demand_jr | capacity_ir | reserved_r,
    capacity_ir) per binding resource r (a reservation: a job pinned where it runs, a fixed
    interval), and the redundant energy cut sum_j a_jr d_ji x_ji <= capacity_ir * C_max for
    every demanded resource. The cut is implied but gives the LP relaxation the load of each
    node, which the cumulatives over optional intervals do not: on random 80-200-job batches
    it raised the proven bound within 10 s markedly (887 -> 3750 minutes on a 192-job one).
    """
    if not jobs:
        return
    lo, hi = inst.maint_ptr[i], inst.maint_ptr[i + 1]
    maint = [
        m.new_fixed_size_interval_var(int(s), int(e - s), f"maint{i}_{k}")
        for k, (s, e) in enumerate(zip(inst.maint_start[lo:hi], inst.maint_end[lo:hi],
                                       strict=True))
    ]
    lo, hi = inst.res_ptr[i], inst.res_ptr[i + 1]
    held = [(int(max(s, 0)), int(e), k) for k, (s, e) in enumerate(
        zip(inst.res_start[lo:hi], inst.res_end[lo:hi], strict=True)) if e > max(s, 0)]
    fixed = [m.new_fixed_size_interval_var(s, e - s, f"held{i}_{k}") for s, e, k in held]
    demand = inst.demand[jobs]
    for r in node_resources(inst, i, demand):
        cap = int(inst.capacity[i, r])
        reserved = [int(inst.res_demand[lo + k, r]) for _, _, k in held]
        m.add_cumulative(intervals + maint + fixed,
                         [int(a) for a in demand[:, r]] + [cap] * len(maint) + reserved, cap)
    work = demand * inst.duration_on(np.asarray(jobs, dtype=np.int64), i).astype(np.int64)[:, None]
    for r in np.flatnonzero(work.sum(axis=0) > 0):
        m.add(cp_model.LinearExpr.weighted_sum(x, [int(a) for a in work[:, r]])
              <= int(inst.capacity[i, r]) * makespan)


