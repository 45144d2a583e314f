"""Figures of a plan as data: the summary, the per-node and the per-job frames.

All figures are computed once here from the instance and the result; tables, CSV, JSON and
charts only format them. Utilisation is measured against *available* capacity: a node in
maintenance offers nothing, so its window is taken out of the denominator.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from assignplan.bounds import COMPLETION_PART_NAMES, PART_NAMES, binding_parts
from assignplan.instance import NO_DUE, Instance
from assignplan.plan import BSLD_THRESHOLD, PlanResult, objective, term_gap_pct, turnaround
from assignplan.units import clock, hours_of, iso, number

LISTED = 10  # late jobs and jobs past the window named in the summary, the worst first


def peak_usage(assign: np.ndarray, start: np.ndarray, end: np.ndarray, demand: np.ndarray,
               n_nodes: int) -> np.ndarray:
    """float64[N]: the largest simultaneous demand on each node (event sweep, ends first).

    Intervals are half-open, so a job ending at t and one starting at t never overlap:
    at equal times the end events are sorted before the start events.
    """
    n = len(assign)
    if n == 0:
        return np.zeros(n_nodes)
    node = np.concatenate([assign, assign])
    time = np.concatenate([start, end])
    is_start = np.concatenate([np.ones(n, np.int8), np.zeros(n, np.int8)])
    delta = np.concatenate([demand, -demand]).astype(np.float64)
    order = np.lexsort((is_start, time, node))
    node, delta = node[order], delta[order]
    # Each node's deltas sum to zero, so a running total over all nodes restarts at zero on
    # every node boundary; the per-node maximum is a segmented max over that total.
    level = np.cumsum(delta)
    peaks = np.zeros(n_nodes)
    firsts = np.flatnonzero(np.r_[True, node[1:] != node[:-1]])
    peaks[node[firsts]] = np.maximum.reduceat(level, firsts)
    return peaks


def _work_within(inst: Instance, result: PlanResult, horizon: int) -> np.ndarray:
    """float64[J, 3]: resource-minutes each job uses inside [0, horizon)."""
    inside = np.clip(np.minimum(result.end, horizon) - np.minimum(result.start, horizon), 0, None)
    return inst.demand * inside[:, None].astype(np.float64)


def _pct(num: float, den: float) -> float | None:
    return None if den <= 0 else round(100.0 * num / den, 2)


def bound_source_text(source: str | None) -> str:
    """`summary`'s lower_bound_set_by in words, for tables and reports ("" if unknown)."""
    if source is None:
        return ""
    if source == "solver":
        return "the exact solver's proof"
    return "; ".join(PART_NAMES.get(k, k) for k in source.split(", "))


def _bound_source(result: PlanResult) -> str | None:
    """Which argument sets the plan's lower bound: part names of `bounds.lower_bound`, or
    "solver" when the method proved a better bound, None when the parts are unknown."""
    if not result.bound_parts:
        return "solver" if result.solver_bound is not None \
            and result.solver_bound == result.lower_bound else None
    hit = binding_parts(result.bound_parts, result.lower_bound)
    return ", ".join(hit) if hit else "solver"


def completion_source_text(source: str | None) -> str:
    """`summary`'s weighted_completion_bound_set_by in words ("" if unknown)."""
    return "" if source is None else COMPLETION_PART_NAMES.get(source, source)


def tardiness_text(s: dict) -> str:
    """'12.50 h, bound 2.00 h (gap 525.00 %)'; against a zero bound 'bound 0' (no relative
    gap: the whole value is the excess)."""
    value, bound = s["weighted_tardiness_h"], s.get("weighted_tardiness_bound_h")
    text = f"{number(value, 2)} h"
    if bound is None:
        return text
    if bound > 0:
        gap = number(s["weighted_tardiness_gap_pct"], 2)
        return text + f", bound {number(bound, 2)} h (gap {gap} %)"
    return text + ", bound 0"


def completion_text(s: dict) -> str:
    """'4,256.00 h, bound 3,900.00 h (gap 9.13 %), set by ...'."""
    text = f"{number(s['weighted_completion_h'], 2)} h"
    if s.get("weighted_completion_bound_h") is None:
        return text
    why = completion_source_text(s.get("weighted_completion_bound_set_by"))
    return (text + f", bound {number(s['weighted_completion_bound_h'], 2)} h (gap "
            f"{number(s['weighted_completion_gap_pct'], 2)} %)"
            + (f", set by {why}" if why else ""))


def turnaround_text(s: dict) -> str:
    """Mean and P90 wait, mean bounded slowdown with its threshold."""
    return (f"wait mean {number(s['mean_wait_h'], 2)} h, P90 {number(s['p90_wait_h'], 2)} h;"
            f" bounded slowdown {number(s['mean_bounded_slowdown'], 2)}"
            f" ({s['bounded_slowdown_threshold_min']} min threshold)")


def _term_bounds(result: PlanResult, tard: float, compl: float) -> dict:
    """The bound and gap of the weighted tardiness and the weighted completion time (None
    where the result carries no bound): see `plan.term_gap_pct` for a zero bound."""
    tb, cb = result.tardiness_bound, result.completion_bound
    parts = result.completion_parts
    return {
        "weighted_tardiness_bound_h": None if tb is None else tb / 60,
        "weighted_tardiness_gap_pct": None if tb is None else _round(term_gap_pct(tard, tb)),
        "weighted_tardiness_excess_h": None if tb is None else (tard - tb) / 60,
        "weighted_completion_bound_h": None if cb is None else cb / 60,
        "weighted_completion_gap_pct": None if cb is None else _round(term_gap_pct(compl, cb)),
        "weighted_completion_bound_set_by": max(parts, key=parts.get) if parts else None,
    }


def _round(pct: float | None) -> float | None:
    return None if pct is None else round(pct, 2)


def summary(inst: Instance, result: PlanResult) -> dict:
    """The plan's headline figures (the keys of `solve --json`): the makespan, the weighted
    tardiness and the weighted completion time each with its lower bound and gap, the
    turnaround figures (`plan.turnaround`), utilisation, jobs late or past the window."""
    mk, tard, compl = objective(inst, result.end)
    cap = inst.capacity.astype(np.float64)
    avail_mk = inst.available_minutes(mk).astype(np.float64)
    avail_win = inst.available_minutes(inst.window_minutes).astype(np.float64)
    used_mk = _work_within(inst, result, mk).sum(axis=0)
    used_win = _work_within(inst, result, inst.window_minutes).sum(axis=0)
    cap_mk = cap.T @ avail_mk
    cap_win = cap.T @ avail_win
    late = (inst.due != NO_DUE) & (result.end > inst.due)
    past = result.end > inst.window_minutes
    return {
        "method": result.method,
        "status": result.status,
        "priority": None if result.priority is None else result.priority.name,
        "minimised": None if result.priority is None else result.priority.describe(),
        "jobs": inst.n_jobs,
        "nodes": inst.n_nodes,
        "makespan_h": mk / 60,
        "window_start": inst.window_start.isoformat(),
        "makespan_at": clock(inst.window_start, mk),
        "lower_bound_h": result.lower_bound / 60,
        "lower_bound_set_by": _bound_source(result),
        "lower_bound_parts_h": {k: v / 60 for k, v in result.bound_parts.items()},
        "gap_pct": round(result.gap_pct, 2),
        "core_utilisation_pct": _pct(used_mk[0], cap_mk[0]),
        "memory_utilisation_pct": _pct(used_mk[1], cap_mk[1]),
        "gpu_utilisation_pct": _pct(used_mk[2], cap_mk[2]),
        "core_utilisation_window_pct": _pct(used_win[0], cap_win[0]),
        "memory_utilisation_window_pct": _pct(used_win[1], cap_win[1]),
        "gpu_utilisation_window_pct": _pct(used_win[2], cap_win[2]),
        "window_h": inst.window_minutes / 60,
        "jobs_past_window": int(np.sum(past)),
        "past_window": _worst(inst, result.end - inst.window_minutes, past, "past_h"),
        "late_jobs": int(np.sum(late)),
        "late": _worst(inst, result.end - inst.due, late, "late_h"),
        "weighted_tardiness_h": tard / 60,
        "weighted_completion_h": compl / 60,
        **_term_bounds(result, tard, compl),
        **turnaround(inst, result.start, result.end),
        "bounded_slowdown_threshold_min": BSLD_THRESHOLD,
        "seed": result.seed,
        "seconds": round(result.seconds, 3),
    }


def _worst(inst: Instance, by: np.ndarray, hit: np.ndarray, key: str) -> list[dict]:
    """The LISTED jobs of `hit` with the largest `by` (minutes): name, `key` in hours, end."""
    jobs = np.flatnonzero(hit)
    jobs = jobs[np.argsort(-by[jobs], kind="stable")][:LISTED]
    return [{"job": inst.job_names[j], key: hours_of(by[j])} for j in jobs.tolist()]


def node_frame(inst: Instance, result: PlanResult) -> pd.DataFrame:
    """One row per node: jobs, core-hours, utilisation over the makespan, peaks, busy until."""
    mk = max(result.makespan, 1)
    n = inst.n_nodes
    dur = (result.end - result.start).astype(np.float64)
    jobs = np.bincount(result.assign, minlength=n)
    core_min = np.bincount(result.assign, weights=inst.demand[:, 0] * dur, minlength=n)
    gpu_min = np.bincount(result.assign, weights=inst.demand[:, 2] * dur, minlength=n)
    avail = inst.available_minutes(mk).astype(np.float64)
    peak_cores = peak_usage(result.assign, result.start, result.end, inst.demand[:, 0], n)
    peak_mem = peak_usage(result.assign, result.start, result.end, inst.demand[:, 1], n)
    busy_until = np.zeros(n, dtype=np.int64)
    np.maximum.at(busy_until, result.assign, result.end)
    with np.errstate(divide="ignore", invalid="ignore"):
        core_util = np.where(avail > 0, 100 * core_min / (inst.capacity[:, 0] * avail), 0.0)
        gpu_den = inst.capacity[:, 2] * avail
        gpu_util = np.where(gpu_den > 0, 100 * gpu_min / np.where(gpu_den > 0, gpu_den, 1), np.nan)
    return pd.DataFrame({
        "node": inst.node_names,
        "kind": inst.node_groups,
        "jobs": jobs,
        "core_hours": np.round(core_min / 60, 2),
        "core_utilisation_pct": np.round(core_util, 2),
        "peak_cores": peak_cores.astype(np.int64),
        "cores": inst.capacity[:, 0],
        "peak_memory_gib": np.round(peak_mem / 1024, 2),
        "memory_gib": np.round(inst.capacity[:, 1] / 1024, 2),
        "gpu_utilisation_pct": np.round(gpu_util, 2),
        "busy_until_h": [hours_of(m) for m in busy_until],
        "busy_until": [clock(inst.window_start, m) if m else "" for m in busy_until],
        "busy_until_iso": [iso(inst.window_start, m) if m else "" for m in busy_until],
    })


def job_frame(inst: Instance, result: PlanResult) -> pd.DataFrame:
    """One row per job, in start order: node, start, end, hours, size, late / past window."""
    has_due = inst.due != NO_DUE
    frame = pd.DataFrame({
        "job": inst.job_names,
        "group": inst.job_groups,
        "node": [inst.node_names[i] for i in result.assign],
        "start_h": [hours_of(m) for m in result.start],
        "end_h": [hours_of(m) for m in result.end],
        "start": [clock(inst.window_start, m) for m in result.start],
        "end": [clock(inst.window_start, m) for m in result.end],
        "start_iso": [iso(inst.window_start, m) for m in result.start],
        "end_iso": [iso(inst.window_start, m) for m in result.end],
        "hours": [hours_of(m) for m in result.end - result.start],
        "cores": inst.demand[:, 0],
        "memory_gib": np.round(inst.demand[:, 1] / 1024, 2),
        "gpus": inst.demand[:, 2],
        "due_h": np.where(has_due, np.round(inst.due / 60, 4), np.nan),
        "late": has_due & (result.end > inst.due),
        "past_window": result.end > inst.window_minutes,
    })
    return frame.sort_values(["start_h", "node", "job"], kind="stable").reset_index(drop=True)
