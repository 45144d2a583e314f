"""Local moves off the node that delays the critical chain: move or swap its jobs away, or
trade a late job for smaller ones on a node with room, while it helps (first improvement)."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from assignplan.instance import Instance
from assignplan.methods.ga.critical import critical_node
from assignplan.methods.ga.encoding import EligibleIndex, job_share, node_load
from assignplan.methods.ga.population import Evaluate, Key
from assignplan.methods.ga.selection import lex_less
from assignplan.priority import DEFAULT, Priority
from assignplan.schedule import build_schedule

TARGETS = 3  # least-loaded destinations tried per job: wider scans rarely pay off per trial
BATCH = 8  # trial plans scored per compiled call (a few per thread, little wasted work)
EXCHANGES = 24  # packing exchanges tried first after each rebuild of the neighbourhood


def _neighbours(inst: Instance, index: EligibleIndex, assign: np.ndarray,
                order: np.ndarray, justify: bool, target: int | None = None,
                priority: Priority = DEFAULT) -> Iterator[np.ndarray]:
    """Trial assignments int64[J], most promising first.

    c is the critical node (`critical_node`). Each job j on c is scored by the estimated
    relief of its best move, L_c - min_k (L_k + p_jk * share_jk) over its other eligible nodes
    (`encoding.node_load`): jobs that can go to a much lighter node come first (on a
    heterogeneous cluster these are the plain jobs crowding a special node). Per job: a move
    to each of its TARGETS lightest nodes k, each followed by swaps (`_swaps`).
    With a `target` finish (minutes, e.g. the lower bound), the packing exchanges of
    `_exchanges` come first.
    """
    start = build_schedule(inst, assign, order, justify=justify, priority=priority)
    end = inst.end_times(assign, start)
    crit = critical_node(inst, assign, start, end)
    load = node_load(inst, assign[None])[0]
    if target is not None:
        yield from _exchanges(inst, index, assign, end, crit, load, target)
    moves = []
    for j in np.flatnonzero(assign == crit).tolist():
        nodes = index.nodes(j).astype(np.int64)
        nodes = nodes[nodes != crit]
        if len(nodes):
            est = load[nodes] + inst.duration_on(j, nodes) * job_share(
                inst, np.full(len(nodes), j), nodes)
            pick = np.argsort(est, kind="stable")[:TARGETS]
            moves.append((float(est[pick[0]]), j, nodes[pick].tolist()))
    for _, j, targets in sorted(moves):
        for k in targets:
            trial = assign.copy()
            trial[j] = k
            yield trial
            yield from _swaps(inst, assign, trial, j, k, crit)


def _area(inst: Instance, jobs: np.ndarray, nodes: np.ndarray) -> np.ndarray:
    """float64[...]: p_ji * share_ji, job j's estimated use of node i (minutes of the node)."""
    return inst.duration_on(jobs, nodes) * job_share(inst, jobs, nodes)


def _exchanges(inst: Instance, index: EligibleIndex, assign: np.ndarray, end: np.ndarray,
               crit: int, load: np.ndarray, target: int) -> list[np.ndarray]:
    """Up to EXCHANGES trial assignments int64[J] that take a job j ending at the makespan
    off the critical node c into another node k's room, tightest fit first.

    Room is estimated from the loads L (`encoding.node_load`): j moves to k alone when
    L_k + a_jk <= target, or in exchange for one or two jobs o of k with smaller area
    (a = duration x share), which go to c, when L_k + a_jk - sum a_ok <= target. Ranked by
    the slack left on k, least first: fuller nodes leave less work over the first layer.
    Falkenauer's dominance-based local step of the grouping GA (replace items of a bin by
    fewer, larger ones that fill it better; J. Heuristics 2, 1996, from memory), after
    Martello & Toth's reduction (Knapsack Problems, Wiley 1990, from memory).
    """
    late = np.flatnonzero((assign == crit) & (end == end.max()))
    owners = np.flatnonzero((assign != crit) & inst.elig.of(np.arange(inst.n_jobs), crit))
    back = _area(inst, owners, np.full(len(owners), crit))
    own = _area(inst, owners, assign[owners])
    by_node: dict[int, list[int]] = {}
    for r, i in enumerate(assign[owners].tolist()):
        by_node.setdefault(i, []).append(r)
    found: list[tuple[float, int, int, tuple[int, ...]]] = []
    for j in late.tolist():
        nodes = index.nodes(j).astype(np.int64)
        nodes = nodes[nodes != crit]
        room = target - load[nodes] - _area(inst, np.full(len(nodes), j), nodes)
        for k, slack in zip(nodes.tolist(), room.tolist(), strict=True):
            a_j = target - load[k] - slack
            if slack >= 0:
                found.append((slack, j, k, ()))
            rows = by_node.get(k, [])
            for x, r in enumerate(rows):
                if own[r] < a_j and back[r] < a_j and slack + own[r] >= 0:
                    found.append((slack + own[r], j, k, (int(owners[r]),)))
                for r2 in rows[x + 1 :]:
                    two = own[r] + own[r2]
                    if two < a_j and back[r] + back[r2] < a_j and slack + two >= 0:
                        found.append((slack + two, j, k, (int(owners[r]), int(owners[r2]))))
    trials = []
    for _, j, k, group in sorted(found)[:EXCHANGES]:
        trial = assign.copy()
        trial[j] = k
        trial[list(group)] = crit
        trials.append(trial)
    return trials


def _swaps(inst: Instance, assign: np.ndarray, moved: np.ndarray, j: int, k: int,
           crit: int) -> Iterator[np.ndarray]:
    """After job j moved from crit to k: bring back to crit one or two jobs of k whose area
    on crit (duration x `job_share`) is below j's: the smallest one, the one closest below
    j's area, and the pair closest below it (the smallest change of both loads).

    Area, not duration, because on a packing-like node (equal durations, different core
    counts) a smaller job is a narrower one. A Martello & Toth style item exchange (from
    memory: S. Martello, P. Toth, Knapsack Problems, Wiley 1990, the dominance-based
    reduction), as Falkenauer's grouping GA uses it (J. Heuristics 2, 1996).
    """
    others = np.flatnonzero((assign == k) & inst.elig.of(np.arange(inst.n_jobs), crit))
    if len(others) == 0:
        return
    area = inst.duration_on(others, crit) * job_share(inst, others, np.full(len(others), crit))
    limit = inst.duration_on(j, crit) * job_share(inst, np.array([j]), np.array([crit]))[0]
    below = area < limit
    others, area = others[below], area[below]
    picks: list[tuple[int, ...]] = []
    if len(others):
        picks += [(int(others[np.argmin(area)]),), (int(others[np.argmax(area)]),)]
    if len(others) >= 2:
        pair = area[:, None] + area[None, :]
        pair[np.tril_indices(len(others))] = np.inf
        pair[pair >= limit] = np.inf
        a, b = np.unravel_index(np.argmin(np.where(np.isinf(pair), np.inf, limit - pair)),
                                pair.shape)
        if np.isfinite(pair[a, b]):
            picks.append((int(others[a]), int(others[b])))
    for group in dict.fromkeys(picks):
        trial = moved.copy()
        trial[list(group)] = crit
        yield trial


def improve(assign: np.ndarray, fit: np.ndarray, inst: Instance, index: EligibleIndex,
            order: np.ndarray, evaluate: Evaluate, budget: int, *,
            justify: bool = False, key: Key | None = None, target: int | None = None,
            priority: Priority = DEFAULT) -> tuple[np.ndarray, np.ndarray, int]:
    """First-improvement descent from assign: int64[J] with fitness float64[3] (decoded in
    `order`: int64[J]).

    Trials are scored BATCH at a time through `evaluate`; the first one (in neighbour order)
    better than the current plan under `key` (default: the fitness itself, lexicographic; the
    engine passes its plateau tie-break, so a move that relieves one of several nodes ending
    at the makespan counts as progress) is taken and the neighbourhood rebuilt
    around it. Stops when `budget` trials are spent or no neighbour improves.
    `justify`: the critical node is read off the forward-backward improved schedule (the one
    the default scorer grades when `improvement.justify` is on, under `priority`).
    `target`: a finish no node needs to beat (the lower bound); turns on `_exchanges`.
    Returns new arrays (assign, fitness) and the number of trials scored.
    """
    best, best_fit, spent = assign.copy(), fit.copy(), 0
    best_key = best_fit if key is None else key(best[None], best_fit[None])[0]
    trials = _neighbours(inst, index, best, order, justify, target, priority)
    while spent < budget:
        batch = [t for _, t in zip(range(min(BATCH, budget - spent)), trials, strict=False)]
        if not batch:
            break
        scores = evaluate(np.stack(batch), order)
        spent += len(batch)
        keys = scores if key is None else key(np.stack(batch), scores)
        better = np.flatnonzero(lex_less(keys, best_key))
        if len(better):
            k = int(better[0])
            best, best_fit, best_key = batch[k], scores[k].copy(), keys[k].copy()
            trials = _neighbours(inst, index, best, order, justify, target, priority)
    return best, best_fit, spent


