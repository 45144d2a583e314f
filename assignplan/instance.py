"""The validated batch as numpy arrays: capacities, demands, durations, eligibility, precedence.

Every method, the schedule builder and the lower bound read this one structure; none of them
sees pydantic objects. Time is whole minutes, memory whole MiB (see `model.duration_minutes`).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import NamedTuple

import numpy as np

from assignplan.model import (
    ExpandedBatch,
    ceil_minutes,
    duration_minutes,
    floor_minutes,
)

RESOURCES = ("cores", "memory", "gpus")
NO_DUE = np.iinfo(np.int64).max // 4  # far beyond any makespan: never late
NO_LIMIT = np.iinfo(np.int64).max // 4  # a run-time limit no run reaches


class Arrays(NamedTuple):
    """The instance's arrays as the compiled kernels take them: one structured argument
    (see `Instance` for shapes and units)."""

    capacity: np.ndarray
    demand: np.ndarray
    duration: np.ndarray
    eligible: np.ndarray
    ready: np.ndarray
    due: np.ndarray
    weight: np.ndarray
    pred_ptr: np.ndarray
    pred_idx: np.ndarray
    succ_ptr: np.ndarray
    succ_idx: np.ndarray
    maint_ptr: np.ndarray
    maint_start: np.ndarray
    maint_end: np.ndarray


@dataclass(frozen=True, eq=False)
class Instance:
    """Array form of a batch.

    Shapes: J jobs, N nodes, R = 3 resources (cores, memory MiB, GPUs).

    - ``capacity``: int64[N, 3]; ``demand``: int64[J, 3]
    - ``speed``: float64[N]; ``hours``: float64[J] (reference hours)
    - ``duration``: int32[J, N] minutes, ``ceil(hours*60/speed)``; meaningful where eligible
    - ``eligible``: bool[J, N], the node can hold the job (cores, memory, GPUs, tags)
    - ``ready``: int64[J] earliest start minute; ``due``: int64[J] (``NO_DUE`` if none)
    - ``weight``: float64[J]
    - ``pred_ptr``/``pred_idx``: CSR of predecessors (``follows``), int64
    - ``succ_ptr``/``succ_idx``: CSR of successors, int64
    - ``maint_ptr``/``maint_start``/``maint_end``: CSR of maintenance windows per node,
      whole minutes, half-open ``[start, end)``, widened outwards to whole minutes
    - ``order``: int64[J] a priority order (largest bottom level first) that respects follows
    - ``limit``: int64[J] hard run-time limit in minutes of wall time, ``ceil(limit_h * 60)``
      (``NO_LIMIT`` if none); read only by runtime-risk replays
    """

    job_names: tuple[str, ...]
    job_groups: tuple[str, ...]
    node_names: tuple[str, ...]
    node_groups: tuple[str, ...]
    window_start: datetime
    window_minutes: int
    capacity: np.ndarray
    demand: np.ndarray
    speed: np.ndarray
    hours: np.ndarray
    duration: np.ndarray
    eligible: np.ndarray
    ready: np.ndarray
    due: np.ndarray
    weight: np.ndarray
    pred_ptr: np.ndarray
    pred_idx: np.ndarray
    succ_ptr: np.ndarray
    succ_idx: np.ndarray
    maint_ptr: np.ndarray
    maint_start: np.ndarray
    maint_end: np.ndarray
    order: np.ndarray
    limit: np.ndarray

    @property
    def arrays(self) -> Arrays:
        """The arrays the kernels read, as one `Arrays` (built on each call: cheap, and
        always that of this instance, also after `dataclasses.replace`)."""
        return Arrays(*(getattr(self, name) for name in Arrays._fields))

    @property
    def n_jobs(self) -> int:
        return len(self.job_names)

    @property
    def n_nodes(self) -> int:
        return len(self.node_names)

    def predecessors(self, j: int) -> np.ndarray:
        return self.pred_idx[self.pred_ptr[j] : self.pred_ptr[j + 1]]

    def successors(self, j: int) -> np.ndarray:
        return self.succ_idx[self.succ_ptr[j] : self.succ_ptr[j + 1]]

    def durations(self, assign: np.ndarray) -> np.ndarray:
        """int64[..., J]: each job's duration on its node under `assign` int64[..., J]."""
        jobs = np.broadcast_to(np.arange(self.n_jobs), np.shape(assign))
        return self.duration[jobs, assign].astype(np.int64)

    def end_times(self, assign: np.ndarray, start: np.ndarray) -> np.ndarray:
        """int64[..., J]: start + duration on the assigned node (the one end-time rule)."""
        return np.asarray(start, dtype=np.int64) + self.durations(assign)

    def available_minutes(self, horizon: int) -> np.ndarray:
        """int64[N]: minutes of [0, horizon) outside each node's maintenance windows."""
        lost = np.clip(np.minimum(self.maint_end, horizon)
                       - np.clip(self.maint_start, 0, horizon), 0, None)
        node = np.repeat(np.arange(self.n_nodes), np.diff(self.maint_ptr))
        return max(0, horizon) - np.bincount(node, weights=lost,
                                             minlength=self.n_nodes).astype(np.int64)

    def min_duration(self) -> np.ndarray:
        """int64[J]: each job's shortest duration over its eligible nodes."""
        big = np.iinfo(np.int32).max
        return np.where(self.eligible, self.duration, big).min(axis=1).astype(np.int64)


def _csr(lists: list[list[int]]) -> tuple[np.ndarray, np.ndarray]:
    ptr = np.zeros(len(lists) + 1, dtype=np.int64)
    ptr[1:] = np.cumsum([len(x) for x in lists])
    idx = np.fromiter((v for x in lists for v in x), dtype=np.int64, count=int(ptr[-1]))
    return ptr, idx


def priority_order(hours: np.ndarray, pred_ptr: np.ndarray, pred_idx: np.ndarray,
                   succ_ptr: np.ndarray, succ_idx: np.ndarray) -> np.ndarray:
    """Jobs by largest bottom level first (longest chain of reference hours to a sink).

    A job's bottom level strictly exceeds each successor's (hours > 0), so sorting by it is a
    topological order of `follows`; without follows it is exactly LPT (longest first).
    Ties go to the longer job, then the lower index, so the order is deterministic.
    """
    n = len(hours)
    indeg = np.diff(succ_ptr).copy()  # successors not yet processed
    bottom = hours.astype(np.float64).copy()
    stack = [j for j in range(n) if indeg[j] == 0]
    while stack:
        j = stack.pop()
        for p in pred_idx[pred_ptr[j] : pred_ptr[j + 1]]:
            bottom[p] = max(bottom[p], hours[p] + bottom[j])
            indeg[p] -= 1
            if indeg[p] == 0:
                stack.append(int(p))
    return np.lexsort((np.arange(n), -hours, -bottom)).astype(np.int64)


def build_instance(batch: ExpandedBatch) -> Instance:
    """Convert an expanded, checked batch into arrays (one pass, no validation left to do)."""
    nodes, jobs = batch.nodes, batch.jobs
    capacity = np.array([[n.cores, n.memory_mib, n.gpus] for n in nodes], dtype=np.int64)
    demand = np.array([[j.cores, j.memory_mib, j.gpus] for j in jobs], dtype=np.int64)
    speed = np.array([n.speed for n in nodes], dtype=np.float64)
    hours = np.array([j.hours for j in jobs], dtype=np.float64)

    duration = duration_minutes(hours[:, None], speed[None, :]).astype(np.int32)
    eligible = _eligibility(batch, capacity, demand)

    index = {j.name: k for k, j in enumerate(jobs)}
    preds = [sorted({index[p] for p in j.follows}) for j in jobs]
    succs: list[list[int]] = [[] for _ in jobs]
    for k, ps in enumerate(preds):
        for p in ps:
            succs[p].append(k)
    pred_ptr, pred_idx = _csr(preds)
    succ_ptr, succ_idx = _csr(succs)

    windows = [sorted(n.maintenance) for n in nodes]
    maint_ptr, _ = _csr([[0] * len(w) for w in windows])
    maint_start = np.array([floor_minutes(s * 60) for w in windows for s, _ in w], dtype=np.int64)
    maint_end = np.array([ceil_minutes(e * 60) for w in windows for _, e in w], dtype=np.int64)

    ready = np.array([ceil_minutes(j.ready_h * 60) for j in jobs], dtype=np.int64)
    due = np.array(
        [NO_DUE if j.due_h is None else floor_minutes(j.due_h * 60) for j in jobs], dtype=np.int64
    )
    return Instance(
        job_names=tuple(j.name for j in jobs),
        job_groups=tuple(j.group for j in jobs),
        node_names=tuple(n.name for n in nodes),
        node_groups=tuple(n.group for n in nodes),
        window_start=batch.window_start,
        window_minutes=ceil_minutes(batch.window_hours * 60),
        capacity=capacity,
        demand=demand,
        speed=speed,
        hours=hours,
        duration=duration,
        eligible=eligible,
        ready=ready,
        due=due,
        weight=np.array([j.weight for j in jobs], dtype=np.float64),
        pred_ptr=pred_ptr,
        pred_idx=pred_idx,
        succ_ptr=succ_ptr,
        succ_idx=succ_idx,
        maint_ptr=maint_ptr,
        maint_start=maint_start,
        maint_end=maint_end,
        order=priority_order(hours, pred_ptr, pred_idx, succ_ptr, succ_idx),
        limit=np.array([NO_LIMIT if j.limit_h is None else ceil_minutes(j.limit_h * 60)
                        for j in jobs], dtype=np.int64),
    )


def _eligibility(batch: ExpandedBatch, capacity: np.ndarray, demand: np.ndarray) -> np.ndarray:
    """bool[J, N]: resources by broadcasting; tags only for the few distinct `needs` sets."""
    eligible = np.all(demand[:, None, :] <= capacity[None, :, :], axis=2)
    by_needs: dict[frozenset[str], np.ndarray] = {}
    for jj, job in enumerate(batch.jobs):
        if not job.needs:
            continue
        if job.needs not in by_needs:
            by_needs[job.needs] = np.array([job.needs <= n.tags for n in batch.nodes])
        eligible[jj] &= by_needs[job.needs]
    return eligible
