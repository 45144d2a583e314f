"""Deadline-aware re-decoding: a plan's nodes kept, its jobs re-timed in completion orders,
node by node, each node taking the order that ends its jobs earliest while it still ends by
the plan's makespan.

The orders (`redecoded_order`), for the plan's assignment: backwards, the serial schedule
generation scheme on the time-mirrored batch (`greedy.mirrored`, the plan's makespan T as
the mirror), the jobs that can set the makespan first (they end at T), then the others by
decreasing Smith key (the least urgent end latest), after which the jobs go forwards by
their mirrored-back start, so each starts as early as its node allows in that order (left
justification: V. Valls, F. Ballestin, S. Quintanilla, EJOR 165(2), 2005, here with a
completion order instead of the plan's own); forwards, the scheme in
`orders.completion_order`.

One order for the whole plan rarely keeps the makespan when the cluster is full: the node
that sets it loses its tight packing. But without `follows` between nodes a node's schedule
depends only on the order of its own jobs, so each node can take its own: the one of least
(weighted tardiness, weighted completion) on that node among the orders that end it by T
(the plan's own order always does). Decoding the jobs by their start in the chosen schedules
starts none later (`repack.start_order`). Measured on KTH-SP2 week 45 on 6 nodes: one order
for all kept the makespan in none of 90 trials; node by node, weighted completion fell from
16,759 h to 11,984 h at the same makespan. With `follows` across nodes the combined plan may
differ; it is scored like any trial and kept only when better in the objective's own order.
"""

from __future__ import annotations

import numpy as np

from assignplan.instance import NO_DUE, Instance
from assignplan.methods.ga.improvers.repack import keys_for_order, start_order
from assignplan.methods.greedy import (
    VARIANT_MIXES,
    VARIANT_SHARES,
    mirrored,
    reversed_topological,
)
from assignplan.methods.orders import completion_order, smith_keys
from assignplan.schedule import build_schedule, population_starts

GRID = [(share, mix, backward) for share in VARIANT_SHARES for mix in VARIANT_MIXES
        for backward in (True, False)]


def completion_key(inst: Instance, mix: float) -> np.ndarray:
    """float64[J]: area^mix * duration^(1 - mix) / weight (see `greedy.completion_variants`)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.nan_to_num(smith_keys(inst, "area") ** mix * smith_keys(inst) ** (1.0 - mix),
                             nan=np.inf)


def redecoded_order(inst: Instance, assign: np.ndarray, horizon: int, share: float,
                    mix: float, backward: bool, order: np.ndarray) -> np.ndarray:
    """int64[J] decoding order of the plan's assignment for one grid point: the jobs at least
    share * horizon long critical, the others keyed by `completion_key(mix)`; ties of the
    mirrored-back starts by their place in `order`."""
    p = inst.min_duration()
    critical = p >= share * horizon
    key = completion_key(inst, mix)
    if not backward:
        return completion_order(inst, critical, key)
    back = np.lexsort((np.arange(inst.n_jobs), np.where(critical, -p, -key), ~critical))
    mirror = mirrored(inst, horizon)
    back_start = build_schedule(mirror, assign, reversed_topological(inst, back))
    return start_order(horizon - mirror.end_times(assign, back_start), order)


def node_by_node(inst: Instance, assign: np.ndarray, order: np.ndarray, horizon: int,
                 orders: list[np.ndarray]) -> np.ndarray:
    """int64[J] decoding order: each node's jobs as in the order of `[order] + orders` that
    gives that node the least (weighted tardiness, weighted completion) among those ending
    it by `horizon`; the jobs by their start there (ties by `order`)."""
    every = np.stack([order] + orders)
    starts = population_starts(inst, np.repeat(assign[None], len(every), axis=0), every)
    ends = inst.end_times(assign[None], starts)
    n_nodes, n_var = inst.n_nodes, len(every)
    node_end = np.zeros((n_var, n_nodes), dtype=np.int64)
    rows = np.repeat(np.arange(n_var), inst.n_jobs)
    cols = np.tile(assign, n_var)
    np.maximum.at(node_end, (rows, cols), ends.ravel())
    late = np.where(inst.due != NO_DUE, np.maximum(0, ends - inst.due), 0) * inst.weight
    node_tard = np.zeros((n_var, n_nodes))
    np.add.at(node_tard, (rows, cols), late.ravel())
    node_compl = np.zeros((n_var, n_nodes))
    np.add.at(node_compl, (rows, cols), (ends * inst.weight).ravel())
    big = np.where(node_end <= horizon, 0.0, np.inf)  # orders that end the node too late
    pick = np.lexsort((np.arange(n_var)[:, None].repeat(n_nodes, axis=1),
                       node_compl + big, node_tard + big), axis=0)[0]  # [N]
    by_start = start_order(starts[pick[assign], np.arange(inst.n_jobs)], order)
    if len(inst.pred_idx) == 0:
        return by_start
    # with follows across nodes, starts taken from different orders may put a job before one
    # it follows: keep the start order wherever it respects follows
    rank = np.empty(inst.n_jobs, dtype=np.float64)
    rank[by_start] = np.arange(inst.n_jobs)
    return completion_order(inst, np.zeros(inst.n_jobs, dtype=bool), rank)


def redecode_trial(inst: Instance, assign: np.ndarray, horizon: int, order: np.ndarray,
                   n: int, *, rng: np.random.Generator) -> np.ndarray:
    """Order keys float64[J] of the plan re-decoded node by node (`node_by_node`) among its
    own order and n grid points drawn at random without replacement."""
    picks = rng.choice(len(GRID), size=min(n, len(GRID)), replace=False)
    orders = [redecoded_order(inst, assign, horizon, *GRID[k], order) for k in picks.tolist()]
    return keys_for_order(inst, node_by_node(inst, assign, order, horizon, orders))
