"""Published bin-packing and P||Cmax instances with known optima, solved and checked."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from functools import cache
from pathlib import Path

import pytest

from assignplan.bounds import lower_bound
from assignplan.check import check_plan
from assignplan.errors import SolveError
from assignplan.expand import ExpandedBatch, expand_batch
from assignplan.instance import Instance, build_instance
from assignplan.methods.ga import GASettings, ga_settings
from assignplan.methods.greedy import greedy_assign
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

DATA = Path(__file__).parent / "data" / "published"
BPP_OPT = read_optima(DATA / "binpacking" / "optima.csv", "optimal_bins")
PCMAX_OPT = read_optima(DATA / "pcmax" / "optima.csv", "optimal_makespan")
PCMAX_VERIFIED = read_column(DATA / "pcmax" / "optima.csv", "verified")

# Bounded by generations and stagnation only (the time limit is a far-off safety net), so every
# run is deterministic: same instance, seed and config, same plan.
# These runs count makespan optima only: the ga's final phase, which works on the weighted
# completion time, is off (completion_share 0) to keep the suite's budget.
GA_TEST_CONFIG = ga_settings(generations=100, stagnation=40, completion_share=0.0)
# t60: no setting we measured solves any of the 20 to 1 h (see RESULTS.md), and every ga
# generation spends its full repacking effort there, so the suite runs them short.
T60_GA_CONFIG = ga_settings(generations=30, stagnation=15, completion_share=0.0)
GA_SEED = 0
GA_SAFETY_SECONDS = 900.0
# CP-SAT limits: the 10-job P||Cmax instances prove optimal within a few seconds; the bin
# packing runs only count how many reach 1 h, and counts are compared with greedy's only on
# instances where exact returned a plan, so a slow machine lowers a count, never a verdict.
EXACT_SMALL_LIMIT = 10.0
EXACT_COUNT_LIMIT = 1.0
EXACT_TRY_LIMIT = 0.5  # a run that may find nothing: only what it finds is asserted on

U120 = [f"Falkenauer_u120_{k:02d}" for k in range(20)]
T60 = [f"Falkenauer_t60_{k:02d}" for k in range(20)]
# Scholl, Klein, Juergens (1997) sets 1 and 2 with 50 items: small enough for CP-SAT here.
SCHOLL_50 = ["N1C1W1_A", "N1C1W1_B", "N1C1W1_C", "N1C1W1_D", "N1C1W1_E", "N1C2W2_A",
             "N1C3W4_A", "N1W1B1R0", "N1W1B1R1", "N1W1B1R2"]
# Larger ones (100 to 200 items): greedy and ga here; exact only in benchmarks/bench_reference.py.
SCHOLL_LARGE = ["N2C1W1_A", "HARD0", "Hard28_BPP14", "Hard28_BPP832"]
PCMAX = sorted(p.stem for p in (DATA / "pcmax").glob("*.txt"))


def batch_of(doc: dict) -> tuple[ExpandedBatch, Instance]:
    """A batch document through the same validation as a user's file."""
    eb = expand_batch(parse_batch_text(json.dumps(doc)))
    return eb, build_instance(eb)


def checked(eb: ExpandedBatch, inst: Instance, result: PlanResult) -> PlanResult:
    """Every plan in this module passes the independent checker."""
    violations = check_plan(eb, to_plan_doc(inst, result))
    assert violations == [], [v.message for v in violations[:3]]
    assert result.lower_bound <= result.makespan
    return result


def run(method: str, eb: ExpandedBatch, inst: Instance, *,
        budget: float = EXACT_COUNT_LIMIT,
        settings: GASettings = GA_TEST_CONFIG) -> PlanResult | None:
    """Plan through the solve API and check it; None when exact finds no plan within its
    budget."""
    if method == "ga":
        # generations and stagnation stop the run; the budget is only a safety net
        budget = GA_SAFETY_SECONDS
    try:
        result = solve(inst, method, seed=GA_SEED, budget=budget,
                       settings=settings if method == "ga" else None)
    except SolveError:
        if method != "exact":
            raise
        return None
    return checked(eb, inst, result)


@dataclass
class Tally:
    """Per method, the instances a class's runs solved to the published optimum."""

    solved: dict[str, list[str]]

    def count(self, method: str) -> int:
        return len(self.solved[method])


def bin_packing_runs(names: list[str], methods: tuple[str, ...],
                     settings: GASettings = GA_TEST_CONFIG) -> tuple[Tally, dict]:
    """Run `methods` with z* nodes on each instance; 'solved' = a 1-hour plan."""
    tally = Tally({m: [] for m in methods})
    results: dict[str, dict[str, PlanResult | None]] = {}
    for name in names:
        bpp = read_bpp(DATA / "binpacking" / f"{name}.txt")
        eb, inst = batch_of(bin_packing_batch(bpp, BPP_OPT[name]))
        results[name] = {m: run(m, eb, inst, settings=settings) for m in methods}
        for m, r in results[name].items():
            if r is not None and r.makespan == HOUR:
                tally.solved[m].append(name)
    print({m: tally.count(m) for m in methods}, "of", len(names))
    return tally, results


def lpt_makespan(inst: Instance) -> int:
    """The makespan of list scheduling longest first (the greedy method's "longest" plan)."""
    return int(inst.end_times(*greedy_assign(inst)).max())


def greedy_count_where_exact_planned(tally: Tally, results: dict) -> int:
    """Greedy's 1-hour plans on the instances where exact returned any plan (exact starts from
    the greedy plan as its hint, so there it must do at least as well)."""
    return sum(results[n].get("exact") is not None for n in tally.solved["greedy"])


# --------------------------------------------------------------------------- the reductions


def test_parsers_read_the_published_files():
    # BPPLIB format (Delorme, Iori, Martello 2018): n, C, then n sizes, CRLF line ends.
    bpp = read_bpp(DATA / "binpacking" / "Falkenauer_u120_00.txt")
    assert (bpp.capacity, len(bpp.sizes)) == (150, 120)
    assert b"\r\n" in (DATA / "binpacking" / "Falkenauer_u120_00.txt").read_bytes()
    # pcmax format: `p p_cmax n m`, n times then 0, `OPT:v;`; v agrees with optima.csv.
    for name in PCMAX:
        pc = read_pcmax(DATA / "pcmax" / f"{name}.txt")
        assert pc.stated_opt == PCMAX_OPT[name]
        assert (pc.machines, len(pc.times)) == tuple(
            int(x) for x in name.split("_")[3:1:-1])  # U_k_nnnn_mm_i -> (mm, nnnn)


def test_bin_packing_optima_respect_the_capacity_bound():
    # BPPLIB optima (optima.csv) are >= L1 = ceil(sum / C); for Falkenauer u120_08 and u120_19
    # they are 50 and 49 (= L1), not the OR-Library header values 51 and 50 (see SOURCES.md).
    for name in U120 + T60 + SCHOLL_50 + SCHOLL_LARGE:
        bpp = read_bpp(DATA / "binpacking" / f"{name}.txt")
        assert BPP_OPT[name] >= math.ceil(sum(bpp.sizes) / bpp.capacity), name
    assert (BPP_OPT["Falkenauer_u120_08"], BPP_OPT["Falkenauer_u120_19"]) == (50, 49)
    assert all(BPP_OPT[name] == 20 for name in T60)  # triplets: 60 items, 3 per bin


def test_reduction_makespan_is_one_hour_iff_the_items_pack():
    # Sizes 6, 5, 5, 4 with C = 10 need 2 bins ({6, 4}, {5, 5}): 1 h on 2 nodes, and exactly
    # 2 h on 1 node, as `bin_packing_batch` claims (> 60 min proven means >= 120 min).
    from assignplan.published import BinPacking

    bpp = BinPacking("tiny", 10, (6, 5, 5, 4))
    for nodes, expected in ((2, HOUR), (1, 2 * HOUR)):
        eb, inst = batch_of(bin_packing_batch(bpp, nodes))
        result = run("exact", eb, inst, budget=EXACT_SMALL_LIMIT)
        assert (result.makespan, result.status) == (expected, "optimal")


# --------------------------------------------------------------------------- Falkenauer u120


@pytest.mark.slow
@pytest.mark.parametrize("name", U120 + T60)
def test_one_node_fewer_needs_two_hours(name):
    # Falkenauer (1996) u120 and t60 via BPPLIB, optimum z* from optima.csv: with z* - 1 nodes
    # the lower bound exceeds 1 h (so no plan is under 2 h; t60 sizes sum to exactly
    # 20 * 1000) and greedy reaches 2 h: the optimum is 2 h.
    bpp = read_bpp(DATA / "binpacking" / f"{name}.txt")
    eb, inst = batch_of(bin_packing_batch(bpp, BPP_OPT[name] - 1))
    assert lower_bound(inst).value == 2 * HOUR
    assert run("greedy", eb, inst).makespan == 2 * HOUR


@pytest.fixture(scope="module")
def u120_runs():
    return bin_packing_runs(U120, ("greedy", "ga"))


@pytest.mark.slow
def test_u120_ga_never_worse_than_greedy(u120_runs):
    # E. Falkenauer, "A hybrid grouping genetic algorithm for bin packing", J. Heuristics 2,
    # 1996 (u120 class, C = 150, via BPPLIB); optima from optima.csv, not the OR-Library header.
    tally, results = u120_runs
    assert tally.count("ga") >= tally.count("greedy")
    for name, r in results.items():
        assert r["ga"].makespan <= r["greedy"].makespan, name
        assert r["ga"].lower_bound == HOUR  # the bound never claims more than the optimum


@pytest.mark.slow
def test_u120_ga_finds_the_one_hour_plan(u120_runs):
    # Falkenauer's grouping GA solved all 20 u120 instances (J. Heuristics 2, 1996). Our target
    # is at least 15 of 20 with z* nodes (optima.csv) and GA_TEST_CONFIG, seed 0. Measured:
    # 16 of 20 (greedy 6), since the ga repacks a few nodes exactly each generation.
    tally, _results = u120_runs
    assert tally.count("ga") >= 15, (
        f"ga reached 1 h on {tally.count('ga')} of 20 u120 instances "
        f"(greedy {tally.count('greedy')}): {tally.solved['ga']}")


# --------------------------------------------------------------------------- Falkenauer t60


@pytest.fixture(scope="module")
def t60_runs():
    # exact on the first five only and short ga runs, to keep the suite's budget; the
    # benchmark runs all 20 with each method's full budget
    tally, results = bin_packing_runs(T60, ("greedy", "ga"), T60_GA_CONFIG)
    exact_tally, exact_results = bin_packing_runs(T60[:5], ("exact",))
    tally.solved.update(exact_tally.solved)
    for name, r in exact_results.items():
        results[name].update(r)
    return tally, results


@pytest.mark.slow
def test_t60_counts(t60_runs):
    # Falkenauer (1996) triplet class t60 (C = 1000, 60 items, every optimal bin holds exactly
    # three items, z* = 20), via BPPLIB. Counts recorded in benchmarks/RESULTS.md.
    tally, results = t60_runs
    assert tally.count("ga") >= tally.count("greedy")
    assert tally.count("exact") >= greedy_count_where_exact_planned(tally, results)
    for name, r in results.items():
        assert r["ga"].makespan <= r["greedy"].makespan, name
        if r.get("exact") is not None:
            # a solver bound above 1 h would contradict the published optimum of 20 bins
            assert r["exact"].lower_bound <= HOUR, name


# --------------------------------------------------------------------------- Scholl, hard28


@pytest.fixture(scope="module")
def scholl_runs():
    small = bin_packing_runs(SCHOLL_50, ("greedy", "ga", "exact"))
    large = bin_packing_runs(SCHOLL_LARGE, ("greedy", "ga"))
    return small, large


@pytest.mark.slow
def test_scholl_and_hard28_counts(scholl_runs):
    # A. Scholl, R. Klein, C. Juergens, "BISON", Computers & OR 24(7), 1997 (N*, HARD0) and
    # Schoenfield's hard28 (2002), via BPPLIB; optimal bin counts from optima.csv.
    for tally, results in scholl_runs:
        assert tally.count("ga") >= tally.count("greedy")
        for name, r in results.items():
            assert r["ga"].makespan <= r["greedy"].makespan, name
            exact = r.get("exact")
            if exact is not None:
                assert exact.lower_bound <= HOUR, name  # never above the published optimum
    (small, small_results), _ = scholl_runs
    assert small.count("exact") >= greedy_count_where_exact_planned(small, small_results)


@pytest.mark.slow
@pytest.mark.parametrize("name", SCHOLL_50 + SCHOLL_LARGE)
def test_scholl_and_hard28_never_beat_the_optimum(name):
    # Scholl et al. (1997) / Schoenfield hard28 via BPPLIB: with z* - 1 nodes a plan under 2 h
    # would be a packing into fewer bins than the published optimum, i.e. a bug.
    bpp = read_bpp(DATA / "binpacking" / f"{name}.txt")
    eb, inst = batch_of(bin_packing_batch(bpp, BPP_OPT[name] - 1))
    assert lower_bound(inst).value <= 2 * HOUR
    assert run("greedy", eb, inst).makespan >= 2 * HOUR
    if name in SCHOLL_50:
        exact = run("exact", eb, inst, budget=EXACT_TRY_LIMIT)
        assert exact is None or exact.makespan >= 2 * HOUR


# --------------------------------------------------------------------------- P||Cmax


def _confirmed(name: str) -> bool:
    # optima.csv `verified`: "confirmed: ..." for 20 of 22; NU_3_0050_05_0 only has a schedule
    # at OPT, NU_3_0050_10_4 is not confirmed at all (see SOURCES.md).
    return PCMAX_VERIFIED[name].startswith("confirmed")


@cache
def pcmax_plans(name: str) -> tuple[int, Instance, ExpandedBatch, dict[str, PlanResult]]:
    """(C* in minutes, instance, batch, greedy and ga plans) of one P||Cmax file."""
    pc = read_pcmax(DATA / "pcmax" / f"{name}.txt")
    eb, inst = batch_of(pcmax_batch(pc.times, pc.machines))
    return pc.stated_opt * HOUR, inst, eb, {m: run(m, eb, inst) for m in ("greedy", "ga")}


@pytest.mark.slow
@pytest.mark.parametrize("name", PCMAX)
def test_pcmax_published_optima(name):
    # P||Cmax instances of Franca, Gendreau, Laporte, Mueller (1994) / Frangioni, Necciari,
    # Scutella (2004), OPT from each file's `OPT:` line (makespan-minimization collection).
    target, inst, eb, plans = pcmax_plans(name)
    assert plans["ga"].makespan <= plans["greedy"].makespan
    if _confirmed(name):
        assert min(p.makespan for p in plans.values()) >= target
        assert lower_bound(inst).value <= target
    if inst.n_jobs == 10:
        exact = run("exact", eb, inst, budget=EXACT_SMALL_LIMIT)
        assert (exact.makespan, exact.status) == (target, "optimal")


@pytest.mark.slow
@pytest.mark.parametrize("name", PCMAX)
def test_pcmax_ga_within_one_percent(name):
    # Same instances and OPT lines as above: the ga's target is C* + 1 %.
    target, _inst, _eb, plans = pcmax_plans(name)
    ga = plans["ga"].makespan
    assert ga <= 1.01 * target, f"ga {ga / HOUR:g} h vs C* {target / HOUR:g} h"


@pytest.mark.parametrize("m", [3, 4, 5])
def test_graham_lpt_family(m):
    # R. L. Graham, SIAM J. Appl. Math. 17(2), 1969: 2m + 1 jobs 2m-1, 2m-1, ..., m+1, m+1,
    # m, m, m; LPT gives 4m - 1, the optimum is 3m (family from memory; m = 4 checked by
    # exhaustive search, see worked_examples.json).
    eb, inst = batch_of(pcmax_batch(graham_lpt_family(m), m))
    assert lpt_makespan(inst) == (4 * m - 1) * HOUR
    # the greedy method keeps the best of several orders, LPT among them
    assert run("greedy", eb, inst).makespan <= (4 * m - 1) * HOUR
    exact = run("exact", eb, inst, budget=EXACT_SMALL_LIMIT)
    assert (exact.makespan, exact.status) == (3 * m * HOUR, "optimal")
    assert run("ga", eb, inst).makespan <= 1.01 * 3 * m * HOUR


def test_graham_worked_example_file():
    # worked_examples.json, graham1969_lpt_tight_m4: published LPT 15 and optimum 12 (m = 4).
    ex = json.loads((DATA / "examples" / "worked_examples.json").read_text())["examples"][0]
    assert tuple(ex["processing_times"]) == graham_lpt_family(ex["machines"])
    eb, inst = batch_of(pcmax_batch(ex["processing_times"], ex["machines"]))
    assert lpt_makespan(inst) == ex["published_lpt_makespan"] * HOUR
    assert run("greedy", eb, inst).makespan <= ex["published_lpt_makespan"] * HOUR
    assert run("ga", eb, inst).makespan == ex["published_optimal_makespan"] * HOUR
