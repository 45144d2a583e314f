"""A plan's runtime risk as data: run the replays, then the figures tables, files and the
report show (`assess`, `summary`, `job_frame`, `node_frame`).

Definitions (S samples, makespan M_s of sample s):
- makespan quantiles by nearest rank (`replay.nearest_rank`), mean over samples;
- P(inside the window) = share of samples with M_s <= window;
- per job: P(late) = share of samples ending after its due time; P(past window) likewise;
  mean end; P90 end (nearest rank);
- per node: share of samples in which it ends at the makespan (ties count for every node
  ending then, so the shares may add up to more than 1); expected core utilisation
  sum_s work_s / sum_s (cores * available minutes of [0, M_s)), a ratio of expectations
  over the samples, maintenance taken out as in the plan's own utilisation.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from assignplan.executor import Executor
from assignplan.instance import NO_DUE, Instance
from assignplan.plan import PlanResult
from assignplan.risk.replay import (
    POLICIES,
    ReplayPlan,
    Tally,
    quantile,
    replay,
    replay_plan,
)
from assignplan.risk.sampling import Sampler
from assignplan.units import clock, hours_of, iso

MAKESPAN_QUANTILES = (0.1, 0.5, 0.9, 0.99)
RISKIEST = 20  # jobs listed in the summary, riskiest first
LAST_NODES = 10  # nodes listed by how often they end last


@dataclass(frozen=True, eq=False)
class Risk:
    """A plan's replays: the sampler, seed and sample count, the plan's replay view, and the
    merged tally of each policy."""

    sampler: Sampler
    seed: int
    samples: int
    plan: ReplayPlan
    tallies: dict[str, Tally]
    seconds: float


def assess(inst: Instance, result: PlanResult, sampler: Sampler, *, samples: int, seed: int,
           executor: Executor | None = None,
           on_chunk: Callable[[int], None] | None = None) -> Risk:
    """Replay the plan under `samples` futures of `sampler` with both policies (the same
    futures for both: common random numbers)."""
    t0 = time.perf_counter()
    plan = replay_plan(inst, result)
    tallies = replay(inst, plan, sampler, policies=POLICIES, samples=samples, seed=seed,
                     executor=executor, on_chunk=on_chunk)
    return Risk(sampler, seed, samples, plan, tallies, time.perf_counter() - t0)


def _available_sum(inst: Instance, horizons: np.ndarray) -> np.ndarray:
    """float64[N]: sum over the horizons h of each node's minutes of [0, h) outside
    maintenance."""
    h = horizons.astype(np.float64)[:, None]
    lost = np.clip(np.minimum(inst.maint_end[None, :], h)
                   - np.clip(inst.maint_start[None, :], 0, h), 0, None).sum(axis=0)
    node = np.repeat(np.arange(inst.n_nodes), np.diff(inst.maint_ptr))
    return h.sum() - np.bincount(node, weights=lost, minlength=inst.n_nodes)


def _utilisation(inst: Instance, tally: Tally) -> tuple[np.ndarray, float]:
    """Expected core utilisation in % per node (NaN for a node never available) and over
    the cluster (see the module docstring)."""
    offered = inst.capacity[:, 0] * _available_sum(inst, tally.makespan)
    with np.errstate(divide="ignore", invalid="ignore"):
        per_node = np.where(offered > 0, 100 * tally.work / offered, np.nan)
    total = 100 * tally.work.sum() / offered.sum() if offered.sum() > 0 else float("nan")
    return per_node, float(total)


def job_frame(inst: Instance, risk: Risk, policy: str) -> pd.DataFrame:
    """One row per job, riskiest first: planned node and end, due, P(late), P(past window),
    mean and P90 end."""
    tally, plan, n = risk.tallies[policy], risk.plan, risk.samples
    has_due = inst.due != NO_DUE
    p90 = tally.job_quantile_end()
    planned_end = inst.end_times(plan.assign, plan.start)
    ws = inst.window_start
    lateness = np.where(has_due, p90 - inst.due, p90 - inst.window_minutes)
    frame = pd.DataFrame({
        "job": inst.job_names,
        "group": inst.job_groups,
        "node": [inst.node_names[i] for i in plan.assign],
        "planned_end_h": [hours_of(m) for m in planned_end],
        "due_h": np.where(has_due, np.round(inst.due / 60, 4), np.nan),
        "p_late": np.where(has_due, tally.late / n, np.nan),
        "p_past_window": tally.past / n,
        "mean_end_h": np.round(tally.end_sum / n / 60, 4),
        "p90_end_h": [hours_of(m) for m in p90],
        "p90_end": [clock(ws, m) for m in p90],
        "p90_end_iso": [iso(ws, m) for m in p90],
        "_risk": np.where(has_due, tally.late, 0),
        "_lateness": lateness,
    })
    frame = frame.sort_values(["_risk", "p_past_window", "_lateness", "job"],
                              ascending=[False, False, False, True], kind="stable")
    return frame.drop(columns=["_risk", "_lateness"]).reset_index(drop=True)


def node_frame(inst: Instance, risk: Risk, policy: str) -> pd.DataFrame:
    """One row per node, the most often last first: share of samples it ends last in,
    expected core utilisation."""
    tally = risk.tallies[policy]
    util, _ = _utilisation(inst, tally)
    frame = pd.DataFrame({
        "node": inst.node_names,
        "kind": inst.node_groups,
        "share_ending_last": tally.last / risk.samples,
        "core_utilisation_pct": np.round(util, 2),
    })
    return frame.sort_values(["share_ending_last", "node"], ascending=[False, True],
                             kind="stable").reset_index(drop=True)


def _policy_summary(inst: Instance, risk: Risk, policy: str) -> dict:
    tally = risk.tallies[policy]
    mk = tally.makespan
    _, util = _utilisation(inst, tally)
    jobs = job_frame(inst, risk, policy)
    risky = jobs[(jobs["p_late"].fillna(0) > 0) | (jobs["p_past_window"] > 0)].head(RISKIEST)
    nodes = node_frame(inst, risk, policy)
    return {
        "makespan_h": {"mean": round(float(mk.mean()) / 60, 4),
                       **{f"p{round(100 * q)}": hours_of(quantile(mk, q))
                          for q in MAKESPAN_QUANTILES}},
        "makespan_at": {f"p{round(100 * q)}": clock(inst.window_start, quantile(mk, q))
                        for q in MAKESPAN_QUANTILES},
        "inside_window": float(np.mean(mk <= inst.window_minutes)),
        "mean_late_jobs": float(tally.late.sum() / risk.samples),
        "mean_weighted_tardiness_h": round(float(tally.tardiness.mean()) / 60, 4),
        "core_utilisation_pct": round(util, 2),
        "riskiest": [
            {"job": r.job, "node": r.node, "due_h": None if np.isnan(r.due_h) else r.due_h,
             "p_late": None if np.isnan(r.p_late) else round(float(r.p_late), 4),
             "p_past_window": round(float(r.p_past_window), 4), "p90_end_h": r.p90_end_h,
             "p90_end": r.p90_end}
            for r in risky.itertuples(index=False)],
        "nodes_ending_last": [
            {"node": r.node, "share": round(float(r.share_ending_last), 4)}
            for r in nodes[nodes["share_ending_last"] > 0].head(LAST_NODES).itertuples(
                index=False)],
    }


def summary(inst: Instance, risk: Risk) -> dict:
    """The headline figures of both policies (the keys of `risk --json`)."""
    return {
        "model": risk.sampler.model.model_dump(mode="json"),
        "model_text": risk.sampler.text,
        "samples": risk.samples,
        "seed": risk.seed,
        "window_h": inst.window_minutes / 60,
        "planned_makespan_h": hours_of(risk.plan.makespan),
        "policies": {p: _policy_summary(inst, risk, p) for p in risk.tallies},
        "seconds": round(risk.seconds, 3),
    }


def makespan_samples(risk: Risk, policy: str) -> np.ndarray:
    """int64[S]: the makespan of every sample, in sample order."""
    return risk.tallies[policy].makespan
