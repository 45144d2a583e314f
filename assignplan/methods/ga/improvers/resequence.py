"""Node-local re-sequencing for the weighted completion time: on each node, jobs move forward
in the node's sequence, past jobs Smith's rule ranks after them, and jobs move to other
nodes, while every node still ends by the plan's makespan; each trial rebuilds one or two
nodes alone.

A job j goes before the job i places earlier in its sequence when Smith's key (duration /
weight, `orders.smith_keys`) ranks j first: one place (a swap of neighbours), or 2, 4, 8 ...
places at once (an insertion; on a full node a swap alone often cannot make room). A trial is
kept when the node's (weighted tardiness, weighted completion) falls and it ends by the
horizon. A transfer puts a job that waited on another node, at the place Smith's key gives
it there, when the two nodes' summed (tardiness, completion) falls. The frozen earliest
starts and latest ends of `descent` keep every other node's schedule valid, so the nodes are
improved one after another and the result, decoded in its start order (`repack.adopt`), is
scored like any plan and kept only when better in the objective's own order. On one node of
whole-node jobs, forward moves by Smith's key reach Smith's order, which is optimal there
(W. E. Smith, Naval Res. Logist. Q. 3, 1956).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from assignplan.instance import NO_DUE, Instance
from assignplan.kernels import duration_of, node_slots
from assignplan.methods.ga.improvers.descent import TOO_LATE, decode_node, take_out
from assignplan.methods.ga.improvers.repack import adopt
from assignplan.methods.ga.population import Evaluate, Key
from assignplan.methods.orders import smith_keys
from assignplan.priority import DEFAULT, Priority
from assignplan.schedule import build_schedule


@njit(cache=True)
def _node_cost(A, seq, n, end):
    """(weighted tardiness, weighted completion) of the jobs seq[:n] with ends `end`."""
    tard = 0.0
    compl = 0.0
    for q in range(n):
        j = seq[q]
        if A.due[j] != NO_DUE and end[j] > A.due[j]:
            tard += A.weight[j] * (end[j] - A.due[j])
        compl += A.weight[j] * end[j]
    return tard, compl


@njit(cache=True)
def _move(seq, src, dst):
    """Move seq[src] to position dst < src, shifting the jobs between one place back."""
    j = seq[src]
    for q in range(src, dst, -1):
        seq[q] = seq[q - 1]
    seq[dst] = j


@njit(cache=True)
def _back(seq, src, dst):
    """Undo `_move(seq, src, dst)`."""
    j = seq[dst]
    for q in range(dst, src):
        seq[q] = seq[q + 1]
    seq[src] = j


@njit(cache=True)
def _sequence_pass(A, i, seq, n, key, earliest, latest, horizon, budget, spent, cost, work):
    """One pass of forward moves by Smith's key over node i's sequence seq[:n] (in place);
    cost float64[N, 2] holds each node's (tardiness, completion). Returns (moves, spent)."""
    seg_t, seg_f, seg_lo, seg_n, end = work
    moves = 0
    for src in range(1, n):
        step = 1
        while step <= src and spent < budget:
            dst = src - step
            step *= 2
            if key[seq[src]] >= key[seq[dst]]:
                continue
            _move(seq, src, dst)
            last = decode_node(A, i, seq, n, -1, -1, earliest, latest, seg_t, seg_f, seg_lo,
                                seg_n, end)
            spent += 1
            if last <= horizon:
                t, c = _node_cost(A, seq, n, end)
                if t < cost[i, 0] or (t == cost[i, 0] and c < cost[i, 1]):
                    cost[i, 0], cost[i, 1] = t, c
                    moves += 1
                    break
            _back(seq, src, dst)
    return moves, spent


@njit(cache=True)
def _transfer_pass(A, seqs, fill, assign, key, earliest, latest, horizon, budget, spent, cost,
                   work, jobs):
    """Jobs of `jobs` (most delayed first) moved to another eligible node, into the place
    Smith's key gives them there, when both nodes still end by the horizon and their summed
    (tardiness, completion) falls. Returns (moves, spent)."""
    seg_t, seg_f, seg_lo, seg_n, end = work
    n_nodes = seqs.shape[0]
    buf = np.empty(seqs.shape[1], np.int64)
    moves = 0
    for q in range(jobs.shape[0]):
        j = jobs[q]
        a = assign[j]
        for b in range(n_nodes):
            if spent >= budget:
                return moves, spent
            if (b == a or not A.class_ok[A.job_class[j], A.node_type[b]]
                    or fill[b] + 1 >= seqs.shape[1]):
                continue
            nb = fill[b]
            pos = 0
            while pos < nb and key[seqs[b, pos]] <= key[j]:
                pos += 1
            for k in range(pos):
                buf[k] = seqs[b, k]
            buf[pos] = j
            for k in range(pos, nb):
                buf[k + 1] = seqs[b, k]
            last_b = decode_node(A, b, buf, nb + 1, -1, -1, earliest, latest, seg_t, seg_f,
                                  seg_lo, seg_n, end)
            spent += 1
            if last_b > horizon:
                continue
            tb, cb = _node_cost(A, buf, nb + 1, end)
            last_a = decode_node(A, a, seqs[a], fill[a], j, -1, earliest, latest, seg_t, seg_f,
                                  seg_lo, seg_n, end)
            spent += 1
            if last_a > horizon:
                continue
            ta, ca = _node_cost_skip(A, seqs[a], fill[a], j, end)
            t_new, c_new = ta + tb, ca + cb
            t_old, c_old = cost[a, 0] + cost[b, 0], cost[a, 1] + cost[b, 1]
            if t_new < t_old or (t_new == t_old and c_new < c_old):
                take_out(seqs, fill, a, j)
                for k in range(nb + 1):
                    seqs[b, k] = buf[k]
                fill[b] = nb + 1
                assign[j] = b
                cost[a, 0], cost[a, 1] = ta, ca
                cost[b, 0], cost[b, 1] = tb, cb
                moves += 1
                break
    return moves, spent


@njit(cache=True)
def _node_cost_skip(A, seq, n, skip, end):
    """`_node_cost` of seq[:n] without job `skip`."""
    tard = 0.0
    compl = 0.0
    for q in range(n):
        j = seq[q]
        if j == skip:
            continue
        if A.due[j] != NO_DUE and end[j] > A.due[j]:
            tard += A.weight[j] * (end[j] - A.due[j])
        compl += A.weight[j] * end[j]
    return tard, compl


@njit(cache=True)
def _resequence(A, seqs, fill, assign, key, earliest, latest, horizon, budget, jobs, start):
    """The descent, in place on seqs (int64[N, W], each node's jobs in start order, fill[i]
    of them), assign and start int64[J]: forward moves on every node, then transfers of
    `jobs` between nodes, while either helps. Returns (moves kept, node decodes spent)."""
    n_nodes = seqs.shape[0]
    fixed = 0  # the most slots a node's maintenance and reservations take
    for i in range(n_nodes):
        fixed = max(fixed, node_slots(A.maint_ptr, A.res_ptr, i))
    size = fixed + 2 * seqs.shape[1]
    work = (np.empty(size, np.int64), np.empty((size, 3), np.int64),
            np.zeros(n_nodes, np.int64), np.zeros(n_nodes, np.int64),
            np.zeros(start.shape[0], np.int64))
    seg_t, seg_f, seg_lo, seg_n, end = work
    cost = np.zeros((n_nodes, 2))
    for i in range(n_nodes):
        decode_node(A, i, seqs[i], fill[i], -1, -1, earliest, latest, seg_t, seg_f, seg_lo,
                     seg_n, end)
        cost[i, 0], cost[i, 1] = _node_cost(A, seqs[i], fill[i], end)
    moves = 0
    spent = 0
    improved = True
    while improved and spent < budget:
        improved = False
        for i in range(n_nodes):
            found, spent = _sequence_pass(A, i, seqs[i], fill[i], key, earliest, latest,
                                          horizon, budget, spent, cost, work)
            moves += found
            improved = improved or found > 0
        found, spent = _transfer_pass(A, seqs, fill, assign, key, earliest, latest, horizon,
                                      budget, spent, cost, work, jobs)
        moves += found
        improved = improved or found > 0
    for i in range(n_nodes):
        decode_node(A, i, seqs[i], fill[i], -1, -1, earliest, latest, seg_t, seg_f, seg_lo,
                     seg_n, end)
        for q in range(fill[i]):
            j = seqs[i, q]
            start[j] = end[j] - duration_of(A, j, i)
    return moves, spent


def resequence(inst: Instance, assign: np.ndarray, start: np.ndarray, budget: int
               ) -> tuple[np.ndarray, np.ndarray, int]:
    """(assign, start int64[J], moves kept) after the node-local descent of a feasible plan,
    ending every node by the plan's makespan; the inputs are not changed. Earliest starts
    (ready times and predecessors' ends) and latest ends (a job with successors: its end now)
    are frozen from the plan, as in `descent`. Transfers try the jobs that waited longest
    past their earliest start (weighted) first."""
    end = inst.end_times(assign, start)
    earliest = inst.ready.astype(np.int64).copy()
    for j in np.flatnonzero(np.diff(inst.pred_ptr) > 0).tolist():
        earliest[j] = max(earliest[j], int(end[inst.predecessors(j)].max()))
    has_succ = np.diff(inst.succ_ptr) > 0
    latest = np.where(has_succ, end, TOO_LATE - 1).astype(np.int64)
    by_start = np.lexsort((np.arange(inst.n_jobs), start))
    fill = np.bincount(assign, minlength=inst.n_nodes).astype(np.int64)
    seqs = np.full((inst.n_nodes, 2 * max(1, int(fill.max())) + 2), -1, dtype=np.int64)
    ranked = by_start[np.argsort(assign[by_start], kind="stable")]
    offsets = np.concatenate([[0], np.cumsum(fill)[:-1]])
    for i in np.flatnonzero(fill).tolist():
        seqs[i, : fill[i]] = ranked[offsets[i] : offsets[i] + fill[i]]
    new_assign = np.array(assign, dtype=np.int64)
    new_start = np.array(start, dtype=np.int64)
    delay = inst.weight * (start - earliest)
    movable = np.flatnonzero(delay > 0)
    jobs = movable[np.argsort(-delay[movable], kind="stable")].astype(np.int64)
    moves, _ = _resequence(inst.arrays, seqs, fill, new_assign, smith_keys(inst), earliest,
                           latest, int(end.max()), budget, jobs, new_start)
    return new_assign, new_start, int(moves)


def resequence_step(assign: np.ndarray, keys: np.ndarray | None, full: np.ndarray,
                    inst: Instance, order: np.ndarray, evaluate: Evaluate, key: Key, *,
                    budget: int, justify: bool, priority: Priority = DEFAULT
                    ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray] | None:
    """The re-sequencing of one ga plan: the new (assign, keys, scorer row) when it moved
    something and the result is no worse under `key`, else None (as `descent.descent_step`)."""
    start = build_schedule(inst, assign, order, justify=justify, priority=priority)
    new_assign, new_start, moves = resequence(inst, assign, start, budget)
    if moves == 0:
        return None
    return adopt(assign, full, new_assign, new_start, keys, inst, order, evaluate, key)
