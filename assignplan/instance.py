"""The validated batch as numpy arrays: capacities, demands, durations, eligibility, precedence.

Every method, the schedule builder and the lower bound read this one structure; none of them
sees pydantic objects. Time is whole minutes, memory whole MiB (see `units.duration_minutes`).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import NamedTuple

import numpy as np

from assignplan.expand import ExpandedBatch, hosts
from assignplan.units import ceil_minutes, duration_minutes, floor_minutes

RESOURCES = ("cores", "memory", "gpus")
NO_DUE = np.iinfo(np.int64).max // 4  # far beyond any makespan: never late
NO_LIMIT = np.iinfo(np.int64).max // 4  # a run-time limit no run reaches


class Arrays(NamedTuple):
    """The instance's arrays as the compiled kernels take them: one structured argument
    (see `Instance` and `Eligibility` for shapes and units)."""

    capacity: np.ndarray
    demand: np.ndarray
    dur: np.ndarray
    node_speed: np.ndarray
    job_class: np.ndarray
    node_type: np.ndarray
    class_ok: np.ndarray
    class_ptr: np.ndarray
    class_nodes: np.ndarray
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
    res_ptr: np.ndarray
    res_start: np.ndarray
    res_end: np.ndarray
    res_demand: np.ndarray


@dataclass(frozen=True, eq=False)
class Eligibility:
    """Which node can hold which job, kept per class: job j may run on node i iff
    ``ok[job_class[j], node_type[i]]``.

    A node type is a set of nodes no job tells apart (same cores, memory, GPUs and tags, or a
    finer split such as the ga's node groups); a job class is a set of jobs with the same
    eligible types. Both are few (a handful of node types, at most a few dozen classes on
    real inventories) whatever the batch's size, so nothing here is O(jobs x nodes):

    - ``job_class``: int32[J]; ``node_type``: int32[N]; ``ok``: bool[E, T];
    - ``ptr``/``nodes``: CSR of each class's nodes, ascending: class e's nodes are
      ``nodes[ptr[e]:ptr[e + 1]]`` (int64[E + 1], int32[sum over classes]).
    """

    job_class: np.ndarray
    node_type: np.ndarray
    ok: np.ndarray
    ptr: np.ndarray
    nodes: np.ndarray

    @staticmethod
    def build(job_class: np.ndarray, node_type: np.ndarray, ok: np.ndarray) -> Eligibility:
        """From the class tables, with unused classes dropped and equal classes merged."""
        ok = np.asarray(ok, dtype=bool)
        rows, inverse = np.unique(ok[np.asarray(job_class)], axis=0, return_inverse=True)
        job_class = inverse.reshape(-1).astype(np.int32)
        node_type = np.asarray(node_type, dtype=np.int32)
        member = rows[:, node_type]  # bool[E, N]: E is small, see the class docstring
        ptr = np.zeros(len(rows) + 1, dtype=np.int64)
        ptr[1:] = np.cumsum(member.sum(axis=1))
        nodes = np.nonzero(member)[1].astype(np.int32)
        return Eligibility(job_class, node_type, rows, ptr, nodes)

    @staticmethod
    def from_matrix(matrix: np.ndarray) -> Eligibility:
        """From a full bool[J, N] matrix (tests and small batches: it is O(J x N))."""
        matrix = np.asarray(matrix, dtype=bool)
        _, node_type = np.unique(np.packbits(matrix.T, axis=1), axis=0, return_inverse=True)
        node_type = node_type.reshape(-1)
        rep = np.array([np.flatnonzero(node_type == t)[0] for t in range(node_type.max() + 1)])
        return Eligibility.build(np.arange(matrix.shape[0]), node_type, matrix[:, rep])

    def of(self, jobs: np.ndarray | int, nodes: np.ndarray | int) -> np.ndarray:
        """bool[...]: may each job run on each node (jobs and nodes broadcast together)."""
        return self.ok[self.job_class[jobs], self.node_type[nodes]]

    def nodes_of(self, j: int) -> np.ndarray:
        """int32[k]: job j's eligible nodes, ascending."""
        e = self.job_class[j]
        return self.nodes[self.ptr[e] : self.ptr[e + 1]]

    def counts(self) -> np.ndarray:
        """int64[J]: how many nodes can hold each job."""
        return np.diff(self.ptr)[self.job_class]

    def matrix(self) -> np.ndarray:
        """bool[J, N] (tests and small batches only: it is O(J x N))."""
        return self.ok[self.job_class][:, self.node_type]

    def narrowed(self, keep: np.ndarray, node_group: np.ndarray) -> Eligibility:
        """The eligibility with job class e also barred from node group g where
        ``keep[e, g]`` is False (`node_group` int[N] must refine the node types)."""
        n_groups = int(node_group.max()) + 1
        group_type = np.zeros(n_groups, dtype=np.int64)
        group_type[node_group] = self.node_type
        return Eligibility.build(self.job_class, node_group,
                                 self.ok[:, group_type] & np.asarray(keep, dtype=bool))


@dataclass(frozen=True, eq=False)
class Instance:
    """Array form of a batch.

    Shapes: J jobs, N nodes, R = 3 resources (cores, memory MiB, GPUs), S distinct node
    speeds; nothing is O(J x N) (see `Eligibility`).

    - ``capacity``: int64[N, 3]; ``demand``: int64[J, 3]
    - ``speeds``: float64[S] the distinct speeds; ``node_speed``: int32[N] index into them
    - ``hours``: float64[J] (reference hours); ``dur``: int32[J, S] minutes,
      ``ceil(hours*60/speed)`` (`units.duration_minutes`): job j runs
      ``dur[j, node_speed[i]]`` minutes on node i
    - ``elig``: `Eligibility`, which node can hold which job
    - ``node_class``: int32[N], nodes interchangeable for every job (same type, speed and
      maintenance)
    - ``ready``: int64[J] earliest start minute; ``due``: int64[J] (``NO_DUE`` if none)
    - ``weight``: float64[J]
    - ``pred_ptr``/``pred_idx``: CSR of predecessors (``follows``), int64
    - ``succ_ptr``/``succ_idx``: CSR of successors, int64
    - ``maint_ptr``/``maint_start``/``maint_end``: CSR of maintenance windows per node,
      whole minutes, half-open ``[start, end)``, widened outwards to whole minutes
    - ``order``: int64[J] a priority order (largest bottom level first) that respects follows
    - ``limit``: int64[J] hard run-time limit in minutes of wall time, ``ceil(limit_h * 60)``
      (``NO_LIMIT`` if none); read only by runtime-risk replays
    - ``res_ptr``/``res_start``/``res_end``/``res_demand``: CSR of reservations per node:
      fixed intervals ``[start, end)`` that take ``res_demand`` int64[K, 3] of the node's
      capacity (jobs already running when a batch is replanned, see `pinning`); empty for a
      batch planned from scratch
    """

    job_names: tuple[str, ...]
    job_groups: tuple[str, ...]
    node_names: tuple[str, ...]
    node_groups: tuple[str, ...]
    window_start: datetime
    window_minutes: int
    capacity: np.ndarray
    demand: np.ndarray
    speeds: np.ndarray
    node_speed: np.ndarray
    hours: np.ndarray
    dur: np.ndarray
    elig: Eligibility
    node_class: np.ndarray
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
    res_ptr: np.ndarray
    res_start: np.ndarray
    res_end: np.ndarray
    res_demand: np.ndarray

    @property
    def arrays(self) -> Arrays:
        """The arrays the kernels read, as one `Arrays` (built on each call: cheap, and
        always that of this instance, also after `dataclasses.replace`)."""
        e = self.elig
        return Arrays(self.capacity, self.demand, self.dur, self.node_speed, e.job_class,
                      e.node_type, e.ok, e.ptr, e.nodes, self.ready, self.due, self.weight,
                      self.pred_ptr, self.pred_idx, self.succ_ptr, self.succ_idx,
                      self.maint_ptr, self.maint_start, self.maint_end, self.res_ptr,
                      self.res_start, self.res_end, self.res_demand)

    @property
    def n_jobs(self) -> int:
        return len(self.job_names)

    @property
    def n_nodes(self) -> int:
        return len(self.node_names)

    @property
    def speed(self) -> np.ndarray:
        """float64[N]: each node's relative speed."""
        return self.speeds[self.node_speed]

    @property
    def duration(self) -> np.ndarray:
        """int32[J, N]: every job's duration on every node (tests and small batches only:
        it is O(J x N); methods use `duration_on`)."""
        return self.dur[:, self.node_speed]

    @property
    def eligible(self) -> np.ndarray:
        """bool[J, N] (tests and small batches only: it is O(J x N); methods use
        `elig.of`)."""
        return self.elig.matrix()

    def duration_on(self, jobs: np.ndarray | int, nodes: np.ndarray | int) -> np.ndarray:
        """int32[...]: minutes each job runs on each node (jobs and nodes broadcast)."""
        return self.dur[jobs, self.node_speed[nodes]]

    def predecessors(self, j: int) -> np.ndarray:
        return self.pred_idx[self.pred_ptr[j] : self.pred_ptr[j + 1]]

    def successors(self, j: int) -> np.ndarray:
        return self.succ_idx[self.succ_ptr[j] : self.succ_ptr[j + 1]]

    def durations(self, assign: np.ndarray) -> np.ndarray:
        """int64[..., J]: each job's duration on its node under `assign` int64[..., J]."""
        jobs = np.broadcast_to(np.arange(self.n_jobs), np.shape(assign))
        return self.duration_on(jobs, assign).astype(np.int64)

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

    def class_speeds(self) -> np.ndarray:
        """bool[E, S]: which speeds the nodes of each job class offer."""
        e = self.elig
        out = np.zeros((len(e.ok), len(self.speeds)), dtype=bool)
        cls = np.repeat(np.arange(len(e.ok)), np.diff(e.ptr))
        out[cls, self.node_speed[e.nodes]] = True
        return out

    def min_duration(self) -> np.ndarray:
        """int64[J]: each job's shortest duration over its eligible nodes."""
        big = np.iinfo(np.int32).max
        offered = self.class_speeds()[self.elig.job_class]
        return np.where(offered, self.dur, big).min(axis=1).astype(np.int64)


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
    """Convert an expanded, checked batch into arrays: per job group, then repeated over its
    members with numpy (no Python object per member), no validation left to do."""
    nodes, specs = batch.nodes, batch.specs
    counts = np.array([len(spec.names) for spec in specs], dtype=np.int64)
    capacity = np.array([[n.cores, n.memory_mib, n.gpus] for n in nodes], dtype=np.int64)

    def per_job(values, dtype) -> np.ndarray:
        return np.repeat(np.asarray(values, dtype=dtype), counts, axis=0)

    demand = per_job([[s.cores, s.memory_mib, s.gpus] for s in specs], np.int64)
    hours = per_job([s.hours for s in specs], np.float64)
    speeds, node_speed = np.unique(np.array([n.speed for n in nodes], dtype=np.float64),
                                   return_inverse=True)
    dur = duration_minutes(hours[:, None], speeds[None, :]).astype(np.int32)
    pred_ptr, pred_idx, succ_ptr, succ_idx = _follows(specs, counts)

    windows = [sorted(n.maintenance) for n in nodes]
    maint_ptr, _ = _csr([[0] * len(w) for w in windows])
    maint_start = np.array([floor_minutes(s * 60) for w in windows for s, _ in w], dtype=np.int64)
    maint_end = np.array([ceil_minutes(e * 60) for w in windows for _, e in w], dtype=np.int64)

    no_due = np.array([s.due_h is None for s in specs])
    due_h = np.array([0.0 if s.due_h is None else s.due_h for s in specs])
    due = np.where(no_due, NO_DUE, floor_minutes(due_h * 60) if len(specs) else 0)
    no_limit = np.array([s.limit_h is None for s in specs])
    limit_h = np.array([0.0 if s.limit_h is None else s.limit_h for s in specs])
    limit = np.where(no_limit, NO_LIMIT, ceil_minutes(limit_h * 60) if len(specs) else 0)
    node_type, spec_kind, ok, _ = hosts(nodes, specs)
    return Instance(
        job_names=tuple(name for spec in specs for name in spec.names),
        job_groups=tuple(name for spec, n in zip(specs, counts.tolist(), strict=True)
                         for name in [spec.group] * n),
        node_names=tuple(n.name for n in nodes),
        node_groups=tuple(n.group for n in nodes),
        window_start=batch.window_start,
        window_minutes=ceil_minutes(batch.window_hours * 60),
        capacity=capacity,
        demand=demand.reshape(-1, 3),
        speeds=speeds,
        node_speed=node_speed.reshape(-1).astype(np.int32),
        hours=hours,
        dur=dur,
        elig=Eligibility.build(per_job(spec_kind, np.int64), node_type, ok),
        node_class=_node_classes(capacity, node_speed.reshape(-1), nodes),
        ready=per_job(ceil_minutes(np.array([s.ready_h for s in specs], dtype=np.float64)
                                   * 60), np.int64),
        due=per_job(due, np.int64),
        weight=per_job([s.weight for s in specs], np.float64),
        pred_ptr=pred_ptr,
        pred_idx=pred_idx,
        succ_ptr=succ_ptr,
        succ_idx=succ_idx,
        maint_ptr=maint_ptr,
        maint_start=maint_start,
        maint_end=maint_end,
        order=priority_order(hours, pred_ptr, pred_idx, succ_ptr, succ_idx),
        limit=per_job(limit, np.int64),
        res_ptr=np.zeros(len(nodes) + 1, dtype=np.int64),
        res_start=np.zeros(0, dtype=np.int64),
        res_end=np.zeros(0, dtype=np.int64),
        res_demand=np.zeros((0, 3), dtype=np.int64),
    )


def _follows(specs, counts: np.ndarray) -> tuple[np.ndarray, ...]:
    """(pred_ptr, pred_idx, succ_ptr, succ_idx): CSR of every member's predecessors (its
    group's follows, ascending) and successors (ascending), built with numpy."""
    follows = [np.array(sorted(set(s.follows)), dtype=np.int64) for s in specs]
    per_member = np.repeat([len(f) for f in follows], counts) if len(specs) else np.zeros(0)
    pred_ptr = np.zeros(int(counts.sum()) + 1, dtype=np.int64)
    pred_ptr[1:] = np.cumsum(per_member)
    pred_idx = np.concatenate([np.tile(f, n) for f, n in zip(follows, counts.tolist(),
                                                             strict=True)] or [np.zeros(0)])
    pred_idx = pred_idx.astype(np.int64)
    job = np.repeat(np.arange(len(pred_ptr) - 1), np.diff(pred_ptr))
    by_pred = np.lexsort((job, pred_idx))
    succ_ptr = np.zeros(len(pred_ptr), dtype=np.int64)
    succ_ptr[1:] = np.cumsum(np.bincount(pred_idx, minlength=len(pred_ptr) - 1))
    return pred_ptr, pred_idx, succ_ptr, job[by_pred].astype(np.int64)


def _node_classes(capacity: np.ndarray, node_speed: np.ndarray, nodes) -> np.ndarray:
    """int32[N]: nodes with the same capacity, speed, tags and maintenance share a class."""
    key: dict = {}
    out = np.empty(len(nodes), dtype=np.int32)
    for i, n in enumerate(nodes):
        out[i] = key.setdefault((tuple(capacity[i]), int(node_speed[i]), n.tags,
                                 tuple(sorted(n.maintenance))), len(key))
    return out
