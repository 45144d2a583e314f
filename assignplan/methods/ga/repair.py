"""Repair after variation: one 1 per row, only on an eligible node, overloaded nodes relieved."""

from __future__ import annotations

import bisect
from typing import Literal

import numpy as np
from numba import njit

from assignplan.instance import Instance
from assignplan.kernels import duration_of
from assignplan.methods.ga.encoding import EligibleIndex, Rows, job_share, node_load


def repair(rows: Rows, inst: Instance, index: EligibleIndex, horizon: int | None, *,
           fill: Literal["earliest", "random"], keep: Literal["random", "previous"],
           rng: np.random.Generator) -> np.ndarray:
    """int64[P, J]: a valid population from matrices that may hold 0 or several 1s per row.

    1. 1s on nodes that cannot hold the job are cleared.
    2. A row with several 1s keeps one: uniformly at random ("random") or its original 1
       ("previous", a random one if it had none).
    3. An empty row gets a node (`fill_rows`).
    4. Nodes whose work cannot fit before `horizon` shed jobs (`shed_overload`); None skips it.
    Idempotent: a valid population comes back unchanged unless step 4 can still move a job,
    and step 4 runs to a fixed point.
    """
    base = rows.base.copy()
    n_pop, n_jobs = base.shape
    jobs = np.broadcast_to(np.arange(n_jobs), base.shape)
    base[(base >= 0) & ~inst.elig.of(jobs, np.maximum(base, 0))] = -1
    extra = rows.extra[inst.elig.of(rows.extra[:, 1], rows.extra[:, 2])]
    assign = _keep_one(base, extra, keep=keep, rng=rng)
    assign = fill_rows(assign, inst, index, fill=fill, rng=rng)
    if horizon is not None:
        assign = shed_overload(assign, inst, index, horizon, rng=rng)
    return assign


def _keep_one(base: np.ndarray, extra: np.ndarray, *, keep: str,
              rng: np.random.Generator) -> np.ndarray:
    """int64[P, J]: base with each row that has extra 1s reduced to one chosen 1."""
    if len(extra) == 0:
        return base
    p, j = extra[:, 0], extra[:, 1]
    has_base = base[p, j] >= 0
    bp, bj = p[has_base], j[has_base]
    cand = np.concatenate([extra, np.stack([bp, bj, base[bp, bj]], axis=1)])
    key = rng.random(len(cand))
    if keep == "previous":  # the original 1 wins its row whenever it is still there
        key[len(extra):] = -1.0
    row = cand[:, 0] * base.shape[1] + cand[:, 1]
    first = np.lexsort((key, row))
    _, at = np.unique(row[first], return_index=True)
    chosen = cand[first[at]]
    out = base.copy()
    out[chosen[:, 0], chosen[:, 1]] = chosen[:, 2]
    return out


def fill_rows(assign: np.ndarray, inst: Instance, index: EligibleIndex, *,
              fill: Literal["earliest", "random"], rng: np.random.Generator) -> np.ndarray:
    """int64[P, J]: rows holding -1 get an eligible node.

    "random": uniformly among the eligible nodes. "earliest": the eligible node i minimising
    the estimated finish L_i + p_ji * share_ji (`encoding.node_load`; maintenance and waiting
    ignored: a cheap estimate), rows filled one by one in job order so each sees the others.
    """
    p_empty, j_empty = np.nonzero(assign < 0)
    if len(p_empty) == 0:
        return assign
    out = assign.copy()
    if fill == "random":
        out[p_empty, j_empty] = index.sample(j_empty, rng=rng)
        return out
    # an empty row is counted on its first eligible node, then taken off again
    placed = np.where(out >= 0, out, index.first()[None, :])
    load = node_load(inst, placed)
    load[p_empty, placed[p_empty, j_empty]] -= _work(inst, j_empty, placed[p_empty, j_empty])
    for p, j in zip(p_empty.tolist(), j_empty.tolist(), strict=True):
        nodes = index.nodes(j)
        add = _work(inst, np.full(len(nodes), j), nodes)
        k = int(np.argmin(load[p, nodes] + add))
        out[p, j] = nodes[k]
        load[p, nodes[k]] += add[k]
    return out


def _work(inst: Instance, jobs: np.ndarray, nodes: np.ndarray) -> np.ndarray:
    """float64: p_ji * share_ji, the minutes job j adds to node i's estimated finish."""
    return inst.duration_on(jobs, nodes) * job_share(inst, jobs, nodes)


def resource_work(inst: Instance, assign: np.ndarray) -> np.ndarray:
    """int64[P, N, 3]: W_pir = sum_{j: a_pj = i} d_jr * p_ji (resource-minutes per node)."""
    n_pop, n_jobs = assign.shape
    jobs = np.broadcast_to(np.arange(n_jobs), assign.shape)
    dur = inst.duration_on(jobs, assign).astype(np.int64)
    flat = (np.arange(n_pop)[:, None] * inst.n_nodes + assign).ravel()
    out = np.empty((n_pop, inst.n_nodes, 3), dtype=np.int64)
    for r in range(3):
        w = (inst.demand[jobs, r] * dur).ravel()
        out[:, :, r] = np.bincount(flat, weights=w, minlength=n_pop * inst.n_nodes).reshape(
            n_pop, inst.n_nodes)
    return out


def shed_overload(assign: np.ndarray, inst: Instance, index: EligibleIndex, horizon: int, *,
                  rng: np.random.Generator) -> np.ndarray:
    """int64[P, J]: jobs moved off nodes that cannot finish their work by `horizon`.

    Node i is overloaded when W_ir > cap_ir * A_i for some resource r (W from
    `resource_work`, A_i = `Instance.available_minutes`): its jobs then cannot all end by
    the horizon, whatever their order (work conservation), so the plan is already worse than
    one ending there. Its jobs, in random order, move to the eligible node k with room
    (W_k + d_j p_jk <= cap_k A_k for every r) and the lowest resulting max_r W_kr / (cap_kr A_k),
    until it fits. Passes repeat until no job can move (a fixed point: total excess over the
    limits strictly falls with each move).
    """
    limit = inst.capacity * inst.available_minutes(horizon)[:, None]  # int64[N, 3]
    work = resource_work(inst, assign)
    over = (work > limit[None]).any(axis=2)
    if not over.any():
        return assign
    out = assign.copy()
    scale = np.where(limit > 0, limit, 1).astype(np.float64)
    arrays = inst.arrays
    for p in np.flatnonzero(over.any(axis=1)).tolist():
        row, load = out[p], work[p]  # this individual's own rows: changed in place
        members = _jobs_by_node(row)
        moved = True
        while moved:
            moved = False
            for i in np.flatnonzero((load > limit).any(axis=1)).tolist():
                jobs = rng.permutation(np.array(members.get(i, []), dtype=np.int64))
                gone = _shed_node(arrays, jobs, row, load, i, limit, scale, index.job_class,
                                  index.ptr, index.idx)
                for j in jobs[:gone].tolist():
                    if row[j] != i:
                        bisect.insort(members.setdefault(int(row[j]), []), j)
                        moved = True
                members[i] = [j for j in members.get(i, []) if row[j] == i]
    return out


def _jobs_by_node(row: np.ndarray) -> dict[int, list[int]]:
    """node -> its jobs in one individual's assignment, ascending."""
    order = np.argsort(row, kind="stable")
    nodes, first = np.unique(row[order], return_index=True)
    return {int(n): part.tolist() for n, part in zip(nodes, np.split(order, first[1:]),
                                                    strict=True)}


@njit(cache=True)
def _shed_node(A, jobs, row, work, i, limit, scale, job_class, class_ptr, class_nodes):
    """Move jobs off node i, in the order of `jobs`, until it fits (see `shed_overload`);
    row and work (this individual's) change in place. Returns how many of `jobs` were
    looked at: the moved ones among them now have another node in `row`."""
    for q in range(jobs.shape[0]):
        j = jobs[q]
        c = job_class[j]
        best_k = -1
        best_fill = np.inf
        for x in range(class_ptr[c], class_ptr[c + 1]):
            k = class_nodes[x]
            if k == i:
                continue
            dur = duration_of(A, j, k)
            fits = True
            fill = -np.inf
            for r in range(3):
                after = work[k, r] + A.demand[j, r] * dur
                if after > limit[k, r]:
                    fits = False
                    break
                fill = max(fill, after / scale[k, r])
            if fits and fill < best_fill:
                best_k, best_fill = k, fill
        if best_k < 0:
            continue
        d_i, d_k = duration_of(A, j, i), duration_of(A, j, best_k)
        for r in range(3):
            work[i, r] -= A.demand[j, r] * d_i
            work[best_k, r] += A.demand[j, r] * d_k
        row[j] = best_k
        fits = True
        for r in range(3):
            if work[i, r] > limit[i, r]:
                fits = False
        if fits:
            return q + 1
    return jobs.shape[0]
