"""Local improvement: move or swap jobs off the node that sets the makespan while it helps."""

from __future__ import annotations

from collections.abc import Callable, Iterator

import numpy as np

from assignplan.instance import Instance
from assignplan.methods.ga.encoding import EligibleIndex, job_share, node_load
from assignplan.methods.ga.selection import lex_less
from assignplan.schedule import build_schedule

Evaluate = Callable[[np.ndarray, np.ndarray], np.ndarray]
TARGETS = 3  # least-loaded destinations tried per job: wider scans rarely pay off per trial
BATCH = 8  # trial plans scored per compiled call (a few per thread, little wasted work)


def critical_node(inst: Instance, assign: np.ndarray, start: np.ndarray,
                  end: np.ndarray) -> int:
    """The node whose capacity delays the critical path: from the job that ends last, step
    back to the predecessor whose end fixed its start, until a job started later than
    max(ready, predecessor ends), i.e. waited for its node; that node (or, if none waited,
    the last job's node)."""
    j = int(np.argmax(end))
    first = j
    while True:
        preds = inst.predecessors(j)
        free = max(int(inst.ready[j]), int(end[preds].max()) if len(preds) else 0)
        if start[j] > free or not len(preds) or start[j] > int(end[preds].max()):
            break
        j = int(preds[np.argmax(end[preds])])
    return int(assign[j] if start[j] > free else assign[first])


def _neighbours(inst: Instance, index: EligibleIndex, assign: np.ndarray,
                order: np.ndarray) -> Iterator[np.ndarray]:
    """Trial assignments int64[J], most promising first.

    c is the critical node (`critical_node`). Each job j on c is scored by the estimated
    relief of its best move, L_c - min_k (L_k + p_jk * share_jk) over its other eligible nodes
    (`encoding.node_load`): jobs that can go to a much lighter node come first (on a
    heterogeneous cluster these are the plain jobs crowding a special node). Per job: a move
    to each of its TARGETS lightest nodes k, each followed by swaps (`_swaps`).
    """
    start = build_schedule(inst, assign, order)
    end = start + inst.duration[np.arange(inst.n_jobs), assign]
    crit = critical_node(inst, assign, start, end)
    load = node_load(inst, assign[None])[0]
    moves = []
    for j in np.flatnonzero(assign == crit).tolist():
        nodes = index.nodes(j).astype(np.int64)
        nodes = nodes[nodes != crit]
        if len(nodes):
            est = load[nodes] + inst.duration[j, nodes] * job_share(
                inst, np.full(len(nodes), j), nodes)
            pick = np.argsort(est, kind="stable")[:TARGETS]
            moves.append((float(est[pick[0]]), j, nodes[pick].tolist()))
    for _, j, targets in sorted(moves):
        for k in targets:
            trial = assign.copy()
            trial[j] = k
            yield trial
            yield from _swaps(inst, assign, trial, j, k, crit)


def _swaps(inst: Instance, assign: np.ndarray, moved: np.ndarray, j: int, k: int,
           crit: int) -> Iterator[np.ndarray]:
    """After job j moved from crit to k: bring back to crit the job of k that is shortest on
    crit, and the one closest below j's duration there (the smallest change of both loads)."""
    others = np.flatnonzero((assign == k) & inst.eligible[:, crit])
    others = others[inst.duration[others, crit] < inst.duration[j, crit]]
    if len(others) == 0:
        return
    dur = inst.duration[others, crit]
    for o in dict.fromkeys([int(others[np.argmin(dur)]), int(others[np.argmax(dur)])]):
        trial = moved.copy()
        trial[o] = crit
        yield trial


def improve(assign: np.ndarray, fit: np.ndarray, inst: Instance, index: EligibleIndex,
            order: np.ndarray, evaluate: Evaluate,
            budget: int) -> tuple[np.ndarray, np.ndarray, int]:
    """First-improvement descent from assign: int64[J] with fitness float64[3] (decoded in
    `order`: int64[J]).

    Trials are scored BATCH at a time through `evaluate`; the first one (in neighbour order)
    lexicographically better than the current plan is taken and the neighbourhood rebuilt
    around it. Stops when `budget` trials are spent or no neighbour improves.
    Returns new arrays (assign, fitness) and the number of trials scored.
    """
    best, best_fit, spent = assign.copy(), fit.copy(), 0
    trials = _neighbours(inst, index, best, order)
    while spent < budget:
        batch = [t for _, t in zip(range(min(BATCH, budget - spent)), trials, strict=False)]
        if not batch:
            break
        scores = evaluate(np.stack(batch), order)
        spent += len(batch)
        better = np.flatnonzero(lex_less(scores, best_fit))
        if len(better):
            k = int(better[0])
            best, best_fit = batch[k], scores[k].copy()
            trials = _neighbours(inst, index, best, order)
    return best, best_fit, spent
