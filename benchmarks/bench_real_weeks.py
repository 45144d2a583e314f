"""Plan real weeks of the KTH-SP2 trace on an invented 24-node inventory; write RESULTS.md.

Usage (from the repository root):
    .venv/bin/python benchmarks/bench_real_weeks.py [TRACE.swf] [--weeks 2,13,20,34,45]
        [--inventory examples/inventory-24x32.json] [--ga-seconds 20] [--no-write]

For every chosen week it imports the jobs twice (hours = requested time, hours = actual run
time), plans them with greedy and with ga, and reports jobs, makespan, lower bound, gap, core
utilisation and seconds. It also measures the requested/actual run-time ratio over the whole
trace. Results, not asserts.
"""

from __future__ import annotations

import argparse
import itertools
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from assignplan.bounds import lower_bound
from assignplan.documents import Batch
from assignplan.expand import expand_batch
from assignplan.importers import Inventory, load_inventory
from assignplan.importers.swf import REQ_TIME, RUN, STATUS, Trace, read_swf, week_batch
from assignplan.instance import build_instance
from assignplan.methods.greedy import solve_greedy
from assignplan.metrics import summary
from benchmarks.bench_builder import write_section

SECTION = "## Real weeks from the KTH-SP2 trace"
DEFAULT_TRACE = REPO / "tests" / "data" / "published" / "swf" / "KTH-SP2-1996-2.1-cln.swf"
# Spread over the year; 34 is the busiest week of the trace (1,207 submitted jobs).
DEFAULT_WEEKS = (2, 13, 20, 34, 45)
TIGHT_DIVISOR = 4
QUANTILES = (0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95, 0.99)


def warm_up(trace: Trace, inventory, week: int) -> None:
    """Compile the numba kernels once so that no timed row pays for it."""
    inst = build_instance(expand_batch(week_batch(trace, inventory, week).batch))
    solve_greedy(inst, lower_bound=lower_bound(inst).value)


def plan_rows(inst, methods: list[str], ga_seconds: float) -> list[dict]:
    """One row per method: makespan, bound, gap, core utilisation and seconds."""
    t0 = time.perf_counter()
    bound = lower_bound(inst).value
    bound_s = time.perf_counter() - t0
    rows = []
    for method in methods:
        t0 = time.perf_counter()
        if method == "greedy":
            result = solve_greedy(inst, lower_bound=bound)
        else:
            from assignplan.solve import solve

            result = solve(inst, method, seed=0, budget=ga_seconds)
        seconds = time.perf_counter() - t0
        s = summary(inst, result)
        rows.append({
            "method": method,
            "makespan_h": round(float(s["makespan_h"]), 2),
            "lower_bound_h": round(bound / 60, 2),
            "gap_pct": round(float(s["gap_pct"]), 2),
            "core_util_pct": round(float(s["core_utilisation_pct"]), 1),
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
              methods: list[str], ga_seconds: float) -> pd.DataFrame:
    """Rows per week x inventory x hours source x ready times (submit, 0) x method."""
    rows = []
    for week, (n_nodes, inventory), estimate in itertools.product(
        weeks, inventories.items(), ("requested", "actual")
    ):
        t0 = time.perf_counter()
        imported = week_batch(trace, inventory, week, estimate=estimate)
        import_s = time.perf_counter() - t0
        for ready in ("submit", "0"):
            batch = imported.batch if ready == "submit" else all_ready_at_start(imported.batch)
            inst = build_instance(expand_batch(batch))
            base = {
                "week": week, "nodes": n_nodes, "hours_from": estimate, "ready": ready,
                "submitted": imported.submitted, "jobs": imported.imported,
                "skipped": sum(imported.skipped.values()),
                "core_hours": round(float((inst.hours * inst.demand[:, 0]).sum()), 1),
                "import_s": round(import_s, 2),
            }
            for row in plan_rows(inst, methods, ga_seconds):
                rows.append({**base, **row})
                print(rows[-1], file=sys.stderr)
    return pd.DataFrame(rows)


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
        "util_req_pct": req["core_util_pct"], "util_act_pct": act["core_util_pct"],
    }).reset_index()


def md_table(frame: pd.DataFrame, digits: int | None = None) -> str:
    """A pipe table (pandas' own to_markdown needs a package we do not depend on)."""
    def cell(v) -> str:
        return f"{v:.{digits}f}" if digits is not None and isinstance(v, float) else str(v)

    head = "| " + " | ".join(map(str, frame.columns)) + " |"
    rule = "|" + "|".join("---" for _ in frame.columns) + "|"
    body = ["| " + " | ".join(cell(v) for v in row) + " |" for row in frame.itertuples(index=False)]
    return "\n".join([head, rule, *body])


def headline(weeks: pd.DataFrame) -> str:
    """The figures worth reading first, computed from the rows (so they never drift)."""
    worst = weeks.loc[weeks["gap_pct"].idxmax()]
    change = comparison(weeks)["makespan_change_pct"]
    by_source = weeks.groupby("hours_from")["core_hours"].sum()
    return (
        f"Largest gap to the lower bound: {worst['gap_pct']} % (week {worst['week']},"
        f" {worst['nodes']} nodes, hours from {worst['hours_from']}, ready {worst['ready']},"
        f" {worst['method']}); {int((weeks['gap_pct'] == 0).sum())} of {len(weeks)} plans"
        f" meet the bound. Planning with actual instead of requested hours changes the"
        f" makespan by {change.min():+.1f} % to {change.max():+.1f} % (median"
        f" {change.median():+.1f} %); requested core-hours are"
        f" {by_source['requested'] / by_source['actual']:.2f}"
        " times the actual ones over these weeks."
    )


def markdown(args, trace: Trace, weeks: pd.DataFrame, ratios: pd.DataFrame, facts: dict,
             methods: list[str]) -> str:
    inv = load_inventory(args.inventory)
    nodes = ", ".join(f"{g.count} x {g.cores} cores / {g.memory_gib:g} GiB" for g in inv.nodes)
    lines = [
        SECTION, "",
        f"Command: `python benchmarks/bench_real_weeks.py {Path(args.trace).name}"
        f" --weeks {','.join(map(str, args.weeks))}`. Trace: Parallel Workloads Archive,"
        " KTH-SP2-1996-2.1-cln (IBM SP2, 100 nodes, 1996-97; Feitelson, Tsafrir, Krakov,"
        f" JPDC 74(10), 2014), {facts['jobs']} jobs, {trace.n_weeks} weeks.",
        f"Inventory `{Path(args.inventory).name}` (invented): {nodes}. Each trace job becomes one"
        " single-node job: cores = requested processors, 2 GiB per core (the trace records no"
        " memory), ready at its submit time within the week; jobs wider than 32 processors"
        f" are skipped. `nodes` = {sum(g.count for g in inv.nodes)}: that file;"
        f" the smaller count: the same kinds with every group count divided by {TIGHT_DIVISOR}.",
        f"Methods: {', '.join(methods)}.",
        "`ready = submit`: each job ready at its submit time, so the makespan can never be below"
        " the last submit time of the week plus that job's run (the `job` part of the lower"
        " bound). `ready = 0`: the same jobs handed over at once, as a batch planned ahead.",
        "plan_s: seconds of the method alone (a warm-up run compiles the kernels first);"
        " bound_s: seconds of the lower bound.",
        "", headline(weeks), "", "### Per week", "", md_table(weeks), "",
        "### Requested time / actual run time, whole trace", "",
        f"Over the {facts['with_both']} jobs with both values: mean {facts['mean']:.1f};"
        f" {facts['overran_pct']:.1f} % ran longer than requested (ratio < 1);"
        f" median {facts['completed_median']:.2f} for completed"
        f" and {facts['failed_median']:.2f} for failed jobs.", "",
        md_table(ratios, digits=2), "",
        "### Requested against actual hours, same week and method", "",
        md_table(comparison(weeks)), "",
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("trace", nargs="?", default=str(DEFAULT_TRACE))
    parser.add_argument("--inventory", default=str(REPO / "examples" / "inventory-24x32.json"))
    parser.add_argument("--weeks", type=lambda s: [int(w) for w in s.split(",")],
                        default=list(DEFAULT_WEEKS))
    parser.add_argument("--ga-seconds", type=float, default=20.0)
    parser.add_argument("--results", default=str(REPO / "benchmarks" / "RESULTS.md"))
    parser.add_argument("--no-write", action="store_true", help="print, do not touch RESULTS.md")
    args = parser.parse_args(argv)

    trace = read_swf(args.trace)
    inventory = load_inventory(args.inventory)
    methods = ["greedy", "ga"]
    # The full inventory is far larger than the traced machine (768 cores against 100
    # processors); a quarter of it makes the packing, not the arrival times, set the makespan.
    inventories = {sum(g.count for g in inv.nodes): inv
                   for inv in (inventory, shrink(inventory, TIGHT_DIVISOR))}
    warm_up(trace, inventory, args.weeks[0])
    weeks = week_rows(trace, inventories, args.weeks, methods, args.ga_seconds)
    ratios, facts = ratio_quantiles(trace)
    text = markdown(args, trace, weeks, ratios, facts, methods)
    print(text)
    if not args.no_write:
        write_section(text, Path(args.results), SECTION)


if __name__ == "__main__":
    main()
