"""The class-split relaxation behind the ga's balanced seeds (`methods.ga.balance`)."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings

from assignplan.check import check_plan
from assignplan.methods.ga import ga_settings, solve_ga
from assignplan.methods.ga.balance import balanced_eligibility, class_split, reserved_eligibility
from assignplan.methods.ga.encoding import EligibleIndex
from assignplan.methods.ga.seeding import initial_population
from assignplan.methods.greedy import greedy_assign
from assignplan.plan import make_result, to_plan_doc
from tests.strategies import batches, instance_of

WEEK = {"start": "2026-12-07T00:00:00", "hours": 168.0}


def crowded_fast_node() -> dict:
    """Two plain nodes and one twice-as-fast GPU node; two plain 4 h jobs, three 3 h GPU jobs,
    each a whole node. Longest first, earliest finish: the first plain job takes the GPU node
    (done at 2 h there) and the GPU jobs queue behind it, 2 + 3 x 1.5 = 6.5 h. Plain jobs on
    the plain nodes and GPU jobs on the GPU node end at 4.5 h, the optimum (the GPU work alone
    takes the only GPU node 4.5 h)."""
    return {"window": WEEK,
            "nodes": [{"name": "cpu", "count": 2, "cores": 64, "memory_gib": 256.0},
                      {"name": "gpu", "cores": 64, "memory_gib": 256.0, "gpus": 4,
                       "speed": 2.0}],
            "jobs": [{"name": "plain", "count": 2, "cores": 64, "memory_gib": 8.0,
                      "hours": 4.0},
                     {"name": "train", "cores": 64, "memory_gib": 8.0, "gpus": 4,
                      "hours": 3.0, "count": 3}]}


def makespan(inst, assign, start) -> int:
    return int((start + inst.duration[np.arange(inst.n_jobs), assign]).max())


def test_plain_jobs_leave_the_special_node_to_the_jobs_that_need_it():
    batch, inst = instance_of(crowded_fast_node())
    assert makespan(inst, *greedy_assign(inst)) == 6.5 * 60
    narrowed = balanced_eligibility(inst)
    assert narrowed is not None
    allowed = narrowed.matrix()
    plain = np.array([name.startswith("plain") for name in inst.job_names])
    gpu_node = inst.capacity[:, 2] > 0
    assert not allowed[np.ix_(plain, gpu_node)].any()
    assert allowed[np.ix_(~plain, gpu_node)].all()
    assign, start = greedy_assign(inst, inst.order, narrowed)
    assert makespan(inst, assign, start) == 4.5 * 60
    plan = to_plan_doc(inst, make_result(inst, "greedy", assign, start, 0, status="feasible"))
    assert check_plan(batch, plan) == []


def test_relaxation_load_is_the_fractional_optimum_of_the_example():
    # By hand: GPU work is 3 x 1.5 h on the GPU node; x plain jobs on it at 2 h each and
    # 2 - x on the two plain nodes at 4 h each: T = max(4.5 + 2x, 4 (2 - x) / 2), least at
    # x = 0: T = 4.5 h, no plain work on the GPU node.
    _, inst = instance_of(crowded_fast_node())
    cls, group, share, t = class_split(inst)
    assert abs(t - 4.5 * 60) < 1e-6
    np.testing.assert_allclose(share.sum(axis=1), 1.0)
    plain = cls[list(inst.job_names).index(next(n for n in inst.job_names if "plain" in n))]
    gpu_group = group[int(np.flatnonzero(inst.capacity[:, 2] > 0)[0])]
    assert share[plain, gpu_group] < 1e-9


def test_one_class_changes_nothing():
    doc = {"window": WEEK, "nodes": [{"name": "n", "count": 3, "cores": 8, "memory_gib": 32.0}],
           "jobs": [{"name": "j", "count": 7, "cores": 3, "memory_gib": 4.0, "hours": 1.5}]}
    assert balanced_eligibility(instance_of(doc)[1]) is None


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(batches(max_jobs=20, p_follows=0.3))
def test_balanced_and_reserved_choices_keep_a_node_for_every_job_and_plans_pass_the_checker(
        doc):
    batch, inst = instance_of(doc)
    reserved = reserved_eligibility(inst)
    if reserved is not None:  # a reservation never raises the relaxation's load
        assert class_split(inst, reserved)[3] <= class_split(inst)[3] * (1 + 1e-6)
    for narrowed in (balanced_eligibility(inst), reserved):
        if narrowed is None:
            continue
        allowed = narrowed.matrix()
        assert not (allowed & ~inst.eligible).any()
        assert allowed.any(axis=1).all()
        assign, start = greedy_assign(inst, inst.order, narrowed)
        assert allowed[np.arange(inst.n_jobs), assign].all()
        plan = to_plan_doc(inst, make_result(inst, "greedy", assign, start, 0,
                                             status="feasible"))
        assert check_plan(batch, plan) == []


def test_ga_starts_from_balanced_seeds_and_can_do_without():
    _, inst = instance_of(crowded_fast_node())
    allowed = balanced_eligibility(inst)
    balanced = greedy_assign(inst, inst.order, allowed)[0]
    index = EligibleIndex.of(inst)
    pop, keys, _ = initial_population(inst, ga_settings(), index, rng=np.random.default_rng(0))
    assert any(np.array_equal(member, balanced) for member in pop)
    assert len(pop) == len(keys) == ga_settings().population.mu
    pop, _, _ = initial_population(inst, ga_settings(balanced_seeds=0, greedy_variants=0), index,
                                   rng=np.random.default_rng(0))
    assert not np.array_equal(pop[0], balanced)  # greedy's own plan comes first
    plan = solve_ga(inst, settings=ga_settings(generations=0), lower_bound=0, seed=0,
                    budget=10.0)
    assert plan.makespan == 4.5 * 60


# ------------------------------------------------------------------ reserved node groups


def roomy_plain_nodes(plain_jobs: int) -> dict:
    """Four plain nodes, one GPU node; `plain_jobs` plain 2 h whole-node jobs, two 3 h GPU
    jobs. Up to 4 x 6 / 2 = 12 plain jobs fit on the plain nodes within the GPU node's 6 h of
    GPU work, so the relaxation's load does not rise when they leave the GPU node; with more
    the plain nodes alone end later than the cluster could, and the GPU node stays open."""
    return {"window": WEEK,
            "nodes": [{"name": "cpu", "count": 4, "cores": 32, "memory_gib": 128.0},
                      {"name": "gpu", "cores": 32, "memory_gib": 128.0, "gpus": 4}],
            "jobs": [{"name": "plain", "count": plain_jobs, "cores": 32, "memory_gib": 8.0,
                      "hours": 2.0},
                     {"name": "train", "count": 2, "cores": 32, "memory_gib": 8.0, "gpus": 4,
                      "hours": 3.0}]}


def test_scarce_group_is_reserved_while_the_others_can_absorb_its_guests():
    _, inst = instance_of(roomy_plain_nodes(12))
    reserved = reserved_eligibility(inst)
    assert reserved is not None
    allowed = reserved.matrix()
    plain = np.array([name.startswith("plain") for name in inst.job_names])
    gpu_node = inst.capacity[:, 2] > 0
    assert not allowed[np.ix_(plain, gpu_node)].any()  # plain jobs: plain nodes only
    assert allowed[np.ix_(plain, ~gpu_node)].all()
    assert allowed[np.ix_(~plain, gpu_node)].all()  # the GPU jobs keep their node
    assert abs(class_split(inst, reserved)[3] - 6 * 60) < 1e-6
    assert abs(class_split(inst)[3] - 6 * 60) < 1e-6
    # 16 plain jobs: 8 h on the plain nodes alone, but (16 x 2 + 2 x 3) / 5 = 7.6 h with
    # the GPU node's help, so nothing is reserved
    _, crowded = instance_of(roomy_plain_nodes(16))
    assert class_split(crowded)[3] < 8 * 60
    assert reserved_eligibility(crowded) is None


def test_a_group_its_own_jobs_leave_mostly_idle_stays_open():
    """A tagged node whose own jobs take 10 h sets the relaxation's load (T = 10 h); the GPU
    node's own job takes 1 h. Sending the plain jobs (4 x 2 h whole-node) away from either
    leaves T at 10 h, but only the tagged node is full of its own work: the GPU node stays
    open to plain jobs, the tagged one is reserved."""
    doc = {"window": WEEK,
           "nodes": [{"name": "cpu", "count": 2, "cores": 32, "memory_gib": 128.0},
                     {"name": "gpu", "cores": 32, "memory_gib": 128.0, "gpus": 4},
                     {"name": "tagged", "cores": 32, "memory_gib": 128.0, "tags": ["x"]}],
           "jobs": [{"name": "plain", "count": 4, "cores": 32, "memory_gib": 8.0, "hours": 2.0},
                    {"name": "train", "cores": 32, "memory_gib": 8.0, "gpus": 4, "hours": 1.0},
                    {"name": "special", "count": 5, "cores": 32, "memory_gib": 8.0,
                     "hours": 2.0, "needs": ["x"]}]}
    _, inst = instance_of(doc)
    assert abs(class_split(inst)[3] - 10 * 60) < 1e-6
    reserved = reserved_eligibility(inst)
    assert reserved is not None
    allowed = reserved.matrix()
    plain = np.array([name.startswith("plain") for name in inst.job_names])
    gpu_node = inst.capacity[:, 2] > 0
    tagged = np.array([name.startswith("tagged") for name in inst.node_names])
    assert allowed[np.ix_(plain, gpu_node)].all()
    assert not allowed[np.ix_(plain, tagged)].any()


def test_identical_nodes_reserve_nothing():
    doc = {"window": WEEK, "nodes": [{"name": "n", "count": 3, "cores": 8, "memory_gib": 32.0}],
           "jobs": [{"name": "j", "count": 7, "cores": 3, "memory_gib": 4.0, "hours": 1.5},
                    {"name": "k", "count": 2, "cores": 8, "memory_gib": 4.0, "hours": 1.0}]}
    assert reserved_eligibility(instance_of(doc)[1]) is None


def test_ga_with_a_reserved_phase_gives_checked_plans_no_worse_than_greedy():
    batch, inst = instance_of(roomy_plain_nodes(12))
    assert reserved_eligibility(inst) is not None
    rows = []
    res = solve_ga(inst, settings=ga_settings(generations=10, mu=6, lam=6), lower_bound=0, seed=1,
                   budget=600.0, on_generation=rows.append)
    assert check_plan(batch, to_plan_doc(inst, res)) == []
    assert res.makespan <= makespan(inst, *greedy_assign(inst))
    assert res.makespan == 6 * 60  # plain jobs on the plain nodes, the GPU node for training
    # one history across the phases: generations 0..10 of the reserved and the makespan
    # phase, then at most 3 (30 % of 10) of the final phase; evaluations rising, best never
    # worse
    assert rows == res.history and [r.generation for r in rows] == list(range(len(rows)))
    assert 11 <= len(rows) <= 14
    assert all(b.evaluations > a.evaluations for a, b in zip(rows, rows[1:], strict=False))
    best = [r.best_makespan_h for r in rows]
    assert best == sorted(best, reverse=True)
