"""Compiled replays of a plan under sampled run times: many samples per call, two policies.

A sample gives each job a factor (`risk.sampling`); job j then runs
``sampled_minutes(factor_j, duration_of(A, j, i), limit_j)`` minutes on node i. A replay
places the jobs one at a time in the plan's start order through the builder's node profiles
(`kernels.init_node`, `earliest_start`, `place`: room, maintenance, ready times and `follows`
as in the builder), under one of two policies:

- KEEP: each job on its planned node;
- DISPATCH: each job on the eligible node where it can start first (ties: its planned node,
  then the lowest index), as an online list scheduler would send it.

Under both, a job never starts on a node before the job placed there last started: a node
serves its jobs in the planned order. That rule also keeps the replay honest about what is
known when: after the last start on a node its load only falls (jobs end) until maintenance,
so the first minute a job's demand fits is found without knowing the run times of jobs still
to come. For a plan the serial SGS built (greedy, ga) the KEEP replay with every factor 1
gives back the plan's starts exactly: each job is then placed with the jobs that start before
it, all where the plan has them, and whatever kept it from starting earlier in the builder
started before it too.

Tie rules are part of the contract (tests/twin_replay.py follows them).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from assignplan.instance import NO_DUE
from assignplan.kernels import (
    BLOCKED,
    NEVER,
    duration_of,
    earliest_start,
    grow_slice,
    init_node,
    node_slots,
    place,
    scan_from,
    segment_at,
)

KEEP, DISPATCH = 0, 1
POLICY_CODES = {"keep": KEEP, "dispatch": DISPATCH}
# float noise of factor * minutes ignored when rounding up (as `units.ceil_minutes` does)
NOISE = 1e-6


@njit(cache=True, inline="always")
def sampled_minutes(factor, minutes, limit):
    """A sampled run time in whole minutes: ``max(1, ceil(factor * minutes))`` (noise below
    1e-6 min ignored), stopped at the job's limit."""
    d = np.int64(np.ceil(factor * minutes - NOISE))
    if d < 1:
        d = np.int64(1)
    return min(d, limit)


@njit(cache=True)
def _fit_from(seg_t, seg_f, lo, n, k, t0, dur, d0, d1, d2, cutoff):
    """`kernels.earliest_start` from segment k (the one holding t0), giving up (NEVER, -1)
    once no start before `cutoff` is left: a dispatch only wants a node that beats the best
    start found so far, and the node's last start tells where to begin (see `replay_one`)."""
    return scan_from(seg_t, seg_f, lo, n, k, t0, dur, d0, d1, d2, cutoff - 1)


@njit(cache=True)
def _segment_after(seg_t, lo, a, n, t):
    """Index (relative to lo) of the segment containing minute t, known to be segment a or
    a later one (binary search over [a, n))."""
    b = n - 1
    while a < b:
        mid = (a + b + 1) // 2
        if seg_t[lo + mid] <= t:
            a = mid
        else:
            b = mid - 1
    return a


@njit(cache=True)
def _release(j, ready, end, pred_ptr, pred_idx):
    """max(ready_j, ends of j's predecessors); NEVER while a predecessor is unplaced."""
    t = ready[j]
    for q in range(pred_ptr[j], pred_ptr[j + 1]):
        e = end[pred_idx[q]]
        if e < 0:
            return NEVER
        if e > t:
            t = e
    return t


@njit(cache=True)
def replay_one(A, plan_assign, order, factor, limit, policy, start, end, where):
    """One sampled future of a plan: writes start, end and where (node) int64[J].

    A: the instance's arrays; plan_assign: int64[J] the planned nodes; order: int64[J] the
    plan's start order (respects follows); factor: float64[J]; limit: int64[J] minutes.
    Returns False when a job cannot be placed (its node cannot hold it, or a predecessor
    comes later in `order`).
    """
    demand, capacity, maint_ptr = A.demand, A.capacity, A.maint_ptr
    n_jobs = order.shape[0]
    n_nodes = capacity.shape[0]
    seg_cap = np.empty(n_nodes, np.int64)
    for i in range(n_nodes):
        seg_cap[i] = node_slots(maint_ptr, A.res_ptr, i)
    for j in range(n_jobs):
        seg_cap[plan_assign[j]] += 2
    seg_lo = np.empty(n_nodes, np.int64)
    used = np.int64(0)
    for i in range(n_nodes):
        seg_lo[i] = used
        used += seg_cap[i]
    # KEEP knows every node's room up front; DISPATCH grows a node's slice when it must
    seg_t = np.empty(used if policy == KEEP else 2 * used, np.int64)
    seg_f = np.empty((seg_t.shape[0], 3), np.int64)
    seg_n = np.empty(n_nodes, np.int64)
    for i in range(n_nodes):
        init_node(i, seg_t, seg_f, seg_lo, seg_n, capacity, maint_ptr, A.maint_start,
                  A.maint_end, A.res_ptr, A.res_start, A.res_end, A.res_demand)
    # A reservation counts as the node's first start: jobs come after it (they are ready
    # from `now`, which is past every reservation's start), and the rule below holds.
    last = np.zeros(n_nodes, np.int64)
    for i in range(n_nodes):
        for w in range(A.res_ptr[i], A.res_ptr[i + 1]):
            last[i] = max(last[i], A.res_start[w])
    # What a dispatch reads of a node before its profile: the segment holding last[i]
    # (placements on i start there or later, so they never shift it), that segment's free
    # room, and when it ends. Past last[i] the free room only grows until maintenance, so a
    # node without room now and no change before the best start so far is passed over.
    at_last = np.zeros(n_nodes, np.int64)
    room = np.empty((3, n_nodes), np.int64)  # by resource: the scan below vectorises
    change = np.empty(n_nodes, np.int64)
    bound = np.empty(n_nodes, np.int64)
    if policy == DISPATCH:
        for i in range(n_nodes):
            at_last[i] = segment_at(seg_t, seg_lo[i], seg_n[i], last[i])
            _remember(seg_t, seg_f, seg_lo[i], seg_n[i], at_last[i], room, change, i)
    end[:] = -1
    for q in range(n_jobs):
        j = order[q]
        t0 = _release(j, A.ready, end, A.pred_ptr, A.pred_idx)
        if t0 < 0:
            return False
        d0 = demand[j, 0]
        d1 = demand[j, 1]
        d2 = demand[j, 2]
        i = plan_assign[j]
        dur = sampled_minutes(factor[j], duration_of(A, j, i), limit[j])
        s, k = earliest_start(seg_t, seg_f, seg_lo[i], seg_n[i], max(t0, last[i]), dur,
                              d0, d1, d2)
        if s < 0:
            return False
        if policy == DISPATCH and s > t0:
            # a lower bound on every node's start first, in one branch-free pass; then the
            # profile search only where the bound beats the best start so far
            ok = A.class_ok[A.job_class[j]]  # by node type (`instance.Eligibility`)
            for c in range(n_nodes):
                lb = max(t0, last[c])
                fits = (room[0, c] >= d0) & (room[1, c] >= d1) & (room[2, c] >= d2)
                bound[c] = max(lb, change[c] * (1 - fits)) if ok[A.node_type[c]] else NO_DUE
            bound[plan_assign[j]] = NO_DUE
            for c in range(n_nodes):
                if bound[c] >= s:
                    continue
                lb = bound[c]
                if lb < change[c]:
                    kc = at_last[c]
                else:
                    # No room before the profile changes. Past last[c] the free room only
                    # grows until a maintenance window (and is whole after one): if the
                    # segment holding minute s - 1 is no window and still lacks room, no
                    # earlier one has it.
                    kc = _segment_after(seg_t, seg_lo[c], at_last[c] + 1, seg_n[c], s - 1)
                    f = seg_lo[c] + kc
                    if seg_f[f, 0] != BLOCKED and (seg_f[f, 0] < d0 or seg_f[f, 1] < d1
                                                   or seg_f[f, 2] < d2):
                        continue
                    kc = at_last[c] + 1 if lb == change[c] else segment_at(
                        seg_t, seg_lo[c], seg_n[c], lb)
                dc = sampled_minutes(factor[j], duration_of(A, j, c), limit[j])
                sc, kc = _fit_from(seg_t, seg_f, seg_lo[c], seg_n[c], kc, lb, dc, d0, d1, d2,
                                   s)
                if sc >= 0:
                    s, k, i, dur = sc, kc, c, dc
                    if s == t0:
                        break
        if seg_n[i] + 2 > seg_cap[i]:  # only under DISPATCH: KEEP sized every slice exactly
            seg_t, seg_f, used = grow_slice(seg_t, seg_f, seg_lo, seg_cap, seg_n, used, i,
                                       seg_n[i] + 2)
        seg_n[i] = place(seg_t, seg_f, seg_lo[i], seg_n[i], k, s, dur, d0, d1, d2)
        start[j] = s
        end[j] = s + dur
        where[j] = i
        last[i] = s
        if policy == DISPATCH:
            at_last[i] = k if seg_t[seg_lo[i] + k] == s else k + 1
            _remember(seg_t, seg_f, seg_lo[i], seg_n[i], at_last[i], room, change, i)
    return True


@njit(cache=True, inline="always")
def _remember(seg_t, seg_f, lo, n, k, room, change, i):
    """room[:, i] = the free room of node i's segment k; change[i] = when that segment ends."""
    for r in range(3):
        room[r, i] = seg_f[lo + k, r]
    change[i] = seg_t[lo + k + 1] if k + 1 < n else NO_DUE


def _replay_chunk(A, plan_assign, order, factors, limit, policy, end_out, start_out,
                  where_out, node_finish, node_work, makespan, tardiness):
    """Replay every sample of a chunk; per-sample results only (the fold is `fold_jobs`).

    factors: float64[n, J]. Writes end_out int64[n, J]; start_out and where_out int64[n, J]
    (or [n, 0] not to keep the schedules); node_finish int64[n, N] (0 for an idle node);
    node_work int64[n, N] core-minutes; makespan int64[n]; tardiness float64[n], the weighted
    tardiness sum_j w_j max(0, C_j - d_j) over jobs with a due time, summed in job order.
    A sample that cannot be replayed gets makespan -1 (the caller checks the plan first).
    """
    n = factors.shape[0]
    n_jobs = order.shape[0]
    keep = start_out.shape[1] == n_jobs
    due, weight, demand = A.due, A.weight, A.demand
    for s in prange(n):
        start = np.empty(n_jobs, np.int64)
        where = np.empty(n_jobs, np.int64)
        end = end_out[s]
        if not replay_one(A, plan_assign, order, factors[s], limit, policy, start, end,
                          where):
            makespan[s] = -1
            continue
        mk = np.int64(0)
        tard = 0.0
        node_finish[s, :] = 0
        node_work[s, :] = 0
        for j in range(n_jobs):
            e = end[j]
            i = where[j]
            if e > mk:
                mk = e
            if e > node_finish[s, i]:
                node_finish[s, i] = e
            node_work[s, i] += demand[j, 0] * (e - start[j])
            if due[j] != NO_DUE and e > due[j]:
                tard += weight[j] * (e - due[j])
        makespan[s] = mk
        tardiness[s] = tard
        if keep:
            start_out[s, :] = start
            where_out[s, :] = where


replay_chunk = njit(cache=True, parallel=True)(_replay_chunk)


@njit(cache=True, parallel=True)
def fold_jobs(ends, due, window, end_sum, late, past):
    """Add a chunk's job ends (int64[J, n]: job j's ends in row j) to the per-job
    accumulators int64[J], in place: end_sum, late (end > due), past (end > window)."""
    n_jobs, n = ends.shape
    for j in prange(n_jobs):
        for s in range(n):
            e = ends[j, s]
            end_sum[j] += e
            if due[j] != NO_DUE and e > due[j]:
                late[j] += 1
            if e > window:
                past[j] += 1


def _replay_population(A, assign2d, start2d, factors, limit, out):
    """KEEP replays of P plans (assign2d, start2d int64[P, J]) under K samples (factors
    float64[K, J]): out float64[P, K, 3] = (makespan, weighted tardiness, weighted
    completion) per plan and sample; +inf where a plan cannot be replayed."""
    n_pop, n_jobs = assign2d.shape
    n_samples = factors.shape[0]
    orders = np.empty((n_pop, n_jobs), np.int64)
    for p in prange(n_pop):
        orders[p] = np.argsort(start2d[p], kind="mergesort")
    due, weight = A.due, A.weight
    for t in prange(n_pop * n_samples):
        p = t // n_samples
        k = t % n_samples
        start = np.empty(n_jobs, np.int64)
        end = np.empty(n_jobs, np.int64)
        where = np.empty(n_jobs, np.int64)
        if not replay_one(A, assign2d[p], orders[p], factors[k], limit, KEEP, start, end,
                          where):
            out[p, k, :] = np.inf
            continue
        mk = np.int64(0)
        tard = 0.0
        compl = 0.0
        for j in range(n_jobs):
            e = end[j]
            if e > mk:
                mk = e
            if due[j] != NO_DUE and e > due[j]:
                tard += weight[j] * (e - due[j])
            compl += weight[j] * e
        out[p, k, 0] = mk
        out[p, k, 1] = tard
        out[p, k, 2] = compl


replay_population = njit(cache=True, parallel=True)(_replay_population)
