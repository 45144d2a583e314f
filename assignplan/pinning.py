"""Pinned jobs in the array form: the instance a replan's methods plan, and the plan put back.

A replan plans only the jobs that have not started (`free_instance`): every one is ready no
earlier than `now` (a global ready time) nor before its pinned predecessors ended; the jobs
running at `now` become reservations, fixed intervals holding part of their node's capacity,
which the builder, greedy, the ga, exact and the lower bound all honour
(`instance.Instance`); done jobs hold nothing after `now`. Nodes with reservations are no
longer interchangeable with their group's other nodes, so their node class is their own.
`merge` puts the pinned jobs back beside the planned ones, on the whole batch's indices.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from assignplan.bounds import LowerBound
from assignplan.expand import ExpandedBatch
from assignplan.instance import Instance, build_instance
from assignplan.plan import PlanResult
from assignplan.state import Pins


@dataclass(frozen=True, eq=False)
class FreePart:
    """The jobs left to plan as an instance of their own: `inst` (None when every job is
    pinned), and `jobs` int64[F] the index in the whole batch of each of its jobs (its nodes
    are the whole batch's)."""

    inst: Instance | None
    jobs: np.ndarray


def free_batch(batch: ExpandedBatch, pins: Pins) -> ExpandedBatch:
    """The batch without its pinned jobs: each other job ready from max(ready, now, end of
    each pinned predecessor), following only jobs still to plan. The same object when nothing
    is pinned and `now` is the window start: a replan then plans exactly what solve plans.

    Members of a group share their follows, so they share their new ready time too: the
    batch stays one `JobSpec` per group (a group all pinned drops out)."""
    if not pins.jobs and pins.now <= 0:
        return batch
    names = [n for spec in batch.specs for n in spec.names]
    keep = np.array([n not in pins.jobs for n in names], dtype=bool)
    renumber = np.cumsum(keep) - 1  # old member index -> new, valid where kept
    specs = []
    first = 0
    for spec in batch.specs:
        kept = tuple(n for n in spec.names if n not in pins.jobs)
        if not kept:
            continue
        ends = [pins.jobs[names[p]].end for p in spec.follows if not keep[p]]
        ready = max([spec.ready_h * 60, pins.now] + ends) / 60
        follows = tuple(int(renumber[p]) for p in spec.follows if keep[p])
        specs.append(replace(spec, names=kept, first=first, ready_h=ready, follows=follows))
        first += len(kept)
    return replace(batch, specs=tuple(specs), members=None)


def free_instance(batch: ExpandedBatch, pins: Pins) -> FreePart:
    """The instance of the jobs still to plan, with the running jobs as reservations."""
    part = free_batch(batch, pins)
    index = {j.name: k for k, j in enumerate(batch.jobs)}
    jobs = np.array([index[j.name] for j in part.jobs], dtype=np.int64)
    if not len(jobs):
        return FreePart(None, jobs)
    inst = build_instance(part)
    held = [(name, pin) for name, pin in pins.jobs.items() if pin.running and pin.end > pins.now]
    if not held:
        return FreePart(inst, jobs)
    node_index = {n: i for i, n in enumerate(inst.node_names)}
    by_job = {j.name: j for j in batch.jobs}
    rows = sorted((node_index[pin.node], pins.now, pin.end,
                   by_job[name].cores, by_job[name].memory_mib, by_job[name].gpus)
                  for name, pin in held)
    table = np.array(rows, dtype=np.int64).reshape(-1, 6)
    ptr = np.zeros(inst.n_nodes + 1, dtype=np.int64)
    ptr[1:] = np.cumsum(np.bincount(table[:, 0], minlength=inst.n_nodes))
    # A node holding reservations is a class of its own (its profile differs from its peers').
    held_nodes = np.unique(table[:, 0])
    node_class = inst.node_class.copy()
    node_class[held_nodes] = node_class.max() + 1 + np.arange(len(held_nodes))
    inst = replace(inst, res_ptr=ptr, res_start=np.ascontiguousarray(table[:, 1]),
                   res_end=np.ascontiguousarray(table[:, 2]),
                   res_demand=np.ascontiguousarray(table[:, 3:6]),
                   node_class=node_class.astype(np.int32))
    return FreePart(inst, jobs)


def pinned_end(pins: Pins) -> int:
    """The latest end of a pinned job (0 if none): no plan of the week ends earlier."""
    return max((pin.end for pin in pins.jobs.values()), default=0)


def replan_bound(free_bound: LowerBound | None, pins: Pins) -> LowerBound:
    """The whole week's makespan bound: `free_bound` (`bounds.lower_bound` of the jobs still
    to plan, ready from now, the running jobs' capacity taken; None when none is left)
    raised to the latest pinned end (part "pinned")."""
    bound = LowerBound(0, {}) if free_bound is None else free_bound
    if not pins.jobs:
        return bound
    end = pinned_end(pins)
    return replace(bound, value=max(bound.value, end), parts={**bound.parts, "pinned": end})


def merge(inst: Instance, free: FreePart, result: PlanResult | None, pins: Pins,
          bound: LowerBound) -> PlanResult:
    """The whole batch's plan: the pinned jobs where they are, the others as `result` (on
    `free.inst`) has them; lower bound `bound` (or what `result` proved, if higher)."""
    n = inst.n_jobs
    assign = np.full(n, -1, dtype=np.int64)
    start = np.zeros(n, dtype=np.int64)
    end = np.zeros(n, dtype=np.int64)
    node_index = {name: i for i, name in enumerate(inst.node_names)}
    job_index = {name: j for j, name in enumerate(inst.job_names)}
    for name, pin in pins.jobs.items():
        j = job_index[name]
        assign[j], start[j], end[j] = node_index[pin.node], pin.start, pin.end
    if result is not None:
        assign[free.jobs], start[free.jobs], end[free.jobs] = result.assign, result.start, \
            result.end
    lower = max(bound.value, result.lower_bound if result is not None else 0)
    method = result.method if result is not None else "pinned"
    kept = {} if result is None else {"status": result.status, "seed": result.seed,
                                      "seconds": result.seconds, "history": result.history,
                                      "solver_bound": result.solver_bound}
    return PlanResult(method, assign, start, end, lower, bound_parts=dict(bound.parts), **kept)
