"""Changes of the decoding order on the critical node, the assignment fixed: promote the
jobs the critical chains waited for, then swap pairs of the node's jobs, while it helps."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from assignplan.instance import Instance
from assignplan.methods.ga.critical import critical_node, critical_waiters
from assignplan.methods.ga.improvers.moves import BATCH
from assignplan.methods.ga.order_keys import bottom_levels, orders_from_keys
from assignplan.methods.ga.population import Evaluate, Key
from assignplan.methods.ga.selection import lex_less
from assignplan.priority import DEFAULT, Priority
from assignplan.schedule import build_schedule


def _order_neighbours(inst: Instance, assign: np.ndarray, keys: np.ndarray, order: np.ndarray,
                      justify: bool, priority: Priority = DEFAULT) -> Iterator[np.ndarray]:
    """Trial keys float64[J]: swap the priorities of two jobs on the critical node.

    Pseudo-hours q = hours * keys set the decoding order; trading q_a and q_b between jobs a
    and b (key_a = q_b / h_a, key_b = q_a / h_b) swaps their places among that node's jobs
    when they do not follow others. Pairs close in the current order come first (adjacent
    ones, then two apart, ...): small changes of the node's packing.
    """
    start = build_schedule(inst, assign, order, justify=justify, priority=priority)
    end = inst.end_times(assign, start)
    crit = critical_node(inst, assign, start, end)
    yield from _promotions(inst, assign, start, end, keys)
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


def _promotions(inst: Instance, assign: np.ndarray, start: np.ndarray, end: np.ndarray,
                keys: np.ndarray) -> Iterator[np.ndarray]:
    """Trial keys float64[J] that decode each waiting job a of the critical chains
    (`critical.critical_waiters`) ahead of the jobs of its node that start before it: all of them,
    then the later half.

    A chain waits at a: a gathering job that needs a whole node, after sweeps placed late in
    the order, ends the plan hours after its inputs could have been done, and when several
    sweeps end last together every one of them has to move. Swaps of neighbours in the order
    (below) move one job one place at a time; this moves them all at once. Pseudo-hours
    q = hours * keys give bottom levels B; raising q_a by (max B over the jobs ahead of it)
    - B_a + a little puts B_a above them all, so a decodes first among them.
    """
    waiters = critical_waiters(inst, start, end)
    if not waiters:
        return
    q = inst.hours * keys
    bottom = bottom_levels(inst, q[None])[0]
    for part in (0, 2):  # ahead of all earlier jobs on the node, then of the later half
        trial, moved = keys.copy(), False
        for a in waiters:
            ahead = np.flatnonzero((assign == assign[a]) & (start < start[a]))
            ahead = ahead[np.argsort(start[ahead], kind="stable")][len(ahead) // 2 if part else 0:]
            if not len(ahead):
                continue
            top = bottom[ahead].max()
            if top >= bottom[a]:
                trial[a] = (q[a] + top - bottom[a] + 1e-6 * max(1.0, top)) / inst.hours[a]
                moved = True
        if moved:
            yield trial


def improve_order(assign: np.ndarray, keys: np.ndarray, fit: np.ndarray, inst: Instance,
                  evaluate: Evaluate, budget: int, *, justify: bool,
                  key: Key | None = None, priority: Priority = DEFAULT
                  ) -> tuple[np.ndarray, np.ndarray, int]:
    """First-improvement descent over the decoding order of the critical node, assignment
    fixed: keys float64[J] (see `order_keys`) with fitness `fit`; neighbours from
    `_order_neighbours`, scored BATCH at a time, accepted when better under `key` (default:
    the fitness, lexicographic). Returns new (keys, fitness) and the trials scored."""
    best_keys, best_fit, spent = keys.copy(), fit.copy(), 0
    best_key = best_fit if key is None else key(assign[None], best_fit[None])[0]
    order = orders_from_keys(inst, best_keys[None])[0]
    trials = _order_neighbours(inst, assign, best_keys, order, justify, priority)
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
            trials = _order_neighbours(inst, assign, best_keys, order, justify, priority)
    return best_keys, best_fit, spent
