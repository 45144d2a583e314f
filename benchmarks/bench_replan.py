"""Replanning mid-week: a 2,000-job week replanned with 200 run times changed and 5 nodes down,
with the churn tie-break against planning the rest from scratch (`--free`).

    .venv/bin/python benchmarks/bench_replan.py [--seeds 1,2,3] [--old-seconds 30]
        [--seconds 25] [--no-write]

The week: the generated medium batch (2,000 jobs x 200 nodes, `assignplan/generate.py`), its
ga plan (seed 0, --old-seconds). "Mid-week" is half that plan's makespan (the generated
batches end well inside their 168-hour window). The state is simulated from the plan: jobs
in planned start order start when planned or when the jobs they follow actually ended; 200
of the started jobs (drawn with the seed) run 0.5 to 1.6 times their estimate; a started job
that has not ended by now is running (if it fits its node beside the others), else done;
then 5 nodes of the larger groups go down from now until further notice. Each replan (ga and
greedy; churn last, churn before the completion time, no churn term) gets the same budget;
times are wall seconds of `replan.replan` (reading excluded). Numbers, not asserts.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from datetime import date
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

from bench_builder import write_section  # noqa: E402
from bench_risk import machine  # noqa: E402

from assignplan.expand import load_batch  # noqa: E402
from assignplan.generate import batch_doc, generate  # noqa: E402
from assignplan.instance import build_instance  # noqa: E402
from assignplan.plan import objective, to_plan_doc  # noqa: E402
from assignplan.replan import load_replan, replan  # noqa: E402
from assignplan.solve import solve  # noqa: E402

SECTION = "## Replanning mid-week"
TIE_BREAKS = {"churn": "churn last (default)", "fewer": "churn before completion"
              " (--fewer-moves)", "free": "none (--free)"}


def simulated_state(batch, inst, old, now: int, *, changed: int, down: int,
                    rng: np.random.Generator) -> dict:
    """The state document of the module docstring."""
    jobs = {j.name: j for j in batch.jobs}
    started = np.flatnonzero(old.start < now)
    factor = np.ones(inst.n_jobs)
    pick = rng.choice(started, size=min(changed, len(started)), replace=False)
    factor[pick] = rng.uniform(0.5, 1.6, size=len(pick))
    actual_end: dict[str, int] = {}
    held: dict[int, np.ndarray] = {}
    entries = []
    for j in np.argsort(old.start, kind="stable").tolist():
        name = inst.job_names[j]
        pred_end = max((actual_end.get(p, 10**12) for p in jobs[name].follows), default=0)
        start = max(int(old.start[j]), pred_end)
        if start >= now:
            continue
        i = int(old.assign[j])
        end = start + max(1, round((old.end[j] - old.start[j]) * factor[j]))
        if end <= now:
            actual_end[name] = end
            entries.append({"job": name, "status": "done", "node": inst.node_names[i],
                            "start_h": start / 60, "end_h": end / 60})
            continue
        room = held.setdefault(i, inst.capacity[i].copy())
        if np.any(room < inst.demand[j]):
            continue  # does not fit beside the jobs running there: taken as not started
        room -= inst.demand[j]
        entries.append({"job": name, "status": "running", "node": inst.node_names[i],
                        "start_h": start / 60, "end_h": end / 60})
    sizes = np.bincount(np.unique(inst.node_groups, return_inverse=True)[1])
    group_of = np.unique(inst.node_groups, return_inverse=True)[1]
    large = np.flatnonzero(sizes[group_of] >= 10)
    nodes = [{"node": inst.node_names[i], "status": "down", "start_h": now / 60}
             for i in rng.choice(large, size=down, replace=False).tolist()]
    return {"now_h": now / 60, "jobs": entries, "nodes": nodes}


def one_week(seed: int, old_seconds: float, seconds: float) -> tuple[dict, list]:
    """The facts of one week's replan and its rows (method, free, seconds, Replanned)."""
    rng = np.random.default_rng(seed)
    folder = Path(tempfile.mkdtemp(prefix="bench-replan-"))
    batch_path = folder / "batch.json"
    batch_path.write_text(json.dumps(batch_doc(generate("medium", seed))))
    batch = load_batch(batch_path)
    inst = build_instance(batch)
    old = solve(inst, "ga", seed=0, budget=old_seconds)
    old_path = folder / "old.json"
    old_path.write_text(json.dumps(to_plan_doc(inst, old).model_dump(mode="json")))
    now = old.makespan // 2
    state = simulated_state(batch, inst, old, now, changed=200, down=5, rng=rng)
    state_path = folder / "state.json"
    state_path.write_text(json.dumps(state))
    t0 = time.perf_counter()
    given = load_replan(batch_path, old_path, state_path, now=None)
    reading = time.perf_counter() - t0
    rows = []
    for method in ("ga", "greedy"):
        for mode in TIE_BREAKS:
            t0 = time.perf_counter()
            out = replan(given, method, seed=0, budget=seconds, free=mode == "free",
                         fewer_moves=mode == "fewer")
            rows.append((method, mode, time.perf_counter() - t0, out))
            print(seed, method, mode, f"{rows[-1][2]:.1f} s", out.result.makespan / 60,
                  out.churn, file=sys.stderr)
    facts = {"seed": seed, "old": old.makespan / 60, "now": now / 60,
             "pinned": len(given.pins.jobs), "lost": len(given.pins.lost),
             "replanned": rows[0][3].replanned, "reading": reading}
    return facts, rows


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", default="1,2,3")
    ap.add_argument("--old-seconds", type=float, default=30.0)
    ap.add_argument("--seconds", type=float, default=25.0)
    ap.add_argument("--no-write", action="store_true")
    args = ap.parse_args(argv)
    weeks = [one_week(int(s), args.old_seconds, args.seconds) for s in args.seeds.split(",")]
    lines = [SECTION, "",
             "Generated medium batches (2,000 jobs x 200 nodes) planned by the ga"
             f" ({args.old_seconds:g} s, seed 0), replanned at half that plan's makespan with"
             " 200 run times changed (x0.5 to x1.6) and 5 nodes down from then on (the state"
             " simulated as in the script's docstring). Budget"
             f" {args.seconds:g} s per replan (the churn tie-break keeps 10 % of it; the ga"
             " starts from the old plan kept where it can be); time: wall seconds of"
             " `replan.replan`, the documents already read (reading them: the last column)."
             " Moved: jobs planned again on another node than the old plan's; shifted: starts"
             " moved by more than an hour; both over the jobs planned again.", "",
             "| batch seed | old makespan h | now h | pinned | stopped | planned again | method"
             " | tie-break | time | makespan h | lower bound h | weighted tardiness h |"
             " weighted completion h | moved | shifted | reading |",
             "|---:|---:|---:|---:|---:|---:|---|---|---:|---:|---:|---:|---:|---:|---:|---:|"]
    for facts, rows in weeks:
        for method, mode, seconds, out in rows:
            terms = objective(out.inst, out.result.end)
            lines.append(
                f"| {facts['seed']} | {facts['old']:.2f} | {facts['now']:.2f} |"
                f" {facts['pinned']:,} | {facts['lost']} | {facts['replanned']:,} | {method} |"
                f" {TIE_BREAKS[mode]} | {seconds:.1f} s |"
                f" {out.result.makespan / 60:.2f} | {out.result.lower_bound / 60:.2f} |"
                f" {terms[1] / 60:,.1f} | {terms[2] / 60:,.1f} |"
                f" {out.churn.moved:,} | {out.churn.shifted:,} | {facts['reading']:.1f} s |")
    lines += ["", "Reproduce: `.venv/bin/python benchmarks/bench_replan.py --seeds"
              f" {args.seeds} --old-seconds {args.old_seconds:g} --seconds {args.seconds:g}`"
              " (from the repository root).", "",
              f"Machine: {machine()}. Measured {date.today().isoformat()}.", ""]
    text = "\n".join(lines)
    print(text)
    if not args.no_write:
        write_section(text, HERE / "RESULTS.md", SECTION)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
