"""Runtime risk: replay throughput and memory, and robust plans against single-estimate ones.

    .venv/bin/python benchmarks/bench_risk.py [--part speed|robust|all] [--no-write]
        [--samples 1000] [--large-samples 10000] [--small-seconds 20] [--medium-seconds 60]

`speed`: 1,000 sampled futures of a ga plan of the generated 2,000 x 200 batch, per policy
and both (the `risk` command's replay); then 10,000 futures of a greedy plan of the
10,000 x 1,000 batch in a child process, whose peak memory is read back. `robust`: on
generated batches, the ga planning for the single estimate against the ga planning for the
P90 makespan over 32 futures (`solve --robust 0.9`), both judged on 1,000 other futures.
Each part writes its own section of benchmarks/RESULTS.md (others are left as they are).
Numbers, not asserts: timings depend on the machine and on what else runs on it.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numba
import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

from bench_builder import instance, write_section  # noqa: E402

from assignplan.bounds import lower_bound  # noqa: E402
from assignplan.methods.ga import ga_settings  # noqa: E402
from assignplan.methods.greedy import greedy_assign  # noqa: E402
from assignplan.plan import make_result  # noqa: E402
from assignplan.risk.figures import assess, summary  # noqa: E402
from assignplan.risk.models import parse_model  # noqa: E402
from assignplan.risk.replay import quantile, replay, replay_plan  # noqa: E402
from assignplan.risk.robust import Robust  # noqa: E402
from assignplan.risk.sampling import bind  # noqa: E402
from assignplan.solve import solve  # noqa: E402

SPEED = "## Runtime risk: replay throughput and memory"
ROBUST = "## Runtime risk: robust against single-estimate plans"
KTH = ROOT / "tests" / "data" / "published" / "swf" / "KTH-SP2-1996-2.1-cln.swf"
MODELS = {"lognormal cv 0.3": "lognormal:0.3", "KTH-SP2 actual/requested": f"trace:{KTH}"}


def machine() -> str:
    cpu = platform.processor() or platform.machine()
    try:
        cpu = next(line.split(":", 1)[1].strip() for line in
                   Path("/proc/cpuinfo").read_text().splitlines()
                   if line.startswith("model name"))
    except (OSError, StopIteration):
        pass
    load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
    return (f"{cpu}, {os.cpu_count()} logical CPUs, {numba.get_num_threads()} numba threads,"
            f" shared with other work (load average {load} when the part ended); Python"
            f" {platform.python_version()}, numpy {np.__version__}, numba {numba.__version__}")


def median_seconds(fn, repeats: int) -> float:
    fn()  # warm-up: compile or load the cached kernels
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def rss_mib() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


# --------------------------------------------------------------------------- speed


def speed_rows(samples: int, repeats: int, seconds: float) -> list[str]:
    inst = instance("medium", 1)
    plan = replay_plan(inst, solve(inst, "ga", seed=0, budget=seconds))
    sampler = bind(parse_model("lognormal:0.3"), inst)
    rows = []
    for policies in (("keep",), ("dispatch",), ("keep", "dispatch")):
        sec = median_seconds(lambda p=policies: replay(inst, plan, sampler, policies=p,
                                                       samples=samples, seed=0), repeats)
        rows.append(f"| {' + '.join(policies)} | medium {inst.n_jobs:,} x {inst.n_nodes:,} |"
                    f" {samples:,} | {sec:.2f} s | {samples / sec:,.0f} |"
                    f" {samples * len(policies) * inst.n_jobs / sec / 1e6:.2f} M | – |")
        print(rows[-1], flush=True)
    return rows


def memory_child(samples: int) -> dict:
    """Run in a child process: the greedy plan of the large batch, replayed `samples` times
    under both policies with the figures computed; peak and baseline memory."""
    inst = instance("large", 1)
    assign, start = greedy_assign(inst)
    result = make_result(inst, "greedy", assign, start, 0)
    sampler = bind(parse_model("lognormal:0.3"), inst)
    replay(inst, replay_plan(inst, result), sampler, samples=4, seed=1)  # compile / load
    before = rss_mib()
    t0 = time.perf_counter()
    risk = assess(inst, result, sampler, samples=samples, seed=0)
    figures = summary(inst, risk)
    return {"jobs": inst.n_jobs, "nodes": inst.n_nodes, "samples": samples,
            "seconds": time.perf_counter() - t0, "baseline_mib": before,
            "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
            "p90_keep_h": figures["policies"]["keep"]["makespan_h"]["p90"],
            "p90_dispatch_h": figures["policies"]["dispatch"]["makespan_h"]["p90"]}


def memory_row(samples: int) -> str:
    out = subprocess.run([sys.executable, __file__, "--part", "memory-child", "--large-samples",
                          str(samples)], check=True, capture_output=True, text=True)
    m = json.loads(out.stdout.strip().splitlines()[-1])
    row = (f"| keep + dispatch, with the figures | large {m['jobs']:,} x {m['nodes']:,} |"
           f" {m['samples']:,} | {m['seconds']:.0f} s | {m['samples'] / m['seconds']:,.0f} |"
           f" {2 * m['samples'] * m['jobs'] / m['seconds'] / 1e6:.2f} M |"
           f" {m['peak_mib']:,.0f} MiB ({m['baseline_mib']:,.0f} MiB before the replays) |")
    print(row, flush=True)
    return row


def speed_section(args) -> str:
    header = ["| policies | batch (jobs x nodes) | samples | time | samples / s |"
              " job placements / s | peak memory |", "|---|---|---:|---:|---:|---:|---:|"]
    print("\n".join(header), flush=True)
    rows = speed_rows(args.samples, args.repeats, args.medium_seconds)
    rows.append(memory_row(args.large_samples))
    return "\n".join([
        SPEED, "",
        "Sampled futures of a plan replayed by the compiled kernel (`kernels_replay`), "
        "streamed in chunks of 250 samples into per-job and per-node accumulators "
        "(`risk.replay`), lognormal cv 0.3. Medium rows: the ga plan of the generated batch "
        f"(seed 1, {args.medium_seconds:g} s), median of {args.repeats} runs after a warm-up "
        "run, `replay` as `assignplan risk` calls it (factor draws, replays, folds, merges). "
        "Large row: the greedy plan of the generated 10,000 x 1,000 batch, one run of "
        "`risk.figures.assess` and its figures in a child process; peak memory is the "
        "child's (instance and plan included).", "",
        *header, *rows, "",
        "Targets: 1,000 samples of the 2,000 x 200 plan in under 2 s on 2 cores; 10,000 "
        "samples of the 10,000 x 1,000 plan within 2 GiB.", "",
        f"Reproduce: `.venv/bin/python benchmarks/bench_risk.py --part speed --samples "
        f"{args.samples} --large-samples {args.large_samples}` (from the repository root).",
        "", f"Machine: {machine()}. Measured {time.strftime('%Y-%m-%d')}.", ""])


# --------------------------------------------------------------------------- robust


def robust_rows(args, outcomes: list[tuple[str, float, float]]) -> list[str]:
    """Table rows; appends (model name, P90 change %, makespan cost %) to `outcomes`."""
    rows = []
    for scale, seeds, seconds in (("small", (1, 2, 3), args.small_seconds),
                                  ("medium", (1, 2), args.medium_seconds)):
        for seed in seeds:
            inst = instance(scale, seed)
            bound = lower_bound(inst)
            settings = ga_settings()
            single = solve(inst, "ga", seed=0, budget=seconds, bound=bound, settings=settings)
            for name, spec in MODELS.items():
                sampler = bind(parse_model(spec), inst)
                robust = solve(inst, "ga", seed=0, budget=seconds, bound=bound,
                               settings=settings, robust=Robust(0.9, 32, sampler, seed=0))
                p90 = []
                for plan in (single, robust):
                    tally = replay(inst, replay_plan(inst, plan), sampler, policies=("keep",),
                                   samples=args.samples, seed=0)["keep"]
                    p90.append(quantile(tally.makespan, 0.9) / 60)
                change = 100 * (p90[1] - p90[0]) / p90[0]
                cost = 100 * (robust.makespan - single.makespan) / single.makespan
                outcomes.append((name, change, cost))
                rows.append(
                    f"| {name} | {scale} {inst.n_jobs:,} x {inst.n_nodes:,}, seed {seed} |"
                    f" {single.makespan / 60:.2f} | {p90[0]:.2f} | {robust.makespan / 60:.2f} |"
                    f" {p90[1]:.2f} | {change:+.1f} % | {cost:+.1f} % |"
                    f" {len(robust.history) - 1} |")
                print(rows[-1], flush=True)
    return rows


def robust_summary(outcomes: list[tuple[str, float, float]]) -> str:
    """Per runtime model: the median (and range) of the P90 change and of the cost."""
    lines = []
    for name in MODELS:
        change = [c for n, c, _ in outcomes if n == name]
        cost = [k for n, _, k in outcomes if n == name]
        if change:
            lines.append(
                f"{name}: P90 change median {statistics.median(change):+.1f} % (from"
                f" {min(change):+.1f} to {max(change):+.1f} %), makespan cost median"
                f" {statistics.median(cost):+.1f} % (from {min(cost):+.1f} to"
                f" {max(cost):+.1f} %) over {len(change)} batches.")
    return " ".join(lines)


def robust_section(args) -> str:
    header = ["| runtime model | batch | single-estimate plan: makespan h | its P90 h |"
              " robust plan: makespan h | its P90 h | P90 change | makespan cost |"
              " robust generations |", "|---|---|---:|---:|---:|---:|---:|---:|---:|"]
    print("\n".join(header), flush=True)
    outcomes: list[tuple[str, float, float]] = []
    rows = robust_rows(args, outcomes)
    return "\n".join([
        ROBUST, "",
        "Generated batches (`assignplan/generate.py`). Single-estimate plan: the ga with its "
        "defaults, seed 0. Robust plan: the same ga scoring every candidate by the P90 of its "
        "makespan (and the mean weighted tardiness) over 32 futures kept fixed for the run "
        "(`solve --robust 0.9 --samples 32`). Both get the same budget "
        f"({args.small_seconds:g} s on small batches, {args.medium_seconds:g} s on medium "
        "ones; the robust ga scores each candidate 32 times, so it runs fewer generations). "
        f"P90: the nearest-rank 90th percentile of the makespan over {args.samples:,} other "
        "futures (the `risk` stream, seed 0) keeping the plan. Makespan: the plan's own, "
        "single-estimate makespan. Trace model: hours read as requested times, factors drawn "
        "from KTH-SP2's actual/requested run times (median 0.40).", "",
        *header, *rows, "", robust_summary(outcomes), "",
        f"Reproduce: `.venv/bin/python benchmarks/bench_risk.py --part robust --samples "
        f"{args.samples} --small-seconds {args.small_seconds:g} --medium-seconds "
        f"{args.medium_seconds:g}` (from the repository root).", "",
        f"Machine: {machine()}. Measured {time.strftime('%Y-%m-%d')}.", ""])


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--part", choices=("speed", "robust", "all", "memory-child"),
                    default="all")
    ap.add_argument("--samples", type=int, default=1_000)
    ap.add_argument("--large-samples", type=int, default=10_000)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--small-seconds", type=float, default=20.0)
    ap.add_argument("--medium-seconds", type=float, default=60.0)
    ap.add_argument("--no-write", action="store_true")
    args = ap.parse_args(argv)
    if args.part == "memory-child":
        print(json.dumps(memory_child(args.large_samples)))
        return 0
    if args.part in ("speed", "all"):
        text = speed_section(args)
        if not args.no_write:
            write_section(text, HERE / "RESULTS.md", SPEED)
    if args.part in ("robust", "all"):
        text = robust_section(args)
        if not args.no_write:
            write_section(text, HERE / "RESULTS.md", ROBUST)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
