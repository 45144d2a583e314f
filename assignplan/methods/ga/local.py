"""Local improvement on the node that sets the makespan: move or swap its jobs away, or swap
two of its jobs in the decoding order, while it helps."""

from __future__ import annotations

from collections.abc import Callable, Iterator

import numpy as np

from assignplan.instance import Instance
from assignplan.methods.ga.encoding import EligibleIndex, job_share, node_load
from assignplan.methods.ga.order_keys import bottom_levels, orders_from_keys
from assignplan.methods.ga.selection import lex_less
from assignplan.schedule import build_schedule

Evaluate = Callable[[np.ndarray, np.ndarray], np.ndarray]
Key = Callable[[np.ndarray, np.ndarray], np.ndarray]  # (assign [P, J], fit [P, 3]) -> [P, C]
TARGETS = 3  # least-loaded destinations tried per job: wider scans rarely pay off per trial
BATCH = 8  # trial plans scored per compiled call (a few per thread, little wasted work)
EXCHANGES = 24  # packing exchanges tried first after each rebuild of the neighbourhood


def _released(inst: Instance, j: int, end: np.ndarray) -> int:
    """The earliest start job j's ready time and its predecessors' ends allow."""
    preds = inst.predecessors(j)
    return max(int(inst.ready[j]), int(end[preds].max()) if len(preds) else 0)


def critical_node(inst: Instance, assign: np.ndarray, start: np.ndarray,
                  end: np.ndarray) -> int:
    """The node whose capacity delays the critical path: from the job that ends last, step
    back to the predecessor whose end fixed its start, until a job started later than
    max(ready, predecessor ends), i.e. waited for its node; that node (or, if none waited,
    the last job's node)."""
    j = int(np.argmax(end))
    first = j
    while True:
        preds = inst.predecessors(j)
        free = _released(inst, j, end)
        if start[j] > free or not len(preds) or start[j] > int(end[preds].max()):
            break
        j = int(preds[np.argmax(end[preds])])
    return int(assign[j] if start[j] > free else assign[first])


def _neighbours(inst: Instance, index: EligibleIndex, assign: np.ndarray,
                order: np.ndarray, justify: bool, target: int | None = None
                ) -> Iterator[np.ndarray]:
    """Trial assignments int64[J], most promising first.

    c is the critical node (`critical_node`). Each job j on c is scored by the estimated
    relief of its best move, L_c - min_k (L_k + p_jk * share_jk) over its other eligible nodes
    (`encoding.node_load`): jobs that can go to a much lighter node come first (on a
    heterogeneous cluster these are the plain jobs crowding a special node). Per job: a move
    to each of its TARGETS lightest nodes k, each followed by swaps (`_swaps`).
    With a `target` finish (minutes, e.g. the lower bound), the packing exchanges of
    `_exchanges` come first.
    """
    start = build_schedule(inst, assign, order, justify=justify)
    end = start + inst.duration[np.arange(inst.n_jobs), assign]
    crit = critical_node(inst, assign, start, end)
    load = node_load(inst, assign[None])[0]
    if target is not None:
        yield from _exchanges(inst, index, assign, end, crit, load, target)
    moves = []
    for j in np.flatnonzero(assign == crit).tolist():
        nodes = index.nodes(j).astype(np.int64)
        nodes = nodes[nodes != crit]
        if len(nodes):
            est = load[nodes] + inst.duration[j, nodes] * job_share(
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
    return inst.duration[jobs, nodes] * job_share(inst, jobs, nodes)


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
    owners = np.flatnonzero((assign != crit) & inst.eligible[:, crit])
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
    others = np.flatnonzero((assign == k) & inst.eligible[:, crit])
    if len(others) == 0:
        return
    area = inst.duration[others, crit] * job_share(inst, others, np.full(len(others), crit))
    limit = inst.duration[j, crit] * job_share(inst, np.array([j]), np.array([crit]))[0]
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
            justify: bool = False, key: Key | None = None, target: int | None = None
            ) -> tuple[np.ndarray, np.ndarray, int]:
    """First-improvement descent from assign: int64[J] with fitness float64[3] (decoded in
    `order`: int64[J]).

    Trials are scored BATCH at a time through `evaluate`; the first one (in neighbour order)
    better than the current plan under `key` (default: the fitness itself, lexicographic; the
    engine passes its plateau tie-break, so a move that relieves one of several nodes ending
    at the makespan counts as progress) is taken and the neighbourhood rebuilt
    around it. Stops when `budget` trials are spent or no neighbour improves.
    `justify`: the critical node is read off the forward-backward improved schedule (the one
    the default scorer grades when `GAConfig.justify` is on).
    `target`: a finish no node needs to beat (the lower bound); turns on `_exchanges`.
    Returns new arrays (assign, fitness) and the number of trials scored.
    """
    best, best_fit, spent = assign.copy(), fit.copy(), 0
    best_key = best_fit if key is None else key(best[None], best_fit[None])[0]
    trials = _neighbours(inst, index, best, order, justify, target)
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
            trials = _neighbours(inst, index, best, order, justify, target)
    return best, best_fit, spent


def _order_neighbours(inst: Instance, assign: np.ndarray, keys: np.ndarray, order: np.ndarray,
                      justify: bool) -> Iterator[np.ndarray]:
    """Trial keys float64[J]: swap the priorities of two jobs on the critical node.

    Pseudo-hours q = hours * keys set the decoding order; trading q_a and q_b between jobs a
    and b (key_a = q_b / h_a, key_b = q_a / h_b) swaps their places among that node's jobs
    when they do not follow others. Pairs close in the current order come first (adjacent
    ones, then two apart, ...): small changes of the node's packing.
    """
    start = build_schedule(inst, assign, order, justify=justify)
    end = start + inst.duration[np.arange(inst.n_jobs), assign]
    crit = critical_node(inst, assign, start, end)
    yield from _promotions(inst, assign, start, end, keys)
    pos = np.empty(inst.n_jobs, dtype=np.int64)
    pos[order] = np.arange(inst.n_jobs)
    on = np.flatnonzero(assign == crit)
    on = on[np.argsort(pos[on], kind="stable")].tolist()
    q = inst.hours * keys
    for gap in range(1, len(on)):
        for x in range(len(on) - gap):
            a, b = on[x], on[x + gap]
            trial = keys.copy()
            trial[a], trial[b] = q[b] / inst.hours[a], q[a] / inst.hours[b]
            yield trial


def _critical_waiters(inst: Instance, start: np.ndarray, end: np.ndarray,
                      limit: int = 64) -> list[int]:
    """Jobs of the critical chains that waited for their node: from every job ending at the
    makespan, back through each predecessor whose end is the job's start (ties included:
    a gather waits for all its sweeps that end last), stopping at a job that started after
    max(ready, predecessor ends) (see `critical_node`). A last job that waited itself is
    not one: on its own node, putting it first only reorders that node (the swaps' work).
    At most `limit` jobs are visited."""
    last = np.flatnonzero(end == end.max()).tolist()
    todo, seen, waiters = list(last), set(last), []
    while todo and len(seen) <= limit:
        j = todo.pop()
        if start[j] > _released(inst, j, end):
            if j not in last:
                waiters.append(j)
            continue
        preds = inst.predecessors(j)
        for p in preds[end[preds] == start[j]].tolist():
            if p not in seen:
                seen.add(p)
                todo.append(p)
    return sorted(waiters)


def _promotions(inst: Instance, assign: np.ndarray, start: np.ndarray, end: np.ndarray,
                keys: np.ndarray) -> Iterator[np.ndarray]:
    """Trial keys float64[J] that decode each waiting job a of the critical chains
    (`_critical_waiters`) ahead of the jobs of its node that start before it: all of them,
    then the later half.

    A chain waits at a: a gathering job that needs a whole node, after sweeps placed late in
    the order, ends the plan hours after its inputs could have been done, and when several
    sweeps end last together every one of them has to move. Swaps of neighbours in the order
    (below) move one job one place at a time; this moves them all at once. Pseudo-hours
    q = hours * keys give bottom levels B; raising q_a by (max B over the jobs ahead of it)
    - B_a + a little puts B_a above them all, so a decodes first among them.
    """
    waiters = _critical_waiters(inst, start, end)
    if not waiters:
        return
    q = inst.hours * keys
    bottom = bottom_levels(inst, q[None])[0]
    for part in (0, 2):  # ahead of all earlier jobs on the node, then of the later half
        trial, moved = keys.copy(), False
        for a in waiters:
            ahead = np.flatnonzero((assign == assign[a]) & (start < start[a]))
            ahead = ahead[np.argsort(start[ahead], kind="stable")][len(ahead) // 2 if part else 0:]
            if not len(ahead):
                continue
            top = bottom[ahead].max()
            if top >= bottom[a]:
                trial[a] = (q[a] + top - bottom[a] + 1e-6 * max(1.0, top)) / inst.hours[a]
                moved = True
        if moved:
            yield trial


def improve_order(assign: np.ndarray, keys: np.ndarray, fit: np.ndarray, inst: Instance,
                  evaluate: Evaluate, budget: int, *, justify: bool,
                  key: Key | None = None) -> tuple[np.ndarray, np.ndarray, int]:
    """First-improvement descent over the decoding order of the critical node, assignment
    fixed: keys float64[J] (see `order_keys`) with fitness `fit`; neighbours from
    `_order_neighbours`, scored BATCH at a time, accepted when better under `key` (default:
    the fitness, lexicographic). Returns new (keys, fitness) and the trials scored."""
    best_keys, best_fit, spent = keys.copy(), fit.copy(), 0
    best_key = best_fit if key is None else key(assign[None], best_fit[None])[0]
    order = orders_from_keys(inst, best_keys[None])[0]
    trials = _order_neighbours(inst, assign, best_keys, order, justify)
    while spent < budget:
        batch = [t for _, t in zip(range(min(BATCH, budget - spent)), trials, strict=False)]
        if not batch:
            break
        pop = np.broadcast_to(assign, (len(batch), inst.n_jobs))
        scores = evaluate(pop, orders_from_keys(inst, np.stack(batch)))
        spent += len(batch)
        keyed = scores if key is None else key(pop, scores)
        better = np.flatnonzero(lex_less(keyed, best_key))
        if len(better):
            k = int(better[0])
            best_keys, best_fit, best_key = batch[k], scores[k].copy(), keyed[k].copy()
            order = orders_from_keys(inst, best_keys[None])[0]
            trials = _order_neighbours(inst, assign, best_keys, order, justify)
    return best_keys, best_fit, spent
