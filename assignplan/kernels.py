"""Compiled kernels of the schedule builder (serial SGS) and the node profiles they share
with list scheduling (`kernels_list`) and the runtime replays (`kernels_replay`).

Plain arrays in, plain arrays out; `schedule.py` is the Python face. Each node keeps a step
profile of free capacity: segment k of node i covers ``[seg_t[k], seg_t[k+1])`` (the last one
runs to infinity) with free ``seg_f[k] = (cores, memory MiB, GPUs)``. Maintenance is a segment
whose free capacity is ``BLOCKED`` (below any demand, which is >= 0), so it needs no special case;
a reservation (a job pinned where it runs) is demand taken off its fixed interval up front.
Each node owns a contiguous slice ``[seg_lo[i], seg_lo[i] + seg_n[i])`` of one flat pool of
``seg_cap[i]`` slots. A placement inserts at most two breakpoints, so a node holding n_i jobs
and m_i windows and r_i reservations never needs more than ``2*m_i + 2*r_i + 1 + 2*n_i``
slots; the builder knows n_i from the assignment and sizes the pool exactly: O(J + N +
maintenance + reservations) memory per individual.
Finding a start and placing a job cost O(segments on that node).

Tie rules are part of the contract (the pure-Python twin in tests/twin_builder.py follows
them): jobs are placed in the given order; greedy picks the earliest finish, then the earliest
start, then the lowest node index.
"""

from __future__ import annotations

import types

import numpy as np
from numba import njit, prange

from assignplan.instance import NO_DUE

BLOCKED = -1  # free capacity of a maintenance segment: every demand (>= 0) exceeds it
NEVER = np.int64(-1)  # returned as a start when a job cannot fit the node at all


@njit(cache=True)
def init_node(i, seg_t, seg_f, seg_lo, seg_n, capacity, maint_ptr, maint_start, maint_end,
              res_ptr, res_start, res_end, res_demand):
    """Fill node i's slice with its empty profile: full capacity, maintenance blocked, and
    each reservation's demand taken off its interval.

    Windows are sorted; after widening to whole minutes two of them may touch or overlap,
    so each is clipped to begin no earlier than the previous one ends. Reservations (jobs
    pinned where they run, see `instance.Instance`) need no order: each is placed like a job,
    at most two breakpoints. At most 2*m_i + 1 + 2*r_i segments; past every window and
    reservation the last segment (to infinity) is fully free.
    """
    lo = seg_lo[i]
    seg_t[lo] = 0
    for r in range(3):
        seg_f[lo, r] = capacity[i, r]
    n = 1
    cur = np.int64(0)  # start of the last (free) segment
    for w in range(maint_ptr[i], maint_ptr[i + 1]):
        a = max(maint_start[w], cur)
        b = maint_end[w]
        if b <= a:
            continue
        if a > cur:
            seg_t[lo + n] = a
            n += 1
        for r in range(3):
            seg_f[lo + n - 1, r] = BLOCKED
        seg_t[lo + n] = b
        for r in range(3):
            seg_f[lo + n, r] = capacity[i, r]
        n += 1
        cur = b
    for w in range(res_ptr[i], res_ptr[i + 1]):
        a = max(res_start[w], np.int64(0))
        b = res_end[w]
        if b <= a:
            continue
        k = segment_at(seg_t, lo, n, a)
        n = place(seg_t, seg_f, lo, n, k, a, b - a, res_demand[w, 0], res_demand[w, 1],
                  res_demand[w, 2])
    seg_n[i] = n


@njit(cache=True, inline="always")
def node_slots(maint_ptr, res_ptr, i):
    """Profile slots node i needs before any job: 2 per window and reservation, plus 2."""
    return 2 * (maint_ptr[i + 1] - maint_ptr[i]) + 2 * (res_ptr[i + 1] - res_ptr[i]) + 2


@njit(cache=True)
def segment_at(seg_t, lo, n, t):
    """Index (relative to lo) of the segment containing minute t >= 0 (binary search)."""
    a = 0
    b = n - 1
    while a < b:
        mid = (a + b + 1) // 2
        if seg_t[lo + mid] <= t:
            a = mid
        else:
            b = mid - 1
    return a


@njit(cache=True)
def earliest_start(seg_t, seg_f, lo, n, t0, dur, d0, d1, d2):
    """Earliest s >= t0 with free >= demand on every segment meeting [s, s + dur).

    Returns (s, k) with k the segment containing s, or (NEVER, -1) if the demand exceeds even
    the empty node. When segment m is too full, no start before its end can work, so the
    search jumps to the next breakpoint: each segment is looked at once.
    """
    return earliest_start_by(seg_t, seg_f, lo, n, t0, dur, d0, d1, d2, NO_DUE)


@njit(cache=True)
def earliest_start_by(seg_t, seg_f, lo, n, t0, dur, d0, d1, d2, latest):
    """`earliest_start`, giving up (NEVER, -1) as soon as the start would pass `latest`: a
    caller that only wants starts up to some minute stops scanning there."""
    return scan_from(seg_t, seg_f, lo, n, segment_at(seg_t, lo, n, t0), t0, dur, d0, d1, d2,
                     latest)


@njit(cache=True)
def scan_from(seg_t, seg_f, lo, n, k, t0, dur, d0, d1, d2, latest):
    """The earliest start s >= t0 with room for [s, s + dur), scanning from segment k (the
    one holding t0): (s, its segment), or (NEVER, -1) once s would pass `latest`."""
    s = t0
    while True:
        if s > latest:
            return NEVER, -1
        m = k
        ok = True
        while m < n:
            if m > k and seg_t[lo + m] >= s + dur:
                break
            if seg_f[lo + m, 0] < d0 or seg_f[lo + m, 1] < d1 or seg_f[lo + m, 2] < d2:
                ok = False
                break
            m += 1
        if ok:
            return s, k
        if m + 1 >= n:
            return NEVER, -1
        k = m + 1
        s = seg_t[lo + k]


@njit(cache=True)
def _insert(seg_t, seg_f, lo, n, pos, t, src):
    """Insert a breakpoint at relative index pos with time t and the free capacity of src."""
    f0 = seg_f[lo + src, 0]
    f1 = seg_f[lo + src, 1]
    f2 = seg_f[lo + src, 2]
    for k in range(n, pos, -1):
        seg_t[lo + k] = seg_t[lo + k - 1]
        seg_f[lo + k, 0] = seg_f[lo + k - 1, 0]
        seg_f[lo + k, 1] = seg_f[lo + k - 1, 1]
        seg_f[lo + k, 2] = seg_f[lo + k - 1, 2]
    seg_t[lo + pos] = t
    seg_f[lo + pos, 0] = f0
    seg_f[lo + pos, 1] = f1
    seg_f[lo + pos, 2] = f2


@njit(cache=True)
def place(seg_t, seg_f, lo, n, k, s, dur, d0, d1, d2):
    """Take demand off [s, s + dur) on a profile where it fits; return the new segment count.

    k is the segment containing s (from `earliest_start`). At most two breakpoints are added.
    """
    e = s + dur
    if seg_t[lo + k] < s:
        _insert(seg_t, seg_f, lo, n, k + 1, s, k)
        n += 1
        k += 1
    m = k
    while True:
        nxt = seg_t[lo + m + 1] if m + 1 < n else e + 1
        if nxt > e:
            _insert(seg_t, seg_f, lo, n, m + 1, e, m)
            n += 1
        seg_f[lo + m, 0] -= d0
        seg_f[lo + m, 1] -= d1
        seg_f[lo + m, 2] -= d2
        if nxt >= e:
            return n
        m += 1


@njit(cache=True)
def _ready_time(j, ready, end, pred_ptr, pred_idx):
    """max(ready_j, ends of j's predecessors); a predecessor not yet placed has end -1."""
    t0 = ready[j]
    for q in range(pred_ptr[j], pred_ptr[j + 1]):
        p = pred_idx[q]
        if end[p] < 0:
            return NEVER
        if end[p] > t0:
            t0 = end[p]
    return t0


@njit(cache=True, inline="always")
def duration_of(A, j, i):
    """Minutes job j runs on node i (the one place the kernels read durations)."""
    return np.int64(A.dur[j, A.node_speed[i]])


@njit(cache=True, inline="always")
def eligible_of(A, j, i):
    """Node i can hold job j (`instance.Eligibility`)."""
    return A.class_ok[A.job_class[j], A.node_type[i]]


@njit(cache=True)
def _sgs(A, assign, order, ready, pred_ptr, pred_idx, maint_start, maint_end, res_start,
         res_end, start):
    """Serial SGS for one assignment; writes start int64[J], returns False if a job failed.

    A: the instance's arrays (`instance.Arrays`); ready times, predecessors, maintenance and
    reservation intervals are separate arguments because forward-backward improvement runs
    the same scheme on the time-mirrored batch. A job fails when it is too big for its node
    or a predecessor comes later in `order`; its start (and every later one) is left at -1.
    """
    demand, capacity, maint_ptr = A.demand, A.capacity, A.maint_ptr
    n_jobs = assign.shape[0]
    n_nodes = capacity.shape[0]
    seg_cap = np.empty(n_nodes, np.int64)
    for i in range(n_nodes):
        seg_cap[i] = node_slots(maint_ptr, A.res_ptr, i)
    for j in range(n_jobs):
        seg_cap[assign[j]] += 2
    seg_lo = np.empty(n_nodes, np.int64)
    total = np.int64(0)
    for i in range(n_nodes):
        seg_lo[i] = total
        total += seg_cap[i]
    seg_t = np.empty(total, np.int64)
    seg_f = np.empty((total, 3), np.int64)
    seg_n = np.empty(n_nodes, np.int64)
    for i in range(n_nodes):
        init_node(i, seg_t, seg_f, seg_lo, seg_n, capacity, maint_ptr, maint_start, maint_end,
                  A.res_ptr, res_start, res_end, A.res_demand)
    end = np.full(n_jobs, -1, np.int64)
    start[:] = -1
    for q in range(n_jobs):
        j = order[q]
        i = assign[j]
        t0 = _ready_time(j, ready, end, pred_ptr, pred_idx)
        if t0 < 0:
            return False
        dur = duration_of(A, j, i)
        d0 = demand[j, 0]
        d1 = demand[j, 1]
        d2 = demand[j, 2]
        lo = seg_lo[i]
        s, k = earliest_start(seg_t, seg_f, lo, seg_n[i], t0, dur, d0, d1, d2)
        if s < 0:
            return False
        seg_n[i] = place(seg_t, seg_f, lo, seg_n[i], k, s, dur, d0, d1, d2)
        start[j] = s
        end[j] = s + dur
    return True


@njit(cache=True)
def _fitness(A, start, assign, out):
    """out[:] = (C_max, sum w_j max(0, C_j - d_j) over jobs with a due time, sum w_j C_j)."""
    due, weight = A.due, A.weight
    mk = np.int64(0)
    tard = 0.0
    compl = 0.0
    for j in range(start.shape[0]):
        c = start[j] + duration_of(A, j, assign[j])
        if c > mk:
            mk = c
        if due[j] != NO_DUE and c > due[j]:
            tard += weight[j] * (c - due[j])
        compl += weight[j] * c
    out[0] = mk
    out[1] = tard
    out[2] = compl


@njit(cache=True)
def _mirror_windows(T, maint_ptr, maint_start, maint_end, m_start, m_end):
    """Maintenance mirrored in time, t' = T - t: [a, b) becomes [T - b, T - a), clipped at 0
    (a mirrored job starts at t' >= 0, i.e. ends by T, so nothing earlier matters); a window
    wholly after T becomes empty. Written per node into m_start/m_end, re-sorted by start,
    because `init_node` needs sorted windows and nested windows do not stay sorted when
    mirrored."""
    for i in range(maint_ptr.shape[0] - 1):
        a = maint_ptr[i]
        b = maint_ptr[i + 1]
        for w in range(a, b):
            s = max(T - maint_end[w], np.int64(0))
            m_start[w] = s
            m_end[w] = max(T - maint_start[w], s)
        for w in range(a + 1, b):  # insertion sort: a node has a handful of windows
            s = m_start[w]
            e = m_end[w]
            k = w - 1
            while k >= a and (m_start[k] > s or (m_start[k] == s and m_end[k] > e)):
                m_start[k + 1] = m_start[k]
                m_end[k + 1] = m_end[k]
                k -= 1
            m_start[k + 1] = s
            m_end[k + 1] = e


@njit(cache=True)
def _lex_better(a, b, reading, weights):
    """a (float64[3]) is strictly better than b as a priority reads them: first by the
    weighted sums sum_k weights_k x_k when any weight is above 0, then lexicographically in
    the column order `reading` (int64[3]; 0, 1, 2 with zero weights: makespan first)."""
    if weights[0] > 0 or weights[1] > 0 or weights[2] > 0:
        sa = weights[0] * a[0] + weights[1] * a[1] + weights[2] * a[2]
        sb = weights[0] * b[0] + weights[1] * b[1] + weights[2] * b[2]
        if sa < sb:
            return True
        if sa > sb:
            return False
    for k in range(3):
        c = reading[k]
        if a[c] < b[c]:
            return True
        if a[c] > b[c]:
            return False
    return False


@njit(cache=True)
def _justify(A, assign, zeros, rounds, start, fit, reading, weights):
    """Forward-backward improvement (double justification) of one schedule, in place.

    V. Valls, F. Ballestin, S. Quintanilla, "Justification and RCPSP: A technique that pays",
    EJOR 165(2), 2005; iterative forward-backward scheduling after K. Y. Li and R. J. Willis,
    EJOR 56(3), 1992. The assignment stays fixed. A round, with T the current makespan:

    - backward: jobs by decreasing end (ties: lower index first) go through the serial SGS on
      the time-mirrored batch (t' = T - t; maintenance and reservations mirrored; successors
      act as predecessors; ready times 0), i.e. each job is placed as late as possible, ending
      by T and before its already placed successors start;
    - forward: jobs by increasing backward start (ties: lower index) through the ordinary SGS.

    Why ready times may be ignored backwards: by induction over the backward order, every job
    k placed so far has s'_k >= s_k. For the next job j (e_k >= e_j for every placed k), a
    placed k uses a minute of [s_j, e_j) in the new schedule only if it did in the old one
    (its new interval [s'_k, e'_k) meets [s_j, e_j) only inside [s_k, e_k), since s'_k >= s_k
    and e_k >= e_j), so j's old slot is still free of resources and maintenance, and its
    placed successors start at s'_k >= s_k >= e_j; the mirrored SGS returns the earliest
    mirrored start, i.e. the latest slot, hence s'_j >= s_j >= ready_j. The same argument
    forwards gives s''_j <= s'_j, so end'' <= end' <= T: the makespan never increases.

    start: int64[J] a feasible schedule, fit: float64[3] its fitness; both replaced by the
    best schedule seen as `reading` and `weights` compare them (`_lex_better`; by default
    lexicographically, makespan first). Rounds stop early once the makespan stops falling.
    Tardiness or completion may get worse in a round (jobs off the critical path move right);
    keeping the best means the result is never worse than the input.
    """
    n_jobs = assign.shape[0]
    dur = np.empty(n_jobs, np.int64)
    for j in range(n_jobs):
        dur[j] = duration_of(A, j, assign[j])
    m_start = np.empty_like(A.maint_start)
    m_end = np.empty_like(A.maint_end)
    r_start = np.empty_like(A.res_start)
    r_end = np.empty_like(A.res_end)
    cur = start.copy()
    back = np.empty(n_jobs, np.int64)
    fwd = np.empty(n_jobs, np.int64)
    key = np.empty(n_jobs, np.int64)
    f = np.empty(3, np.float64)
    T = np.int64(fit[0])
    for _ in range(rounds):
        for j in range(n_jobs):
            key[j] = T - (cur[j] + dur[j])
        order_b = np.argsort(key, kind="mergesort")
        _mirror_windows(T, A.maint_ptr, A.maint_start, A.maint_end, m_start, m_end)
        for w in range(A.res_start.shape[0]):  # [a, b) -> [T - b, T - a), cut at 0
            r_start[w] = max(T - A.res_end[w], np.int64(0))
            r_end[w] = max(T - A.res_start[w], r_start[w])
        if not _sgs(A, assign, order_b, zeros, A.succ_ptr, A.succ_idx, m_start, m_end,
                    r_start, r_end, back):
            return  # cannot happen for a feasible input (see above): keep it unchanged
        for j in range(n_jobs):
            key[j] = T - back[j] - dur[j]
        order_f = np.argsort(key, kind="mergesort")
        if not _sgs(A, assign, order_f, A.ready, A.pred_ptr, A.pred_idx, A.maint_start,
                    A.maint_end, A.res_start, A.res_end, fwd):
            return
        _fitness(A, fwd, assign, f)
        if _lex_better(f, fit, reading, weights):
            start[:] = fwd
            fit[:] = f
        if f[0] >= T:
            return
        T = np.int64(f[0])
        cur[:] = fwd


@njit(cache=True)
def _node_spread(A, start, assign):
    """sum_i F_i^2 over the nodes' finish times F_i (0 for an empty node), in minutes^2."""
    n_nodes = A.capacity.shape[0]
    fin = np.zeros(n_nodes, np.int64)
    for j in range(start.shape[0]):
        e = start[j] + duration_of(A, j, assign[j])
        if e > fin[assign[j]]:
            fin[assign[j]] = e
    total = 0.0
    for i in range(n_nodes):
        total += float(fin[i]) * float(fin[i])
    return total


@njit(cache=True)
def _tail_area(A, start, assign):
    """sum over the jobs j ending at the makespan of p_j * max_r d_jr / cap_ir (minutes).

    On a packing-like batch (equal durations) this is the work left over the first layer
    of nodes: lower = fuller nodes below it, so it falls with every exchange that packs a
    node tighter even while the makespan and the node finishes stay put.
    """
    demand, capacity = A.demand, A.capacity
    ms = np.int64(0)
    for j in range(start.shape[0]):
        e = start[j] + duration_of(A, j, assign[j])
        if e > ms:
            ms = e
    total = 0.0
    for j in range(start.shape[0]):
        i = assign[j]
        dur = duration_of(A, j, i)
        if start[j] + dur == ms:
            share = 0.0
            for r in range(3):
                if demand[j, r] > 0:
                    share = max(share, float(demand[j, r]) / float(capacity[i, r]))
            total += float(dur) * share
    return total


def _sgs_population(A, assign, order, rounds, reading, weights, start_out, fitness_out):
    """Build and score P schedules; each individual has its own workspace.

    A: the instance's arrays (`instance.Arrays`); assign: int64[P, J] node per job; order:
    int64[P, J] a decoding order per individual, or int64[1, J] one for all; rounds: rounds
    of forward-backward improvement (`_justify`), 0 = the plain serial SGS; reading, weights:
    how `_justify` compares schedules (`_lex_better`); start_out:
    int64[P, J] (or [P, 0] to skip writing starts); fitness_out: float64[P, C] with columns
    (makespan, weighted tardiness, weighted completion) in minutes, then with C >= 4 the
    `_node_spread` and with C >= 5 the `_tail_area` of the scored schedule; +inf in every
    column for an individual that failed.
    """
    n_pop = assign.shape[0]
    n_jobs = assign.shape[1]
    keep = start_out.shape[1] == n_jobs
    zeros = np.zeros(n_jobs, np.int64)
    step = 0 if order.shape[0] == 1 else 1  # row p * step: shared or per individual
    for p in prange(n_pop):
        start = np.empty(n_jobs, np.int64)
        ok = _sgs(A, assign[p], order[p * step], A.ready, A.pred_ptr, A.pred_idx,
                  A.maint_start, A.maint_end, A.res_start, A.res_end, start)
        if ok:
            _fitness(A, start, assign[p], fitness_out[p])
            if rounds > 0:
                _justify(A, assign[p], zeros, rounds, start, fitness_out[p, :3], reading,
                         weights)
            if fitness_out.shape[1] >= 4:
                fitness_out[p, 3] = _node_spread(A, start, assign[p])
            if fitness_out.shape[1] >= 5:
                fitness_out[p, 4] = _tail_area(A, start, assign[p])
        else:
            fitness_out[p, :] = np.inf
        if keep:
            start_out[p, :] = start


# Two compilations of the body: threads pay off for a population, but waking the pool costs
# milliseconds on a busy machine (measured ~8 ms a call with 2 shared cores), more than a
# single plan or a local-search batch takes to build; prange is a plain range in the serial one.
def _renamed(fn, suffix: str):
    """`fn`'s code under another name. numba's on-disk cache files a compilation under the
    function's name, line and signature, not its `parallel` flag: two dispatchers of one
    function share one entry, and the serial one could load the threaded code (measured: the
    ga's small populations 4.7 ms a call instead of 0.03 ms on a busy machine)."""
    twin = types.FunctionType(fn.__code__, fn.__globals__, fn.__name__ + suffix,
                              fn.__defaults__, fn.__closure__)
    twin.__qualname__ = fn.__qualname__ + suffix
    return twin


sgs_population = njit(cache=True, parallel=True)(_sgs_population)
sgs_population_serial = njit(cache=True)(_renamed(_sgs_population, "_serial"))


@njit(cache=True)
def grow_slice(seg_t, seg_f, seg_lo, seg_cap, seg_n, used, i, need):
    """Give node i room for `need` slots: move its slice to the pool's end, doubling the pool
    when full. Returns (seg_t, seg_f, used). Moved-out slices are abandoned, a geometric
    series: total space stays within a constant factor of the segments in use."""
    new_cap = max(2 * seg_cap[i], need)
    if used + new_cap > seg_t.shape[0]:
        size = max(2 * seg_t.shape[0], used + new_cap)
        t2 = np.empty(size, np.int64)
        f2 = np.empty((size, 3), np.int64)
        t2[:used] = seg_t[:used]
        f2[:used] = seg_f[:used]
        seg_t = t2
        seg_f = f2
    lo = seg_lo[i]
    for k in range(seg_n[i]):
        seg_t[used + k] = seg_t[lo + k]
        for r in range(3):
            seg_f[used + k, r] = seg_f[lo + k, r]
    seg_lo[i] = used
    seg_cap[i] = new_cap
    return seg_t, seg_f, used + new_cap
