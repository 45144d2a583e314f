"""Provable lower bounds on the makespan (whole minutes) of any feasible plan of an instance,
and with them the bounds on the other two terms of the objective (`completion`)."""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import networkx as nx
import numpy as np

from assignplan.bounds.completion import completion_bound, tardiness_bound
from assignplan.bounds.configurations import configuration_bound
from assignplan.instance import RESOURCES, Instance

MAX_CLASSES = 300  # node-set classes examined beyond the whole cluster (largest load first)
MAX_CLIQUE_CLASSES = 40  # of those, the ones also searched for a clique and given `dff_work`
MAX_LP_CLASSES = 40  # node-set classes (heaviest first) given the configuration LP
MAX_LP_JOBS = 1_000  # larger sets of jobs are left to the other parts (LP time)
LP_MIN_GAIN = 0.001  # a class's LP search stops once it cannot lift the bound by more
DFF_K = 16  # u^(k) of `dff_work` for k = 1 .. DFF_K
DFF_THRESHOLDS = 12  # thresholds e of U^(e) tried by `dff_work`
_CHUNK_CELLS = 2_000_000  # job x node cells per vectorised block: bounds memory at ~16 MB/array
_BIG = np.iinfo(np.int64).max // 4
# Work and supply are float sums of up to ~1e14; a relative slack far below one minute of any
# class's supply keeps float noise from ever rejecting a makespan that is actually feasible.
_REL_SLACK = 1e-9


@dataclass(frozen=True)
class LowerBound:
    """Lower bounds of a batch, one per term of the objective: the makespan in minutes and the
    component each part of it came from (`value`, `parts`); the weighted tardiness and the
    weighted completion time in weighted minutes, the latter with its parts
    (`completion.completion_bound`)."""

    value: int
    parts: dict[str, int]
    tardiness: float = 0.0
    completion: float = 0.0
    completion_parts: dict[str, float] = field(default_factory=dict)


PART_NAMES = {  # one line each for tables and reports; the docstring below has the detail
    "job": "the longest single job",
    "critical_path": "the longest chain of follows",
    "cores": "total core work",
    "memory": "total memory work",
    "gpus": "total GPU work",
    "class_cores": "core work of jobs only some nodes can hold",
    "class_memory": "memory work of jobs only some nodes can hold",
    "class_gpus": "GPU work of jobs only some nodes can hold",
    "conflict": "jobs that can never share a node",
    "dff": "work with dual feasible functions",
    "clique": "pairwise-conflicting jobs",
    "configurations": "sets of jobs that fit a node together (LP)",
    "grid": "rounding to the batch's time grid",
    "pinned": "jobs already running (a replan)",
}


def binding_parts(parts: dict[str, int], value: int) -> list[str]:
    """The parts equal to `value`; "grid" only when it alone does (it rounds the others up, so
    it names no argument of its own otherwise); empty when a method proved a bound above
    every part (e.g. CP-SAT's)."""
    hit = [k for k, v in parts.items() if v == value]
    return [k for k in hit if k != "grid"] or hit


def lower_bound(inst: Instance, *, deadline: float | None = None) -> LowerBound:
    """The largest of several bounds, each valid for every feasible plan of `inst`.

    `deadline` (a `time.perf_counter()` reading): past it, the configuration LP of further
    node-set classes and the completion bound's flow LP are skipped (the parts it has are
    valid bounds all the same); the other parts are cheap and always computed. The bounds on
    weighted tardiness and weighted completion come from the same head times
    (`completion.tardiness_bound`, `completion.completion_bound`).

    - ``job``: max_j min_{i eligible} eft_i(ready_j, dur_ji), where eft_i(t, d) is the earliest
      end of a d-minute run starting at or after t on node i outside its maintenance.
    - ``critical_path``: the same along ``follows``: est_j = max(ready_j, max_p fin_p),
      fin_j = min_i eft_i(est_j, dur_ji); bound max_j fin_j (see `head_times`).
    - ``cores``/``memory``/``gpus``: total work over total supply (see `work_bound`).
    - ``class_cores``/``class_memory``/``class_gpus``: the same for the jobs that only a
      node set S can hold, on S alone.
    - ``conflict``: jobs that can never share a node, counted by pigeonhole (see
      `conflict_bound`).
    - ``dff``: the work bounds again, each job's demand first mapped by a dual feasible
      function (see `dff_work`), which counts jobs that cannot share a node as larger.
    - ``clique``: a set of pairwise-conflicting jobs (any two overflow some resource on every
      node that can hold them, e.g. whole-node jobs, or a memory-heavy job and a core-heavy
      one) shares its host nodes like P||Cmax machines: average load (see `clique_bound`).
    - ``configurations``: the configuration LP of the jobs only a node set can hold (the whole
      cluster included), solved only where it can beat the parts above (see
      `configurations.configuration_bound`).
    - ``grid``: the largest of the above rounded up to a multiple of g (see `time_grid`).
    """
    est, fin = head_times(inst)
    fin_ready = _earliest_finish(inst, np.arange(inst.n_jobs), inst.ready)
    parts = {"job": int(fin_ready.max()), "critical_path": int(fin.max())}
    ref = _reference_minutes(inst)
    classes = _node_set_classes(inst, ref)
    parts.update(_resource_bounds(inst, est, ref, classes))
    parts["configurations"] = _configuration_part(inst, est, ref, classes,
                                                  floor=max(parts.values()), deadline=deadline)
    g = time_grid(inst)
    parts["grid"] = -(-max(parts.values()) // g) * g
    completion, completion_parts = completion_bound(inst, est, fin, ref, classes,
                                                    deadline=deadline)
    return LowerBound(value=max(parts.values()), parts=parts,
                      tardiness=tardiness_bound(inst, fin), completion=completion,
                      completion_parts=completion_parts)


def time_grid(inst: Instance) -> int:
    """g = gcd of every eligible duration, ready time, maintenance and reservation end
    (minutes).

    Some optimal plan has a makespan that is a multiple of g: shift jobs one minute earlier
    while the plan stays feasible (no end grows). When no job can move, each start is 0, a
    ready time, a maintenance or reservation end, or the end of another job (a predecessor,
    or a job on the same node whose end frees the resource that blocks minute start - 1).
    By induction over start times every start is then a multiple of g, and so is every end,
    the makespan included. A lower bound B therefore rounds up to g * ceil(B / g).
    """
    offered = inst.class_speeds()[inst.elig.job_class]  # bool[J, S]: speeds a job can run at
    values = [inst.dur[offered].astype(np.int64), inst.ready, inst.maint_end, inst.res_end]
    return max(1, int(np.gcd.reduce(np.concatenate(values))))


# --------------------------------------------------------------------------- per job, per chain


def _class_nodes(inst: Instance) -> np.ndarray:
    """int64[C]: one node of each node class (`Instance.node_class`): nodes of a class have
    the same speed, capacity, tags and maintenance, so what holds for it holds for them."""
    _, first = np.unique(inst.node_class, return_index=True)
    return first.astype(np.int64)


def _maintenance_table(inst: Instance, nodes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """int64[len(nodes), K] window starts and ends of `nodes`, padded with windows that
    never overlap."""
    counts = np.diff(inst.maint_ptr)[nodes]
    width = int(counts.max()) if len(counts) else 0
    starts = np.full((len(nodes), width), _BIG, dtype=np.int64)
    ends = np.full((len(nodes), width), _BIG, dtype=np.int64)
    for r in np.flatnonzero(counts):
        lo, hi = inst.maint_ptr[nodes[r]], inst.maint_ptr[nodes[r] + 1]
        starts[r, : hi - lo] = inst.maint_start[lo:hi]
        ends[r, : hi - lo] = inst.maint_end[lo:hi]
    return starts, ends


def _earliest_finish(inst: Instance, jobs: np.ndarray, t0: np.ndarray,
                     table: tuple | None = None) -> np.ndarray:
    """int64[len(jobs)]: min over eligible nodes of the earliest end of each job from `t0`,
    computed once per node class (its nodes all give the same end).

    Windows are sorted and disjoint, so one pass in start order suffices: after a push to the
    end of window k, every earlier window ends before the new start.
    """
    reps = _class_nodes(inst)
    starts, ends = _maintenance_table(inst, reps) if table is None else table
    out = np.empty(len(jobs), dtype=np.int64)
    step = max(1, _CHUNK_CELLS // max(1, len(reps)))
    for lo in range(0, len(jobs), step):
        rows = jobs[lo : lo + step]
        dur = inst.duration_on(rows[:, None], reps[None, :]).astype(np.int64)
        t = np.broadcast_to(np.asarray(t0[lo : lo + step], dtype=np.int64)[:, None], dur.shape)
        for k in range(starts.shape[1]):
            hit = (t < ends[:, k]) & (starts[:, k] < t + dur)
            t = np.where(hit, ends[:, k], t)
        eligible = inst.elig.of(rows[:, None], reps[None, :])
        out[lo : lo + step] = np.where(eligible, t + dur, _BIG).min(axis=1)
    return out


def head_times(inst: Instance) -> tuple[np.ndarray, np.ndarray]:
    """Earliest possible start and end of every job, int64[J] each (the critical-path bound).

    est_j = max(ready_j, max_{p in follows(j)} fin_p);  fin_j = min_{i eligible} eft_i(est_j).

    In any feasible plan start_j >= est_j and end_j >= fin_j, by induction along a topological
    order: a job cannot start before its ready time nor before a predecessor ends, and eft_i is
    non-decreasing in its start argument. Jobs of one topological generation (networkx) have no
    follows among them, so each generation is computed as one vectorised block.
    """
    graph = nx.DiGraph()
    graph.add_nodes_from(range(inst.n_jobs))
    dst = np.repeat(np.arange(inst.n_jobs), np.diff(inst.pred_ptr))
    graph.add_edges_from(zip(inst.pred_idx.tolist(), dst.tolist(), strict=True))
    table = _maintenance_table(inst, _class_nodes(inst))
    est = inst.ready.astype(np.int64).copy()
    fin = np.zeros(inst.n_jobs, dtype=np.int64)
    for generation in nx.topological_generations(graph):
        gen = np.asarray(sorted(generation), dtype=np.int64)
        for j in gen:
            preds = inst.predecessors(int(j))
            if len(preds):
                est[j] = max(est[j], int(fin[preds].max()))
        fin[gen] = _earliest_finish(inst, gen, est[gen], table)
    return est, fin


# --------------------------------------------------------------------------- resources


def _reference_minutes(inst: Instance) -> np.ndarray:
    """float64[J]: min over eligible nodes i of duration_ji * speed_i (a job's run time in
    reference minutes: at least hours_j * 60), over the speeds its class's nodes offer."""
    work = inst.dur * inst.speeds[None, :]
    offered = inst.class_speeds()[inst.elig.job_class]
    return np.where(offered, work, np.inf).min(axis=1)


def _max_capacity(inst: Instance) -> np.ndarray:
    """int64[J, R]: the largest capacity of each resource among each job's eligible nodes."""
    e = inst.elig
    cls = np.repeat(np.arange(len(e.ok)), np.diff(e.ptr))
    per_class = np.full((len(e.ok), len(RESOURCES)), -1, dtype=np.int64)
    np.maximum.at(per_class, cls, inst.capacity[e.nodes])
    return per_class[e.job_class]


def _supply(inst: Instance, nodes: np.ndarray, start: int, cap: np.ndarray,
            reserved: bool = False):
    """(supply, total rate float64[R], last maintenance end or `start`) of `nodes`, where
    supply(t) -> float64[R] is sum_{i in nodes} cap_ir * speed_i * avail_i(t_r) for
    t int64[R] (one time per resource; a single time broadcasts).

    With `reserved`, each reservation's demand res_r * speed_i is taken off its interval
    too (capacity pinned jobs hold; they never meet a maintenance window and fit the node
    together, see `pinning`), so supply counts what is left for the jobs to plan."""
    rate = (cap[nodes] * inst.speed[nodes, None]).astype(np.float64)  # [n, R]
    win_node = np.repeat(np.arange(inst.n_nodes), np.diff(inst.maint_ptr))
    keep = np.isin(win_node, nodes) & (inst.maint_end > start)
    w_start = np.maximum(inst.maint_start[keep], start)
    w_end = inst.maint_end[keep]
    w_rate = (cap[win_node[keep]] * inst.speed[win_node[keep], None]).astype(float)
    if reserved:
        res_node = np.repeat(np.arange(inst.n_nodes), np.diff(inst.res_ptr))
        held = np.isin(res_node, nodes) & (inst.res_end > start)
        w_start = np.r_[w_start, np.maximum(inst.res_start[held], start)]
        w_end = np.r_[w_end, inst.res_end[held]]
        w_rate = np.concatenate([w_rate.reshape(-1, cap.shape[1]), (
            inst.res_demand[held] * inst.speed[res_node[held], None]).astype(float)])
    total_rate = rate.sum(axis=0)

    def supply(t: np.ndarray) -> np.ndarray:
        lost = np.clip(np.minimum(w_end[:, None], t[None, :]) - w_start[:, None], 0, None)
        return total_rate * np.maximum(0, t - start) - (w_rate * lost).sum(axis=0)

    return supply, total_rate, max(start, int(w_end.max()) if len(w_end) else start)


def work_bound(work: np.ndarray, nodes: np.ndarray, start: int, inst: Instance,
               capacity: np.ndarray | None = None) -> np.ndarray:
    """int64[R]: the smallest T with sum_{i in nodes} cap_ir * speed_i * avail_i(T) >= W_r.

    A job j on node i occupies d_jr resource units for dur_ji minutes, all inside
    [start, T) minus node i's maintenance, where `start` <= every counted job's est. With
    avail_i(T) = (T - start) - (maintenance minutes of node i inside [start, T)) the load
    on node i satisfies sum_j d_jr * dur_ji <= cap_ir * avail_i(T). Multiplying by speed_i and
    using dur_ji * speed_i >= ref_j = min_{i' eligible} dur_ji' * speed_i' (>= hours_j * 60):
        W_r = sum_j d_jr * ref_j <= sum_i cap_ir * speed_i * avail_i(T).
    The right side is non-decreasing in T, so the smallest such integer T is found by
    bisection. A resource without work gives 0. `capacity` (int64[N, R], default
    inst.capacity) replaces cap_ir in the supply, for work measured in other units (`dff_work`).
    In resource units (the default) the reservations' share comes off the supply: the
    counted jobs share a node only with what is left, cap_ir - res_ir(t).
    """
    supply, total_rate, last = _supply(inst, nodes, start,
                                       inst.capacity if capacity is None else capacity,
                                       reserved=capacity is None)
    need = np.asarray(work, dtype=np.float64) * (1.0 - _REL_SLACK)
    active = need > 0
    safe_rate = np.where(total_rate > 0, total_rate, 1.0)
    lo = np.full(len(need), start, dtype=np.int64)  # supply(lo) < need
    hi = last + np.ceil(need / safe_rate).astype(np.int64) + 1  # supply(hi) >= need
    while np.any(active & (hi - lo > 1)):
        mid = (lo + hi) // 2
        ok = supply(mid) >= need
        hi = np.where(active & ok, mid, hi)
        lo = np.where(active & ~ok, mid, lo)
    return np.where(active, hi, 0)


def dff_work(demand: np.ndarray, ref: np.ndarray, cap: int) -> float:
    """max over a family of dual feasible functions f of sum_j f(d_j / cap) * cap * ref_j.

    A dual feasible function f: [0, 1] -> [0, 1] keeps sizes that add up to at most 1 adding
    up to at most 1. The jobs running at any minute on a node whose capacity is at most
    `cap` use at most cap, so their transformed demands f(d / cap) * cap add up to at most
    cap: the transformed work obeys the supply inequality of `work_bound` with cap on every
    node that has any of the resource, and it can be larger than the plain work (3-GPU jobs
    on 4-GPU nodes never run two at once, and u^(1) counts each as a whole node).
    Family (S. P. Fekete and J. Schepers, "New classes of fast lower bounds for bin packing
    problems", Math. Programming 91, 2001): the identity;
        u^(k)(x) = x if (k+1)x is an integer, else floor((k+1)x) / k,   k = 1 .. DFF_K;
        U^(e)(x) = 1 if x > 1 - e;  x if e <= x <= 1 - e;  0 if x < e,  0 < e <= 1/2;
    and u^(k) o U^(e) (a composition of dual feasible functions is one). Thresholds e are
    demands of the batch (at most DFF_THRESHOLDS of them, spread over their range); all in
    integer demand units, so (k+1)x is tested exactly.
    """
    d = np.asarray(demand, dtype=np.int64)
    if cap <= 0 or len(d) == 0:
        return 0.0
    small = np.unique(d[(d > 0) & (2 * d <= cap)])
    if len(small) > DFF_THRESHOLDS:
        small = small[np.linspace(0, len(small) - 1, DFF_THRESHOLDS).astype(np.int64)]
    t = np.concatenate(([0], small))[:, None]  # threshold 0: no U^(e) first
    y = np.where(d[None, :] > cap - t, cap, np.where(d[None, :] < t, 0, d[None, :]))
    ref = np.asarray(ref, dtype=np.float64)
    best = float((y @ ref).max())
    for k in range(1, DFF_K + 1):
        up = (k + 1) * y
        val = np.where(up % cap == 0, y, (up // cap) * (cap / k))
        best = max(best, float((val @ ref).max()))
    return best


def conflict_bound(p: np.ndarray, est: np.ndarray, n_hosts: int) -> int:
    """Pigeonhole bound for jobs no two of which can ever run on one node at the same time.

    Let B be such jobs (for one resource r, every job of B needs more than half of r on every
    node that can hold it, so any two exceed cap_ir together), all hostable only on a set of
    K = `n_hosts` nodes, with minimal durations sorted p_1 >= p_2 >= ... (`p`) and head times
    `est`. For q >= 1 with |B| >= qK + 1: among the qK + 1 longest jobs some node runs at
    least q + 1 (pigeonhole), one after another, the first not before min est over them, so
        T >= min_{k <= qK+1} est_k + (p_{qK-q+1} + ... + p_{qK+1})
    (the q + 1 smallest of the qK + 1 longest). q = 1 is the classic P||Cmax bound
    p_K + p_{K+1} for whole-node jobs on K identical nodes.
    """
    n = len(p)
    if n_hosts <= 0 or n <= n_hosts:
        return 0
    order = np.lexsort((est, -p))
    p, est = p[order].astype(np.int64), est[order]
    cs = np.concatenate(([0], np.cumsum(p)))
    first = np.minimum.accumulate(est)
    q = np.arange(1, (n - 1) // n_hosts + 1)
    top = q * n_hosts + 1
    return int(np.max(first[top - 1] + cs[top] - cs[top - q - 1]))


def greedy_clique(demand: np.ndarray, p: np.ndarray, capmax: np.ndarray) -> np.ndarray:
    """Indices of a set of jobs no two of which fit on one node together (greedy, longest first).

    Job k joins the set B when, for some resource r, d_kr > capmax_r - min_{j in B} d_jr: then
    d_kr + d_jr > capmax_r >= cap_ir for every member j and every node i (capmax is the largest
    capacity among the nodes concerned), so k conflicts with all of B on r. Keeping the running
    minimum per resource makes each test O(R). Any such set is valid; the candidates are
    limited to the jobs needing more than half of some resource (two of those always conflict
    on it) only to keep the search short.
    """
    candidates = np.flatnonzero((2 * demand > capmax).any(axis=1))
    candidates = candidates[np.argsort(-p[candidates], kind="stable")]
    members: list[int] = []
    low = [None] * demand.shape[1]
    cap = capmax.tolist()
    for k in candidates.tolist():
        d = demand[k].tolist()
        if members and not any(d[r] > cap[r] - low[r] for r in range(len(d))):
            continue
        members.append(k)
        low = [d[r] if low[r] is None else min(low[r], d[r]) for r in range(len(d))]
    return np.array(members, dtype=np.int64)


def clique_bound(p: np.ndarray, est: np.ndarray, n_hosts: int) -> int:
    """Average-load bound for pairwise-conflicting jobs on their K = `n_hosts` host nodes.

    No two of them ever run at once on one node, so each node runs its share one after
    another, the first not before min est; the node loads add up to at least sum p (p: each
    job's fastest duration), so the largest is at least ceil(sum p / K):
        T >= min_j est_j + ceil(sum_j p_j / K)
    (the P||Cmax bound sum p / m, here over the jobs' own hosts; maintenance only adds).
    """
    if n_hosts <= 0 or len(p) == 0:
        return 0
    return int(est.min()) + int(-(-int(p.sum()) // n_hosts))


def _unique_node_sets(inst: Instance) -> tuple[np.ndarray, np.ndarray]:
    """Distinct eligibility rows (the node sets of the job classes) as packed uint64 words,
    in the rows' byte order, and each job's row index."""
    e = inst.elig
    packed = np.packbits(e.ok[:, e.node_type], axis=1)
    pad = (-packed.shape[1]) % 8
    packed = np.ascontiguousarray(np.pad(packed, ((0, 0), (0, pad)))).view(np.uint64)
    rows, inverse = np.unique(packed, axis=0, return_inverse=True)
    return rows, inverse.reshape(-1)[e.job_class]


def _node_set_classes(inst: Instance, ref: np.ndarray):
    """Distinct eligibility rows (packed), each job's row, the rows' node masks (bool[rows, N]),
    their reference work (float[rows, R]), and the partial rows (not every node) to examine,
    heaviest load per unit of supply first, at most MAX_CLASSES."""
    rows, inverse = _unique_node_sets(inst)
    row_work = np.zeros((len(rows), len(RESOURCES)))
    np.add.at(row_work, inverse, inst.demand * ref[:, None])
    row_nodes = np.unpackbits(rows.view(np.uint8), axis=1, count=inst.n_nodes).astype(bool)
    rate = (inst.capacity * inst.speed[:, None]).astype(np.float64)
    row_rate = row_nodes.astype(np.float64) @ rate
    with np.errstate(divide="ignore", invalid="ignore"):
        score = np.nan_to_num(row_work / row_rate, nan=0.0, posinf=0.0).max(axis=1)
    partial = ~row_nodes.all(axis=1)
    classes = [c for c in np.argsort(-score, kind="stable") if partial[c]][:MAX_CLASSES]
    return rows, inverse, row_nodes, row_work, classes


def _rows_inside(rows: np.ndarray, c) -> np.ndarray:
    """bool[rows]: the rows whose node set lies inside class c's (every row for c = None);
    indexed by a job's row, the jobs only c's nodes can hold."""
    if c is None:
        return np.ones(len(rows), dtype=bool)
    return ~np.any(rows & ~rows[c], axis=1)


def _resource_bounds(inst: Instance, est: np.ndarray, ref: np.ndarray,
                     node_set_classes: tuple) -> dict[str, int]:
    """Work bounds on the whole cluster and per node-set class, and the conflict bound
    (`ref`: reference minutes per job; `node_set_classes`: from `_node_set_classes`)."""
    mindur = inst.min_duration()
    big = 2 * inst.demand > _max_capacity(inst)  # [J, R] never two on one node at once
    rows, inverse, row_nodes, row_work, classes = node_set_classes

    out = dict.fromkeys(RESOURCES, 0)
    out.update({f"class_{name}": 0 for name in RESOURCES})
    out["conflict"] = 0
    out["clique"] = 0
    out["dff"] = 0
    all_nodes = np.arange(inst.n_nodes)
    for label, c in [("", None)] + [("class_", c) for c in classes]:
        nodes = all_nodes if c is None else np.flatnonzero(row_nodes[c])
        members = _rows_inside(rows, c)
        jobs = members[inverse]
        w = work_bound(row_work[members].sum(axis=0), nodes, int(est[jobs].min()), inst)
        for r, name in enumerate(RESOURCES):
            out[label + name] = max(out[label + name], int(w[r]))
            chosen = jobs & big[:, r]
            if chosen.any():
                hosts = int(row_nodes[np.unique(inverse[chosen])].any(axis=0).sum())
                b = conflict_bound(mindur[chosen], est[chosen], hosts)
                out["conflict"] = max(out["conflict"], b)
        if c is None or c in classes[:MAX_CLIQUE_CLASSES]:
            out["dff"] = max(out["dff"], _dff_part(inst, jobs, nodes, ref, int(est[jobs].min())))
            out["clique"] = max(out["clique"], _clique_part(inst, np.flatnonzero(jobs), nodes,
                                                            mindur, est, inverse, row_nodes))
    return out


def _dff_part(inst: Instance, jobs: np.ndarray, nodes: np.ndarray, ref: np.ndarray,
              start: int) -> int:
    """`work_bound` of the `dff_work` of the jobs (bool[J]) on `nodes`, best resource."""
    best = 0
    for r in range(len(RESOURCES)):
        cap = int(inst.capacity[nodes, r].max())
        use = jobs & (inst.demand[:, r] > 0)
        if cap <= 0 or not use.any():
            continue
        work = np.zeros(len(RESOURCES))
        work[r] = dff_work(inst.demand[use, r], ref[use], cap)
        level = np.where(inst.capacity > 0, cap, 0)  # cap on every node that has any of r
        best = max(best, int(work_bound(work, nodes, start, inst, capacity=level)[r]))
    return best


def _clique_part(inst: Instance, jobs: np.ndarray, nodes: np.ndarray, mindur: np.ndarray,
                 est: np.ndarray, inverse: np.ndarray, row_nodes: np.ndarray) -> int:
    """`clique_bound` and `conflict_bound` over a greedy clique of `jobs` (hosted in `nodes`)."""
    if len(jobs) < 2:
        return 0
    capmax = inst.capacity[nodes].max(axis=0)
    clique = jobs[greedy_clique(inst.demand[jobs], mindur[jobs], capmax)]
    if len(clique) < 2:
        return 0
    hosts = int(row_nodes[np.unique(inverse[clique])].any(axis=0).sum())
    return max(clique_bound(mindur[clique], est[clique], hosts),
               conflict_bound(mindur[clique], est[clique], hosts))


def _node_time(inst: Instance, nodes: np.ndarray, start: int, t: int) -> float:
    """sum_{i in nodes} speed_i * avail_i(t): the reference minutes `nodes` offer in [start, t)."""
    supply, _, _ = _supply(inst, nodes, start, np.ones_like(inst.capacity))
    return float(supply(np.array([t]))[0])


def _configuration_part(inst: Instance, est: np.ndarray, ref: np.ndarray,
                        node_set_classes: tuple, floor: int,
                        deadline: float | None = None) -> int:
    """`work_bound` of the configuration LP of each class's jobs on its nodes.

    At any moment a node runs a set of the class's jobs that fits its capacity, so the LP's
    node time z (in reference minutes, over configurations that fit the class's largest
    capacity per resource, a relaxation) is at most sum_i speed_i * avail_i(T). The search
    for a class stops as soon as its LP cannot lift the bound past `floor` (the best part so
    far) by more than LP_MIN_GAIN of it: the last fraction of a percent of a column
    generation's tail costs most of its rounds.
    """
    rows, inverse, row_nodes, _, classes = node_set_classes
    ones = np.ones_like(inst.capacity)
    best = 0
    for c in [None] + classes[:MAX_LP_CLASSES]:
        if deadline is not None and time.perf_counter() >= deadline:
            break
        nodes = np.arange(inst.n_nodes) if c is None else np.flatnonzero(row_nodes[c])
        jobs = np.flatnonzero(_rows_inside(rows, c)[inverse])
        if not 2 <= len(jobs) <= MAX_LP_JOBS:
            continue
        start = int(est[jobs].min())
        target = max(floor, best)
        target += max(1, int(LP_MIN_GAIN * target))
        z = configuration_bound(ref[jobs], inst.demand[jobs], inst.capacity[nodes].max(axis=0),
                                give_up_below=_node_time(inst, nodes, start, target))
        if z > 0:
            work = np.zeros(len(RESOURCES))
            work[0] = z
            best = max(best, int(work_bound(work, nodes, start, inst, capacity=ones)[0]))
    return best
