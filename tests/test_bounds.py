"""The lower bound: never above a real optimum, and tight where published results say it is."""

from __future__ import annotations

import csv
import itertools
import json
import math
from functools import cache
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from assignplan.bounds import (
    PART_NAMES,
    binding_parts,
    conflict_bound,
    dff_work,
    lower_bound,
    time_grid,
)
from assignplan.check import check_plan
from assignplan.instance import Instance
from assignplan.methods.exact import solve_exact
from assignplan.plan import to_plan_doc
from tests.strategies import instance_of, random_batch_doc
from tests.test_check import serial_plan

DATA = Path(__file__).parent / "data" / "published"
WEEK = {"start": "2026-12-07T00:00:00", "hours": 168.0}


def pcmax_doc(times: list[float], m: int, *, speed: float = 1.0) -> dict:
    """P||Cmax as a batch: m one-core nodes, one-core jobs (two never share a node)."""
    return {"window": WEEK,
            "nodes": [{"name": "n", "count": m, "cores": 1, "memory_gib": 1.0, "speed": speed}],
            "jobs": [{"name": f"j{k}", "cores": 1, "memory_gib": 1.0, "hours": float(p)}
                     for k, p in enumerate(times)]}


def bound_of(doc: dict) -> int:
    return lower_bound(instance_of(doc)[1]).value


# --------------------------------------------------------------------------- brute force


def brute_force_optimum(inst: Instance) -> int:
    """Optimal makespan when no two jobs can ever share a node and there are no follows.

    Each node then runs its jobs one after another; for a fixed order, starting each job at its
    earliest minute (ready time, previous end, past maintenance) is optimal, so the node's best
    makespan is the minimum over orders. Nodes are independent, so a DP over (job subset,
    first k nodes) gives the optimum: best(S, k) = min over T subset S of
    max(node_cost(k, T), best(S - T, k - 1)).
    """
    n, m = inst.n_jobs, inst.n_nodes
    windows = [list(zip(inst.maint_start[inst.maint_ptr[i]:inst.maint_ptr[i + 1]].tolist(),
                        inst.maint_end[inst.maint_ptr[i]:inst.maint_ptr[i + 1]].tolist(),
                        strict=True)) for i in range(m)]

    @cache
    def node_cost(i: int, subset: int) -> float:
        jobs = [j for j in range(n) if subset >> j & 1]
        if not all(inst.eligible[j, i] for j in jobs):
            return math.inf
        best = math.inf
        for order in itertools.permutations(jobs):
            t = 0
            for j in order:
                t, d = max(t, int(inst.ready[j])), int(inst.duration[j, i])
                for a, b in windows[i]:
                    if t < b and a < t + d:
                        t = b
                t += d
            best = min(best, t)
        return best

    @cache
    def best(subset: int, k: int) -> float:
        if k == 0:
            return 0 if subset == 0 else math.inf
        out, sub = math.inf, subset
        while True:  # every sub-subset of `subset`, the empty one included
            out = min(out, max(node_cost(k - 1, sub), best(subset & ~sub, k - 1)))
            if sub == 0:
                return out
            sub = (sub - 1) & subset

    return int(best((1 << n) - 1, m))


def whole_node_doc(rng: np.random.Generator) -> dict:
    """A random heterogeneous batch (tests/strategies.py) made into one whose jobs never share.

    Every node gets 16 cores and every job 9..16 cores, so any two jobs together exceed any
    node; memory, GPUs, speed, tags, maintenance and ready times stay as drawn. No follows.
    """
    doc = random_batch_doc(rng, max_jobs=4, p_follows=0.0, p_maintenance=0.5, p_ready=0.4)
    for node in doc["nodes"]:
        node["cores"] = 16
    for job in doc["jobs"]:
        job["cores"] = int(rng.integers(9, 17))
    return doc


# --------------------------------------------------------------------------- P||Cmax


@pytest.mark.parametrize("m", range(2, 8))
def test_graham_lpt_family_bound_equals_optimum(m):
    # R. L. Graham, SIAM J. Appl. Math. 17(2), 1969 (family quoted from standard knowledge of
    # the result): 2m+1 jobs 2m-1, 2m-1, ..., m+1, m+1, m, m, m on m machines; optimum 3m,
    # which is sum/m = 3m^2/m, so the bound must reach it exactly.
    times = [p for p in range(2 * m - 1, m, -1) for _ in range(2)] + [m, m, m]
    assert sum(times) == 3 * m * m
    assert bound_of(pcmax_doc(times, m)) == 3 * m * 60


def test_graham_worked_example_from_data():
    examples = json.loads((DATA / "examples" / "worked_examples.json").read_text())["examples"]
    ex = next(e for e in examples if e["id"] == "graham1969_lpt_tight_m4")
    assert bound_of(pcmax_doc(ex["processing_times"], ex["machines"])) == (
        60 * ex["published_optimal_makespan"])


def _read_pcmax(path: Path) -> tuple[list[int], int, int]:
    """(times, machines, OPT) from the `p p_cmax n m` format."""
    tokens = path.read_text().split()
    assert tokens[:2] == ["p", "p_cmax"]
    n, m = int(tokens[2]), int(tokens[3])
    times = [int(x) for x in tokens[4 : 4 + n]]
    assert tokens[4 + n] == "0"
    opt = int(tokens[5 + n].removeprefix("OPT:").removesuffix(";"))
    return times, m, opt


# the instances whose OPT an exact check confirmed when gathered (optima.csv, `verified`)
PCMAX = [DATA / "pcmax" / f"{name}.txt" for name in (
    "NU_1_0010_05_0", "NU_2_0050_10_0", "U_1_0010_05_0", "U_1_0010_05_1", "U_1_0010_05_2",
    "U_1_0010_05_3", "U_1_0010_05_4", "U_1_0050_25_8", "U_2_0010_05_0", "U_2_0050_10_0",
    "U_3_0010_05_0")]


@pytest.mark.parametrize("path", PCMAX, ids=[p.stem for p in PCMAX])
def test_published_pcmax_instances(path):
    # França, Gendreau, Laporte, Müller (1994) instances with OPT lines, exactly confirmed when
    # gathered (tests/data/published/README.md). Hours -> minutes: every bound scales by 60.
    times, m, opt = _read_pcmax(path)
    with open(DATA / "pcmax" / "optima.csv", newline="") as f:
        row = next(r for r in csv.DictReader(f) if r["instance"] == path.stem)
    assert int(row["optimal_makespan"]) == opt and row["verified"].startswith("confirmed")
    p = sorted(times, reverse=True)
    trivial = max(math.ceil(sum(p) / m), p[0], p[m - 1] + p[m] if len(p) > m else 0)
    lb = bound_of(pcmax_doc(times, m))
    # Whole hours on every node: the grid of 60 minutes lifts ceil(sum*60/m) to 60*ceil(sum/m).
    assert lb >= 60 * trivial
    assert lb <= 60 * opt
    if int(row["trivial_lower_bound"]) == opt:
        assert lb == 60 * opt


@pytest.mark.parametrize("seed", range(30))
def test_identical_whole_node_bound_formula_and_optimum(seed):
    rng = np.random.default_rng(seed)
    m = int(rng.integers(1, 4))
    times = rng.integers(1, 20, size=int(rng.integers(1, 8))).tolist()
    _, inst = instance_of(pcmax_doc([t / 4 for t in times], m))  # quarter hours: 15 min steps
    p = sorted((15 * t for t in times), reverse=True)
    lb = lower_bound(inst).value
    # Common practice for P||Cmax: max(ceil(sum/m), p_max, p_m + p_(m+1)) is a lower bound.
    assert lb >= max(math.ceil(sum(p) / m), p[0], p[m - 1] + p[m] if len(p) > m else 0)
    assert lb <= brute_force_optimum(inst)


# --------------------------------------------------------------------------- vs optimum


def test_brute_force_optima_of_random_heterogeneous_batches_respect_the_bound():
    tested = tight = crowded = 0
    for seed in range(300):
        _, inst = instance_of(whole_node_doc(np.random.default_rng(seed)))
        if inst.n_jobs > 5 or inst.n_nodes > 6:
            continue
        opt, lb = brute_force_optimum(inst), lower_bound(inst).value
        assert lb <= opt, f"seed {seed}: bound {lb} above optimum {opt}"
        tested += 1
        tight += lb == opt
        crowded += inst.n_jobs > inst.n_nodes  # some node must run two jobs in sequence
    assert tested >= 200 and crowded >= 40
    # Measured: tight on 226 of 251. A bound that is rarely tight would be a weak bound.
    assert tight >= tested // 2


@pytest.mark.parametrize("seed", range(60))
def test_feasible_plans_of_random_batches_are_never_below_the_bound(seed):
    # Any checked plan's makespan is an upper bound on the optimum (follows, maintenance,
    # ready times and shared nodes included).
    batch, inst = instance_of(random_batch_doc(np.random.default_rng(seed), max_jobs=20,
                                               p_follows=0.3))
    plan = serial_plan(batch)
    assert check_plan(batch, plan) == []
    makespan = max(round(a.end_h * 60) for a in plan.assignments)
    assert lower_bound(inst).value <= makespan


# --------------------------------------------------------------------------- hand examples


def test_maintenance_is_counted():
    # One node down for [0 h, 2 h): a 1 h job cannot end before 3 h.
    doc = {"window": WEEK,
           "nodes": [{"name": "n", "cores": 16, "memory_gib": 8.0,
                      "maintenance": [{"start_h": 0.0, "end_h": 2.0}]}],
           "jobs": [{"name": "a", "cores": 1, "memory_gib": 1.0, "hours": 1.0}]}
    assert bound_of(doc) == 180


def test_maintenance_reduces_supply():
    # Two 16-core nodes, one down for [1 h, 3 h); 8 one-hour 8-core jobs = 64 core-hours.
    # Supply by T hours: 16 T + 16 (T - min(2, max(0, T - 1))) >= 64 -> T = 3 h.
    doc = {"window": WEEK,
           "nodes": [{"name": "a", "cores": 16, "memory_gib": 64.0},
                     {"name": "b", "cores": 16, "memory_gib": 64.0,
                      "maintenance": [{"start_h": 1.0, "end_h": 3.0}]}],
           "jobs": [{"name": "x", "count": 8, "cores": 8, "memory_gib": 1.0, "hours": 1.0}]}
    lb = lower_bound(instance_of(doc)[1])
    assert lb.parts["cores"] == 180 and lb.value == 180


def test_speed_is_counted():
    # Work 2 x 16 cores x 240 min on one 16-core node of speed 2: 240 minutes, not 480.
    doc = {"window": WEEK,
           "nodes": [{"name": "n", "cores": 16, "memory_gib": 8.0, "speed": 2.0}],
           "jobs": [{"name": "a", "count": 2, "cores": 16, "memory_gib": 1.0, "hours": 4.0}]}
    assert bound_of(doc) == 240
    # Speeds 1 and 3 for 4 whole-node jobs of 3 h: 720 reference node-minutes over a supply of
    # 1 + 3 per minute gives 180; the optimum (three on the fast node, 3 x 60) is also 180.
    doc = {"window": WEEK,
           "nodes": [{"name": "s", "cores": 16, "memory_gib": 8.0, "speed": 1.0},
                     {"name": "f", "cores": 16, "memory_gib": 8.0, "speed": 3.0}],
           "jobs": [{"name": "a", "count": 4, "cores": 16, "memory_gib": 1.0, "hours": 3.0}]}
    _, inst = instance_of(doc)
    assert lower_bound(inst).value == brute_force_optimum(inst) == 180


def test_ready_time_and_critical_path():
    # a (ready 1 h, 2 h) -> b (1 h on the 2x node) -> c (ready 6 h, 1 h): ends 3 h, 3.5 h;
    # c waits for its ready time: 7 h.
    doc = {"window": WEEK,
           "nodes": [{"name": "n", "cores": 4, "memory_gib": 8.0},
                     {"name": "f", "cores": 4, "memory_gib": 8.0, "speed": 2.0}],
           "jobs": [{"name": "a", "cores": 1, "memory_gib": 1.0, "hours": 4.0, "ready_h": 1.0},
                    {"name": "b", "cores": 1, "memory_gib": 1.0, "hours": 1.0, "follows": ["a"]},
                    {"name": "c", "cores": 1, "memory_gib": 1.0, "hours": 2.0, "ready_h": 6.0,
                     "follows": ["b"]}]}
    lb = lower_bound(instance_of(doc)[1])
    assert lb.parts["job"] == 420  # c alone: ready 6 h + 1 h on the fast node
    assert lb.parts["critical_path"] == 420
    doc["jobs"][2]["ready_h"] = 0.0
    lb = lower_bound(instance_of(doc)[1])
    assert lb.parts["critical_path"] == 60 + 120 + 30 + 60 == lb.value


def test_critical_path_waits_for_maintenance_on_every_eligible_node():
    doc = {"window": WEEK,
           "nodes": [{"name": "n", "count": 2, "cores": 4, "memory_gib": 8.0,
                      "maintenance": [{"start_h": 1.5, "end_h": 4.0}]}],
           "jobs": [{"name": "a", "cores": 1, "memory_gib": 1.0, "hours": 1.0},
                    {"name": "b", "cores": 1, "memory_gib": 1.0, "hours": 1.0,
                     "follows": ["a"]}]}
    # b cannot run [60, 120) across the window [90, 240) on either node: it ends at 5 h.
    assert lower_bound(instance_of(doc)[1]).parts["critical_path"] == 300


def test_class_bound_gpu_jobs_on_one_node_of_ten():
    # 8 one-hour jobs each needing all 8 cores of the only GPU node: 8 h there, although the
    # nine 64-core CPU nodes make the cluster-wide work bound tiny.
    doc = {"window": WEEK,
           "nodes": [{"name": "g", "cores": 8, "memory_gib": 64.0, "gpus": 4},
                     {"name": "c", "count": 9, "cores": 64, "memory_gib": 256.0}],
           "jobs": [{"name": "t", "count": 8, "cores": 8, "memory_gib": 8.0, "gpus": 1,
                     "hours": 1.0},
                    {"name": "x", "count": 5, "cores": 2, "memory_gib": 8.0, "hours": 1.0}]}
    lb = lower_bound(instance_of(doc)[1])
    assert lb.parts["cores"] < 60
    assert lb.parts["class_cores"] == 480 and lb.value == 480


def test_class_bound_on_a_subset_of_work():
    # Jobs that need tag "big" fit only on the two fat nodes: 6 x 32-core jobs of 1 h on 2 x
    # 64 cores -> 1.5 h, while the cluster as a whole would do it in well under an hour.
    doc = {"window": WEEK,
           "nodes": [{"name": "fat", "count": 2, "cores": 64, "memory_gib": 512.0,
                      "tags": ["big"]},
                     {"name": "c", "count": 20, "cores": 64, "memory_gib": 256.0}],
           "jobs": [{"name": "b", "count": 6, "cores": 32, "memory_gib": 8.0, "hours": 1.0,
                     "needs": ["big"]}]}
    lb = lower_bound(instance_of(doc)[1])
    assert lb.parts["cores"] < 60 and lb.parts["class_cores"] == 90
    # Four such jobs run at a time and all take 60 minutes, so any makespan is a multiple of
    # 60: the grid lifts 90 to 120, the true optimum (two rounds).
    assert lb.value == 120


def _read_bpp(path: Path) -> tuple[list[int], int]:
    lines = path.read_text().split()
    n, cap = int(lines[0]), int(lines[1])
    return [int(x) for x in lines[2 : 2 + n]], cap


BPP = [DATA / "binpacking" / f"{name}.txt" for name in (
    "Falkenauer_t60_00", "Falkenauer_u120_08", "N1C1W1_A", "N1W1B1R0", "N1W1B1R1", "N1W1B1R2")]


@pytest.mark.parametrize("path", BPP, ids=[p.stem for p in BPP])
def test_bin_packing_reduction(path):
    # Items of s_k cores for exactly 1 h on z nodes of C cores finish within 1 h iff they pack
    # into z bins. Optimal bin counts: BPPLIB (Delorme, Iori, Martello 2018), see README.
    sizes, cap = _read_bpp(path)
    with open(DATA / "binpacking" / "optima.csv", newline="") as f:
        opt = int(next(r for r in csv.DictReader(f) if r["instance"] == path.stem)
                  ["optimal_bins"])

    def doc(z: int) -> dict:
        return {"window": WEEK,
                "nodes": [{"name": "n", "count": z, "cores": cap, "memory_gib": 1.0}],
                "jobs": [{"name": f"i{k}", "cores": s, "memory_gib": 0.001, "hours": 1.0}
                         for k, s in enumerate(sizes)]}

    assert bound_of(doc(opt)) == 60  # one hour is achievable with the published optimum
    z = math.ceil(sum(sizes) / cap) - 1  # fewer nodes than the capacity bound allows
    assert bound_of(doc(z)) > 60


# --------------------------------------------------------------------------- pieces


def test_conflict_bound_formula():
    # p_K + p_(K+1) for K = 2 hosts: sorted 9, 7, 5, 3 -> 7 + 5 = 12; with three per node
    # (q = 2 needs 5 jobs) the single 5-job case gives 5 + 3 + 1 = 9 < 12.
    p, est = np.array([5, 9, 3, 7]), np.zeros(4, dtype=np.int64)
    assert conflict_bound(p, est, 2) == 12
    assert conflict_bound(np.array([9, 7, 5, 3, 1]), np.zeros(5, dtype=np.int64), 2) == 12
    assert conflict_bound(np.array([4, 4, 4, 4, 4]), np.zeros(5, dtype=np.int64), 2) == 12
    assert conflict_bound(p, np.array([10, 10, 10, 10]), 2) == 22
    assert conflict_bound(p, est, 4) == 0  # no node needs two of them


def test_time_grid():
    # One 2-core node, 1-core jobs of 60, 60 and 30 minutes: work 150 core-minutes over 2 cores
    # is 75, but every makespan is a multiple of 30 minutes: 90, the optimum.
    doc = {"window": WEEK, "nodes": [{"name": "n", "cores": 2, "memory_gib": 8.0}],
           "jobs": [{"name": f"j{k}", "cores": 1, "memory_gib": 1.0, "hours": h}
                    for k, h in enumerate((1.0, 1.0, 0.5))]}
    _, inst = instance_of(doc)
    assert time_grid(inst) == 30
    lb = lower_bound(inst)
    assert lb.parts["cores"] == 75 and lb.value == 90


def test_value_is_the_largest_part():
    _, inst = instance_of(random_batch_doc(np.random.default_rng(7), max_jobs=30))
    lb = lower_bound(inst)
    assert lb.value == max(lb.parts.values()) > 0
    assert {"job", "critical_path", "cores", "memory", "gpus", "class_cores", "class_memory",
            "class_gpus", "conflict", "clique", "dff", "configurations", "grid"} == set(lb.parts)


@pytest.mark.slow
def test_ten_thousand_jobs_on_a_thousand_nodes():
    rng = np.random.default_rng(3)
    doc = {"window": WEEK,
           "nodes": [{"name": "cpu", "count": 600, "cores": 64, "memory_gib": 256.0,
                      "maintenance": [{"start_h": 20.0, "end_h": 24.0}]},
                     {"name": "gpu", "count": 100, "cores": 64, "memory_gib": 512.0, "gpus": 4,
                      "tags": ["cuda"], "speed": 1.5},
                     {"name": "fat", "count": 300, "cores": 128, "memory_gib": 2048.0,
                      "speed": 0.8, "maintenance": [{"start_h": 1.0, "end_h": 3.0}]}],
           "jobs": [{"name": f"g{k}", "count": 100, "cores": int(rng.integers(1, 64)),
                     "memory_gib": float(rng.integers(1, 250)),
                     "hours": round(float(rng.uniform(0.1, 10)), 2),
                     **({"needs": ["cuda"], "gpus": 1} if k % 3 == 0 else {}),
                     **({"follows": [f"g{k - 1}"]} if k % 5 == 1 else {})} for k in range(100)]}
    batch, inst = instance_of(doc)
    assert inst.n_jobs == 10_000 and inst.n_nodes == 1_000
    lb = lower_bound(inst)
    # GPU jobs only fit the 100 GPU nodes: their class bound must beat the cluster-wide one.
    assert lb.parts["class_cores"] > lb.parts["cores"] > 0
    assert lb.value == max(lb.parts.values())


def test_clique_of_mixed_conflicts_bounds_a_partition():
    """Memory-heavy and core-heavy jobs that pairwise overflow some resource share their four
    host nodes like P||Cmax machines: 12 x 28 h + 4 x 20 h on 4 nodes needs 104 h on average
    (the pigeonhole and work bounds alone say 84 h). CP-SAT finds a plan of exactly 104 h, so
    the bound is tight there, and the brute-force tests above keep it below every optimum."""
    from assignplan.methods.exact import solve_exact

    doc = {"window": {"start": "2026-12-07T00:00:00"},
           "nodes": [{"name": "fat", "count": 4, "cores": 64, "memory_gib": 2048},
                     {"name": "thin", "count": 8, "cores": 64, "memory_gib": 256}],
           "jobs": [{"name": "asm", "count": 12, "cores": 32, "memory_gib": 1200, "hours": 28},
                    {"name": "img", "count": 4, "cores": 64, "memory_gib": 900, "hours": 20},
                    {"name": "small", "count": 20, "cores": 8, "memory_gib": 16, "hours": 5}]}
    batch, inst = instance_of(doc)
    bound = lower_bound(inst)
    assert bound.parts["clique"] == 104 * 60
    assert bound.parts["conflict"] < 104 * 60  # the new part is what lifts the bound
    exact = solve_exact(inst, lower_bound=0, budget=20, workers=1)
    assert exact.makespan == 104 * 60 == bound.value
    assert check_plan(batch, to_plan_doc(inst, exact)) == []


# ------------------------------------------------------------------- dual feasible functions


@st.composite
def fitting_demands(draw) -> tuple[list[int], int]:
    """A capacity and demands that fit on one node together (sum <= capacity)."""
    cap = draw(st.integers(1, 300))
    left, out = cap, []
    for _ in range(draw(st.integers(0, 12))):
        if left == 0:
            break
        d = draw(st.integers(1, left))
        out.append(d)
        left -= d
    return out, cap


@settings(max_examples=300, deadline=None)
@given(fitting_demands())
def test_every_function_of_the_dff_family_is_dual_feasible(case):
    # Definition of a dual feasible function (Fekete & Schepers, Math. Programming 91, 2001):
    # sizes adding up to at most 1 still add up to at most 1 after the map. With unit
    # weights dff_work is the largest transformed sum over the family, so it must stay <= cap.
    demands, cap = case
    assert dff_work(np.array(demands), np.ones(len(demands)), cap) <= cap + 1e-9
    # and it never counts less than the plain work (the identity is in the family)
    assert dff_work(np.array(demands), np.ones(len(demands)), cap) >= sum(demands) - 1e-9


def gpu_doc(gpus: list[int], minutes: list[int], n_nodes: int) -> dict:
    """Jobs of 8 cores per GPU on identical 4-GPU, 32-core nodes."""
    return {"window": WEEK,
            "nodes": [{"name": "g", "count": n_nodes, "cores": 32, "memory_gib": 256.0,
                       "gpus": 4}],
            "jobs": [{"name": f"j{k}", "cores": 8 * g, "memory_gib": 8.0 * g, "gpus": g,
                      "hours": m / 60} for k, (g, m) in enumerate(zip(gpus, minutes,
                                                                        strict=True))]}


def test_dff_lifts_the_bound_where_jobs_cannot_share_a_node():
    # Two 4-GPU nodes; jobs of 3, 3, 2, 2 GPUs for 60, 60, 45, 45 min. A 3-GPU job shares its
    # node with nothing here, so the optimum is 105 (both 2-GPU jobs together after a 3-GPU
    # one). Plain GPU work: (2*3*60 + 2*2*45) / 8 = 67.5 -> 68. With Fekete & Schepers'
    # u^(1) (3/4 -> 1, 1/2 -> 1/2): (2*4*60 + 2*2*45) / 8 = 82.5 -> 83; on the 15-minute grid
    # (gcd of the durations) 90.
    _, inst = instance_of(gpu_doc([3, 3, 2, 2], [60, 60, 45, 45], 2))
    lb = lower_bound(inst)
    assert lb.parts["gpus"] == 68 and lb.parts["dff"] == 83 and lb.value == 90
    assert max(v for k, v in lb.parts.items() if k not in ("dff", "grid")) < 83
    res = solve_exact(inst, lower_bound=0, budget=10.0, workers=1, seed=0)
    assert (res.makespan, res.status) == (105, "optimal")


def test_dff_bound_never_exceeds_proven_optima_of_random_gpu_batches():
    # Independent reference: CP-SAT's proven optimum (methods.exact) on small batches of wide
    # GPU jobs, where the dual feasible functions matter most.
    rng = np.random.default_rng(20261202)
    lifted = 0
    for case in range(25):
        n = int(rng.integers(3, 7))
        gpus = rng.integers(1, 5, size=n).tolist()
        minutes = (15 * rng.integers(1, 9, size=n)).tolist()
        _, inst = instance_of(gpu_doc(gpus, minutes, int(rng.integers(1, 3))))
        lb = lower_bound(inst)
        res = solve_exact(inst, lower_bound=0, budget=10.0, workers=1, seed=0)
        assert res.status == "optimal"
        assert lb.value <= res.makespan, f"case {case}: {gpus} {minutes}: {lb} > {res.makespan}"
        lifted += lb.parts["dff"] > max(lb.parts["gpus"], lb.parts["cores"])
    assert lifted >= 5  # the check exercises the new part, not only the old ones


def test_binding_parts_name_the_argument_not_the_rounding():
    parts = {"job": 90, "cores": 120, "clique": 120, "grid": 120}
    assert binding_parts(parts, 120) == ["cores", "clique"]
    assert binding_parts({"job": 90, "cores": 117, "grid": 120}, 120) == ["grid"]
    assert binding_parts(parts, 125) == []  # a solver's proof above every part


def test_every_part_has_a_name_for_the_reports():
    """The tables describe the binding part in words: no part of the bound without one."""
    _, inst = instance_of(random_batch_doc(np.random.default_rng(5), max_jobs=12))
    assert lower_bound(inst).parts.keys() <= PART_NAMES.keys()
