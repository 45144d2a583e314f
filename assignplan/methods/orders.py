"""Priority orders for list scheduling that keep the third objective term: the jobs that can
set the makespan longest first, every other job by Smith's rule, always within `follows`."""

from __future__ import annotations

import heapq

import numpy as np

from assignplan.bounds.makespan import head_times
from assignplan.instance import Instance

LONG_SHARE = 0.5  # a job at least this share of the makespan bound long can set the makespan


def tail_minutes(inst: Instance, p: np.ndarray) -> np.ndarray:
    """int64[J]: the longest chain of durations `p` after each job (its successors', not its
    own), computed successors first (inst.order reversed is a reverse topological order)."""
    tail = np.zeros(inst.n_jobs, dtype=np.int64)
    for j in inst.order[::-1].tolist():
        succ = inst.successors(j)
        if len(succ):
            tail[j] = int((p[succ] + tail[succ]).max())
    return tail


def critical_jobs(inst: Instance, makespan_bound: int, share: float | None) -> np.ndarray:
    """bool[J]: the jobs that can set the makespan, and every job they follow.

    Job j is critical when the longest chain through it reaches the bound B,
    fin_j + tail_j >= B (fin_j its earliest finish, `makespan.head_times`; tail_j the chain of
    fastest durations after it): started late, it delays the plan's end. With a `share`,
    also when p_j >= share * B (a long job started late can end past B even off any chain).
    """
    p = inst.min_duration()
    _, fin = head_times(inst)
    hit = fin + tail_minutes(inst, p) >= makespan_bound
    if share is not None:
        hit |= p >= share * makespan_bound
    for j in inst.order[::-1].tolist():  # successors first: a job a critical job follows
        if hit[j]:
            hit[inst.predecessors(j)] = True
    return hit


def smith_keys(inst: Instance, by: str = "duration") -> np.ndarray:
    """float64[J]: Smith's ratio of each job, smaller first: p_j / w_j ("duration") or
    p_j * c_j / w_j ("area", c_j the job's largest share of a node's cores, memory or GPUs);
    p_j the fastest eligible duration. A job of weight 0 comes last."""
    p = inst.min_duration().astype(np.float64)
    if by == "area":
        share = inst.demand / np.maximum(inst.capacity.max(axis=0), 1)[None, :]
        p = p * share.max(axis=1)
    with np.errstate(divide="ignore"):
        return np.where(inst.weight > 0, p / np.where(inst.weight > 0, inst.weight, 1.0), np.inf)


def completion_order(inst: Instance, critical: np.ndarray, keys: np.ndarray) -> np.ndarray:
    """int64[J]: a topological order of `follows` that takes, among the jobs whose
    predecessors are all placed, the critical ones first (longest chain first, as
    `inst.order` does), then the others by `keys` (smaller first), ties by index."""
    rank = np.empty(inst.n_jobs, dtype=np.int64)
    rank[inst.order] = np.arange(inst.n_jobs)
    waiting = np.diff(inst.pred_ptr).copy()
    heap = [(0 if critical[j] else 1, rank[j] if critical[j] else keys[j], j)
            for j in np.flatnonzero(waiting == 0).tolist()]
    heapq.heapify(heap)
    order = []
    while heap:
        _, _, j = heapq.heappop(heap)
        order.append(j)
        for k in inst.successors(j).tolist():
            waiting[k] -= 1
            if waiting[k] == 0:
                heapq.heappush(heap, (0 if critical[k] else 1,
                                      rank[k] if critical[k] else keys[k], k))
    return np.asarray(order, dtype=np.int64)


def effective_due(inst: Instance) -> np.ndarray:
    """int64[J]: each job's due time tightened by the jobs that follow it,
    d'_j = min(d_j, min_{k follows j} d'_k - p_k) (p_k the fastest eligible duration), so a
    job without a due time of its own inherits the latest end that lets its successors meet
    theirs; computed successors first. NO_DUE stays far beyond any plan."""
    p = inst.min_duration().astype(np.int64)
    due = inst.due.astype(np.int64).copy()
    for j in inst.order[::-1].tolist():
        succ = inst.successors(j)
        if len(succ):
            due[j] = min(due[j], int((due[succ] - p[succ]).min()))
    return due


def due_order(inst: Instance) -> np.ndarray:
    """int64[J]: earliest due date first within `follows`: a topological order that takes,
    among the jobs whose predecessors are all placed, the one of earliest `effective_due`,
    ties in `inst.order` (longest chain first), so jobs without a due time come last, longest
    first."""
    rank = np.empty(inst.n_jobs, dtype=np.int64)
    rank[inst.order] = np.arange(inst.n_jobs)
    due = effective_due(inst)
    waiting = np.diff(inst.pred_ptr).copy()
    heap = [(int(due[j]), int(rank[j]), j) for j in np.flatnonzero(waiting == 0).tolist()]
    heapq.heapify(heap)
    order = []
    while heap:
        _, _, j = heapq.heappop(heap)
        order.append(j)
        for k in inst.successors(j).tolist():
            waiting[k] -= 1
            if waiting[k] == 0:
                heapq.heappush(heap, (int(due[k]), int(rank[k]), k))
    return np.asarray(order, dtype=np.int64)
