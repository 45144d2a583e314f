"""Exact repacking of a few nodes: free every job on the node that sets the makespan and on a
few partner nodes, and let CP-SAT re-assign and re-time them, the rest of the plan fixed.

This is the step that changes *which jobs share a node*, several at once: the move and swap
descent of `local` changes one or two jobs and cannot find a regrouping that needs four items
to trade places. Re-solving a handful of bins exactly is the large neighbourhood search of
P. Shaw, "Using constraint programming and local search methods to solve vehicle routing
problems", CP 1998 (from memory); on bin packing it plays the part of Falkenauer's
dominance-based regrouping (J. Heuristics 2, 1996).

The sub-model is the exact method's (`methods.exact`) restricted to the freed jobs and the
chosen nodes: every freed job keeps its place in the precedence graph by a release time (its
fixed predecessors' ends) and a deadline (its fixed successors' starts), and nothing may end
after the current makespan, so the current plan is a solution (it is given as the hint) and
whatever CP-SAT returns fits the fixed rest of the plan. CP-SAT runs on one worker with a
deterministic time limit and a seed drawn from the run's generator: the same run gives the same
answers on any machine.
"""

from __future__ import annotations

import numpy as np
from ortools.sat.python import cp_model

from assignplan.instance import Instance
from assignplan.methods.cpsat import NodeSlots, add_freed_jobs, add_node_capacity
from assignplan.methods.ga.critical import critical_node
from assignplan.methods.ga.population import Evaluate, Key
from assignplan.methods.ga.repair import resource_work
from assignplan.methods.ga.selection import lex_less
from assignplan.priority import DEFAULT, Priority
from assignplan.schedule import build_schedule

_FOUND = (cp_model.OPTIMAL, cp_model.FEASIBLE)
SINKS = 2  # of the repacked nodes, at most this many are sinks (see `pick_nodes`)
TRIED_LIMIT = 4096  # sub-problems remembered as fruitless (then forgotten all at once)


def pick_nodes(inst: Instance, assign: np.ndarray, end: np.ndarray, crit: int, k: int,
               target: int, *, rng: np.random.Generator) -> np.ndarray:
    """int64[<= k] nodes to repack: `crit` first, then up to k - 1 distinct partners drawn at
    random: among the nodes some job of `crit` could run on, up to SINKS *sinks* (nodes none
    of `crit`'s jobs can use but some job on those nodes can), and only when there are too few
    of both, nodes holding a job `crit` could take (they can lower `crit` only through a third
    node, so they come last).

    Sinks matter when `crit`'s jobs need scarce nodes (a tag, GPUs) that plain jobs also
    occupy: `crit` can only hand a job to another scarce node once that node has handed a
    plain job on, and a repacking of scarce nodes alone has nowhere to put it. On medium-2
    (benchmarks) 416 plain jobs held nearly a third of the 40 tagged nodes' time in a plan
    ending 12 % above the bound. Of k - 1 partners at most k - 2 are sinks: a lone partner
    is always one that can take `crit`'s jobs.

    A partner's weight adds two shares in [0, 1]: its room under `target`, and how early it
    finishes ((makespan - finish + 1) / (makespan + 1)). Room is counted in the resources
    `crit`'s jobs ask for, each as a share of the node's capacity x target left free by its
    jobs' work, the scarcest one counting: a GPU node's jobs need GPU room, which a CPU-only
    node with idle cores does not have. On a packing-like batch every node finishes together
    and only the room tells them apart: a late job needs partners whose spare capacity adds
    up to its size.
    """
    finish = np.zeros(inst.n_nodes, dtype=np.int64)
    np.maximum.at(finish, assign, end)
    on_crit = assign == crit
    others = np.arange(inst.n_nodes) != crit
    reach = _reachable(inst, on_crit) & others  # nodes crit's jobs could use
    takes = np.zeros(inst.n_nodes, dtype=bool)  # nodes holding a job crit could take
    takes[assign[inst.elig.of(np.arange(inst.n_jobs), crit)]] = True
    takes &= others & ~reach
    if k <= 1 or not (reach | takes).any():
        return np.array([crit], dtype=np.int64)
    load = resource_work(inst, assign[None])[0]  # [N, R] resource-minutes
    supply = inst.capacity * float(max(target, 1))
    asked = inst.demand[on_crit].max(axis=0) > 0 if on_crit.any() else inst.capacity[crit] > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(supply > 0, np.maximum(supply - load, 0.0) / supply, np.inf)
    room = np.where(asked[None, :], share, np.inf).min(axis=1)
    room = np.where(np.isfinite(room), room, 0.0)
    early = (finish.max() - finish + 1) / (finish.max() + 1)
    # sinks: nodes crit's jobs cannot use but jobs of crit's class-mates can; they take the
    # plain jobs off the partners so that crit's jobs find room there
    sinks = _reachable(inst, np.isin(assign, np.flatnonzero(reach))) & others & ~reach
    n_sinks = min(SINKS, int(sinks.sum()), max(k - 2, 0))
    picks, taken = [], np.zeros(inst.n_nodes, dtype=bool)
    for pool, quota in ((reach, k - 1 - n_sinks), (sinks, n_sinks), (takes, k - 1)):
        cand = np.flatnonzero(pool & ~taken)
        want = min(quota, k - 1 - int(taken.sum()))
        if want <= 0 or len(cand) == 0:
            continue
        weight = room[cand] / max(room[cand].max(), 1e-9) + early[cand]
        picks.append(rng.choice(cand, size=min(want, len(cand)), replace=False,
                                p=weight / weight.sum()))
        taken[picks[-1]] = True
    return np.concatenate([[crit], np.sort(np.concatenate(picks))]).astype(np.int64)


def _reachable(inst: Instance, jobs: np.ndarray) -> np.ndarray:
    """bool[N]: the nodes some job of `jobs` (bool[J]) can run on."""
    e = inst.elig
    classes = np.unique(e.job_class[jobs])
    return e.ok[classes].any(axis=0)[e.node_type] if len(classes) else np.zeros(
        inst.n_nodes, dtype=bool)


def repack_nodes(inst: Instance, assign: np.ndarray, start: np.ndarray, nodes: np.ndarray, *,
                 deterministic_time: float, seed: int, tried: set[bytes] | None = None
                 ) -> tuple[np.ndarray, np.ndarray] | None:
    """(assign int64[J], start int64[J]) with the jobs of `nodes` re-assigned among `nodes`
    and re-timed, or None when CP-SAT finds nothing better than the current plan there.

    Objective: the latest end on `nodes` first, then sum_j a_j e_j over the freed jobs with
    a_j their share of a node's cores in percent: among plans with the same local makespan,
    the wide jobs start first, which empties the last layer (the tail the ga's tie-break
    watches). The returned plan is feasible: it satisfies the sub-model, whose constraints
    hold the fixed jobs where they are.

    `tried` remembers sub-problems (nodes, freed jobs with their places and time windows) that
    gave nothing; the same one comes back as None without a solve. A plan that stagnates is
    offered the same neighbourhood again and again on a small cluster.
    """
    end = inst.end_times(assign, start)
    in_set = np.zeros(inst.n_nodes, dtype=bool)
    in_set[nodes] = True
    freed = np.flatnonzero(in_set[assign])
    if len(freed) < 2:
        return None
    window = _windows(inst, freed, start, end)
    key = b"".join(np.ascontiguousarray(a, dtype=np.int64).tobytes()
                   for a in (nodes, freed, assign[freed], start[freed], window))
    if tried is not None and key in tried:
        return None
    m, s_var, x_of, hint_value = _sub_model(inst, nodes, freed, window, assign, start, end)
    solver = cp_model.CpSolver()
    solver.parameters.num_workers = 1
    solver.parameters.random_seed = int(seed)
    solver.parameters.max_deterministic_time = float(deterministic_time)
    status = solver.solve(m)
    if status not in _FOUND or solver.objective_value >= hint_value:
        if tried is not None:
            if len(tried) >= TRIED_LIMIT:
                tried.clear()
            tried.add(key)
        return None
    new_assign, new_start = assign.copy(), start.copy()
    for r, j in enumerate(freed.tolist()):
        new_assign[j] = next(i for i, x in x_of[r].items() if solver.boolean_value(x))
        new_start[j] = solver.value(s_var[r])
    return new_assign, new_start


def _windows(inst: Instance, freed: np.ndarray, start: np.ndarray, end: np.ndarray
             ) -> np.ndarray:
    """int64[F, 2] (release, deadline) of each freed job: its ready time and fixed
    predecessors' ends; its fixed successors' starts and the makespan."""
    local = set(freed.tolist())
    makespan = int(end.max())
    window = np.empty((len(freed), 2), dtype=np.int64)
    for r, j in enumerate(freed.tolist()):
        fixed_pred = [p for p in inst.predecessors(j).tolist() if p not in local]
        fixed_succ = [q for q in inst.successors(j).tolist() if q not in local]
        window[r, 0] = max([int(inst.ready[j])] + [int(end[p]) for p in fixed_pred])
        window[r, 1] = min([makespan] + [int(start[q]) for q in fixed_succ])
    return window


def _sub_model(inst: Instance, nodes: np.ndarray, freed: np.ndarray, window: np.ndarray,
               assign: np.ndarray, start: np.ndarray, end: np.ndarray):
    """(model, start vars, per freed job {node: presence}, objective value of the hint): the
    exact method's constraints over the freed jobs and `nodes` (see `repack_nodes`)."""
    m = cp_model.CpModel()
    slots = NodeSlots(inst.n_nodes)
    s_var, e_var, x_of = add_freed_jobs(
        m, inst, freed.tolist(), [nodes[inst.elig.of(j, nodes)] for j in freed.tolist()],
        [(int(lo), int(hi)) for lo, hi in window], slots, (assign, start, end))
    makespan = int(end.max())
    local_ms = m.new_int_var(0, makespan, "local_makespan")
    for e in e_var:
        m.add(local_ms >= e)
    for i in nodes.tolist():
        add_node_capacity(m, inst, i, slots.jobs[i], slots.intervals[i], slots.presence[i],
                          local_ms)
    share = np.rint(100 * inst.demand[freed, 0] / inst.capacity[nodes, 0].max()).astype(np.int64)
    share = np.maximum(share, 1)
    big = int(share.sum()) * (makespan + 1) + 1
    m.minimize(big * local_ms + cp_model.LinearExpr.weighted_sum(e_var, share.tolist()))
    m.add_hint(local_ms, int(end[freed].max()))
    hint_value = big * int(end[freed].max()) + int(share @ end[freed])
    return m, s_var, x_of, hint_value


def start_order(start: np.ndarray, order: np.ndarray) -> np.ndarray:
    """int64[J] decoding order: the jobs by `start` of a feasible plan, ties by their place in
    `order`.

    It respects follows (a predecessor ends, so starts, strictly before its successor), and a
    serial schedule generation scheme fed the jobs of a feasible schedule by start time starts
    no job later than that schedule does (by induction: the jobs placed before job j started
    no later than they did there, so they use no more of j's window; the argument behind
    Kolisch's result that the serial scheme reaches every active schedule, EJOR 90, 1996,
    from memory). So the repacked plan decodes at least as well as CP-SAT packed it, and
    every other job starts no later than before."""
    pos = np.empty(len(order), dtype=np.int64)
    pos[order] = np.arange(len(order))
    return np.lexsort((pos, start)).astype(np.int64)


def keys_for_order(inst: Instance, order: np.ndarray) -> np.ndarray:
    """float64[J] order keys that `order_keys.orders_from_keys` decodes to `order` (a
    topological order of follows): bottom levels J - position, pseudo-hours the difference to
    the largest successor's, keys = pseudo-hours / hours."""
    n = inst.n_jobs
    bottom = np.empty(n, dtype=np.float64)
    bottom[order] = np.arange(n, 0, -1, dtype=np.float64)
    h = bottom.copy()
    for j in np.flatnonzero(np.diff(inst.succ_ptr) > 0).tolist():
        h[j] = bottom[j] - bottom[inst.successors(j)].max()
    return h / inst.hours


def repack_step(assign: np.ndarray, keys: np.ndarray | None, full: np.ndarray,
                inst: Instance, order: np.ndarray, evaluate: Evaluate, key: Key, *, nodes: int,
                target: int, deterministic_time: float, justify: bool,
                rng: np.random.Generator, tried: set[bytes] | None = None,
                priority: Priority = DEFAULT
                ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray] | None:
    """One repacking of the plan (assign int64[J], its order keys or None, its scorer row
    `full`, decoded in `order` int64[J]): the nodes are one of the nodes ending at the
    makespan (or the one `local.critical_node` blames) and partners from `pick_nodes`.

    Returns the new (assign, keys, scorer row) when the rebuilt plan is no worse under `key`
    (equal counts: a sideways step on a plateau), else None. With evolved orders the new
    keys decode the plan in start order (`start_order`), so it is never worse than before;
    with one fixed order the rebuilt plan is scored in that order and may not be.
    """
    start = build_schedule(inst, assign, order, justify=justify, priority=priority)
    end = inst.end_times(assign, start)
    late = np.unique(assign[end == end.max()])
    cands = np.union1d(late, [critical_node(inst, assign, start, end)])
    crit = int(rng.choice(cands))
    chosen = pick_nodes(inst, assign, end, crit, nodes, target, rng=rng)
    seed = int(rng.integers(2**31 - 1))
    found = repack_nodes(inst, assign, start, chosen, deterministic_time=deterministic_time,
                         seed=seed, tried=tried)
    if found is None:
        return None
    return adopt(assign, full, *found, keys, inst, order, evaluate, key)


def adopt(assign: np.ndarray, full: np.ndarray, new_assign: np.ndarray, new_start: np.ndarray,
          keys: np.ndarray | None, inst: Instance, order: np.ndarray, evaluate: Evaluate,
          key: Key) -> tuple[np.ndarray, np.ndarray | None, np.ndarray] | None:
    """A rebuilt plan (new_assign, new_start) as the ga will hold it: (assign, order keys
    decoding its start order, or None with one fixed order, scorer row), or None when it is
    worse under `key` than the plan it came from (assign, scorer row `full`)."""
    new_keys, new_order = None, order
    if keys is not None:
        new_order = start_order(new_start, order)
        new_keys = keys_for_order(inst, new_order)
    new_full = evaluate(new_assign[None], new_order)[0]
    if lex_less(key(assign[None], full[None]), key(new_assign[None], new_full[None])[0])[0]:
        return None
    return new_assign, new_keys, new_full
