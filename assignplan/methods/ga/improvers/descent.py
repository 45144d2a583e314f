"""Node-local descent: moves, swaps and ejection chains off the node that ends last, each
tried by rebuilding only the nodes it touches.

Steps, for a job j of the last-ending node (its last-starting jobs first) and a partner node
k (the earliest-ending first): j moves to k; or j takes the place of a job m of k, and m goes
to the last-ending node (a swap) or to one of the CHAIN_PARTNERS earliest-ending other nodes
(an ejection chain of two moves). When the makespan job waits along a chain of follows
whose head waited for room on its node, one more step (`critical.waiting_head`) ends the
head sooner: the frozen earliest starts hide the gain here, the ga's full decode of the
result shows it.

The ga's own local step (`local.improve`) scores every trial by decoding the whole batch,
which on 2,000 jobs affords a few dozen trials a generation. Here a trial decodes the ~10
jobs of two nodes, so thousands fit in a millisecond. What keeps that exact: every other
job stays where it is, each job's earliest start is frozen at its release and its
predecessors' current ends, and a job with successors must not end later than it does now
(so nothing on an untouched node has to move). A trial is kept when both rebuilt nodes end
before the makespan: one node fewer ends at the makespan, or the makespan falls.

On a node, jobs go through the serial SGS in their current start order, a job moved in goes
last (it still takes the earliest slot that fits, holes included), a job moved out leaves
the others' starts no later (see `repack.start_order`). The result returns to the ga as
order keys that decode to it (`repack.adopt`), so it is never worse there either.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from assignplan.instance import Instance
from assignplan.kernels import (
    duration_of,
    earliest_start,
    eligible_of,
    init_node,
    node_slots,
    place,
)
from assignplan.methods.ga.critical import waiting_head
from assignplan.methods.ga.improvers.repack import adopt
from assignplan.methods.ga.population import Evaluate, Key
from assignplan.priority import DEFAULT, Priority
from assignplan.schedule import build_schedule

CHAIN_PARTNERS = 8  # third nodes an ejection chain tries for the job it pushes out
TOO_LATE = np.int64(1) << 62  # a trial's end when it would delay a job with successors


@njit(cache=True)
def decode_node(A, i, seq, n, skip, extra, earliest, latest, seg_t, seg_f, seg_lo, seg_n,
                 end):
    """Serial SGS of node i alone: jobs seq[:n] in that order except `skip`, then `extra`
    (each -1 for none). Writes end[j] of each job placed; returns the node's last end, 0 if
    it is empty, TOO_LATE if some job would end after latest[j]."""
    init_node(i, seg_t, seg_f, seg_lo, seg_n, A.capacity, A.maint_ptr, A.maint_start,
              A.maint_end, A.res_ptr, A.res_start, A.res_end, A.res_demand)
    last = np.int64(0)
    for q in range(n + 1):
        if q < n:
            j = seq[q]
            if j == skip:
                continue
        else:
            j = extra
            if j < 0:
                break
        dur = duration_of(A, j, i)
        d = A.demand[j]
        s, k = earliest_start(seg_t, seg_f, 0, seg_n[i], earliest[j], dur, d[0], d[1], d[2])
        if s < 0 or s + dur > latest[j]:
            return TOO_LATE
        seg_n[i] = place(seg_t, seg_f, 0, seg_n[i], k, s, dur, d[0], d[1], d[2])
        end[j] = s + dur
        if s + dur > last:
            last = s + dur
    return last


@njit(cache=True)
def _put(lists, fill, i, j):
    lists[i, fill[i]] = j
    fill[i] += 1


@njit(cache=True)
def _relocate(lists, fill, assign, crit, j, k, m, dest):
    """j from crit to k, m from k to dest (crit for a swap, a third node for a chain)."""
    take_out(lists, fill, crit, j)
    take_out(lists, fill, k, m)
    _put(lists, fill, k, j)
    _put(lists, fill, dest, m)
    assign[j] = k
    assign[m] = dest


@njit(cache=True)
def take_out(lists, fill, i, j):
    """Remove job j from node i's list (rows of `lists`, `fill[i]` long), keeping the order."""
    w = 0
    for q in range(fill[i]):
        if lists[i, q] != j:
            lists[i, w] = lists[i, q]
            w += 1
    fill[i] = w


@njit(cache=True)
def _descend(A, assign, start, earliest, latest, budget, target):
    """The descent in place on assign/start int64[J] (a feasible plan). Returns (moves kept,
    node decodes spent); stops when no move or swap off the last-ending node helps, or after
    `budget` decodes. With `target` >= 0: one step off that node instead (every touched node
    still ending before the makespan), whatever `latest` asks of its jobs."""
    maint_ptr = A.maint_ptr
    n_jobs = assign.shape[0]
    n_nodes = A.capacity.shape[0]
    count = np.zeros(n_nodes, np.int64)
    for j in range(n_jobs):
        count[assign[j]] += 1
    width = 2 * count.max() + 2  # a node may gain jobs; a full row stops taking more
    lists = np.full((n_nodes, width), -1, np.int64)
    fill = np.zeros(n_nodes, np.int64)
    ends = np.zeros(n_nodes, np.int64)
    end = np.empty(n_jobs, np.int64)
    for j in np.argsort(start, kind="mergesort"):
        i = assign[j]
        _put(lists, fill, i, j)
        end[j] = start[j] + duration_of(A, j, i)
        ends[i] = max(ends[i], end[j])
    fixed = 0  # the most slots a node's maintenance and reservations take
    for i in range(n_nodes):
        fixed = max(fixed, node_slots(maint_ptr, A.res_ptr, i))
    size = fixed + 2 * width
    seg_t = np.empty(size, np.int64)
    seg_f = np.empty((size, 3), np.int64)
    seg_lo = np.zeros(n_nodes, np.int64)  # every node decodes into the same scratch slice
    seg_n = np.zeros(n_nodes, np.int64)
    trial = end.copy()
    spent = 0
    moves = 0
    k = -1
    third = -1
    while spent < budget:
        crit = np.argmax(ends) if target < 0 else target
        ms = ends.max()
        by_end = np.argsort(ends, kind="mergesort")
        found = False
        third = -1
        for qa in range(fill[crit] - 1, -1, -1):  # the last-starting jobs first
            j = lists[crit, qa]
            a_end = decode_node(A, crit, lists[crit], fill[crit], j, -1, earliest, latest, seg_t,
                                 seg_f, seg_lo, seg_n, trial)
            spent += 1
            if a_end >= ms:
                continue
            for qb in range(n_nodes):  # partners by earliest end: the most room first
                k = by_end[qb]
                if ends[k] >= ms or spent >= budget:
                    break
                if k == crit or not eligible_of(A, j, k) or fill[k] + 1 >= width:
                    continue
                b_end = decode_node(A, k, lists[k], fill[k], -1, j, earliest, latest, seg_t,
                                     seg_f, seg_lo, seg_n, trial)
                spent += 1
                if b_end < ms:  # move j to k
                    take_out(lists, fill, crit, j)
                    _put(lists, fill, k, j)
                    assign[j] = k
                    ends[crit] = a_end
                    ends[k] = b_end
                    found = True
                    break
                for qm in range(fill[k]):  # j in place of m on k; m to crit or a third node
                    m = lists[k, qm]
                    b2 = decode_node(A, k, lists[k], fill[k], m, j, earliest, latest, seg_t,
                                      seg_f, seg_lo, seg_n, trial)
                    spent += 1
                    if b2 >= ms:
                        continue
                    if eligible_of(A, m, crit):  # a swap
                        a2 = decode_node(A, crit, lists[crit], fill[crit], j, m, earliest, latest,
                                          seg_t, seg_f, seg_lo, seg_n, trial)
                        spent += 1
                        if a2 < ms:
                            _relocate(lists, fill, assign, crit, j, k, m, crit)
                            ends[crit] = a2
                            ends[k] = b2
                            found = True
                            break
                    tried = 0  # an ejection chain: m to the roomiest third nodes
                    for ql in range(n_nodes):
                        third = by_end[ql]
                        if ends[third] >= ms or tried >= CHAIN_PARTNERS or spent >= budget:
                            break
                        if third == crit or third == k or not eligible_of(A, m, third) \
                                or fill[third] + 1 >= width:
                            continue
                        tried += 1
                        c_end = decode_node(A, third, lists[third], fill[third], -1, m, earliest,
                                             latest, seg_t, seg_f, seg_lo, seg_n, trial)
                        spent += 1
                        if c_end < ms:
                            _relocate(lists, fill, assign, crit, j, k, m, third)
                            ends[crit] = a_end
                            ends[k] = b2
                            ends[third] = c_end
                            found = True
                            break
                    if found or spent >= budget:
                        break
                    third = -1
                if found:
                    break
            if found or spent >= budget:
                break
        if not found:
            break
        moves += 1
        for i in (crit, k, third):  # the kept rebuild, written out (trials overwrote `trial`)
            if i < 0:
                continue
            decode_node(A, i, lists[i], fill[i], -1, -1, earliest, latest, seg_t, seg_f, seg_lo,
                         seg_n, end)
            for q in range(fill[i]):
                jj = lists[i, q]
                start[jj] = end[jj] - duration_of(A, jj, i)
        if target >= 0:
            break
    return moves, spent


def descend(inst: Instance, assign: np.ndarray, start: np.ndarray, budget: int
            ) -> tuple[np.ndarray, np.ndarray, int]:
    """(assign, start, moves kept) after the descent from a feasible plan; the inputs are not
    changed. Earliest starts and latest ends are frozen from this plan (module docstring)."""
    end = inst.end_times(assign, start)
    earliest = inst.ready.astype(np.int64).copy()
    for j in np.flatnonzero(np.diff(inst.pred_ptr) > 0).tolist():
        earliest[j] = max(earliest[j], int(end[inst.predecessors(j)].max()))
    has_succ = np.diff(inst.succ_ptr) > 0
    latest = np.where(has_succ, end, TOO_LATE - 1).astype(np.int64)
    new_assign = np.array(assign, dtype=np.int64)
    new_start = np.array(start, dtype=np.int64)
    moves, spent = _descend(inst.arrays, new_assign, new_start, earliest, latest, budget, -1)
    head = waiting_head(inst, new_start, inst.end_times(new_assign, new_start))
    if head >= 0 and spent < budget:
        # the makespan job waits, through a chain of follows, for `head`, which itself waited
        # for room on its node: one step that ends `head` sooner (the ga's full decode then
        # moves the chain up; frozen earliest starts cannot show it here)
        end = inst.end_times(new_assign, new_start)
        latest = np.where(has_succ, end, TOO_LATE - 1).astype(np.int64)
        latest[head] = end[head] - 1
        pulled, _ = _descend(inst.arrays, new_assign, new_start, earliest, latest,
                             budget - spent, int(new_assign[head]))
        moves += pulled
    return new_assign, new_start, int(moves)


def descent_step(assign: np.ndarray, keys: np.ndarray | None, full: np.ndarray,
                 inst: Instance, order: np.ndarray, evaluate: Evaluate, key: Key, *,
                 budget: int, justify: bool, priority: Priority = DEFAULT
                 ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray] | None:
    """The descent on one ga plan (assign, its order keys or None, its scorer row `full`,
    decoded in `order`): the new (assign, keys, scorer row) when it moved something and the
    result is no worse under `key`, else None (the contract of `repack.repack_step`)."""
    start = build_schedule(inst, assign, order, justify=justify, priority=priority)
    new_assign, new_start, moves = descend(inst, assign, start, budget)
    if moves == 0:
        return None
    return adopt(assign, full, new_assign, new_start, keys, inst, order, evaluate, key)
