"""Pure-Python twin of the compiled builder and greedy kernels: slow, plain, used only by tests.

It shares no code with `assignplan.kernels`. A node is a list of placed jobs
(start, end, cores, memory, GPUs) plus its maintenance windows; feasibility of a start is
checked directly against them.

Why the candidate starts suffice: if s* > t0 is the earliest feasible start, then s* - 1 is
infeasible while s* is not, so something occupying minute s* - 1 ends exactly at s*: a placed
job or a maintenance window. Hence s* is t0 or an end time > t0, and trying those in
increasing order finds it. Usage on a node changes only at job starts, so checking the load
at s and at every placed start inside (s, s + dur) checks every minute.
"""

from __future__ import annotations

import numpy as np

from assignplan.instance import Instance


def _fits(placed: list[tuple[int, int, int, int, int]], windows: list[tuple[int, int]],
          cap: np.ndarray, s: int, e: int, dem: np.ndarray) -> bool:
    if any(a < e and s < b for a, b in windows):
        return False
    points = [s] + [ps for ps, _pe, *_ in placed if s < ps < e]
    for t in points:
        used = np.zeros(3, dtype=np.int64)
        for ps, pe, c, m, g in placed:
            if ps <= t < pe:
                used += (c, m, g)
        if np.any(used + dem > cap):
            return False
    return True


def earliest_start(placed, windows, cap, t0: int, dur: int, dem) -> int | None:
    """Earliest s >= t0 at which [s, s + dur) fits; None if the job exceeds the empty node."""
    if np.any(np.asarray(dem) > cap):
        return None
    ends = sorted({t0} | {pe for _ps, pe, *_ in placed if pe > t0}
                  | {b for _a, b in windows if b > t0})
    for s in ends:
        if _fits(placed, windows, cap, s, s + dur, np.asarray(dem)):
            return s
    raise AssertionError("unreachable: after every end the node is empty")


def _windows(inst: Instance) -> list[list[tuple[int, int]]]:
    return [
        [(int(a), int(b)) for a, b in zip(inst.maint_start[inst.maint_ptr[i]:inst.maint_ptr[i + 1]],
                                          inst.maint_end[inst.maint_ptr[i]:inst.maint_ptr[i + 1]],
                                          strict=True)]
        for i in range(inst.n_nodes)
    ]


def _t0(inst: Instance, j: int, end: dict[int, int]) -> int:
    return max([int(inst.ready[j])] + [end[int(p)] for p in inst.predecessors(j)])


def twin_build(inst: Instance, assign: np.ndarray, order: np.ndarray | None = None) -> np.ndarray:
    """Serial SGS: start int64[J] for assignment int64[J], jobs taken in `order`."""
    order = inst.order if order is None else order
    windows = _windows(inst)
    placed: list[list] = [[] for _ in range(inst.n_nodes)]
    start = np.full(inst.n_jobs, -1, dtype=np.int64)
    end: dict[int, int] = {}
    for j in map(int, order):
        i = int(assign[j])
        dur = int(inst.duration[j, i])
        s = earliest_start(placed[i], windows[i], inst.capacity[i], _t0(inst, j, end), dur,
                           inst.demand[j])
        placed[i].append((s, s + dur, *map(int, inst.demand[j])))
        start[j], end[j] = s, s + dur
    return start


def twin_greedy(inst: Instance, order: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """List scheduling: each job in `order` to the eligible node of earliest (finish, start,
    node index)."""
    order = inst.order if order is None else order
    windows = _windows(inst)
    placed: list[list] = [[] for _ in range(inst.n_nodes)]
    assign = np.full(inst.n_jobs, -1, dtype=np.int64)
    start = np.full(inst.n_jobs, -1, dtype=np.int64)
    end: dict[int, int] = {}
    for j in map(int, order):
        t0 = _t0(inst, j, end)
        options = []
        for i in np.flatnonzero(inst.eligible[j]):
            dur = int(inst.duration[j, i])
            s = earliest_start(placed[i], windows[i], inst.capacity[i], t0, dur, inst.demand[j])
            options.append((s + dur, s, int(i)))
        e, s, i = min(options)
        placed[i].append((s, e, *map(int, inst.demand[j])))
        assign[j], start[j], end[j] = i, s, e
    return assign, start
