"""Exact method (CP-SAT): enumeration cross-check, published optima, checker, stages, guards."""

from __future__ import annotations

import itertools
import json
import math
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest

from assignplan.bounds import lower_bound  # written by another helper; ImportError = defect
from assignplan.check import check_plan  # idem: the test must fail loudly, never skip
from assignplan.errors import InputError, SolveError
from assignplan.instance import Instance
from assignplan.methods.exact import horizon, solve_exact
from assignplan.methods.greedy import greedy_assign, solve_greedy
from assignplan.plan import PlanResult, make_result, objective, to_plan_doc
from assignplan.published import bin_packing_batch, read_bpp
from tests.strategies import instance_of, random_batch_doc

DATA = Path(__file__).parent / "data"
# Reference files shared with test_bounds.py; provenance in tests/data/published/README.md.
PCMAX = DATA / "published" / "pcmax"
WORKED = DATA / "published" / "examples" / "worked_examples.json"

FAST = {"budget": 5.0, "workers": 1, "seed": 0}  # tiny models solve in milliseconds


def doc_of(nodes: list[dict], jobs: list[dict]) -> dict:
    return {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
            "nodes": nodes, "jobs": jobs}


def identical_whole_node(m: int, hours: list[float]) -> dict:
    """P||Cmax as a batch: m identical nodes, every job needs the whole node (one at a time)."""
    return doc_of([{"name": "m", "count": m, "cores": 4, "memory_gib": 8.0}],
                  [{"name": f"j{k}", "cores": 4, "memory_gib": 1.0, "hours": float(h)}
                   for k, h in enumerate(hours)])


def own_violations(inst: Instance, res: PlanResult) -> list[str]:
    """A minute-by-minute check written for these tests only (tiny horizons).

    Eligibility, end = start + duration, ready, follows, maintenance, and per node and minute
    the summed cores / MiB / GPUs of running jobs within capacity.
    """
    out = []
    jobs = np.arange(inst.n_jobs)
    if not inst.eligible[jobs, res.assign].all():
        out.append("ineligible node")
    if not np.array_equal(res.end, res.start + inst.duration[jobs, res.assign]):
        out.append("end != start + duration")
    if (res.start < inst.ready).any():
        out.append("starts before ready")
    for j in jobs:
        for p in inst.predecessors(j):
            if res.end[p] > res.start[j]:
                out.append(f"job {j} starts before predecessor {p} ends")
    t_max = int(max(res.end.max(), inst.maint_end.max(initial=0))) + 1
    for i in range(inst.n_nodes):
        use = np.zeros((t_max, 3), dtype=np.int64)
        for j in np.flatnonzero(res.assign == i):
            use[res.start[j]:res.end[j]] += inst.demand[j]
        if (use > inst.capacity[i]).any():
            out.append(f"node {i} over capacity")
        for s, e in zip(inst.maint_start[inst.maint_ptr[i]:inst.maint_ptr[i + 1]],
                        inst.maint_end[inst.maint_ptr[i]:inst.maint_ptr[i + 1]], strict=True):
            if use[s:e].any():
                out.append(f"node {i} runs a job during maintenance [{s}, {e})")
    return out


def assert_valid(batch, inst: Instance, res: PlanResult) -> None:
    assert own_violations(inst, res) == []
    assert check_plan(batch, to_plan_doc(inst, res)) == []


# --------------------------------------------------------------------- independent reference


def ref_minutes(hours: float, speed: float) -> int:
    """ceil(hours * 60 / speed) in exact rational arithmetic, at least 1 (DESIGN.md rule)."""
    return max(1, math.ceil(Fraction(str(hours)) * 60 / Fraction(str(speed))))


def enumerated_optimum(dur: list[list[int]], eligible: list[list[int]], n_nodes: int) -> int:
    """min over all assignments of max_i sum of durations on i: every job needs a whole node
    and nothing follows anything, so each node runs its jobs back to back from minute 0."""
    best = None
    for assign in itertools.product(*eligible):
        load = [0] * n_nodes
        for j, i in enumerate(assign):
            load[i] += dur[j][i]
        best = max(load) if best is None else min(best, max(load))
    return best


def whole_node_case(rng: np.random.Generator) -> tuple[dict, list[list[int]], list[list[int]]]:
    """A random batch whose jobs each take a whole node, with node speeds and a tag."""
    n_nodes = int(rng.integers(2, 5))
    speeds = [float(rng.choice([0.8, 1.0, 1.25, 1.5, 2.0])) for _ in range(n_nodes)]
    tagged = [bool(rng.random() < 0.5) for _ in range(n_nodes)]
    tagged[int(rng.integers(n_nodes))] = True  # some node can hold the tagged jobs
    nodes = [{"name": f"n{i}", "cores": 8, "memory_gib": 32.0, "speed": speeds[i],
              "tags": ["ib"] if tagged[i] else []} for i in range(n_nodes)]
    n_jobs = int(rng.integers(1, 10))
    jobs, dur, eligible = [], [], []
    for j in range(n_jobs):
        hours = round(float(rng.uniform(0.05, 6.0)), 2)
        needs_tag = bool(rng.random() < 0.25)
        jobs.append({"name": f"j{j}", "cores": 8, "memory_gib": float(rng.integers(1, 33)),
                     "hours": hours, "needs": ["ib"] if needs_tag else []})
        dur.append([ref_minutes(hours, s) for s in speeds])
        eligible.append([i for i in range(n_nodes) if tagged[i] or not needs_tag])
    return doc_of(nodes, jobs), dur, eligible


@pytest.mark.slow
def test_matches_enumeration_of_all_assignments():
    # Independent reference: brute force over every assignment (no solver involved).
    rng = np.random.default_rng(20261207)
    for case in range(60):
        doc, dur, eligible = whole_node_case(rng)
        batch, inst = instance_of(doc)
        res = solve_exact(inst, lower_bound=0, **FAST)
        expected = enumerated_optimum(dur, eligible, inst.n_nodes)
        assert (res.makespan, res.status) == (expected, "optimal"), f"case {case}: {doc}"
        assert res.solver_bound == expected and res.lower_bound == expected
        assert_valid(batch, inst, res)


# --------------------------------------------------------------------- published optima


def graham_family(m: int) -> list[int]:
    """2m-1, 2m-1, 2m-2, 2m-2, ..., m+1, m+1, m, m, m (2m + 1 jobs)."""
    return [h for v in range(2 * m - 1, m, -1) for h in (v, v)] + [m, m, m]


@pytest.mark.parametrize("m", [2, 3, 4, 5])
def test_graham_lpt_worst_case_optimum(m):
    # R. L. Graham, "Bounds on multiprocessing timing anomalies", SIAM J. Appl. Math. 17(2),
    # 1969: on this family the optimum is 3m (LPT gives 4m - 1). The family is quoted from
    # standard knowledge of the result (see tests/data/published/README.md).
    batch, inst = instance_of(identical_whole_node(m, graham_family(m)))
    res = solve_exact(inst, lower_bound=0, **FAST)
    assert (res.makespan, res.status) == (180 * m, "optimal")
    assert_valid(batch, inst, res)


def test_graham_worked_example_file():
    # The m = 4 instance as stored in worked_examples.json (Graham 1969): optimum 12 hours.
    ex = json.loads(WORKED.read_text())["examples"][0]
    assert ex["id"] == "graham1969_lpt_tight_m4"
    batch, inst = instance_of(identical_whole_node(ex["machines"], ex["processing_times"]))
    res = solve_exact(inst, lower_bound=0, **FAST)
    assert res.status == "optimal"
    assert res.makespan == 60 * ex["published_optimal_makespan"]


def read_pcmax(path: Path) -> tuple[int, list[int], int]:
    """(machines, processing times, OPT) from a `p p_cmax n m` file; converted here, the file
    itself stays as published."""
    tokens = path.read_text().replace(";", " ").split()
    n, m = int(tokens[2]), int(tokens[3])
    times = [int(t) for t in tokens[4:4 + n]]
    assert tokens[4 + n] == "0"
    opt = int(tokens[5 + n].removeprefix("OPT:"))
    return m, times, opt


@pytest.mark.parametrize("name", [
    "U_1_0010_05_3", pytest.param("NU_1_0010_05_0", marks=pytest.mark.slow), "U_2_0010_05_0",
    "U_3_0010_05_0",
])
def test_pcmax_benchmark_optimum(name):
    # França, Gendreau, Laporte, Müller, Computers & Operations Research 21, 1994 (instances),
    # OPT as stated in the distributed files and confirmed exactly when gathered (optima.csv).
    # These four have OPT above the trivial bound, so the solver must really search.
    m, times, opt = read_pcmax(PCMAX / f"{name}.txt")
    batch, inst = instance_of(identical_whole_node(m, times))
    res = solve_exact(inst, lower_bound=0, budget=20.0, workers=1, seed=0)
    assert (res.makespan, res.status) == (60 * opt, "optimal")
    assert_valid(batch, inst, res)


def test_tiny_budget_never_claims_a_wrong_optimum():
    # NU_2_0050_10_0: 50 jobs, 10 machines, OPT 4741 > trivial bound 4663 (França et al. 1994,
    # OPT confirmed when gathered): far too hard to prove in a fraction of a second.
    m, times, opt = read_pcmax(PCMAX / "NU_2_0050_10_0.txt")
    batch, inst = instance_of(identical_whole_node(m, times))
    with pytest.raises(SolveError, match=r"exact: no plan found within 0\.001 s \(status "
                       r"UNKNOWN\); try a longer --budget or --method ga"):
        solve_exact(inst, lower_bound=0, budget=0.001, workers=1, seed=0)
    hint = greedy_assign(inst)
    for limit, given in ((0.2, None), (1.0, None), (0.5, hint)):
        try:
            res = solve_exact(inst, lower_bound=0, budget=limit, workers=1, seed=0,
                              hint=given)
        except SolveError as err:
            assert given is None and "no plan found within" in str(err)
            continue
        # the hint's own plan, when CP-SAT completes nothing in time (a loaded machine), comes
        # back without a solver bound: it claims nothing
        assert (res.solver_bound is None and given is not None) or res.solver_bound <= 60 * opt
        assert 60 * opt <= res.makespan
        if res.status == "optimal":
            assert res.makespan == 60 * opt
        else:
            assert res.status == "feasible"
        if given is not None:  # a full hint gives a plan at once, no worse than the hint
            hint_end = hint[1] + inst.duration[np.arange(inst.n_jobs), hint[0]]
            assert res.makespan <= hint_end.max()
        assert_valid(batch, inst, res)


# --------------------------------------------------------------------- random heterogeneous


@pytest.mark.slow
def test_random_batches_against_bound_greedy_and_checker():
    # Property over seeded random batches (cores / memory / GPUs, tags, maintenance, follows,
    # ready and due times): valid, above the provable bound, and when proven optimal no worse
    # than greedy lexicographically on (makespan, weighted tardiness).
    proven = 0
    for seed in range(40):
        batch, inst = instance_of(random_batch_doc(np.random.default_rng(seed), max_jobs=9))
        lb = lower_bound(inst).value
        greedy = solve_greedy(inst, lower_bound=lb)
        res = solve_exact(inst, lower_bound=lb, budget=3.0, workers=1, seed=seed,
                          hint=greedy_assign(inst))
        assert_valid(batch, inst, res)
        assert res.makespan >= lb, f"seed {seed}"
        assert res.solver_bound <= res.makespan and res.lower_bound == max(lb, res.solver_bound)
        if res.status == "optimal":
            proven += 1
            assert res.makespan == res.solver_bound
            mk, tard, _ = objective(inst, res.end)
            g_mk, g_tard, _ = objective(inst, greedy.end)
            assert (mk, tard) <= (g_mk, g_tard + 1e-9), f"seed {seed}"
    assert proven >= 30  # small batches: nearly all prove within the limit


def test_maintenance_follows_and_ready_by_hand():
    # A (30 min) then B (90 min, follows A); the node is down [60, 120): B cannot run at 30
    # and must wait until 120, ending at 210. C is ready at 180 and fits beside B.
    doc = doc_of(
        [{"name": "n", "cores": 8, "memory_gib": 16.0,
          "maintenance": [{"start_h": 1.0, "end_h": 2.0}]}],
        [{"name": "a", "cores": 4, "memory_gib": 1.0, "hours": 0.5},
         {"name": "b", "cores": 4, "memory_gib": 1.0, "hours": 1.5, "follows": ["a"]},
         {"name": "c", "cores": 4, "memory_gib": 1.0, "hours": 0.25, "ready_h": 3.0}])
    batch, inst = instance_of(doc)
    res = solve_exact(inst, lower_bound=0, **FAST)
    assert (res.makespan, res.status) == (210, "optimal")
    assert res.start[1] == 120 and res.start[2] >= 180
    assert_valid(batch, inst, res)


def test_horizon_holds_a_sequential_plan():
    # The horizon's safety argument, replayed: after every ready time and maintenance window,
    # the jobs one after another (in a follows order, each on its slowest eligible node) form
    # a valid plan, and it must end within the horizon.
    for seed in range(10):
        batch, inst = instance_of(random_batch_doc(np.random.default_rng(seed), p_ready=0.5))
        assign = np.where(inst.eligible, inst.duration, -1).argmax(axis=1)
        dur = inst.duration[np.arange(inst.n_jobs), assign].astype(np.int64)
        t = max(inst.ready.max(), inst.maint_end.max(initial=0))
        start = np.empty(inst.n_jobs, dtype=np.int64)
        for j in inst.order:
            start[j], t = t, t + dur[j]
        plan = make_result(inst, "sequential", assign, start, 0)
        assert_valid(batch, inst, plan)
        assert plan.makespan <= horizon(inst)


def test_bad_hint_is_harmless():
    # A hint that overloads one node is not a plan; CP-SAT must still find the optimum.
    batch, inst = instance_of(identical_whole_node(3, graham_family(3)))
    bad = (np.zeros(inst.n_jobs, dtype=np.int64), np.zeros(inst.n_jobs, dtype=np.int64))
    res = solve_exact(inst, lower_bound=0, hint=bad, **FAST)
    assert (res.makespan, res.status) == (540, "optimal")
    assert_valid(batch, inst, res)


# --------------------------------------------------------------------- stages


def one_node(jobs: list[dict], count: int = 1) -> dict:
    return doc_of([{"name": "n", "count": count, "cores": 4, "memory_gib": 8.0}],
                  [{"cores": 4, "memory_gib": 1.0, **j} for j in jobs])


def test_stage2_picks_lower_weighted_tardiness():
    # One node, two whole-node 1 h jobs, both due at 1 h: either order ends at 120 min, but
    # a late a costs 60 * 1.25 = 75 and a late b costs 60 * 1.5 = 90 (float weights, scaled
    # by 1000 inside the model).
    batch, inst = instance_of(one_node([
        {"name": "a", "hours": 1.0, "due_h": 1.0, "weight": 1.25},
        {"name": "b", "hours": 1.0, "due_h": 1.0, "weight": 1.5},
    ]))
    res = solve_exact(inst, lower_bound=0, **FAST)
    assert res.status == "optimal"
    assert objective(inst, res.end)[:2] == (120, 75.0)
    assert res.start[1] == 0  # b, the heavier one, goes first


def test_makespan_comes_before_tardiness():
    # Two nodes; L (3 h, no due) and three urgent 1 h jobs due at 1 h, weight 10. Minimising
    # tardiness alone would run two urgent jobs first on both nodes (makespan 4 h); the
    # lexicographic optimum keeps the 3 h makespan (L alone on a node) and then pays
    # 10 * (0 + 60 + 120) = 1800 for the urgent jobs queued on the other node.
    batch, inst = instance_of(one_node(
        [{"name": "long", "hours": 3.0}]
        + [{"name": f"u{k}", "hours": 1.0, "due_h": 1.0, "weight": 10.0} for k in range(3)],
        count=2))
    res = solve_exact(inst, lower_bound=0, **FAST)
    assert res.status == "optimal"
    assert objective(inst, res.end)[:2] == (180, 1800.0)
    assert_valid(batch, inst, res)


def test_tiebreak_weighted_completion_follows_smiths_rule():
    # W. E. Smith, "Various optimizers for single-stage production", Naval Research Logistics
    # Quarterly 3, 1956 (from memory): on one machine, sequencing by p_j / w_j non-decreasing
    # minimises sum w_j C_j. No due times, so stage 3 alone decides the order.
    hours = [2.0, 1.0, 0.5, 3.0, 1.5]
    weights = [1.0, 3.0, 1.0, 2.0, 2.5]
    batch, inst = instance_of(one_node(
        [{"name": f"j{k}", "hours": h, "weight": w}
         for k, (h, w) in enumerate(zip(hours, weights, strict=True))]))
    order = sorted(range(5), key=lambda k: hours[k] / weights[k])
    ends = np.cumsum([hours[k] * 60 for k in order])
    smith = sum(weights[k] * e for k, e in zip(order, ends, strict=True))
    res = solve_exact(inst, lower_bound=0, **FAST)
    assert res.status == "optimal"
    assert objective(inst, res.end) == (480, 0.0, smith)


# --------------------------------------------------------------------- guards


def test_size_guard_and_force(monkeypatch):
    from assignplan import solve as solve_api

    monkeypatch.setattr(solve_api, "EXACT_MAX_JOBS", 6)
    batch, inst = instance_of(identical_whole_node(2, [1.0] * 7))
    with pytest.raises(InputError) as err:
        solve_api.solve(inst, "exact", budget=10)
    assert str(err.value) == ("exact: 7 jobs is above the exact method's limit of 6;"
                              " it would not prove anything in time; use --method ga, or"
                              " --force to try anyway")
    res = solve_api.solve(inst, "exact", budget=10,
                          settings=solve_api.ExactSettings(force=True, workers=1))
    assert (res.makespan, res.status) == (240, "optimal")


def test_size_guard_default_limit():
    _, inst = instance_of(identical_whole_node(2, [1.0] * 301))
    from assignplan.solve import solve

    with pytest.raises(InputError, match="exact: 301 jobs is above the exact method's limit"
                       " of 300; it would not prove anything in time; use --method ga, or"
                       " --force to try anyway"):
        solve(inst, "exact")


def test_result_bound_is_the_larger_one_and_seed_is_recorded():
    # lower_bound = max(given, solver's proven bound): with a weak given bound (60) the proven
    # optimum 120 is reported, the gap is 0, and the seed is stored in the result.
    _, inst = instance_of(identical_whole_node(2, [1.0] * 4))
    res = solve_exact(inst, lower_bound=60, budget=5.0, workers=1, seed=7)
    assert (res.makespan, res.solver_bound, res.lower_bound) == (120, 120, 120)
    assert (res.gap_pct, res.seed, res.method) == (0.0, 7, "exact")


def test_exact_never_worse_than_its_hint_even_when_out_of_time():
    """Falkenauer u120_00 on 48 nodes of 150 cores (E. Falkenauer, J. Heuristics 2, 1996, via
    BPPLIB): CP-SAT finds no plan of its own in a split second, so the greedy hint's plan
    stands, decoded by the builder; it is feasible and never worse than greedy."""
    data = Path(__file__).parent / "data" / "published" / "binpacking"
    batch, inst = instance_of(bin_packing_batch(read_bpp(data / "Falkenauer_u120_00.txt"), 48))
    bound = lower_bound(inst).value
    greedy = solve_greedy(inst, lower_bound=bound)
    res = solve_exact(inst, lower_bound=bound, budget=0.05, hint=greedy_assign(inst),
                      workers=1)
    assert res.method == "exact" and res.status == "feasible"
    assert res.makespan <= greedy.makespan
    assert check_plan(batch, to_plan_doc(inst, res)) == []
