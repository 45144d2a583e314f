"""Lower bounds on the objective's second and third terms: weighted tardiness and weighted
completion time, from the head times and the reference work of the makespan bound."""

from __future__ import annotations

import time

import numpy as np
from ortools.graph.python import min_cost_flow

from assignplan.bounds.fluid import wspt_busy_times
from assignplan.instance import NO_DUE, RESOURCES, Instance

COMPLETION_PART_NAMES = {  # a few words each for tables and reports
    "alone": "each job alone",
    "fluid": "the cluster pooled (Smith's rule)",
    "class_fluid": "a node class pooled",
    "rate_flow": "the cluster pooled, rates capped",
}
MAX_FLUID_CLASSES = 12  # node-set classes (heaviest first) given their own fluid bound
FLOW_PIECES = 3  # tangent points of a job's own cost in a slot (see `_solve_flow`)
FLOW_MAX_SLOTS = 192  # capacity slots of the flow LP
FLOW_MIN_SLOTS = 24  # fewer than this (many distinct jobs): the LP is left out
FLOW_MAX_ARCS = 300_000  # arcs of the flow LP: measured 0.1-0.4 s on 1,200 jobs
_INT_RANGE = float(2**30)  # integer supplies and unit costs of the flow LP stay below this
# Float sums of up to ~1e10 weighted minutes: a relative slack far below a weighted minute
# keeps rounding noise from ever lifting a bound above a plan that meets it.
_REL_SLACK = 1e-9


def tardiness_bound(inst: Instance, fin: np.ndarray) -> float:
    """sum_j w_j max(0, fin_j - due_j) over the jobs with a due time (weighted minutes).

    fin_j (`makespan.head_times`) is the earliest end of job j in any feasible plan, so each
    term is at most job j's tardiness in any plan: zero unless a job cannot meet its due time
    even alone on the cluster.
    """
    has_due = inst.due != NO_DUE
    late = np.where(has_due, np.maximum(0, fin - np.where(has_due, inst.due, 0)), 0)
    return float(np.dot(inst.weight, late))


def completion_bound(inst: Instance, est: np.ndarray, fin: np.ndarray, ref: np.ndarray,
                     classes: tuple, *, deadline: float | None = None
                     ) -> tuple[float, dict[str, float]]:
    """(bound, parts) on sum_j w_j C_j in weighted minutes: the largest part.

    est/fin: head times (`makespan.head_times`); ref: float64[J] reference minutes
    min_{i eligible} dur_ji * speed_i; classes: `makespan._node_set_classes`. `deadline` (a
    `time.perf_counter()` reading): past it the flow LP is skipped.

    - ``alone``: sum_j w_j fin_j, since C_j >= fin_j in every plan.
    - ``fluid``: the mean-busy-time relaxation on the whole cluster, the best resource
      (`fluid_part`).
    - ``class_fluid``: the same for the jobs only a node set S can hold, on S's supply, plus
      ``alone`` for the others; the best of the MAX_FLUID_CLASSES heaviest sets (only when
      some jobs cannot run everywhere).
    - ``rate_flow``: the relaxation again with each job's rate capped by what one node can
      give it, solved as a min-cost flow (`rate_flow_part`), on the resource of the best
      ``fluid`` (left out when too big for a fraction of a second, or past `deadline`).
    Each part bounds the sum over a partition of the jobs by a bound per block, so it is
    valid whichever block each job falls in.
    """
    w = inst.weight
    pmin = inst.min_duration().astype(np.float64)
    alone = w * fin
    parts = {"alone": float(alone.sum())}
    all_nodes = np.arange(inst.n_nodes)
    everyone = np.ones(inst.n_jobs, dtype=bool)
    fluid = [fluid_part(inst, everyone, all_nodes, r, est, ref, pmin, alone)
             for r in range(len(RESOURCES))]
    parts["fluid"] = max(fluid)
    needed = [r for r in range(len(RESOURCES)) if (inst.demand[:, r] > 0).any()]
    best_r = max(needed, key=lambda r: fluid[r])
    rows, inverse, row_nodes, _, order = classes
    for c in order[:MAX_FLUID_CLASSES]:
        inside = (~np.any(rows & ~rows[c], axis=1))[inverse]
        nodes = np.flatnonzero(row_nodes[c])
        for r in range(len(RESOURCES)):
            value = fluid_part(inst, inside, nodes, r, est, ref, pmin, alone)
            parts["class_fluid"] = max(parts.get("class_fluid", 0.0),
                                       value + float(alone[~inside].sum()))
    if deadline is None or time.perf_counter() < deadline:
        flow = rate_flow_part(inst, best_r, est, ref, pmin, alone, _max_speed(inst, classes))
        if flow > 0:
            parts["rate_flow"] = flow
    parts = {k: v * (1.0 - _REL_SLACK) for k, v in parts.items()}
    return max(parts.values()), parts


# --------------------------------------------------------------------------- the pooled resource


def pooled_rate(inst: Instance, nodes: np.ndarray, r: int) -> tuple[np.ndarray, np.ndarray]:
    """(cap_t float64[K], cap_rate float64[K]): sum_{i in nodes} cap_ir * speed_i over the nodes
    not in maintenance, on [cap_t[k], cap_t[k+1]) from minute 0, the last rate forever.

    A node's windows are merged first: widened to whole minutes two of them may overlap,
    and a minute lost twice would understate the supply (and overstate the bound).
    """
    rate = inst.capacity[:, r] * inst.speed
    times, deltas = [0.0], [float(rate[nodes].sum())]
    for i in nodes.tolist():
        lo, hi = inst.maint_ptr[i], inst.maint_ptr[i + 1]
        merged: list[list[int]] = []
        for a, b in sorted(zip(inst.maint_start[lo:hi].tolist(), inst.maint_end[lo:hi].tolist(),
                               strict=True)):
            a = max(a, 0)
            if b <= a:
                continue
            if merged and a <= merged[-1][1]:
                merged[-1][1] = max(merged[-1][1], b)
            else:
                merged.append([a, b])
        for a, b in merged:
            times += [float(a), float(b)]
            deltas += [-float(rate[i]), float(rate[i])]
    t, d = np.asarray(times), np.asarray(deltas)
    cap_t, at = np.unique(t, return_inverse=True)
    step = np.bincount(at, weights=d, minlength=len(cap_t))
    return cap_t, np.maximum(np.cumsum(step), 0.0)


def _supply_between(cap_t: np.ndarray, cap_rate: np.ndarray, a: np.ndarray,
                    b: np.ndarray) -> np.ndarray:
    """float64[...]: integral of the pooled rate over [a, b) (elementwise, b >= a >= 0)."""
    cum = np.concatenate(([0.0], np.cumsum(cap_rate[:-1] * np.diff(cap_t))))

    def upto(t: np.ndarray) -> np.ndarray:
        k = np.searchsorted(cap_t, t, side="right") - 1
        return cum[k] + cap_rate[k] * (t - cap_t[k])

    return upto(b) - upto(a)


def fluid_part(inst: Instance, jobs: np.ndarray, nodes: np.ndarray, r: int, est: np.ndarray,
               ref: np.ndarray, pmin: np.ndarray, alone: np.ndarray) -> float:
    """The mean-busy-time bound of the jobs (bool[J]) that need resource r, on `nodes`'
    pooled supply of r; `alone` (w_j fin_j) for the jobs of `jobs` that do not need r.

    Proof sketch. Let job j run on node i from S_j for p_ji minutes at rate d_jr * speed_i
    in reference units of r (a node delivers cap_ir * speed_i of them per minute outside its
    maintenance, so all running jobs together never take more than the pooled rate R(t) of
    `pooled_rate`). Keep only the first e_j = d_jr * ref_j units (ref_j <= p_ji * speed_i):
    they lie in [S_j, S_j + ref_j / speed_i), S_j >= est_j, so their mean time M'_j is at most
    S_j + p_ji / 2, hence C_j = S_j + p_ji >= M'_j + pmin_j / 2. The truncated flows form a
    preemptive schedule of works e_j with releases est_j on one machine of rate R(t), so
        sum_j w_j C_j >= min over such schedules of sum_j w_j M_j + sum_j w_j pmin_j / 2.
    The minimum is attained by preemptive WSPT (largest w_j / e_j first): if some job j of
    larger ratio is released and unfinished at t while k runs there, trading an amount of
    k's work at t with as much of j's at a later t' changes the cost by
    (w_j/e_j - w_k/e_k)(t - t') < 0 (Goemans, Queyranne, Schulz, Skutella & Wang, SIAM J.
    Discrete Math. 15(2), 2002: the LP in mean busy times is solved by preemptive WSPT).
    Without releases and maintenance, on m identical nodes of whole-node jobs, this is the
    bound of Eastman, Even & Isaacs (Management Science 11(2), 1964); on one node it is
    exact, and Smith's rule (Naval Res. Logist. Q. 3, 1956) attains it.
    """
    need = jobs & (inst.demand[:, r] > 0)
    rest = float(alone[jobs & ~need].sum())
    rate = inst.capacity[nodes, r] * inst.speed[nodes]
    if not need.any() or rate.sum() <= 0:
        return rest if not need.any() else 0.0
    cap_t, cap_rate = pooled_rate(inst, nodes, r)
    work = inst.demand[need, r] * ref[need]
    busy, _ = wspt_busy_times(est[need].astype(np.float64), work, inst.weight[need], cap_t,
                              cap_rate)
    w = inst.weight[need]
    return float(np.dot(w, busy) + np.dot(w, pmin[need]) / 2) + rest


# --------------------------------------------------------------------------- rate-capped flow


def _max_speed(inst: Instance, classes: tuple) -> np.ndarray:
    """float64[J]: the fastest eligible node's speed of each job (per eligibility class)."""
    _, inverse, row_nodes, _, _ = classes
    per_row = np.where(row_nodes, inst.speed[None, :], 0.0).max(axis=1)
    return per_row[inverse]


def rate_flow_part(inst: Instance, r: int, est: np.ndarray, ref: np.ndarray, pmin: np.ndarray,
                   alone: np.ndarray, speed_max: np.ndarray) -> float:
    """`fluid_part` on the whole cluster with one more constraint: job j's rate never exceeds
    rho_j = d_jr * max eligible speed (it runs on one node). A long narrow job then cannot
    borrow the whole cluster to finish early, which is what makes the plain fluid bound weak
    when a few long jobs wait at the end of Smith's order. 0 when the LP would be too big.

    The relaxation becomes an LP (a transportation problem with capped arcs), solved as a
    min-cost flow: supply e_j per job; time cut into slots [tau_k, tau_k+1) each offering the
    pool's supply over it (`_slot_edges`); job j sends x to the part [a, b) of slot k after
    est_j at a cost of at least f(x) = (w_j / e_j)(a x + x^2 / (2 rho_j)) (x at full rate from
    a is the earliest it can be delivered), f convex, so the maximum of its tangents at
    FLOW_PIECES points spread over [0, rho_j (b - a)] lies below it and is a chain of arcs of
    rising unit cost (`_solve_flow`); after the last slot anything costs the last edge. Every
    schedule's truncated flow (see `fluid_part`) is then a feasible flow of no smaller cost,
    so the optimum plus sum_j w_j pmin_j / 2 bounds sum_j w_j C_j. In integers: supplies
    rounded down, capacities up, unit costs down: each makes the optimum smaller, so the bound
    stays valid. Identical jobs (same release, work, cap, weight) are one source with their
    total supply and caps: n jobs of cost f each cost n f(x / n) together, the same f with
    rho n. Without jobs that queue inside a slot the LP is exact; on KTH-SP2 weeks (see
    benchmarks/RESULTS.md) it lifts the bound 15 % above ``alone`` on 24 nodes.
    """
    need = inst.demand[:, r] > 0
    if not need.any():
        return 0.0
    rest = float(alone[~need].sum())
    e = (inst.demand[need, r] * ref[need]).astype(np.float64)
    rho = inst.demand[need, r] * speed_max[need]
    rel = est[need].astype(np.float64)
    w = inst.weight[need]
    table = np.column_stack([rel, e, rho, w])
    groups, inverse, count = np.unique(table, axis=0, return_inverse=True, return_counts=True)
    inverse = inverse.reshape(-1)
    n_groups = len(groups)
    slots = min(FLOW_MAX_SLOTS, FLOW_MAX_ARCS // (FLOW_PIECES * n_groups))
    if slots < FLOW_MIN_SLOTS:
        return 0.0
    cap_t, cap_rate = pooled_rate(inst, np.arange(inst.n_nodes), r)
    busy, last = wspt_busy_times(rel, e, w, cap_t, cap_rate)
    tau = _slot_edges(rel, busy, last, rel + e / rho, slots)
    value = _solve_flow(groups, count, tau, cap_t, cap_rate)
    if value is None:
        return 0.0
    return value + float(np.dot(w, pmin[need])) / 2 + rest


def _slot_edges(release: np.ndarray, busy: np.ndarray, last: np.ndarray,
                alone_end: np.ndarray, slots: int) -> np.ndarray:
    """float64[<= slots + 1] slot edges: half of them quantiles of the jobs' mean busy times
    (in the fluid schedule, and alone), so slots are short where many jobs run (all near the
    start when the cluster is large, spread out when it is saturated), half evenly spread;
    the last edge a quarter beyond the latest end of work."""
    moments = np.concatenate([busy, (release + alone_end) / 2])
    start = float(release.min())
    top = float(max(last.max(), alone_end.max()))
    end = top + 0.25 * (top - start) + 1.0
    edges = np.concatenate([np.quantile(moments, np.linspace(0.0, 1.0, slots // 2)),
                            np.linspace(start, end, slots - slots // 2 + 1)])
    return np.unique(np.clip(edges, start, end))


def _solve_flow(groups: np.ndarray, count: np.ndarray, tau: np.ndarray, cap_t: np.ndarray,
                cap_rate: np.ndarray) -> float | None:
    """The min-cost flow of `rate_flow_part` (groups: float64[G, 4] release, work, cap,
    weight; count: jobs per group): its optimum in weighted minutes, None if not optimal.

    A group's arcs to slot k: tangents of f (see `rate_flow_part`) at a + m * step,
    m = 0 .. P - 1, step = (b - a) / (P - 1), have slopes c (a + m step); consecutive tangents
    meet half-way, so the arcs carry rho * step / 2, rho * step, ..., rho * step / 2 at those
    unit costs. The bound is exact wherever a group fills its part of a slot or none of it.
    """
    rel, e, rho, w = (groups[:, c] for c in range(4))
    n_groups, n_slots = len(groups), len(tau) - 1
    unit = float((count * e).sum()) / _INT_RANGE  # resource-minutes per flow unit
    a = np.maximum(tau[None, :-1], rel[:, None])  # [G, K] a job's part of each slot
    b = np.broadcast_to(tau[None, 1:], a.shape)
    ok = a < b
    g_idx, k_idx = np.nonzero(ok)
    length = (b - a)[ok]
    step = length / (FLOW_PIECES - 1)  # tangent points alpha + m * step, m = 0 .. P - 1
    m = np.arange(FLOW_PIECES)
    start = (a[ok][:, None] + m[None, :] * step[:, None]).ravel()
    share = np.where((m == 0) | (m == FLOW_PIECES - 1), 0.5, 1.0)
    g_arc = np.repeat(g_idx, FLOW_PIECES)
    k_arc = np.repeat(k_idx, FLOW_PIECES)
    span = (share[None, :] * step[:, None]).ravel()  # minutes of full rate per segment
    cap = np.ceil(count[g_arc] * rho[g_arc] * span / unit)
    ratio = w / e  # weighted minutes per resource-minute per minute
    tail_at = np.maximum(tau[-1], rel)
    top_cost = float(max((ratio[g_arc] * start).max(initial=0.0),
                         (ratio * tail_at).max(initial=0.0))) * unit
    scale = _INT_RANGE / max(top_cost, 1e-300)
    cost = np.floor(ratio[g_arc] * start * unit * scale)
    slot_cap = np.ceil(_supply_between(cap_t, cap_rate, tau[:-1], tau[1:]) / unit)
    sink = n_groups + n_slots
    supply = np.floor(count * e / unit)
    tails = np.concatenate([g_arc, n_groups + np.arange(n_slots), np.arange(n_groups)])
    heads = np.concatenate([n_groups + k_arc, np.full(n_slots, sink), np.full(n_groups, sink)])
    caps = np.concatenate([cap, slot_cap, supply])
    costs = np.concatenate([cost, np.zeros(n_slots), np.floor(ratio * tail_at * unit * scale)])
    flow = min_cost_flow.SimpleMinCostFlow()
    flow.add_arcs_with_capacity_and_unit_cost(tails.astype(np.int64), heads.astype(np.int64),
                                              caps.astype(np.int64), costs.astype(np.int64))
    supplies = np.concatenate([supply, np.zeros(n_slots), [-supply.sum()]]).astype(np.int64)
    flow.set_nodes_supplies(np.arange(sink + 1, dtype=np.int64), supplies)
    if flow.solve() != flow.OPTIMAL:
        return None
    return flow.optimal_cost() / scale
