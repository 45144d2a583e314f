"""Every objective term on real weeks of the KTH-SP2 trace and on generated batches; writes
RESULTS.md.

Usage (from the repository root):
    .venv/bin/python benchmarks/bench_real_weeks.py [TRACE.swf] [--weeks 2,13,20,34,45]
        [--inventory examples/inventory-24x32.json] [--ga-seconds 20]
        [--estimates requested[,actual]] [--generated small:1,small:2,medium:1]
        [--no-write]

For every chosen week, inventory (the file's and a quarter of it) and ready rule (all ready at
the start, or ready at submit), and for every generated batch, it plans with greedy, with ga
and with the reference list schedule of issue 24 (`reference_plan`), and reports per plan:
the makespan and its gap to the makespan bound; the weighted tardiness and its excess over
its bound; the weighted completion time and its gap to the completion bound; mean wait, P90
wait and mean bounded slowdown. Results, not asserts; the headline checks the issue's
targets from the rows. With both estimates, also the requested/actual comparison of before.
"""

from __future__ import annotations

import argparse
import heapq
import itertools
import json
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from assignplan import kernels
from assignplan.bounds import lower_bound
from assignplan.documents import Batch
from assignplan.expand import expand_batch
from assignplan.generate import batch_doc, generate
from assignplan.importers import Inventory, load_inventory
from assignplan.importers.swf import REQ_TIME, RUN, STATUS, Trace, read_swf, week_batch
from assignplan.instance import Instance, build_instance
from assignplan.metrics import summary
from assignplan.plan import make_result
from assignplan.reading import parse_batch_text
from assignplan.solve import solve
from benchmarks.bench_builder import write_section

SECTION = "## Real weeks from the KTH-SP2 trace"
DEFAULT_TRACE = REPO / "tests" / "data" / "published" / "swf" / "KTH-SP2-1996-2.1-cln.swf"
# Spread over the year; 34 is the busiest week of the trace (1,207 submitted jobs).
DEFAULT_WEEKS = (2, 13, 20, 34, 45)
DEFAULT_GENERATED = ("small:1", "small:2", "small:3", "medium:1", "medium:2")
TIGHT_DIVISOR = 4
QUANTILES = (0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95, 0.99)
METHODS = ("greedy", "ga", "reference")


def reference_plan(inst: Instance, makespan_bound: int) -> tuple[np.ndarray, np.ndarray]:
    """The list schedule issue 24 measured against, as it describes it: the jobs longer than
    half the makespan (bound) first, longest first, then the rest by duration over weight,
    each at its earliest start on any node that can hold it (ties: lowest node); a job whose
    predecessors are not placed yet waits for them (the list is read in topological order,
    taking at each step the first listed job that is free)."""
    p = inst.min_duration()
    long = p > makespan_bound / 2
    key = np.where(long, -p.astype(float), p / np.maximum(inst.weight, 1e-12))
    rank = np.empty(inst.n_jobs, dtype=np.int64)
    rank[np.lexsort((np.arange(inst.n_jobs), key, ~long))] = np.arange(inst.n_jobs)
    waiting = np.diff(inst.pred_ptr).copy()
    free = [(int(rank[j]), j) for j in np.flatnonzero(waiting == 0).tolist()]
    heapq.heapify(free)
    nodes = _empty_profiles(inst)
    assign = np.empty(inst.n_jobs, dtype=np.int64)
    start = np.empty(inst.n_jobs, dtype=np.int64)
    end = np.zeros(inst.n_jobs, dtype=np.int64)
    while free:
        _, j = heapq.heappop(free)
        t0 = max([int(inst.ready[j])] + [int(end[q]) for q in inst.predecessors(j)])
        best = None
        for i in np.flatnonzero(inst.eligible[j]).tolist():
            seg_t, seg_f, n = nodes[i]
            s, k = kernels.earliest_start(seg_t, seg_f, 0, n, t0, int(inst.duration[j, i]),
                                          *inst.demand[j].tolist())
            if s >= 0 and (best is None or s < best[0]):
                best = (int(s), int(k), i)
        s, k, i = best
        seg_t, seg_f, n = nodes[i]
        dur = int(inst.duration[j, i])
        nodes[i] = (seg_t, seg_f, kernels.place(seg_t, seg_f, 0, n, k, s, dur,
                                                *inst.demand[j].tolist()))
        assign[j], start[j], end[j] = i, s, s + dur
        for q in inst.successors(j).tolist():
            waiting[q] -= 1
            if waiting[q] == 0:
                heapq.heappush(free, (int(rank[q]), q))
    return assign, start


def _empty_profiles(inst: Instance) -> list[tuple[np.ndarray, np.ndarray, int]]:
    """Each node's free-capacity profile (kernels' layout, one array per node, room for every
    job: a placement adds at most two breakpoints)."""
    out = []
    for i in range(inst.n_nodes):
        size = 2 * int(inst.maint_ptr[i + 1] - inst.maint_ptr[i]) + 2 + 2 * inst.n_jobs
        seg_t, seg_f = np.empty(size, np.int64), np.empty((size, 3), np.int64)
        seg_lo, seg_n = np.zeros(inst.n_nodes, np.int64), np.zeros(inst.n_nodes, np.int64)
        kernels.init_node(i, seg_t, seg_f, seg_lo, seg_n, inst.capacity, inst.maint_ptr,
                          inst.maint_start, inst.maint_end, inst.res_ptr, inst.res_start,
                          inst.res_end, inst.res_demand)
        out.append((seg_t, seg_f, int(seg_n[i])))
    return out


def plan_rows(inst: Instance, ga_seconds: float) -> list[dict]:
    """One row per method: each term with its bound and gap, turnaround, seconds."""
    t0 = time.perf_counter()
    bound = lower_bound(inst)
    bound_s = time.perf_counter() - t0
    rows = []
    for method in METHODS:
        t0 = time.perf_counter()
        if method == "reference":
            assign, start = reference_plan(inst, bound.value)
            result = make_result(inst, "reference", assign, start, bound.value,
                                 tardiness_bound=bound.tardiness,
                                 completion_bound=bound.completion,
                                 completion_parts=bound.completion_parts)
        else:
            result = solve(inst, method, seed=0, budget=ga_seconds, bound=bound)
        seconds = time.perf_counter() - t0
        s = summary(inst, result)
        rows.append({
            "method": method,
            "makespan_h": round(s["makespan_h"], 2),
            "makespan_bound_h": round(s["lower_bound_h"], 2),
            "makespan_gap_pct": round(s["gap_pct"], 2),
            "w_tardiness_h": round(s["weighted_tardiness_h"], 1),
            "tardiness_excess_h": round(s["weighted_tardiness_excess_h"], 1),
            "w_completion_h": round(s["weighted_completion_h"], 1),
            "completion_bound_h": round(s["weighted_completion_bound_h"], 1),
            "completion_gap_pct": s["weighted_completion_gap_pct"],
            "bound_set_by": s["weighted_completion_bound_set_by"],
            "mean_wait_h": round(s["mean_wait_h"], 2),
            "p90_wait_h": round(s["p90_wait_h"], 2),
            "mean_bsld": round(s["mean_bounded_slowdown"], 2),
            "plan_s": round(seconds, 2),
            "bound_s": round(bound_s, 2),
        })
    return rows


def all_ready_at_start(batch: Batch) -> Batch:
    """The same jobs, all ready at minute 0: the week handed over as one batch to plan."""
    jobs = [job.model_copy(update={"ready_h": 0.0}) for job in batch.jobs]
    return batch.model_copy(update={"jobs": jobs})


def shrink(inventory: Inventory, divisor: int) -> Inventory:
    """The same node kinds, each group's count divided by `divisor` (at least 1 node)."""
    nodes = [g.model_copy(update={"count": max(1, g.count // divisor)}) for g in inventory.nodes]
    return inventory.model_copy(update={"nodes": nodes})


def week_rows(trace: Trace, inventories: dict[int, Inventory], weeks: list[int],
              estimates: list[str], ga_seconds: float) -> pd.DataFrame:
    """Rows per week x inventory x hours source x ready rule (0, submit) x method."""
    rows = []
    for week, (n_nodes, inventory), estimate in itertools.product(
            weeks, inventories.items(), estimates):
        imported = week_batch(trace, inventory, week, estimate=estimate)
        for ready in ("0", "submit"):
            batch = imported.batch if ready == "submit" else all_ready_at_start(imported.batch)
            inst = build_instance(expand_batch(batch))
            base = {"week": week, "nodes": n_nodes, "hours_from": estimate, "ready": ready,
                    "jobs": imported.imported,
                    "core_hours": round(float((inst.hours * inst.demand[:, 0]).sum()), 1)}
            for row in plan_rows(inst, ga_seconds):
                rows.append({**base, **row})
                print(rows[-1], file=sys.stderr, flush=True)
    return pd.DataFrame(rows)


def generated_rows(specs: list[str], ga_seconds: float) -> pd.DataFrame:
    """Rows per generated batch (`scale:seed`) x method."""
    rows = []
    for spec in specs:
        scale, seed = spec.split(":")
        doc = batch_doc(generate(scale, int(seed)))
        inst = build_instance(expand_batch(parse_batch_text(json.dumps(doc))))
        base = {"batch": f"{scale} seed {seed}", "jobs": inst.n_jobs, "nodes": inst.n_nodes}
        for row in plan_rows(inst, ga_seconds):
            rows.append({**base, **row})
            print(rows[-1], file=sys.stderr, flush=True)
    return pd.DataFrame(rows)


def targets(weeks: pd.DataFrame) -> dict:
    """The issue's targets, checked per real week (one week = week x nodes x hours x ready)."""
    keys = ["week", "nodes", "hours_from", "ready"]
    by = weeks.set_index(keys + ["method"])
    out = {"weeks": 0, "best_makespan": 0, "beats_reference": 0, "missed": []}
    for key, group in weeks.groupby(keys):
        ga = by.loc[(*key, "ga")]
        ref = by.loc[(*key, "reference")]
        out["weeks"] += 1
        best = ga["makespan_h"] <= group["makespan_h"].min()
        beats = ga["w_completion_h"] <= ref["w_completion_h"]
        out["best_makespan"] += bool(best)
        out["beats_reference"] += bool(beats)
        if not (best and beats):
            out["missed"].append(
                f"week {key[0]} on {key[1]} nodes, ready {key[3]}: ga {ga['makespan_h']} h /"
                f" {ga['w_completion_h']:,.0f} h, reference {ref['makespan_h']} h /"
                f" {ref['w_completion_h']:,.0f} h")
    ga_rows = weeks[weeks["method"] == "ga"]
    out["median_gap"] = float(ga_rows["completion_gap_pct"].median())
    out["worst_gap"] = ga_rows.loc[ga_rows["completion_gap_pct"].idxmax()]
    return out


def headline(weeks: pd.DataFrame, generated: pd.DataFrame) -> list[str]:
    """The figures worth reading first, computed from the rows (so they never drift)."""
    t = targets(weeks)
    worst = t["worst_gap"]
    lines = [
        f"- ga's makespan is the best found (greedy, ga, reference) on {t['best_makespan']} of"
        f" {t['weeks']} real weeks (target: all).",
        f"- ga's weighted completion time is no worse than the reference list schedule's on"
        f" {t['beats_reference']} of {t['weeks']} (target: all)"
        + (": missed on " + "; ".join(t["missed"]) if t["missed"] else "") + ".",
        f"- Median gap of ga's weighted completion time to its lower bound over the real weeks:"
        f" {t['median_gap']:.1f} % (target: at most 15 %); largest"
        f" {worst['completion_gap_pct']:.1f} % (week {worst['week']}, {worst['nodes']} nodes,"
        f" ready {worst['ready']}).",
    ]
    for (nodes, ready), g in weeks[weeks["method"] == "ga"].groupby(["nodes", "ready"]):
        lines.append(f"  - {nodes} nodes, ready {ready}: median completion gap"
                     f" {g['completion_gap_pct'].median():.1f} %, median makespan gap"
                     f" {g['makespan_gap_pct'].median():.2f} %.")
    if len(generated):
        gap = generated.groupby("method")["completion_gap_pct"].median()
        ga = generated[generated["method"] == "ga"]
        ref = generated[generated["method"] == "reference"].set_index("batch")
        shorter = sum(r["makespan_h"] <= ref.loc[r["batch"], "makespan_h"]
                      for _, r in ga.iterrows())
        lines.append(
            f"- Generated batches: ga's makespan no longer than the reference's on {shorter} of"
            f" {len(ga)}; median completion gap: ga {gap['ga']:.1f} %, reference"
            f" {gap['reference']:.1f} %, greedy {gap['greedy']:.1f} %.")
    return lines


def ratio_quantiles(trace: Trace) -> tuple[pd.DataFrame, dict]:
    """Quantiles of requested time / actual run time over every job that has both (> 0)."""
    req, run, status = trace.jobs[:, REQ_TIME], trace.jobs[:, RUN], trace.jobs[:, STATUS]
    both = (req > 0) & (run > 0)
    ratio = req[both] / run[both]
    table = pd.DataFrame({"quantile": QUANTILES, "requested/actual": np.quantile(ratio, QUANTILES)})
    facts = {
        "jobs": int(len(trace.jobs)),
        "with_both": int(both.sum()),
        "mean": float(ratio.mean()),
        "overran_pct": 100 * float((ratio < 1).mean()),
        "completed_median": float(np.median(ratio[status[both] == 1])),
        "failed_median": float(np.median(ratio[status[both] == 0])),
    }
    return table, facts


def comparison(weeks: pd.DataFrame) -> pd.DataFrame:
    """Per week and method: the plan with requested hours against the plan with actual hours."""
    keyed = weeks.set_index(["week", "nodes", "ready", "method", "hours_from"])
    req = keyed.xs("requested", level="hours_from")
    act = keyed.xs("actual", level="hours_from")
    return pd.DataFrame({
        "core_hours_req": req["core_hours"], "core_hours_act": act["core_hours"],
        "makespan_req_h": req["makespan_h"], "makespan_act_h": act["makespan_h"],
        "makespan_change_pct": (100 * (act["makespan_h"] / req["makespan_h"] - 1)).round(1),
    }).reset_index()


def md_table(frame: pd.DataFrame, digits: int | None = None) -> str:
    """A pipe table (pandas' own to_markdown needs a package we do not depend on)."""
    def cell(v) -> str:
        if isinstance(v, float) and np.isnan(v):
            return "–"
        return f"{v:.{digits}f}" if digits is not None and isinstance(v, float) else str(v)

    head = "| " + " | ".join(map(str, frame.columns)) + " |"
    rule = "|" + "|".join("---" for _ in frame.columns) + "|"
    body = ["| " + " | ".join(cell(v) for v in row) + " |" for row in frame.itertuples(index=False)]
    return "\n".join([head, rule, *body])


WEEK_COLUMNS = ["week", "nodes", "ready", "jobs", "method", "makespan_h", "makespan_gap_pct",
                "w_completion_h", "completion_bound_h", "completion_gap_pct", "bound_set_by",
                "mean_wait_h", "p90_wait_h", "mean_bsld", "plan_s"]
GENERATED_COLUMNS = ["batch", "jobs", "nodes", "method", "makespan_h", "makespan_gap_pct",
                     "w_tardiness_h", "tardiness_excess_h", "w_completion_h",
                     "completion_bound_h", "completion_gap_pct", "mean_wait_h", "mean_bsld",
                     "plan_s"]


def markdown(args, trace: Trace, weeks: pd.DataFrame, generated: pd.DataFrame,
             ratios: pd.DataFrame, facts: dict) -> str:
    inv = load_inventory(args.inventory)
    nodes = ", ".join(f"{g.count} x {g.cores} cores / {g.memory_gib:g} GiB" for g in inv.nodes)
    estimates = ",".join(args.estimates)
    lines = [
        SECTION, "",
        f"Command: `python benchmarks/bench_real_weeks.py {Path(args.trace).name}"
        f" --weeks {','.join(map(str, args.weeks))} --ga-seconds {args.ga_seconds:g}"
        f" --estimates {estimates} --generated {','.join(args.generated)}`"
        " (2 shared cores). Trace: Parallel Workloads Archive,"
        " KTH-SP2-1996-2.1-cln (IBM SP2, 100 nodes, 1996-97; Feitelson, Tsafrir, Krakov,"
        f" JPDC 74(10), 2014), {facts['jobs']} jobs, {trace.n_weeks} weeks.",
        f"Inventory `{Path(args.inventory).name}` (invented): {nodes}. Each trace job becomes one"
        " single-node job: cores = requested processors, 2 GiB per core (the trace records no"
        " memory), hours = the requested time, weight 1, no due time, ready at its submit time"
        " within the week (`ready = submit`) or all at minute 0 (`ready = 0`, the week handed"
        " over as one batch); jobs wider than 32 processors are skipped."
        f" `nodes` = {sum(g.count for g in inv.nodes)}: that file; the smaller count: the same"
        f" kinds with every group count divided by {TIGHT_DIVISOR}.",
        f"Methods: greedy; ga ({args.ga_seconds:g} s budget, seed 0); reference: the list"
        " schedule of issue 24 (jobs longer than half the makespan bound first, longest first,"
        " then the rest by duration over weight, each at its earliest start on any node;"
        " `reference_plan`). Gaps: makespan to the makespan bound, weighted completion time to"
        " the completion bound (`bounds.completion`; `bound_set_by` names its part), tardiness"
        " as the excess over its bound in weighted hours (the bound is 0 on these batches: no"
        " relative gap). Wait = start - ready; bounded slowdown with a 10 min threshold."
        " plan_s: seconds of the method (bound included for greedy and ga).",
        "", *headline(weeks, generated), "",
        "### Per week", "", md_table(weeks[WEEK_COLUMNS]), "",
    ]
    if len(generated):
        lines += ["### Generated batches (`assignplan.generate`)", "",
                  md_table(generated[GENERATED_COLUMNS]), ""]
    lines += [
        "### Requested time / actual run time, whole trace", "",
        f"Over the {facts['with_both']} jobs with both values: mean {facts['mean']:.1f};"
        f" {facts['overran_pct']:.1f} % ran longer than requested (ratio < 1);"
        f" median {facts['completed_median']:.2f} for completed"
        f" and {facts['failed_median']:.2f} for failed jobs.", "",
        md_table(ratios, digits=2), "",
    ]
    if set(args.estimates) == {"requested", "actual"}:
        lines += ["### Requested against actual hours, same week and method", "",
                  md_table(comparison(weeks)), ""]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("trace", nargs="?", default=str(DEFAULT_TRACE))
    parser.add_argument("--inventory", default=str(REPO / "examples" / "inventory-24x32.json"))
    parser.add_argument("--weeks", type=lambda s: [int(w) for w in s.split(",")],
                        default=list(DEFAULT_WEEKS))
    parser.add_argument("--ga-seconds", type=float, default=20.0)
    parser.add_argument("--estimates", type=lambda s: s.split(","), default=["requested"])
    parser.add_argument("--generated", type=lambda s: [g for g in s.split(",") if g],
                        default=list(DEFAULT_GENERATED))
    parser.add_argument("--results", default=str(REPO / "benchmarks" / "RESULTS.md"))
    parser.add_argument("--no-write", action="store_true", help="print, do not touch RESULTS.md")
    args = parser.parse_args(argv)

    trace = read_swf(args.trace)
    inventory = load_inventory(args.inventory)
    # The full inventory is far larger than the traced machine (768 cores against 100
    # processors); a quarter of it makes the packing, not the arrival times, set the makespan.
    inventories = {sum(g.count for g in inv.nodes): inv
                   for inv in (inventory, shrink(inventory, TIGHT_DIVISOR))}
    weeks = week_rows(trace, inventories, args.weeks, args.estimates, args.ga_seconds)
    generated = generated_rows(args.generated, args.ga_seconds)
    ratios, facts = ratio_quantiles(trace)
    text = markdown(args, trace, weeks, generated, ratios, facts)
    print(text)
    if not args.no_write:
        write_section(text, Path(args.results), SECTION)


if __name__ == "__main__":
    main()
