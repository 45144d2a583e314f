"""Greedy list scheduling: Graham's LPT results, a published worked example, checker property."""

from __future__ import annotations

import itertools
import json
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings

from assignplan.bounds import lower_bound  # written by another helper; ImportError = defect
from assignplan.check import check_plan  # idem: the test must fail loudly, never skip
from assignplan.generate import batch_doc, generate
from assignplan.methods.greedy import greedy_assign, solve_greedy
from assignplan.plan import to_plan_doc
from assignplan.schedule import build_schedule
from tests.strategies import batches, instance_of

DATA = Path(__file__).parent / "data" / "published" / "examples" / "worked_examples.json"


def identical_whole_node(m: int, hours: list[float]) -> dict:
    """P||Cmax as a batch: m identical nodes, every job needs a whole node, so jobs on one
    node run one after another and a node's finish is the sum of its jobs' times."""
    return {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
            "nodes": [{"name": "m", "count": m, "cores": 4, "memory_gib": 8.0}],
            "jobs": [{"name": f"j{k}", "cores": 4, "memory_gib": 1.0, "hours": float(h)}
                     for k, h in enumerate(hours)]}


def graham_family(m: int) -> list[int]:
    """2m-1, 2m-1, 2m-2, 2m-2, ..., m+1, m+1, m, m, m (2m + 1 jobs)."""
    return [h for v in range(2 * m - 1, m, -1) for h in (v, v)] + [m, m, m]


def makespan_h(inst, assign, start) -> float:
    return float((start + inst.duration[np.arange(inst.n_jobs), assign]).max()) / 60


@pytest.mark.parametrize("m", range(2, 7))
def test_graham_lpt_worst_case_family(m):
    # R. L. Graham, "Bounds on multiprocessing timing anomalies", SIAM J. Appl. Math. 17(2),
    # 1969: on this family LPT ends at 4m - 1 while the optimum is 3m, so the bound
    # 4/3 - 1/(3m) is tight.
    _, inst = instance_of(identical_whole_node(m, graham_family(m)))
    assign, start = greedy_assign(inst)
    assert makespan_h(inst, assign, start) == 4 * m - 1
    # the optimum 3m: sum of times / m = 3m is a lower bound, and pairing the 2(m-1) long jobs
    # as (longest, shortest), ... plus (m, m, m) on the last node attains it
    assert sum(graham_family(m)) == 3 * m * m
    opt = np.empty(inst.n_jobs, dtype=np.int64)
    n_long = 2 * (m - 1)
    for k in range(m - 1):
        opt[[k, n_long - 1 - k]] = k
    opt[n_long:] = m - 1
    assert makespan_h(inst, opt, build_schedule(inst, opt)) == 3 * m


def test_graham_published_values_m4():
    example = next(e for e in json.loads(DATA.read_text())["examples"]
                   if e["id"] == "graham1969_lpt_tight_m4")
    _, inst = instance_of(identical_whole_node(example["machines"], example["processing_times"]))
    assign, start = greedy_assign(inst)
    assert makespan_h(inst, assign, start) == example["published_lpt_makespan"]  # 15
    loads = sorted(sorted(example["processing_times"][j] for j in np.flatnonzero(assign == i))
                   for i in range(example["machines"]))
    assert loads == sorted(sorted(b) for b in example["example_lpt_schedule"])


@pytest.mark.parametrize("case", [0, 1])
def test_list_scheduling_worked_example(case):
    # Wikipedia, "List scheduling" (example section): jobs 4, 5, 6, 7, 8 taken in that order
    ex = next(e for e in json.loads(DATA.read_text())["examples"]
              if e["id"] == "wikipedia_list_scheduling_4to8")
    times = ex["processing_times_in_list_order"]
    c = ex["cases"][case]
    _, inst = instance_of(identical_whole_node(c["machines"], times))
    assign, start = greedy_assign(inst, order=np.arange(len(times)))
    assert makespan_h(inst, assign, start) == c["published_list_makespan"]  # 18 and 13
    got = sorted(sorted(times[j] for j in np.flatnonzero(assign == i))
                 for i in range(c["machines"]))
    assert got == sorted(sorted(b) for b in c["published_list_schedule"])


def brute_force_opt(times: list[int], m: int) -> int:
    """Optimal P||Cmax by enumerating every assignment (job 0 fixed to machine 0: symmetry)."""
    t = np.array(times)
    best = sum(times)
    for rest in itertools.product(range(m), repeat=len(times) - 1):
        a = np.array((0, *rest))
        best = min(best, int(np.bincount(a, weights=t, minlength=m).max()))
    return best


def test_lpt_ratio_bound_on_random_identical_instances():
    # Graham (1969): C_max(LPT) <= (4/3 - 1/(3m)) C_max(OPT), i.e. 3m LPT <= (4m - 1) OPT
    rng = np.random.default_rng(2024)
    worst = 0.0
    for _ in range(25):
        m = int(rng.integers(2, 4))
        n = int(rng.integers(m + 1, 9))
        minutes = [int(x) for x in rng.integers(10, 600, size=n)]
        _, inst = instance_of(identical_whole_node(m, [x / 60 for x in minutes]))
        assign, start = greedy_assign(inst)
        lpt = int((start + inst.duration[np.arange(n), assign]).max())
        opt = brute_force_opt(minutes, m)
        assert opt <= lpt
        assert 3 * m * lpt <= (4 * m - 1) * opt, (m, minutes, lpt, opt)
        worst = max(worst, lpt / opt)
    assert worst > 1.0  # the instances are not all trivially solved by LPT


def test_tie_on_finish_goes_to_earlier_start():
    # node "a" (index 0, speed 2, down for the first 30 min) and node "b" (index 1, speed 1):
    # a 1 h job finishes at minute 60 on both; it must take b, where it starts earlier
    d = {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
         "nodes": [{"name": "a", "cores": 4, "memory_gib": 8.0, "speed": 2.0,
                    "maintenance": [{"start_h": 0.0, "end_h": 0.5}]},
                   {"name": "b", "cores": 4, "memory_gib": 8.0}],
         "jobs": [{"name": "x", "cores": 1, "memory_gib": 1.0, "hours": 1.0}]}
    _, inst = instance_of(d)
    assign, start = greedy_assign(inst)
    assert (int(assign[0]), int(start[0])) == (1, 0)


def test_tie_on_finish_and_start_goes_to_lowest_node():
    _, inst = instance_of(identical_whole_node(3, [1.0]))
    assert int(greedy_assign(inst)[0][0]) == 0


def test_greedy_uses_the_faster_node_and_shares_capacity():
    d = {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
         "nodes": [{"name": "slow", "cores": 8, "memory_gib": 32.0},
                   {"name": "quick", "cores": 8, "memory_gib": 32.0, "speed": 2.0}],
         "jobs": [{"name": f"j{k}", "cores": 4, "memory_gib": 4.0, "hours": 2.0}
                  for k in range(3)]}
    _, inst = instance_of(d)
    assign, start = greedy_assign(inst)
    # the first two run side by side on quick (1 h each there, ending at 60 instead of 120);
    # the third would end at 120 on either node (quick 60-120, slow 0-120): the tie goes to
    # the earlier start, slow
    assert list(assign) == [1, 1, 0] and list(start) == [0, 0, 0]


def test_solve_greedy_result():
    _, inst = instance_of(identical_whole_node(2, [3.0, 2.0, 1.0]))
    res = solve_greedy(inst, lower_bound=180)
    assert (res.method, res.status, res.makespan, res.lower_bound) == ("greedy", "feasible",
                                                                      180, 180)
    assert res.gap_pct == 0.0 and res.seconds >= 0


@settings(max_examples=200, deadline=None)
@given(batches(max_jobs=14, p_follows=0.3, p_maintenance=0.5))
def test_every_greedy_plan_passes_the_checker(d):
    batch, inst = instance_of(d)
    bound = lower_bound(inst).value
    res = solve_greedy(inst, lower_bound=bound)
    assert check_plan(batch, to_plan_doc(inst, res)) == []
    assert res.makespan >= bound


# ----------------------------------------------------------------- generated benchmark batches


def test_known_optimum_generator_and_greedy():
    d = generate("small", 5, known_optimum=True)
    opt_min = round(d["_known_optimum_h"] * 60)
    batch, inst = instance_of(batch_doc(d))
    assert inst.n_jobs == 200 and inst.n_nodes == 20
    # by construction the pieces tile every node's cores x [0, H) rectangle exactly
    assert int((inst.demand[:, 0] * inst.duration[:, 0]).sum()) == 20 * 64 * opt_min
    assert lower_bound(inst).value <= opt_min
    res = solve_greedy(inst, lower_bound=opt_min)
    assert res.makespan >= opt_min
    assert check_plan(batch, to_plan_doc(inst, res)) == []


def test_heterogeneous_generator_is_seeded_and_greedy_plan_checks():
    d = generate("small", 3)
    assert d == generate("small", 3) and d != generate("small", 4)
    batch, inst = instance_of(d)
    assert inst.n_jobs == 200 and inst.n_nodes == 20
    assert inst.demand[:, 2].any() and len(inst.pred_idx) > 0
    res = solve_greedy(inst, lower_bound=lower_bound(inst).value)
    assert check_plan(batch, to_plan_doc(inst, res)) == []


# ----------------------------------------------------------------- orders for the third term


@pytest.mark.parametrize("seed", range(12))
def test_every_candidate_plan_is_valid_and_greedy_keeps_the_lexicographic_best(seed):
    from assignplan.methods.greedy import candidate_plans, completion_variants
    from assignplan.plan import make_result, objective
    from tests.strategies import random_batch_doc

    batch, inst = instance_of(random_batch_doc(np.random.default_rng(seed), max_jobs=14,
                                               p_follows=0.3, p_maintenance=0.5, p_ready=0.4))
    bound = lower_bound(inst).value
    plans = candidate_plans(inst, bound)
    horizon = int(inst.end_times(*plans["longest"]).max())
    for assign, start in list(plans.values()) + completion_variants(inst, horizon)[:12]:
        plan = make_result(inst, "greedy", assign, start, bound)
        assert check_plan(batch, to_plan_doc(inst, plan)) == []
    best = solve_greedy(inst, lower_bound=bound)
    assert objective(inst, best.end) == min(objective(inst, inst.end_times(*p))
                                            for p in plans.values())


def test_completion_order_puts_the_long_jobs_first_then_smiths_rule_within_follows():
    from assignplan.methods.orders import completion_order, critical_jobs, smith_keys

    d = {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
         "nodes": [{"name": "n", "count": 2, "cores": 4, "memory_gib": 8.0}],
         "jobs": [{"name": "short", "cores": 1, "memory_gib": 1.0, "hours": 1.0},
                  {"name": "heavy", "cores": 1, "memory_gib": 1.0, "hours": 2.0, "weight": 4.0},
                  {"name": "long", "cores": 1, "memory_gib": 1.0, "hours": 10.0},
                  {"name": "tail", "cores": 1, "memory_gib": 1.0, "hours": 0.5,
                   "follows": ["long"]},
                  {"name": "before", "cores": 1, "memory_gib": 1.0, "hours": 3.0},
                  {"name": "after", "cores": 1, "memory_gib": 1.0, "hours": 0.1,
                   "follows": ["before"]}]}
    _, inst = instance_of(d)
    bound = lower_bound(inst).value  # 10.5 h: long, then tail
    critical = critical_jobs(inst, bound, 0.5)
    assert [inst.job_names[j] for j in np.flatnonzero(critical)] == ["long", "tail"]
    order = [inst.job_names[j] for j in completion_order(inst, critical, smith_keys(inst))]
    # Smith's keys p / w: heavy 0.5 h, short 1 h, before 3 h; after (0.1 h) waits for before
    assert order == ["long", "tail", "heavy", "short", "before", "after"]
