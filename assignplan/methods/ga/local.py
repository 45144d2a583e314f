"""Local improvement on the node that sets the makespan: move or swap its jobs away, or swap
two of its jobs in the decoding order, while it helps."""

from __future__ import annotations

from collections.abc import Callable, Iterator

import numpy as np

from assignplan.instance import Instance
from assignplan.methods.ga.encoding import EligibleIndex, job_share, node_load
from assignplan.methods.ga.order_keys import orders_from_keys
from assignplan.methods.ga.selection import lex_less
from assignplan.schedule import build_schedule

Evaluate = Callable[[np.ndarray, np.ndarray], np.ndarray]
Key = Callable[[np.ndarray, np.ndarray], np.ndarray]  # (assign [P, J], fit [P, 3]) -> [P, C]
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
                order: np.ndarray, justify: bool) -> Iterator[np.ndarray]:
    """Trial assignments int64[J], most promising first.

    c is the critical node (`critical_node`). Each job j on c is scored by the estimated
    relief of its best move, L_c - min_k (L_k + p_jk * share_jk) over its other eligible nodes
    (`encoding.node_load`): jobs that can go to a much lighter node come first (on a
    heterogeneous cluster these are the plain jobs crowding a special node). Per job: a move
    to each of its TARGETS lightest nodes k, each followed by swaps (`_swaps`).
    """
    start = build_schedule(inst, assign, order, justify=justify)
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
            order: np.ndarray, evaluate: Evaluate, budget: int, *,
            justify: bool = False, key: Key | None = None
            ) -> tuple[np.ndarray, np.ndarray, int]:
    """First-improvement descent from assign: int64[J] with fitness float64[3] (decoded in
    `order`: int64[J]).

    Trials are scored BATCH at a time through `evaluate`; the first one (in neighbour order)
    better than the current plan under `key` (default: the fitness itself, lexicographic; the
    engine passes its plateau tie-break, so a move that relieves one of several nodes ending
    at the makespan counts as progress) is taken and the neighbourhood rebuilt
    around it. Stops when `budget` trials are spent or no neighbour improves.
    `justify`: the critical node is read off the forward-backward improved schedule (the one
    the default scorer grades when `GAConfig.justify` is on).
    Returns new arrays (assign, fitness) and the number of trials scored.
    """
    best, best_fit, spent = assign.copy(), fit.copy(), 0
    best_key = best_fit if key is None else key(best[None], best_fit[None])[0]
    trials = _neighbours(inst, index, best, order, justify)
    while spent < budget:
        batch = [t for _, t in zip(range(min(BATCH, budget - spent)), trials, strict=False)]
        if not batch:
            break
        scores = evaluate(np.stack(batch), order)
        spent += len(batch)
        keys = scores if key is None else key(np.stack(batch), scores)
        better = np.flatnonzero(lex_less(keys, best_key))
        if len(better):
            k = int(better[0])
            best, best_fit, best_key = batch[k], scores[k].copy(), keys[k].copy()
            trials = _neighbours(inst, index, best, order, justify)
    return best, best_fit, spent


def _order_neighbours(inst: Instance, assign: np.ndarray, keys: np.ndarray, order: np.ndarray,
                      justify: bool) -> Iterator[np.ndarray]:
    """Trial keys float64[J]: swap the priorities of two jobs on the critical node.

    Pseudo-hours q = hours * keys set the decoding order; trading q_a and q_b between jobs a
    and b (key_a = q_b / h_a, key_b = q_a / h_b) swaps their places among that node's jobs
    when they do not follow others. Pairs close in the current order come first (adjacent
    ones, then two apart, ...): small changes of the node's packing.
    """
    start = build_schedule(inst, assign, order, justify=justify)
    end = start + inst.duration[np.arange(inst.n_jobs), assign]
    crit = critical_node(inst, assign, start, end)
    pos = np.empty(inst.n_jobs, dtype=np.int64)
    pos[order] = np.arange(inst.n_jobs)
    on = np.flatnonzero(assign == crit)
    on = on[np.argsort(pos[on], kind="stable")].tolist()
    q = inst.hours * keys
    for gap in range(1, len(on)):
        for x in range(len(on) - gap):
            a, b = on[x], on[x + gap]
            trial = keys.copy()
            trial[a], trial[b] = q[b] / inst.hours[a], q[a] / inst.hours[b]
            yield trial


def improve_order(assign: np.ndarray, keys: np.ndarray, fit: np.ndarray, inst: Instance,
                  evaluate: Evaluate, budget: int, *, justify: bool,
                  key: Key | None = None) -> tuple[np.ndarray, np.ndarray, int]:
    """First-improvement descent over the decoding order of the critical node, assignment
    fixed: keys float64[J] (see `order_keys`) with fitness `fit`; neighbours from
    `_order_neighbours`, scored BATCH at a time, accepted when better under `key` (default:
    the fitness, lexicographic). Returns new (keys, fitness) and the trials scored."""
    best_keys, best_fit, spent = keys.copy(), fit.copy(), 0
    best_key = best_fit if key is None else key(assign[None], best_fit[None])[0]
    order = orders_from_keys(inst, best_keys[None])[0]
    trials = _order_neighbours(inst, assign, best_keys, order, justify)
    while spent < budget:
        batch = [t for _, t in zip(range(min(BATCH, budget - spent)), trials, strict=False)]
        if not batch:
            break
        pop = np.broadcast_to(assign, (len(batch), inst.n_jobs))
        scores = evaluate(pop, orders_from_keys(inst, np.stack(batch)))
        spent += len(batch)
        keyed = scores if key is None else key(pop, scores)
        better = np.flatnonzero(lex_less(keyed, best_key))
        if len(better):
            k = int(better[0])
            best_keys, best_fit, best_key = batch[k], scores[k].copy(), keyed[k].copy()
            order = orders_from_keys(inst, best_keys[None])[0]
            trials = _order_neighbours(inst, assign, best_keys, order, justify)
    return best_keys, best_fit, spent
