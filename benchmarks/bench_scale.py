"""How the planner grows with the batch: time and peak memory per stage, 2,000 to 100,000 jobs.

    .venv/bin/python benchmarks/bench_scale.py [--sizes 2000,10000,50000,100000]
        [--ga-seconds 120] [--no-ga] [--no-write]

Batches from `assignplan.generate` with nodes = jobs / 10 (seed 1). Every measurement runs in
a child process of its own, so its peak resident memory (getrusage maxrss) is that stage's
alone, numba's compiled kernels loaded from the cache (a warm-up child compiles them first):

- read: read the file, validate (pydantic and every cross-field check), expand, build the
  instance arrays;
- bound: the lower bound, on top of read;
- greedy: `assignplan solve --method greedy --json`, the whole command as a user runs it;
- check: `assignplan check` of that plan, the whole command;
- generation: the mean time of one ga generation (a ga run of 3 generations after its seeds);
- ga: `assignplan solve` (ga) with `--budget SECONDS`, the whole command.
Writes the section "## Scaling with the batch size" of benchmarks/RESULTS.md (and a log-log
plot, benchmarks/scaling.png) with the fitted growth exponent of each stage (the slope of
log time against log jobs, least squares). Numbers, not asserts.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from bench_builder import write_section

SECTION = "## Scaling with the batch size"
COMMAND = ".venv/bin/python benchmarks/bench_scale.py"
EXE = Path(sys.executable).with_name("assignplan")
STAGES = ("read", "bound", "greedy", "check", "generation", "ga")


def _batch_file(n_jobs: int, folder: Path) -> Path:
    from assignplan.generate import generate_sized

    path = folder / f"batch-{n_jobs}.json"
    if not path.exists():
        path.write_text(json.dumps(generate_sized(n_jobs, n_jobs // 10, seed=1)),
                        encoding="utf-8")
    return path


def _in_process(stage: str, path: Path) -> dict:
    """One library stage in this (child) process: seconds and peak memory."""
    from assignplan.bounds import lower_bound
    from assignplan.expand import load_batch
    from assignplan.instance import build_instance
    from assignplan.methods.ga import ga_settings, solve_ga

    t0 = time.perf_counter()
    inst = build_instance(load_batch(path))
    out = {"jobs": inst.n_jobs, "nodes": inst.n_nodes,
           "node_classes": int(inst.node_class.max()) + 1,
           "job_classes": len(inst.elig.ok), "speeds": len(inst.speeds)}
    if stage == "bound":
        t0 = time.perf_counter()
        lower_bound(inst)
    if stage == "generation":
        bound = lower_bound(inst).value
        stamps: list[float] = []
        solve_ga(inst, settings=ga_settings(generations=3), lower_bound=bound, seed=0,
                 budget=1e9, on_generation=lambda row: stamps.append(time.perf_counter()))
        out["seconds"] = float(np.mean(np.diff(stamps[-4:])))
    else:
        out["seconds"] = time.perf_counter() - t0
    out["peak_mib"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return out


def _command(args: list[str]) -> dict:
    """A whole `assignplan` command: wall seconds and its peak memory."""
    t0 = time.perf_counter()
    run = subprocess.run([str(EXE), *args], capture_output=True, text=True)
    wall = time.perf_counter() - t0
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    if run.returncode not in (0, 1):
        raise RuntimeError(f"{args}: exit {run.returncode}: {run.stderr[-2000:]}")
    return {"seconds": wall, "peak_mib": usage.ru_maxrss / 1024, "stdout": run.stdout}


def _child(stage: str, path: Path, folder: Path, ga_seconds: float) -> dict:
    """Run one measurement in a fresh child process (its own peak memory)."""
    if stage in ("read", "bound", "generation"):
        cmd = [sys.executable, __file__, "--one", stage, str(path)]
        run = subprocess.run(cmd, capture_output=True, text=True, check=True)
        return json.loads(run.stdout.strip().splitlines()[-1])
    plan = folder / f"plan-{path.stem}.json"
    cmd = [sys.executable, __file__, "--cmd", stage, str(path), str(plan), str(ga_seconds)]
    run = subprocess.run(cmd, capture_output=True, text=True, check=True)
    return json.loads(run.stdout.strip().splitlines()[-1])


def _run_command_stage(stage: str, path: Path, plan: Path, ga_seconds: float) -> dict:
    if stage == "greedy":
        out = _command(["solve", str(path), "--method", "greedy", "--json", "--out",
                        str(plan)])
        summary = json.loads(out.pop("stdout"))
        out.update(method_seconds=summary["seconds"], makespan_h=summary["makespan_h"],
                   gap_pct=summary["gap_pct"])
    elif stage == "check":
        out = _command(["check", str(path), str(plan)])
        out["ok"] = out.pop("stdout").startswith("plan OK")
    else:
        out = _command(["solve", str(path), "--json", "--quiet", "--budget", str(ga_seconds)])
        summary = json.loads(out.pop("stdout"))
        out.update(method_seconds=summary["seconds"], makespan_h=summary["makespan_h"],
                   gap_pct=summary["gap_pct"])
    return out


def _slope(x: list[float], y: list[float]) -> float:
    """Least-squares slope of log y against log x (the growth exponent)."""
    return float(np.polyfit(np.log(x), np.log(y), 1)[0])


def _plot(rows: list[dict], path: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, (ax_t, ax_m) = plt.subplots(1, 2, figsize=(10, 4), constrained_layout=True)
    for stage in STAGES:
        pts = [(r["jobs"], r[stage]["seconds"], r[stage]["peak_mib"]) for r in rows
               if stage in r]
        if len(pts) < 2:
            continue
        jobs, secs, mib = zip(*pts, strict=True)
        ax_t.loglog(jobs, secs, marker="o", label=stage)
        ax_m.loglog(jobs, mib, marker="o", label=stage)
    ax_t.set(xlabel="jobs (nodes = jobs / 10)", ylabel="seconds", title="Time")
    ax_m.set(xlabel="jobs (nodes = jobs / 10)", ylabel="peak MiB", title="Peak memory")
    for ax in (ax_t, ax_m):
        ax.grid(True, which="both", alpha=0.3)
    ax_t.legend(fontsize=8)
    fig.savefig(path, dpi=110)


def _markdown(rows: list[dict], args) -> str:
    cols = [s for s in STAGES if all(s in r for r in rows)]
    head = "| jobs | nodes | node classes | job classes | " + " | ".join(
        f"{s} s | {s} MiB" for s in cols) + " |"
    lines = [SECTION, "",
             "Batches from `assignplan.generate` (invented; nodes = jobs / 10, 20 nodes a "
             "rack group, seed 1). Each figure is one run in a child process of its own (peak "
             "resident memory of that process); the compiled kernels come from numba's cache. "
             "read = read + validate + expand + instance arrays; bound = the lower bound "
             "alone; greedy, check and ga = the whole `assignplan` command (`solve --method "
             "greedy --json --out`, `check`, `solve --budget "
             f"{args.ga_seconds:g}`); generation = one ga generation at that size (mean "
             "of three, after the seeds).", "", head,
             "|" + "---|" * (4 + 2 * len(cols))]
    for r in rows:
        cells = [f"{r['jobs']:,}", f"{r['nodes']:,}", str(r["node_classes"]),
                 str(r["job_classes"])]
        cells += [f"{r[s]['seconds']:.2f} | {r[s]['peak_mib']:,.0f}" for s in cols]
        lines.append("| " + " | ".join(cells) + " |")
    if len(rows) >= 2:
        jobs = [r["jobs"] for r in rows]
        exps = ", ".join(f"{s} {_slope(jobs, [r[s]['seconds'] for r in rows]):.2f}"
                         for s in cols)
        lines += ["", f"Growth exponent of time against jobs (slope of the log-log line): "
                      f"{exps}. Plot: `benchmarks/scaling.png`."]
    greedy = [r for r in rows if "greedy" in r]
    if greedy:
        lines += ["", "Greedy plans: " + "; ".join(
            f"{r['jobs']:,} jobs {r['greedy']['makespan_h']:.2f} h (gap "
            f"{r['greedy']['gap_pct']:.2f} %, method {r['greedy']['method_seconds']:.1f} s)"
            for r in greedy) + "."]
    ga = [r for r in rows if "ga" in r]
    if ga:
        lines += ["", "ga plans: " + "; ".join(
            f"{r['jobs']:,} jobs {r['ga']['makespan_h']:.2f} h (gap {r['ga']['gap_pct']:.2f} %)"
            for r in ga) + "."]
    lines += ["", f"Reproduce: `{COMMAND}` (from the repository root; about half an hour).",
              "", f"Machine: {platform.machine()}, {os.cpu_count()} logical CPUs shared with "
              "other work while measured; Python "
              f"{platform.python_version()}."]
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="2000,10000,50000,100000")
    ap.add_argument("--ga-seconds", type=float, default=120.0)
    ap.add_argument("--no-ga", action="store_true")
    ap.add_argument("--no-write", action="store_true")
    ap.add_argument("--one", nargs=2, help=argparse.SUPPRESS)  # child: a library stage
    ap.add_argument("--cmd", nargs=4, help=argparse.SUPPRESS)  # child: a whole command
    args = ap.parse_args(argv)
    if args.one:
        print(json.dumps(_in_process(args.one[0], Path(args.one[1]))))
        return 0
    if args.cmd:
        stage, path, plan, seconds = args.cmd
        print(json.dumps(_run_command_stage(stage, Path(path), Path(plan), float(seconds))))
        return 0
    folder = Path(tempfile.mkdtemp(prefix="assignplan-scale-"))
    stages = [s for s in STAGES if not (args.no_ga and s in ("generation", "ga"))]
    _child("read", _batch_file(2000, folder), folder, 1.0)  # warm-up: compile the kernels
    rows = []
    for n_jobs in (int(x) for x in args.sizes.split(",")):
        path = _batch_file(n_jobs, folder)
        row: dict = {}
        for stage in stages:
            result = _child(stage, path, folder, args.ga_seconds)
            row.update({k: result[k] for k in ("jobs", "nodes", "node_classes",
                                               "job_classes") if k in result})
            row[stage] = result
            print(n_jobs, stage, {k: v for k, v in result.items()
                                  if k in ("seconds", "peak_mib", "makespan_h", "ok")},
                  flush=True)
        rows.append(row)
    text = _markdown(rows, args)
    print(text)
    if not args.no_write:
        _plot(rows, HERE / "scaling.png")
        write_section(text, HERE / "RESULTS.md", SECTION)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
