"""The configuration LP bound: equal to the LP over every configuration, valid, and stronger
than the other parts where published bin-packing results say it must be."""

from __future__ import annotations

import csv
import itertools
import math
from pathlib import Path

import numpy as np
import pytest
from ortools.linear_solver import pywraplp

from assignplan.bounds import lower_bound
from assignplan.bounds.configurations import configuration_bound
from assignplan.methods.exact import solve_exact
from tests.strategies import instance_of

DATA = Path(__file__).parent / "data" / "published" / "binpacking"
WEEK = {"start": "2026-12-07T00:00:00", "hours": 168.0}


def lp_over_every_configuration(p: np.ndarray, demand: np.ndarray, cap: np.ndarray) -> float:
    """The same LP with all its columns written out (independent of the column generation):
    every subset of the jobs that fits `cap` is a column."""
    n = len(p)
    solver = pywraplp.Solver.CreateSolver("GLOP")
    rows = [solver.Constraint(float(pj), solver.infinity()) for pj in p]
    objective = solver.Objective()
    objective.SetMinimization()
    for size in range(1, n + 1):
        for subset in itertools.combinations(range(n), size):
            if np.all(demand[list(subset)].sum(axis=0) <= cap):
                x = solver.NumVar(0.0, solver.infinity(), "")
                objective.SetCoefficient(x, 1.0)
                for j in subset:
                    rows[j].SetCoefficient(x, 1.0)
    assert solver.Solve() == pywraplp.Solver.OPTIMAL
    return objective.Value()


@pytest.mark.parametrize("seed", range(40))
def test_column_generation_reaches_the_lp_over_every_configuration(seed):
    rng = np.random.default_rng(seed)
    n, n_res = int(rng.integers(2, 10)), int(rng.integers(1, 4))
    cap = rng.integers(4, 20, size=n_res)
    demand = np.minimum(rng.integers(1, 20, size=(n, n_res)), cap)
    p = rng.integers(1, 100, size=n).astype(float)
    full = lp_over_every_configuration(p, demand, cap)
    got = configuration_bound(p, demand, cap)
    assert got <= full * (1 + 1e-9) + 1e-9  # a valid bound on the LP, never above it
    assert got == pytest.approx(full, rel=1e-6)  # and these are small enough to solve


def test_same_input_same_bound():
    rng = np.random.default_rng(11)
    demand = rng.integers(1, 64, size=(120, 2))
    p = rng.integers(5, 600, size=120).astype(float)
    cap = np.array([64, 64])
    assert configuration_bound(p, demand, cap) == configuration_bound(p, demand, cap)


def test_giving_up_early_still_returns_a_valid_bound():
    rng = np.random.default_rng(12)
    demand = rng.integers(1, 30, size=(9, 2))
    p = rng.integers(1, 60, size=9).astype(float)
    cap = np.array([40, 40])
    full = lp_over_every_configuration(p, demand, cap)
    for give_up in (0.0, 0.5 * full, 0.99 * full, 2 * full):
        assert 0.0 <= configuration_bound(p, demand, cap, give_up_below=give_up) <= full + 1e-6


def test_jobs_that_fit_in_pairs_but_not_all_three_together():
    # One node of 10 cores and 10 GiB; jobs of (5 cores, 2 GiB), (2, 5), (4, 4) for 60, 75 and
    # 90 min. Any two fit together, all three do not (11 cores, 11 GiB), so at most two run at
    # a time: 225 job-minutes at two at a time take 112.5 min even with preemption (113 in
    # whole minutes, 120 on the batch's 15-minute grid). The longest job (90 min) is the best
    # of the other parts: work per resource (81 and 86 min), the dual feasible functions and
    # the clique (no two jobs conflict) stay lower. Worked by hand, the
    # optimum is 135: two start at 0 and the third waits for one of them to end, best (60, 90)
    # then (75) after the 60-minute job.
    doc = {"window": WEEK,
           "nodes": [{"name": "n", "count": 1, "cores": 10, "memory_gib": 10.0}],
           "jobs": [{"name": f"j{k}", "cores": c, "memory_gib": float(m), "hours": h}
                    for k, (c, m, h) in enumerate([(5, 2, 1.0), (2, 5, 1.25), (4, 4, 1.5)])]}
    _, inst = instance_of(doc)
    lb = lower_bound(inst)
    assert lb.parts["configurations"] == 113
    assert max(v for k, v in lb.parts.items() if k not in ("configurations", "grid")) == 90
    assert lb.value == 120
    res = solve_exact(inst, lower_bound=0, budget=10.0, workers=1, seed=0)
    assert (res.makespan, res.status) == (135, "optimal")


SCHOLL_SET_2 = ["N1W1B1R0", "N1W1B1R1", "N1W1B1R2"]


@pytest.mark.parametrize("name", SCHOLL_SET_2)
def test_bin_packing_instances_whose_optimum_exceeds_the_capacity_bound(name):
    # Scholl, Klein & Juergens (Computers & OR 24(7), 1997), data set 2, via BPPLIB (Delorme,
    # Iori & Martello 2018): the optimal bin counts (optima.csv, 18 / 18 / 19) are one more
    # than ceil(sum of sizes / capacity). Items of s_k cores for one hour on opt - 1 nodes
    # cannot all end within the hour; only the configuration LP (the Gilmore-Gomory bound of
    # bin packing) proves it here: its value is 17.41 / 17.50 / 18.31 bins (measured).
    lines = (DATA / f"{name}.txt").read_text().split()
    n, cap = int(lines[0]), int(lines[1])
    sizes = [int(x) for x in lines[2 : 2 + n]]
    with open(DATA / "optima.csv", newline="") as f:
        opt = int(next(r for r in csv.DictReader(f) if r["instance"] == name)["optimal_bins"])
    assert math.ceil(sum(sizes) / cap) == opt - 1
    doc = {"window": WEEK,
           "nodes": [{"name": "n", "count": opt - 1, "cores": cap, "memory_gib": 1.0}],
           "jobs": [{"name": f"i{k}", "cores": s, "memory_gib": 0.001, "hours": 1.0}
                    for k, s in enumerate(sizes)]}
    lb = lower_bound(instance_of(doc)[1])
    assert lb.parts["configurations"] > 60
    assert max(v for k, v in lb.parts.items() if k not in ("configurations", "grid")) <= 60
    assert lb.value == 120  # every job takes an hour: a second hour is needed


def test_bound_never_exceeds_proven_optima_of_random_two_resource_batches():
    # Independent reference: CP-SAT's proven optimum (methods.exact) on small batches of jobs
    # heavy in cores or in memory, where configurations matter most.
    rng = np.random.default_rng(20261203)
    lifted = 0
    for case in range(25):
        n = int(rng.integers(3, 8))
        doc = {"window": WEEK,
               "nodes": [{"name": "n", "count": int(rng.integers(1, 3)), "cores": 16,
                          "memory_gib": 64.0}],
               "jobs": [{"name": f"j{k}", "cores": int(rng.integers(2, 12)),
                         "memory_gib": float(rng.integers(8, 48)),
                         "hours": float(rng.integers(1, 9)) / 4} for k in range(n)]}
        _, inst = instance_of(doc)
        lb = lower_bound(inst)
        res = solve_exact(inst, lower_bound=0, budget=10.0, workers=1, seed=0)
        assert res.status == "optimal"
        assert lb.value <= res.makespan, f"case {case}: {lb} > {res.makespan}"
        others = max(v for k, v in lb.parts.items() if k not in ("configurations", "grid"))
        lifted += lb.parts["configurations"] > others
    assert lifted >= 5  # the check exercises the new part, not only the old ones
