"""Compiled list scheduling: each job in turn to the eligible node where it ends earliest.

The profiles are `kernels`' (one step profile of free capacity per node). What is added here
is the room index, which keeps a probe from visiting nodes that cannot beat the best node
found so far. On a large site a job may run on thousands of nodes, and without the index
list scheduling probes each of them for each job (122 million probes for 50,000 jobs on
5,000 nodes; 2.8 million with the index, the same plan).

The room index holds, for each node, each level of cores and of memory (powers of two) and
each span (powers of two of minutes), the first minute from which the node's free amount
stays at that level for that span. A job needing at least the level for at least the span
cannot start on the node before that minute, so ``max(ready, room) + duration`` is a lower
bound of where the job ends there. The bounds are kept per class position (`Eligibility`'s
CSR) with the least of each block of ROOM_BLOCK positions, so a whole block is passed over
when its least bound cannot win. Only the probe order changes: every node that could win is
still probed, and ties are settled by the same rule (earliest end, earliest start, first in
the class's node list), so the plan is the one the plain loop gives.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numba import njit, prange

from assignplan.instance import NO_DUE
from assignplan.kernels import (
    _ready_time,
    duration_of,
    grow_slice,
    init_node,
    node_slots,
    place,
    scan_from,
    segment_at,
)

ROOM_BLOCK = 16  # positions per block: 8, 16, 32, 64 measured at 50,000 x 5,000, 16 best
ROOM_SPANS = 15  # spans 1, 2, 4, ... 2**14 minutes (about 11 days)
# Below this many candidate nodes per job on average the plain loop is faster: keeping the
# index costs microseconds a placement. Measured (one LPT run, best of 5, plain / indexed):
# 132 candidates 0.59, 342: 1.13, 680: 1.67, 1,364: 2.46; 50,000 x 5,000 (3,414): 4.6.
INDEX_MIN_CANDIDATES = 256
FAR = np.int64(1) << np.int64(62)  # no room at that level and span, ever


class RoomIndex(NamedTuple):
    """The room bounds of one list-scheduling run (see the module docstring).

    levels_c, levels_m: int64 thresholds of free cores and memory; rows: int64[R, P] the bound
    of row r at class position p (row 0 is all zeros: no bound, for a job below every level;
    row 1 + (level * ROOM_SPANS + span) for cores, then memory's rows); block_min: int64[R, B];
    speed_at: int64[P] the speed index of each position's node; block_ptr: int64[E + 1] each
    class's blocks; block_lo, block_hi: int64[B] each block's positions; block_of: int64[P];
    pos_ptr, pos_idx: CSR of each node's class positions; scratch: int64[R].
    """

    levels_c: np.ndarray
    levels_m: np.ndarray
    rows: np.ndarray
    block_min: np.ndarray
    speed_at: np.ndarray
    block_ptr: np.ndarray
    block_lo: np.ndarray
    block_hi: np.ndarray
    block_of: np.ndarray
    pos_ptr: np.ndarray
    pos_idx: np.ndarray
    scratch: np.ndarray


@njit(cache=True)
def _levels(values):
    """Powers of two from the largest at or below the least positive value up to the largest
    value (one level [1] if none is positive)."""
    lo = FAR
    hi = np.int64(0)
    for v in values:
        if 0 < v < lo:
            lo = v
        hi = max(hi, v)
    if hi == 0:
        return np.ones(1, np.int64)
    k0 = 0
    while (np.int64(1) << np.int64(k0 + 1)) <= lo:
        k0 += 1
    k1 = k0
    while (np.int64(1) << np.int64(k1 + 1)) <= hi:
        k1 += 1
    out = np.empty(k1 - k0 + 1, np.int64)
    for k in range(k1 - k0 + 1):
        out[k] = np.int64(1) << np.int64(k0 + k)
    return out


@njit(cache=True)
def _level_of(levels, amount):
    """The highest level at or below `amount`, or -1 (then the resource gives no bound)."""
    k = -1
    for m in range(levels.shape[0]):
        if levels[m] > amount:
            break
        k = m
    return k


@njit(cache=True)
def _span_of(minutes):
    """The longest span (a power of two of minutes) at or below `minutes`."""
    d = 0
    while d + 1 < ROOM_SPANS and (np.int64(1) << np.int64(d + 1)) <= minutes:
        d += 1
    return d


@njit(cache=True)
def _node_room(seg_t, seg_f, lo, n, levels, r, out, base):
    """out[base + k * ROOM_SPANS + d]: the first minute from which resource r's free amount
    stays at least levels[k] for 2**d minutes (FAR if never). Runs of segments with room are
    met in time order, so the first run long enough gives the first minute."""
    for x in range(levels.shape[0] * ROOM_SPANS):
        out[base + x] = FAR
    for k in range(levels.shape[0]):
        run = np.int64(-1)
        for m in range(n + 1):
            if m < n and seg_f[lo + m, r] >= levels[k]:
                if run < 0:
                    run = seg_t[lo + m]
                continue
            if run >= 0:  # a run ends here (the last segment runs to infinity)
                length = FAR if m == n else seg_t[lo + m] - run
                for d in range(ROOM_SPANS):
                    if (np.int64(1) << np.int64(d)) > length:
                        break
                    if out[base + k * ROOM_SPANS + d] == FAR:
                        out[base + k * ROOM_SPANS + d] = run
                run = np.int64(-1)


@njit(cache=True)
def _block_least(R, r, b):
    v = FAR
    for x in range(R.block_lo[b], R.block_hi[b]):
        v = min(v, R.rows[r, x])
    R.block_min[r, b] = v


@njit(cache=True)
def room_update(R, seg_t, seg_f, lo, n, i, whole):
    """Node i's profile (seg_t/seg_f[lo:lo + n]) changed: its bounds at each of its class
    positions, and each block's least where node i held it (a placement only raises bounds).
    whole: recompute every block min of node i's blocks (when building)."""
    _node_room(seg_t, seg_f, lo, n, R.levels_c, 0, R.scratch, 1)
    _node_room(seg_t, seg_f, lo, n, R.levels_m, 1, R.scratch, 1 + R.levels_c.shape[0] * ROOM_SPANS)
    for p in range(R.pos_ptr[i], R.pos_ptr[i + 1]):
        q = R.pos_idx[p]
        b = R.block_of[q]
        for r in range(1, R.rows.shape[0]):
            old = R.rows[r, q]
            R.rows[r, q] = R.scratch[r]
            if not whole and R.scratch[r] != old and old == R.block_min[r, b]:
                _block_least(R, r, b)


@njit(cache=True)
def room_index(A, class_ptr, class_nodes, seg_t, seg_f, seg_lo, seg_n, enabled):
    """The `RoomIndex` of the nodes' current profiles (zero-sized when not `enabled`)."""
    n_nodes = seg_lo.shape[0]
    n_classes = class_ptr.shape[0] - 1
    n_pos = class_nodes.shape[0] if enabled else 0
    levels_c = _levels(A.demand[:, 0])
    levels_m = _levels(A.demand[:, 1])
    n_rows = 1 + (levels_c.shape[0] + levels_m.shape[0]) * ROOM_SPANS if enabled else 1
    block_ptr = np.zeros(n_classes + 1, np.int64)
    if enabled:
        for c in range(n_classes):
            size = class_ptr[c + 1] - class_ptr[c]
            block_ptr[c + 1] = block_ptr[c] + (size + ROOM_BLOCK - 1) // ROOM_BLOCK
    n_blocks = block_ptr[n_classes]
    R = RoomIndex(levels_c, levels_m, np.zeros((n_rows, n_pos), np.int64),
                  np.zeros((n_rows, n_blocks), np.int64), np.empty(n_pos, np.int64), block_ptr,
                  np.empty(n_blocks, np.int64), np.empty(n_blocks, np.int64),
                  np.empty(n_pos, np.int64), np.zeros(n_nodes + 1, np.int64),
                  np.empty(n_pos, np.int64), np.zeros(n_rows, np.int64))
    if not enabled:
        return R
    for c in range(n_classes):
        for b in range(block_ptr[c], block_ptr[c + 1]):
            R.block_lo[b] = class_ptr[c] + (b - block_ptr[c]) * ROOM_BLOCK
            R.block_hi[b] = min(R.block_lo[b] + ROOM_BLOCK, class_ptr[c + 1])
            for q in range(R.block_lo[b], R.block_hi[b]):
                R.block_of[q] = b
    for q in range(n_pos):
        R.speed_at[q] = A.node_speed[class_nodes[q]]
        R.pos_ptr[class_nodes[q] + 1] += 1
    for i in range(n_nodes):
        R.pos_ptr[i + 1] += R.pos_ptr[i]
    fill = R.pos_ptr[:-1].copy()
    for q in range(n_pos):
        R.pos_idx[fill[class_nodes[q]]] = q
        fill[class_nodes[q]] += 1
    for i in range(n_nodes):
        room_update(R, seg_t, seg_f, seg_lo[i], seg_n[i], i, True)
    for b in range(n_blocks):
        for r in range(1, n_rows):
            _block_least(R, r, b)
    return R


@njit(cache=True)
def _cutoff(best_e, best_s, best_q, dur, q):
    """The latest start at which position q (running `dur`) still beats the best so far:
    an earlier end, or the same end from an earlier start, or the same end and start at an
    earlier position."""
    base = best_e - dur
    if base < best_s or (base == best_s and q < best_q):
        return base
    return base - 1


@njit(cache=True)
def _best_plain(A, j, t0, class_lo, class_hi, class_nodes, seg_t, seg_f, seg_lo, seg_n):
    """(node, start, its segment, end) of job j's best node, probing every eligible node in
    the class's order (node -1 if none fits)."""
    d0, d1, d2 = A.demand[j, 0], A.demand[j, 1], A.demand[j, 2]
    best_i, best_q, best_s, best_k, best_e = -1, -1, np.int64(0), -1, np.int64(0)
    for q in range(class_lo, class_hi):
        i = class_nodes[q]
        dur = duration_of(A, j, i)
        latest = NO_DUE if best_i < 0 else _cutoff(best_e, best_s, best_q, dur, q)
        if latest < t0:
            continue
        s, k = scan_from(seg_t, seg_f, seg_lo[i], seg_n[i],
                         segment_at(seg_t, seg_lo[i], seg_n[i], t0), t0, dur, d0, d1, d2, latest)
        if s >= 0:  # within the cut-off: better than the best so far
            best_i, best_q, best_s, best_k, best_e = i, q, s, k, s + dur
    return best_i, best_s, best_k, best_e


@njit(cache=True)
def _best_indexed(A, R, j, t0, c, class_nodes, seg_t, seg_f, seg_lo, seg_n, dur_at):
    """`_best_plain` with the room index: the block of least bound first, so the cut-off
    bites early, then every other block whose least bound could still win."""
    d0, d1, d2 = A.demand[j, 0], A.demand[j, 1], A.demand[j, 2]
    shortest = FAR
    for x in range(dur_at.shape[0]):
        dur_at[x] = A.dur[j, x]
        shortest = min(shortest, dur_at[x])
    span = _span_of(shortest)
    lc = _level_of(R.levels_c, d0)
    lm = _level_of(R.levels_m, d1)
    rc = 0 if lc < 0 else 1 + lc * ROOM_SPANS + span
    rm = 0 if lm < 0 else 1 + (R.levels_c.shape[0] + lm) * ROOM_SPANS + span
    b0, b1 = R.block_ptr[c], R.block_ptr[c + 1]
    first = b0
    first_lb = FAR
    for b in range(b0, b1):
        lb = max(t0, max(R.block_min[rc, b], R.block_min[rm, b]))
        if lb < first_lb:
            first, first_lb = b, lb
    best_i, best_q, best_s, best_k, best_e = -1, -1, np.int64(0), -1, np.int64(0)
    for step in range(b1 - b0 + 1):
        b = first if step == 0 else b0 + step - 1
        if step > 0 and b == first:
            continue
        if best_i >= 0:
            # the block's least (end, start) is (lb + shortest, lb): pass over it unless
            # that could beat (best_e, best_s, best_q)
            lb = max(t0, max(R.block_min[rc, b], R.block_min[rm, b]))
            if lb + shortest > best_e or (lb + shortest == best_e and (
                    lb > best_s or (lb == best_s and R.block_lo[b] > best_q))):
                continue
        for q in range(R.block_lo[b], R.block_hi[b]):
            dur = dur_at[R.speed_at[q]]
            latest = NO_DUE
            if best_i >= 0:
                latest = _cutoff(best_e, best_s, best_q, dur, q)
                if max(t0, max(R.rows[rc, q], R.rows[rm, q])) > latest:
                    continue
            i = class_nodes[q]
            s, k = scan_from(seg_t, seg_f, seg_lo[i], seg_n[i],
                             segment_at(seg_t, seg_lo[i], seg_n[i], t0), t0, dur, d0, d1, d2,
                             latest)
            if s >= 0:
                best_i, best_q, best_s, best_k, best_e = i, q, s, k, s + dur
    return best_i, best_s, best_k, best_e


@njit(cache=True)
def _mean_candidates(order, job_class, class_ptr):
    total = 0
    for j in order:
        total += class_ptr[job_class[j] + 1] - class_ptr[job_class[j]]
    return total / max(order.shape[0], 1)


@njit(cache=True)
def greedy_list(A, order, job_class, class_ptr, class_nodes, assign, start,
                index_from=INDEX_MIN_CANDIDATES):
    """List scheduling: each job in `order` to the eligible node where it finishes earliest.

    A: the instance's arrays; job_class/class_ptr/class_nodes: where each job may go (the
    CSR of `instance.Eligibility`: A's own, or a narrower choice); only those nodes are
    probed, through the room index when jobs have `index_from` candidates or more on average
    (tests set it to 0 or to infinity to compare the two ways on one batch). Ties:
    earliest start, then the first node in the class's list (the lowest index: the lists are
    ascending). Writes assign and start int64[J]. Per-node room is unknown up front, so
    slices start small and grow (see `kernels.grow_slice`). Returns False if some job has no
    node or a predecessor comes later in `order`.
    """
    capacity = A.capacity
    n_jobs = order.shape[0]
    n_nodes = capacity.shape[0]
    seg_cap = np.empty(n_nodes, np.int64)
    seg_lo = np.empty(n_nodes, np.int64)
    used = np.int64(0)
    for i in range(n_nodes):
        seg_cap[i] = node_slots(A.maint_ptr, A.res_ptr, i) + 8
        seg_lo[i] = used
        used += seg_cap[i]
    seg_t = np.empty(2 * used + 2 * n_jobs, np.int64)
    seg_f = np.empty((seg_t.shape[0], 3), np.int64)
    seg_n = np.empty(n_nodes, np.int64)
    for i in range(n_nodes):
        init_node(i, seg_t, seg_f, seg_lo, seg_n, capacity, A.maint_ptr, A.maint_start,
                  A.maint_end, A.res_ptr, A.res_start, A.res_end, A.res_demand)
    indexed = _mean_candidates(order, job_class, class_ptr) >= index_from
    R = room_index(A, class_ptr, class_nodes, seg_t, seg_f, seg_lo, seg_n, indexed)
    dur_at = np.empty(A.dur.shape[1], np.int64)
    end = np.full(n_jobs, -1, np.int64)
    assign[:] = -1
    start[:] = -1
    for q in range(n_jobs):
        j = order[q]
        t0 = _ready_time(j, A.ready, end, A.pred_ptr, A.pred_idx)
        if t0 < 0:
            return False
        c = job_class[j]
        if indexed:
            i, s, k, e = _best_indexed(A, R, j, t0, c, class_nodes, seg_t, seg_f, seg_lo,
                                       seg_n, dur_at)
        else:
            i, s, k, e = _best_plain(A, j, t0, class_ptr[c], class_ptr[c + 1], class_nodes,
                                     seg_t, seg_f, seg_lo, seg_n)
        if i < 0:
            return False
        if seg_n[i] + 2 > seg_cap[i]:
            seg_t, seg_f, used = grow_slice(seg_t, seg_f, seg_lo, seg_cap, seg_n, used, i,
                                            seg_n[i] + 2)
        seg_n[i] = place(seg_t, seg_f, seg_lo[i], seg_n[i], k, s, e - s, A.demand[j, 0],
                         A.demand[j, 1], A.demand[j, 2])
        if indexed:
            room_update(R, seg_t, seg_f, seg_lo[i], seg_n[i], i, False)
        assign[j] = i
        start[j] = s
        end[j] = e
    return True


@njit(cache=True, parallel=True)
def greedy_list_pair(A1, order1, A2, order2, job_class, class_ptr, class_nodes, assign, start,
                     ok):
    """Two `greedy_list` runs side by side on two threads: (A1, order1) into assign[0],
    start[0] and (A2, order2) into row 1 (A2 may be another view of the batch, e.g. the
    mirrored one, with the same eligibility). ok[k]: `greedy_list`'s answer for run k."""
    for k in prange(2):
        if k == 0:
            ok[0] = greedy_list(A1, order1, job_class, class_ptr, class_nodes, assign[0],
                                start[0])
        else:
            ok[1] = greedy_list(A2, order2, job_class, class_ptr, class_nodes, assign[1],
                                start[1])
