"""The figures a plan's charts draw: utilisation over time, available capacity, timeline rows.

Pure functions of the instance and the plan; `report.charts` and `report.timeline` draw them
into scenes. The utilisation curve is measured against the same available capacity as the
summary cards (`stats.summary`: maintenance taken out), so its mean over the makespan is the
card's figure.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from assignplan.instance import NO_DUE, Instance
from assignplan.plan import PlanResult

# Up to this many nodes the timeline draws one labelled row per node; above it, nodes are
# grouped by kind into bands of thin unlabelled rows so the chart keeps a readable height.
NODE_ROW_LIMIT = 150


def utilisation_curve(inst: Instance, result: PlanResult, *,
                      nodes: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Cores, memory (MiB) and GPUs busy over time, as a step function from an event sweep.

    Returns ``times``: int64[K] the sorted distinct start/end minutes, and ``busy``:
    float64[K, 3], the demand of the jobs running in ``[times[k], times[k+1])``; the last row
    is zero. Hence ``sum_k busy[k] * (times[k+1] - times[k]) = sum_j demand_j * (end_j -
    start_j)``. ``nodes`` (bool[N]) restricts the sweep to the jobs on those nodes.
    """
    keep = np.ones(inst.n_jobs, bool) if nodes is None else np.asarray(nodes)[result.assign]
    start, end, demand = result.start[keep], result.end[keep], inst.demand[keep]
    times = np.unique(np.concatenate([start, end]).astype(np.int64))
    delta = np.zeros((len(times), 3), dtype=np.int64)
    np.add.at(delta, np.searchsorted(times, start), demand)
    np.add.at(delta, np.searchsorted(times, end), -demand)
    return times, np.cumsum(delta, axis=0).astype(np.float64)


def binned_curve(times: np.ndarray, busy: np.ndarray, lo: int, hi: int,
                 bins: int) -> tuple[np.ndarray, np.ndarray]:
    """A step curve (values float64[K, R]) averaged over `bins` equal bins of [lo, hi):
    (edges[bins+1], mean[bins, R]); the curve is taken as zero after its last step.

    Averaging (not sampling) keeps the area under the curve, so a thinned curve for a large
    plan still shows the same work as the exact one.
    """
    edges = np.linspace(lo, hi, bins + 1)
    if len(times) == 0:
        return edges, np.zeros((bins, busy.shape[1]))
    # Cumulative integral F at every event time; F is piecewise linear, so np.interp is exact.
    area = np.vstack([np.zeros(busy.shape[1]),
                      np.cumsum(busy[:-1] * np.diff(times)[:, None], axis=0)])
    cum = np.column_stack([np.interp(edges, times, area[:, r]) for r in range(busy.shape[1])])
    return edges, np.diff(cum, axis=0) / np.diff(edges)[:, None]


def capacity_curve(inst: Instance) -> tuple[np.ndarray, np.ndarray]:
    """Cores, memory (MiB) and GPUs available over time: installed capacity less the nodes in
    maintenance, as a step function ``(times int64[K], available float64[K, 3])`` holding from
    ``times[k]`` to ``times[k+1]`` (the last row on to any later time; ``times[0]`` is 0)."""
    node = np.repeat(np.arange(inst.n_nodes), np.diff(inst.maint_ptr))
    cap = inst.capacity[node].astype(np.int64)
    start, end = np.maximum(inst.maint_start, 0), np.maximum(inst.maint_end, 0)
    times = np.unique(np.concatenate([[0], start, end]).astype(np.int64))
    delta = np.zeros((len(times), 3), dtype=np.int64)
    np.add.at(delta, np.searchsorted(times, start), -cap)
    np.add.at(delta, np.searchsorted(times, end), cap)
    total = inst.capacity.sum(axis=0).astype(np.int64)
    return times, (total + np.cumsum(delta, axis=0)).astype(np.float64)


def _step_at(times: np.ndarray, values: np.ndarray, at: np.ndarray) -> np.ndarray:
    """A step function's values at the minutes ``at`` (zero before its first step)."""
    k = np.searchsorted(times, at, side="right") - 1
    return np.where((k >= 0)[:, None], values[np.maximum(k, 0)], 0.0)


@dataclass(frozen=True)
class UtilisationCurves:
    """Busy and available capacity over time, in % of ``reference``: the mean available
    capacity over the makespan (float64[3]; 0 where a resource has none), the denominator
    of the summary cards. ``times`` int64[K]; ``busy_pct``/``available_pct`` float64[K, 3]
    hold from ``times[k]`` to ``times[k+1]``."""

    times: np.ndarray
    busy_pct: np.ndarray
    available_pct: np.ndarray
    reference: np.ndarray


def utilisation_curves(inst: Instance, result: PlanResult) -> UtilisationCurves:
    """The utilisation chart's curves. With ``C(t)`` the available capacity and ``B(t)`` the
    busy capacity, ``reference = (1 / M) * integral_0^M C(t) dt`` over the makespan ``M``, and
    ``busy_pct(t) = 100 * B(t) / reference``; hence ``(1 / M) * integral_0^M busy_pct`` is
    ``100 * integral B / integral C``, the card's utilisation over the makespan."""
    job_times, busy = utilisation_curve(inst, result)
    cap_times, available = capacity_curve(inst)
    makespan = max(result.makespan, 1)
    times = np.unique(np.concatenate([job_times, cap_times, [makespan]]))
    busy_at, avail_at = _step_at(job_times, busy, times), _step_at(cap_times, available, times)
    inside = times[:-1] < makespan
    spans = np.diff(times)[inside, None]
    reference = (avail_at[:-1][inside] * spans).sum(axis=0) / makespan
    scale = np.divide(100.0, reference, out=np.zeros(3), where=reference > 0)
    return UtilisationCurves(times, busy_at * scale, avail_at * scale, reference)


def stack_offsets(assign: np.ndarray, start: np.ndarray, end: np.ndarray, cores: np.ndarray,
                  capacity: np.ndarray) -> np.ndarray:
    """int64[J]: where each job's bar sits on its node's core axis (first fit, by start).

    Jobs on a node never use more cores together than it has, but their bars can still be
    fragmented; a job that finds no free contiguous stretch is drawn at the top (overlapping).
    """
    offset = np.zeros(len(assign), dtype=np.int64)
    for node_jobs in _jobs_by_node(assign, start, -cores):
        active: list[tuple[int, int, int]] = []  # (end, low, high) of bars still running
        for j in node_jobs:
            active = [a for a in active if a[0] > start[j]]
            cap, need = int(capacity[assign[j]]), int(cores[j])
            offset[j] = cap - need
            for low in sorted({0, *(a[2] for a in active)}):
                if low + need <= cap and all(a[2] <= low or a[1] >= low + need for a in active):
                    offset[j] = low
                    break
            active.append((int(end[j]), int(offset[j]), int(offset[j]) + need))
    return offset


def _jobs_by_node(assign: np.ndarray, *keys: np.ndarray) -> list[np.ndarray]:
    order = np.lexsort((*reversed(keys), assign))
    cuts = np.flatnonzero(np.diff(assign[order])) + 1
    return np.split(order, cuts) if len(order) else []


@dataclass(frozen=True)
class TimelineLayout:
    """Where the timeline draws each node and job, in rows of unit height.

    ``row``: float64[N] top of each node's row; ``row_height``: the height of a node row;
    ``bands``: (kind, first row top, n nodes) per node kind in drawing order; ``grouped``:
    True when nodes are thin unlabelled rows in bands per kind (more than NODE_ROW_LIMIT).
    ``bar_top``/``bar_height``: float64[J] inside the job's node row, as a share of the row.
    """

    row: np.ndarray
    row_height: float
    bands: tuple[tuple[str, float, int], ...]
    grouped: bool
    bar_top: np.ndarray
    bar_height: np.ndarray
    height: float


def timeline_layout(inst: Instance, result: PlanResult, *, band_gap: float = 1.0) -> TimelineLayout:
    """Rows by node kind (order of first appearance), bars stacked by their share of cores."""
    kinds = list(dict.fromkeys(inst.node_groups))
    grouped = inst.n_nodes > NODE_ROW_LIMIT
    # Grouped: the whole chart stays about NODE_ROW_LIMIT rows tall whatever the node count.
    row_height = NODE_ROW_LIMIT / inst.n_nodes if grouped else 1.0
    row = np.zeros(inst.n_nodes)
    bands = []
    y = 0.0
    kind_of = np.array([kinds.index(g) for g in inst.node_groups])
    for k, kind in enumerate(kinds):
        members = np.flatnonzero(kind_of == k)
        y += band_gap if grouped or k else 0.0
        bands.append((kind, y, len(members)))
        row[members] = y + row_height * np.arange(len(members))
        y += row_height * len(members)
    cap = inst.capacity[:, 0]
    offset = stack_offsets(result.assign, result.start, result.end, inst.demand[:, 0], cap)
    share = inst.demand[:, 0] / cap[result.assign]
    top = 1.0 - offset / cap[result.assign] - share  # lowest core at the bottom of the row
    return TimelineLayout(row, row_height, tuple(bands), grouped, top, share, y)


def late_jobs(inst: Instance, result: PlanResult) -> np.ndarray:
    """bool[J]: the job has a due time and ends after it."""
    return (inst.due != NO_DUE) & (result.end > inst.due)
