"""Compiled preemptive WSPT on one pooled resource: the mean-busy-time relaxation's optimum.

Plain arrays in, plain arrays out; `completion.py` says why the value bounds the weighted
completion time. The pure-Python twin in tests/test_completion_bound.py cross-checks it.
"""

from __future__ import annotations

import heapq

import numpy as np
from numba import njit


@njit(cache=True)
def wspt_busy_times(release, work, weight, cap_t, cap_rate):
    """(mean busy time M float64[n], last moment of work float64[n]) of every job in the
    preemptive WSPT schedule of a fluid resource.

    release: float64[n] earliest moment of each job's work; work: float64[n] > 0; weight:
    float64[n] >= 0; the resource delivers cap_rate[k] per minute on [cap_t[k], cap_t[k+1])
    (cap_t float64[K] ascending, cap_t[0] <= every release; the last rate, > 0, runs on
    forever). At every moment the whole rate goes to the released, unfinished job of largest
    weight / work (ties: the lower index), which is the order that minimises
    sum_j weight_j M_j, M_j = (1 / work_j) * integral of t * rate_j(t) dt (see
    `completion.fluid_part`).
    """
    n = release.shape[0]
    order = np.argsort(release, kind="mergesort")
    left = work.copy()
    moment = np.zeros(n)  # integral of t * rate_j(t) dt so far
    last = np.zeros(n)
    heap = [(0.0, np.int64(0)) for _ in range(0)]
    q = 0
    k = 0
    t = release[order[0]] if n else 0.0
    n_cap = cap_t.shape[0]
    while q < n or len(heap) > 0:
        while q < n and release[order[q]] <= t:
            j = order[q]
            heapq.heappush(heap, (-weight[j] / work[j], j))
            q += 1
        while k + 1 < n_cap and cap_t[k + 1] <= t:
            k += 1
        if len(heap) == 0:
            t = release[order[q]]
            continue
        j = heap[0][1]
        rate = cap_rate[k]
        t_next = release[order[q]] if q < n else np.inf
        if k + 1 < n_cap:
            t_next = min(t_next, cap_t[k + 1])
        if rate > 0.0 and t + left[j] / rate <= t_next:
            t2 = t + left[j] / rate
            moment[j] += rate * (t2 - t) * (t2 + t) / 2.0
            left[j] = 0.0
            last[j] = t2
            heapq.heappop(heap)
        else:
            t2 = t_next
            if rate > 0.0:
                moment[j] += rate * (t2 - t) * (t2 + t) / 2.0
                left[j] -= rate * (t2 - t)
        t = t2
    return moment / work, last
