"""The critical chains of a schedule: which jobs hold the last end, and why they start late.

One walker serves every improver that needs it. From a job, it steps back to the predecessors
that *set* its start (their end is its start) while the job did not wait for room on its node;
a job that started after max(ready time, predecessor ends) waited for its node, and the chain
stops there: that node's capacity, not the chain, is what delays the plan.
"""

from __future__ import annotations

import numpy as np

from assignplan.instance import Instance


def released(inst: Instance, j: int, end: np.ndarray) -> int:
    """The earliest start job j's ready time and its predecessors' ends allow."""
    preds = inst.predecessors(j)
    return max(int(inst.ready[j]), int(end[preds].max()) if len(preds) else 0)


def walk_back(inst: Instance, start: np.ndarray, end: np.ndarray, roots: list[int], *,
              every_setter: bool, limit: int = 64) -> tuple[list[int], list[int]]:
    """(jobs visited, jobs that waited for their node), walking back from `roots` through the
    predecessors that set each job's start: every such predecessor (`every_setter`: a gather
    waits for all the sweeps that end last) or the first one (a single chain, in visiting
    order). The walk stops once more than `limit` jobs have been reached."""
    todo, seen, visited, waited = list(roots), set(roots), [], []
    while todo and len(seen) <= limit:
        j = todo.pop()
        visited.append(j)
        if start[j] > released(inst, j, end):
            waited.append(j)
            continue
        preds = inst.predecessors(j)
        setters = preds[end[preds] == start[j]].tolist()
        for p in setters if every_setter else setters[:1]:
            if p not in seen:
                seen.add(p)
                todo.append(p)
    return visited, waited


def critical_chain(inst: Instance, start: np.ndarray, end: np.ndarray) -> list[int]:
    """The chain from the job that ends last back to the first job that waited for its node
    (or to a job whose start only its ready time set), last job first."""
    visited, _ = walk_back(inst, start, end, [int(np.argmax(end))], every_setter=False,
                           limit=inst.n_jobs)
    return visited


def critical_node(inst: Instance, assign: np.ndarray, start: np.ndarray,
                  end: np.ndarray) -> int:
    """The node whose capacity delays the critical chain: that of the chain's first job if it
    waited for its node, else the last job's node."""
    chain = critical_chain(inst, start, end)
    head = chain[-1]
    return int(assign[head] if start[head] > released(inst, head, end) else assign[chain[0]])


def waiting_head(inst: Instance, start: np.ndarray, end: np.ndarray) -> int:
    """The first job of the critical chain when the last job waits along a chain of follows
    whose first job waited for room; else -1 (the last job waited itself, or the chain starts
    as early as it can)."""
    chain = critical_chain(inst, start, end)
    head = chain[-1]
    return head if len(chain) > 1 and start[head] > released(inst, head, end) else -1


def critical_waiters(inst: Instance, start: np.ndarray, end: np.ndarray,
                     limit: int = 64) -> list[int]:
    """Jobs of the critical chains (from every job ending at the makespan) that waited for
    their node, besides the last jobs themselves (on its own node, putting a last job first
    only reorders that node)."""
    last = np.flatnonzero(end == end.max()).tolist()
    _, waited = walk_back(inst, start, end, last, every_setter=True, limit=limit)
    return sorted(set(waited) - set(last))
