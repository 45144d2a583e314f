"""ga against greedy and the lower bound (or known optimum) per scale: makespan, gap, time, memory.

    .venv/bin/python benchmarks/bench_ga.py [--cases small-1,medium-1,...] [--no-write]

Each case runs in its own child process, so its peak resident memory (getrusage maxrss) is
its own. Prints a markdown table and writes it as the section "## Genetic algorithm" of
benchmarks/RESULTS.md (that section only). Numbers, not asserts: they depend on the machine.
A case name is <scale>-<seed> (heterogeneous batch) or <scale>-<seed>-opt (known optimum).
While exploring, BENCH_LIMITS="15,25,60" (small, medium, large seconds) shortens the runs;
use it with --no-write, the written table states the default limits.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from bench_builder import write_section

from assignplan.generate import batch_doc, generate

SECTION = "## Genetic algorithm"
COMMAND = ".venv/bin/python benchmarks/bench_ga.py"
CASES = ("small-1,small-2,small-3,small-1-opt,small-2-opt,medium-1,medium-2,medium-3,"
         "medium-1-opt,medium-2-opt,large-1")
LIMITS = {"small": 20.0, "medium": 60.0, "large": 120.0}  # seconds per ga run
if os.environ.get("BENCH_LIMITS"):  # exploring: "small,medium,large" seconds
    LIMITS = dict(zip(LIMITS, map(float, os.environ["BENCH_LIMITS"].split(",")), strict=True))


def run_case(name: str, seed: int, config_json: str) -> dict:
    """One case in this process: greedy, bound, ga; returns the row as a dict."""
    from assignplan.bounds import lower_bound
    from assignplan.documents import Batch
    from assignplan.expand import expand_batch
    from assignplan.instance import build_instance
    from assignplan.methods.ga import ga_settings, solve_ga
    from assignplan.methods.greedy import solve_greedy

    scale, gen_seed, *opt = name.split("-")
    doc = generate(scale, int(gen_seed), known_optimum=bool(opt))
    inst = build_instance(expand_batch(Batch.model_validate_json(json.dumps(batch_doc(doc)))))
    bound = lower_bound(inst).value
    greedy = solve_greedy(inst, lower_bound=bound)
    config = ga_settings(**json.loads(config_json))
    t0 = time.perf_counter()
    ga = solve_ga(inst, settings=config, lower_bound=bound, seed=seed,
                  budget=LIMITS[scale])
    seconds = time.perf_counter() - t0
    known = round(doc["_known_optimum_h"] * 60) if opt else None
    ref = known if known is not None else bound
    return {"case": name, "jobs": inst.n_jobs, "nodes": inst.n_nodes, "bound": bound,
            "known": known, "greedy": greedy.makespan, "ga": ga.makespan,
            "greedy_gap": 100 * (greedy.makespan - ref) / ref,
            "ga_gap": 100 * (ga.makespan - ref) / ref, "seconds": seconds,
            "generations": len(ga.history) - 1, "evaluations": ga.history[-1].evaluations,
            "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def row(r: dict) -> str:
    h = lambda m: f"{m / 60:.2f}"  # noqa: E731
    known = h(r["known"]) if r["known"] is not None else "–"
    better = "yes" if r["ga"] < r["greedy"] else ("=" if r["ga"] == r["greedy"] else "no")
    return (f"| {r['case']} | {r['jobs']:,} x {r['nodes']:,} | {h(r['bound'])} | {known} | "
            f"{h(r['greedy'])} | {r['greedy_gap']:.1f} | {h(r['ga'])} | {r['ga_gap']:.1f} | "
            f"{better} | {r['generations']:,} | {r['evaluations']:,} | {r['seconds']:.0f} | "
            f"{r['peak_mib']:.0f} |")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", default=CASES)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--config", default="{}",
                    help="ga settings as flat JSON fields, e.g. {\"mu\": 32}")
    ap.add_argument("--no-write", action="store_true")
    ap.add_argument("--one", help=argparse.SUPPRESS)  # child process: run one case
    args = ap.parse_args(argv)
    if args.one:
        print(json.dumps(run_case(args.one, args.seed, args.config)))
        return 0
    header = ["| case | jobs x nodes | lower bound h | known optimum h | greedy h | greedy gap % "
              "| ga h | ga gap % | ga better | generations | evaluations | ga s | peak MiB |",
              "|---|---|---:|---:|---:|---:|---:|---:|---|---:|---:|---:|---:|"]
    print("\n".join(header), flush=True)
    rows = []
    for name in args.cases.split(","):
        out = subprocess.run([sys.executable, __file__, "--one", name, "--seed", str(args.seed),
                              "--config", args.config], check=True, capture_output=True,
                             text=True, env={**os.environ, "PYTHONWARNINGS": "ignore"})
        rows.append(row(json.loads(out.stdout.strip().splitlines()[-1])))
        print(rows[-1], flush=True)
    if args.no_write:
        return 0
    load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
    text = "\n".join([
        SECTION, "",
        "Batches from `assignplan/generate.py` (`<scale>-<seed>`; `-opt`: known-optimum batch, "
        "optimum by construction). Gap % is to the known optimum where there is one, else to "
        "the lower bound (`bounds.lower_bound`), which may be well below the true optimum on "
        "heterogeneous batches. ga: default settings"
        + (f" with {args.config}" if args.config != "{}" else "")
        + f", seed {args.seed}, budget {LIMITS['small']:.0f} / {LIMITS['medium']:.0f} / "
        f"{LIMITS['large']:.0f} s (small / medium / large); ga s includes its greedy seeds; "
        "peak MiB is the case's own process (instance, bound, greedy and ga).", "",
        *header, *rows, "",
        f"Reproduce: `{COMMAND} --seed {args.seed}"
        + (f" --config '{args.config}'" if args.config != "{}" else "") + "` (from the "
        "repository root; a run stopped by its budget depends on machine speed).", "",
        f"Machine: {platform.machine()}, {os.cpu_count()} logical CPUs shared with other work "
        f"(load average {load}); Python {platform.python_version()}, numpy {np.__version__}.",
        "",
    ])
    write_section(text, HERE / "RESULTS.md", SECTION)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
