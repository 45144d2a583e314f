"""Pure-Python twin of the compiled replay (`assignplan.kernels_replay.replay_one`): slow,
plain, used only by tests. It shares no code with the kernels; node feasibility comes from
`twin_builder.earliest_start` (a start is checked against the placed jobs themselves)."""

from __future__ import annotations

import math

import numpy as np

from assignplan.instance import Instance
from tests.twin_builder import _t0, _windows, earliest_start


def twin_minutes(factor: float, minutes: int, limit: int) -> int:
    """max(1, ceil(factor * minutes)) with float noise below 1e-6 min ignored, at most limit."""
    return min(max(1, math.ceil(factor * minutes - 1e-6)), int(limit))


def twin_replay(inst: Instance, assign: np.ndarray, order: np.ndarray, factor: np.ndarray,
                policy: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(start, end, node) int64[J] of one sampled future: jobs in `order`; each on its planned
    node ("keep") or, when it cannot start there as soon as it is released, on the eligible
    node of the earliest start ("dispatch"; ties: the planned node, then the lowest index);
    never before the last start on that node."""
    windows = _windows(inst)
    placed: list[list] = [[] for _ in range(inst.n_nodes)]
    last = [0] * inst.n_nodes
    start = np.full(inst.n_jobs, -1, dtype=np.int64)
    where = np.full(inst.n_jobs, -1, dtype=np.int64)
    end: dict[int, int] = {}
    for j in map(int, order):
        t0 = _t0(inst, j, end)

        def start_on(i: int, j: int = j, t0: int = t0) -> tuple[int, int]:
            dur = twin_minutes(factor[j], int(inst.duration[j, i]), inst.limit[j])
            return earliest_start(placed[i], windows[i], inst.capacity[i], max(t0, last[i]),
                                  dur, inst.demand[j]), dur

        home = int(assign[j])
        s, dur = start_on(home)
        i = home
        if policy == "dispatch" and s > t0:
            for c in map(int, np.flatnonzero(inst.eligible[j])):
                if c == home:
                    continue
                sc, dc = start_on(c)
                if sc < s:
                    s, dur, i = sc, dc, c
        placed[i].append((s, s + dur, *map(int, inst.demand[j])))
        start[j], where[j], end[j] = s, i, s + dur
        last[i] = s
    ends = np.array([end[j] for j in range(inst.n_jobs)], dtype=np.int64)
    return start, ends, where
