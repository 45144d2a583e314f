"""Churn, the last term of a replan's lexicographic objective: jobs moved, starts shifted.

Against the plan being replaced, a replanned job has *moved* when it runs on another node,
and *shifted* when its start moved by more than `SHIFT_MINUTES`. Churn compares as
(moved, shifted), after makespan, weighted tardiness and weighted completion: among plans of
equal objective, fewer moves first. A replan therefore takes the method's plan and only
looks for plans no worse on the objective and with less churn (`least_churn`):

1. relabelling: nodes of one class (same capacity, speed, tags, windows, reservations) are
   interchangeable, so handing each node's whole schedule to another of its class changes
   no start; per class, the relabelling that keeps the most jobs on their old node is an
   assignment problem (OR-Tools' linear sum assignment);
2. moving jobs back: each job that moved, tried back on its old node (one population
   evaluation of single moves, the schedules decoded in the plan's own start order, which
   starts no job later, `repack.start_order`); the moves that leave the objective no worse
   are applied together, the longest prefix (best single move first) that stays no worse;
   repeated while moves are found and time is left;
3. the old plan itself: every job that can stay on its old node kept there, the others
   placed by greedy list scheduling.

The plan with the least churn among those no worse than the method's wins (`terms=2` ranks
churn before the weighted completion time instead: `replan --fewer-moves`); with nothing to
reduce (the old plan's nodes and starts kept) the method's plan comes back unchanged, so a
replan of an unchanged week is the solve of it.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace

import numpy as np
from ortools.graph.python import linear_sum_assignment

from assignplan import kernels_list
from assignplan.instance import Instance
from assignplan.methods.ga.improvers.repack import start_order
from assignplan.plan import PlanResult, objective
from assignplan.priority import DEFAULT, Priority
from assignplan.schedule import build_schedule, evaluate_population

SHIFT_MINUTES = 60  # a start that moved by more than an hour counts as shifted
MOVE_TRIALS = 256  # single moves back tried per round (one population evaluation)
MAX_ROUNDS = 20


@dataclass(frozen=True, eq=False)
class Baseline:
    """The old plan as seen by the jobs to plan: old_node int64[F] (-1: no old row, or its
    node is gone), old_start int64[F], known bool[F] (the job had a row)."""

    old_node: np.ndarray
    old_start: np.ndarray
    known: np.ndarray


@dataclass(frozen=True)
class Churn:
    """Jobs moved to another node (`forced` of them had to: their old node is gone) and
    jobs whose start moved by more than `SHIFT_MINUTES`."""

    moved: int
    shifted: int
    forced: int = 0

    @property
    def key(self) -> tuple[int, int]:
        return (self.moved, self.shifted)


def churn_of(base: Baseline, assign: np.ndarray, start: np.ndarray) -> Churn:
    """Moved and shifted jobs of a plan (assign, start int64[F]) against `base`."""
    moved = base.known & (assign != base.old_node)
    shifted = base.known & (np.abs(start - base.old_start) > SHIFT_MINUTES)
    return Churn(int(moved.sum()), int(shifted.sum()),
                 int((base.known & (base.old_node < 0)).sum()))


def relabel(inst: Instance, base: Baseline, assign: np.ndarray) -> np.ndarray:
    """The assignment with the nodes of each node class permuted so that the most jobs stay
    on their old node (every node's schedule unchanged, so every start too)."""
    out = assign.copy()
    for cls in np.unique(inst.node_class):
        nodes = np.flatnonzero(inst.node_class == cls)
        if len(nodes) < 2:
            continue
        local = np.full(inst.n_nodes, -1, dtype=np.int64)
        local[nodes] = np.arange(len(nodes))
        on = np.flatnonzero((local[assign] >= 0) & base.known & (base.old_node >= 0))
        on = on[local[base.old_node[on]] >= 0]
        if not len(on):
            continue
        keep = np.zeros((len(nodes), len(nodes)), dtype=np.int64)
        np.add.at(keep, (local[assign[on]], local[base.old_node[on]]), 1)
        solver = linear_sum_assignment.SimpleLinearSumAssignment()
        a, b = np.meshgrid(np.arange(len(nodes)), np.arange(len(nodes)), indexing="ij")
        solver.add_arcs_with_cost(a.ravel(), b.ravel(), -keep.ravel())
        if solver.solve() != solver.OPTIMAL:  # cannot happen: a complete bipartite graph
            continue
        to = np.array([solver.right_mate(k) for k in range(len(nodes))], dtype=np.int64)
        moving = local[assign] >= 0
        out[moving] = nodes[to[local[assign[moving]]]]
    return out


def _eligible_back(inst: Instance, base: Baseline, assign: np.ndarray) -> np.ndarray:
    """Jobs that moved and whose old node can still hold them."""
    jobs = np.flatnonzero(base.known & (base.old_node >= 0) & (assign != base.old_node))
    return jobs[inst.elig.of(jobs, base.old_node[jobs])]


def _lex_le(rows: np.ndarray, ref: tuple) -> np.ndarray:
    """bool[P]: each fitness row (makespan, tardiness, completion) <= ref lexicographically,
    over the first len(ref) terms."""
    out = np.zeros(len(rows), dtype=bool)
    tie = np.ones(len(rows), dtype=bool)
    for c in range(len(ref)):
        out |= tie & (rows[:, c] < ref[c])
        tie &= rows[:, c] == ref[c]
    return out | tie


def moved_back(inst: Instance, base: Baseline, assign: np.ndarray, order: np.ndarray,
               ref: tuple, *, deadline: float, priority: Priority = DEFAULT) -> np.ndarray:
    """The assignment after rounds of moving jobs back to their old nodes, each round no
    worse than `ref` (the objective as `priority` reads it, by default makespan, tardiness,
    completion) decoded in `order` with forward-backward improvement."""
    for _ in range(MAX_ROUNDS):
        jobs = _eligible_back(inst, base, assign)[:MOVE_TRIALS]
        if not len(jobs) or time.perf_counter() >= deadline:
            break
        trial = np.repeat(assign[None, :], len(jobs), axis=0)
        trial[np.arange(len(jobs)), jobs] = base.old_node[jobs]
        fit = priority.read(evaluate_population(inst, trial, order, justify=True,
                                                priority=priority))
        ok = np.flatnonzero(_lex_le(fit, ref))
        if not len(ok):
            break
        ok = ok[np.lexsort(fit[ok].T[::-1])]
        prefix = np.repeat(assign[None, :], len(ok), axis=0)
        for k, row in enumerate(ok):
            prefix[k:, jobs[row]] = base.old_node[jobs[row]]
        fit = priority.read(evaluate_population(inst, prefix, order, justify=True,
                                                priority=priority))
        good = np.flatnonzero(_lex_le(fit, ref))
        if not len(good):
            break
        assign = prefix[good[-1]]
        ref = tuple(fit[good[-1]])[: len(ref)]
    return assign


def keep_old(inst: Instance, base: Baseline) -> tuple[np.ndarray, np.ndarray]:
    """Greedy list scheduling (longest first) with every job that can stay on its old node
    kept there: (assign, start) int64[F]."""
    e = inst.elig
    stay = base.known & (base.old_node >= 0)
    stay[stay] = e.of(np.flatnonzero(stay), base.old_node[stay])
    # classes: the eligibility's own, then one per node (a job kept on its old node)
    n_classes = len(e.ok)
    job_class = np.where(stay, n_classes + np.maximum(base.old_node, 0), e.job_class)
    ptr = np.concatenate([e.ptr, e.ptr[-1] + 1 + np.arange(inst.n_nodes)])
    nodes = np.concatenate([e.nodes, np.arange(inst.n_nodes)]).astype(np.int32)
    assign = np.empty(inst.n_jobs, dtype=np.int64)
    start = np.empty(inst.n_jobs, dtype=np.int64)
    ok = kernels_list.greedy_list(inst.arrays, inst.order, job_class.astype(np.int32),
                             ptr.astype(np.int64), nodes, assign, start)
    if not ok:  # cannot happen: every job keeps a node that can hold it
        raise RuntimeError("keep_old: a job lost every node")
    return assign, start


def least_churn(inst: Instance, result: PlanResult, base: Baseline, *,
                deadline: float, terms: int = 3, priority: Priority = DEFAULT) -> PlanResult:
    """The plan of least churn among `result` (relabelled), its jobs moved back, and the
    old plan kept; only plans no worse than `result` on the first `terms` terms of the
    objective count (see the module docstring; 3: churn after the whole objective, 2: churn
    before the weighted completion time). `result` comes back unchanged when none has less
    churn. The terms are read in `priority`'s order; for a weighted sum, churn comes after
    the sum whatever `terms`."""
    cut = terms if priority.lexicographic else 1
    ref = priority.key(objective(inst, result.end))[:cut]
    first = churn_of(base, result.assign, result.start).key
    best, best_key = result, (ref, first, priority.key(objective(inst, result.end))[cut:])
    if first == (0, 0):
        return result

    def offer(assign: np.ndarray, start: np.ndarray) -> None:
        nonlocal best, best_key
        end = inst.end_times(assign, start)
        full = priority.key(objective(inst, end))
        key = (full[:cut], churn_of(base, assign, start).key, full[cut:])
        if key[0] <= ref and key[1] < first and key < best_key:
            best, best_key = replace(result, assign=assign, start=start, end=end), key

    relabelled = relabel(inst, base, result.assign)
    offer(relabelled, result.start)
    order = start_order(result.start, inst.order)
    back = moved_back(inst, base, relabelled, order, ref, deadline=deadline,
                      priority=priority)
    if not np.array_equal(back, relabelled):
        offer(back, build_schedule(inst, back, order, justify=True, priority=priority))
    offer(*keep_old(inst, base))
    return best


def baseline(inst: Instance, jobs_old: list, node_index: dict[str, int]) -> Baseline:
    """`Baseline` of the jobs of `inst` from their old rows (`state.OldRow` or None each)."""
    old_node = np.full(inst.n_jobs, -1, dtype=np.int64)
    old_start = np.zeros(inst.n_jobs, dtype=np.int64)
    known = np.zeros(inst.n_jobs, dtype=bool)
    for j, row in enumerate(jobs_old):
        if row is None:
            continue
        known[j] = True
        old_node[j] = node_index.get(row.node, -1)
        old_start[j] = row.start
    return Baseline(old_node, old_start, known)

