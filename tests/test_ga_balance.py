"""The class-split relaxation behind the ga's balanced seeds (`methods.ga.balance`)."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings

from assignplan.check import check_plan
from assignplan.methods.ga import GAConfig, solve_ga
from assignplan.methods.ga.balance import balanced_eligibility, class_split
from assignplan.methods.ga.encoding import EligibleIndex
from assignplan.methods.ga.engine import initial_population
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
    allowed = balanced_eligibility(inst)
    assert allowed is not None
    plain = np.array([name.startswith("plain") for name in inst.job_names])
    gpu_node = inst.capacity[:, 2] > 0
    assert not allowed[np.ix_(plain, gpu_node)].any()
    assert allowed[np.ix_(~plain, gpu_node)].all()
    assign, start = greedy_assign(inst, inst.order, allowed)
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
def test_balanced_choice_keeps_a_node_for_every_job_and_plans_pass_the_checker(doc):
    batch, inst = instance_of(doc)
    allowed = balanced_eligibility(inst)
    if allowed is None:
        return
    assert not (allowed & ~inst.eligible).any()
    assert allowed.any(axis=1).all()
    assign, start = greedy_assign(inst, inst.order, allowed)
    assert allowed[np.arange(inst.n_jobs), assign].all()
    plan = to_plan_doc(inst, make_result(inst, "greedy", assign, start, 0, status="feasible"))
    assert check_plan(batch, plan) == []


def test_ga_starts_from_balanced_seeds_and_can_do_without():
    _, inst = instance_of(crowded_fast_node())
    allowed = balanced_eligibility(inst)
    balanced = greedy_assign(inst, inst.order, allowed)[0]
    index = EligibleIndex.of(inst)
    pop, keys, _ = initial_population(inst, GAConfig(), index, rng=np.random.default_rng(0))
    assert any(np.array_equal(member, balanced) for member in pop)
    assert len(pop) == len(keys) == GAConfig().mu
    pop, _, _ = initial_population(inst, GAConfig(balanced_seeds=0, greedy_variants=0), index,
                                   rng=np.random.default_rng(0))
    assert not np.array_equal(pop[0], balanced)  # greedy's own plan comes first
    plan = solve_ga(inst, config=GAConfig(generations=0), lower_bound=0, seed=0,
                    time_limit=10.0)
    assert plan.makespan == 4.5 * 60
