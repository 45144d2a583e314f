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

from dataclasses import replace

import numpy as np

from assignplan.instance import NO_DUE, Instance


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


def twin_fitness(inst: Instance, assign: np.ndarray, start: np.ndarray
                 ) -> tuple[float, float, float]:
    """(makespan, weighted tardiness, weighted completion), summed over jobs by index like the
    kernel, so equal schedules give bit-equal floats."""
    mk, tard, compl = 0, 0.0, 0.0
    for j in range(inst.n_jobs):
        c = int(start[j]) + int(inst.duration[j, assign[j]])
        mk = max(mk, c)
        if inst.due[j] != NO_DUE and c > inst.due[j]:
            tard += inst.weight[j] * (c - int(inst.due[j]))
        compl += inst.weight[j] * c
    return float(mk), tard, compl


def _mirrored(inst: Instance, horizon: int) -> Instance:
    """The batch seen backwards from `horizon` (t' = horizon - t): windows mirrored and cut at
    0 (empty ones dropped), successors as predecessors, no ready times."""
    windows = [sorted((max(horizon - b, 0), horizon - a) for a, b in ws if horizon - a > 0
                      and horizon - a > max(horizon - b, 0))
               for ws in _windows(inst)]
    ptr = np.zeros(inst.n_nodes + 1, dtype=np.int64)
    ptr[1:] = np.cumsum([len(w) for w in windows])
    return replace(inst, ready=np.zeros(inst.n_jobs, dtype=np.int64),
                   pred_ptr=inst.succ_ptr, pred_idx=inst.succ_idx, maint_ptr=ptr,
                   maint_start=np.array([a for w in windows for a, _ in w], dtype=np.int64),
                   maint_end=np.array([b for w in windows for _, b in w], dtype=np.int64))


def twin_justify(inst: Instance, assign: np.ndarray, order: np.ndarray | None = None,
                 rounds: int = 3) -> np.ndarray:
    """Forward-backward improvement: backward SGS on the mirrored batch (jobs by latest end
    first), forward SGS by earliest backward start; ties by job index; keep the
    lexicographically best schedule; stop once the makespan stops falling."""
    dur = inst.duration[np.arange(inst.n_jobs), assign].astype(np.int64)
    best = cur = twin_build(inst, assign, order)
    best_fit = twin_fitness(inst, assign, best)
    horizon = int(best_fit[0])
    for _ in range(rounds):
        end = cur + dur
        back_order = np.array(sorted(range(inst.n_jobs), key=lambda j: (-end[j], j)))
        back = horizon - twin_build(_mirrored(inst, horizon), assign, back_order) - dur
        fwd_order = np.array(sorted(range(inst.n_jobs), key=lambda j: (back[j], j)))
        cur = twin_build(inst, assign, fwd_order)
        fit = twin_fitness(inst, assign, cur)
        if fit < best_fit:
            best, best_fit = cur, fit
        if fit[0] >= horizon:
            break
        horizon = int(fit[0])
    return best
