"""Solve the published reference instances by every method; write the table into RESULTS.md.

Usage (from the repository root):
    .venv/bin/python benchmarks/bench_reference.py [--exact-seconds 3] [--ga-generations 1000]
        [--ga-stagnation 150] [--ga-seconds 30] [--seed 0] [--classes u120,t60,...] [--no-write]

Instances are read unmodified from tests/data/published/ and reduced by assignplan/published.py
(bin packing: z* nodes of C cores, 1-hour jobs, solved = a 1-hour plan; P||Cmax: m whole-node
machines, solved = makespan C* hours). Results, not asserts; every plan is also run through the
independent checker, and a plan below a published optimum is reported as a bug.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from assignplan.check import check_plan
from assignplan.errors import SolveError
from assignplan.expand import ExpandedBatch, expand_batch
from assignplan.instance import Instance, build_instance
from assignplan.plan import PlanResult, to_plan_doc
from assignplan.published import (
    HOUR,
    bin_packing_batch,
    graham_lpt_family,
    pcmax_batch,
    read_bpp,
    read_column,
    read_optima,
    read_pcmax,
)
from assignplan.reading import parse_batch_text
from assignplan.solve import solve
from benchmarks.bench_builder import write_section

DATA = REPO / "tests" / "data" / "published"
RESULTS = REPO / "benchmarks" / "RESULTS.md"
SECTION = "## Published reference instances"
METHODS = ("greedy", "ga", "exact")


@dataclass(frozen=True)
class Case:
    """One instance reduced to a batch, with the makespan (minutes) that is optimal for it."""

    name: str
    doc: dict
    optimum: int
    proven: bool  # the optimum is confirmed (a plan below it would be a bug)


@dataclass
class Row:
    """A class of instances and, per method, makespans and seconds per instance."""

    label: str
    source: str
    cases: list[Case]
    makespan: dict[str, list[int | None]] = field(default_factory=dict)
    seconds: dict[str, list[float]] = field(default_factory=dict)


def bin_packing_cases(names: list[str]) -> list[Case]:
    """z* nodes per instance (BPPLIB optimum, optima.csv): the optimum makespan is 1 h."""
    opt = read_optima(DATA / "binpacking" / "optima.csv", "optimal_bins")
    out = []
    for name in names:
        bpp = read_bpp(DATA / "binpacking" / f"{name}.txt")
        out.append(Case(name, bin_packing_batch(bpp, opt[name]), HOUR, proven=True))
    return out


def pcmax_cases(n_jobs: int) -> list[Case]:
    """P||Cmax files with n_jobs jobs; optimum C* hours from the file's OPT line."""
    verified = read_column(DATA / "pcmax" / "optima.csv", "verified")
    out = []
    for path in sorted((DATA / "pcmax").glob("*.txt")):
        pc = read_pcmax(path)
        if len(pc.times) == n_jobs:
            out.append(Case(pc.name, pcmax_batch(pc.times, pc.machines), pc.stated_opt * HOUR,
                            proven=verified[pc.name].startswith("confirmed")))
    return out


def graham_cases() -> list[Case]:
    """Graham's LPT family for m = 3..6 (optimum 3m hours; family from memory, see
    `published.graham_lpt_family`)."""
    return [Case(f"graham_m{m}", pcmax_batch(graham_lpt_family(m), m), 3 * m * HOUR, True)
            for m in range(3, 7)]


def classes() -> dict[str, tuple[str, str, list[Case]]]:
    """key -> (label, published source, cases)."""
    falk = "Falkenauer, J. Heuristics 2, 1996 (BPPLIB)"
    return {
        "u120": ("Falkenauer u120 (bin packing, C = 150, 120 items)", falk,
                 bin_packing_cases([f"Falkenauer_u120_{k:02d}" for k in range(20)])),
        "t60": ("Falkenauer t60 (triplets, C = 1000, 60 items)", falk,
                bin_packing_cases([f"Falkenauer_t60_{k:02d}" for k in range(20)])),
        "scholl": ("Scholl et al. sets 1-2, 50 items", "Scholl, Klein, Juergens, C&OR 24(7), 1997"
                   " (BPPLIB)", bin_packing_cases([
                       "N1C1W1_A", "N1C1W1_B", "N1C1W1_C", "N1C1W1_D", "N1C1W1_E", "N1C2W2_A",
                       "N1C3W4_A", "N1W1B1R0", "N1W1B1R1", "N1W1B1R2"])),
        "hard": ("Scholl N2C1W1_A, HARD0; hard28 BPP14, BPP832 (100-200 items)",
                 "Scholl et al. 1997; Schoenfield 2002 (BPPLIB)",
                 bin_packing_cases(["N2C1W1_A", "HARD0", "Hard28_BPP14", "Hard28_BPP832"])),
        "pcmax10": ("P‖Cmax, 10 jobs, 5 machines", "Franca et al. 1994 via Frangioni et al."
                    " 2004 (OPT lines)", pcmax_cases(10)),
        "pcmax50": ("P‖Cmax, 50 jobs, 5-25 machines", "Franca et al. 1994 via Frangioni et al."
                    " 2004 (OPT lines)", pcmax_cases(50)),
        "graham": ("Graham's LPT family, m = 3..6", "Graham, SIAM J. Appl. Math. 17(2), 1969"
                   " (family from memory)", graham_cases()),
    }


def batch_of(doc: dict) -> tuple[ExpandedBatch, Instance]:
    eb = expand_batch(parse_batch_text(json.dumps(doc)))
    return eb, build_instance(eb)


def run_method(method: str, inst: Instance, args: argparse.Namespace) -> PlanResult | None:
    """One plan through the solve API; None when exact finds none within its budget."""
    from assignplan.methods.ga import ga_settings

    config = ga_settings(generations=args.ga_generations, stagnation=args.ga_stagnation)
    limit = args.ga_seconds if method == "ga" else args.exact_seconds
    try:
        return solve(inst, method, seed=args.seed, budget=limit,
                     settings=config if method == "ga" else None)
    except SolveError:
        if method != "exact":
            raise
        return None


def run_row(row: Row, args: argparse.Namespace, bugs: list[str]) -> None:
    for method in METHODS:
        row.makespan[method], row.seconds[method] = [], []
    for case in row.cases:
        eb, inst = batch_of(case.doc)
        for method in METHODS:
            t0 = time.perf_counter()
            result = run_method(method, inst, args)
            row.seconds[method].append(time.perf_counter() - t0)
            row.makespan[method].append(None if result is None else result.makespan)
            if result is None:
                continue
            violations = check_plan(eb, to_plan_doc(inst, result))
            if violations:
                bugs.append(f"{case.name} {method}: {violations[0].message}")
            if case.proven and result.makespan < case.optimum:
                bugs.append(f"{case.name} {method}: makespan {result.makespan} min below the "
                            f"published optimum {case.optimum} min")
        print(f"  {case.name}: " + ", ".join(
            f"{m} {row.makespan[m][-1]}" for m in METHODS), file=sys.stderr, flush=True)


def summary(row: Row, method: str) -> tuple[int, str, float, float]:
    """(solved, median gap % text, max gap %, seconds) of one method over a class."""
    opt = [c.optimum for c in row.cases]
    spans = row.makespan[method]
    solved = sum(s is not None and s <= o for s, o in zip(spans, opt, strict=True))
    gaps = [100.0 * (s - o) / o for s, o in zip(spans, opt, strict=True) if s is not None]
    missing = sum(s is None for s in spans)
    gap = f"{statistics.median(gaps):.2f}" if gaps else "-"
    if missing:
        gap += f" ({missing} no plan)"
    return solved, gap, max(gaps, default=float("nan")), sum(row.seconds[method])


def table(rows: list[Row], args: argparse.Namespace, bugs: list[str], total: float) -> str:
    command = ("python benchmarks/bench_reference.py"
               f" --exact-seconds {args.exact_seconds:g} --ga-generations {args.ga_generations}"
               f" --ga-stagnation {args.ga_stagnation} --ga-seconds {args.ga_seconds:g}"
               f" --seed {args.seed}")
    lines = [
        SECTION, "",
        f"Command: `{command}` ({total:.0f} s in all, 2 cores shared with other work).",
        "Instances: tests/data/published/ (unmodified copies; see its README), reduced by"
        " `assignplan/published.py`. Bin packing: z* nodes of C cores (z* = BPPLIB optimum),"
        " one 1-hour job per item; solved = a 1-hour plan (with fewer nodes no plan is under"
        " 2 h, so the gap of an unsolved one is 100 %). P‖Cmax: m whole-node machines;"
        " solved = makespan C* hours (the file's OPT line; NU_3_0050_10_4's OPT is unconfirmed).",
        f"ga: default settings except generations {args.ga_generations}, stagnation"
        f" {args.ga_stagnation}, at most {args.ga_seconds:g} s, seed {args.seed}."
        f" exact: CP-SAT through the solve API (greedy plan as hint), {args.exact_seconds:g} s"
        " per instance; \"no plan\" = none found within that limit.",
        "Cells read greedy / ga / exact. Gap: (makespan - optimum) / optimum in %, median over"
        " the class; seconds: total over the class.",
        "",
        "| class | source | instances | solved to optimum | median gap % | ga worst gap % |"
        " seconds |",
        "|---|---|---|---|---|---|---|",
    ]
    for row in rows:
        c = {m: summary(row, m) for m in METHODS}
        lines.append(
            f"| {row.label} | {row.source} | {len(row.cases)} | "
            + " / ".join(str(c[m][0]) for m in METHODS) + " | "
            + " / ".join(c[m][1] for m in METHODS) + f" | {c['ga'][2]:.2f} | "
            + " / ".join(f"{c[m][3]:.1f}" for m in METHODS) + " |")
    unsolved = []
    for row in rows:
        names = [c.name for c, s in zip(row.cases, row.makespan["ga"], strict=True)
                 if s is None or s > c.optimum]
        if names:
            unsolved.append(f"{row.label.split(' (')[0]}: {', '.join(names)}")
    lines += ["", "Not solved to optimum by ga: " + ("; ".join(unsolved) or "none") + "."]
    lines += ["", ("Checker violations or plans below a confirmed optimum: none."
                   if not bugs else "BUGS: " + "; ".join(bugs))]
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--exact-seconds", type=float, default=3.0)
    parser.add_argument("--ga-generations", type=int, default=1000)
    parser.add_argument("--ga-stagnation", type=int, default=150)
    parser.add_argument("--ga-seconds", type=float, default=30.0)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--classes", default=",".join(classes()))
    parser.add_argument("--no-write", action="store_true")
    args = parser.parse_args(argv)
    available = classes()
    t0 = time.perf_counter()
    rows, bugs = [], []
    for key in args.classes.split(","):
        label, source, cases = available[key]
        print(f"{label}", file=sys.stderr, flush=True)
        row = Row(label, source, cases)
        run_row(row, args, bugs)
        rows.append(row)
    text = table(rows, args, bugs, time.perf_counter() - t0)
    print(text)
    if not args.no_write:
        write_section(text, RESULTS, SECTION)
    return 1 if bugs else 0


if __name__ == "__main__":
    sys.exit(main())
