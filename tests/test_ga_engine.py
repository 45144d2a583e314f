"""The ga loop: checker-clean plans never worse than greedy, reproducibility, known optima."""

from __future__ import annotations

import functools
import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from pydantic import ValidationError

from assignplan.bounds import lower_bound
from assignplan.check import check_plan
from assignplan.generate import batch_doc, generate
from assignplan.methods.ga import ga_settings, run_island, solve_ga
from assignplan.methods.ga.seeding import completion_seeds, greedy_variant_orders
from assignplan.methods.greedy import greedy_assign, solve_greedy
from assignplan.plan import objective, to_plan_doc
from assignplan.schedule import evaluate_population
from tests.strategies import batches, instance_of, random_batch_doc

SMALL = ga_settings(mu=8, lam=8, generations=15, local_evaluations=8, greedy_variants=2)


def greedy_makespan(inst) -> int:
    assign, start = greedy_assign(inst)
    return int((start + inst.duration[np.arange(inst.n_jobs), assign]).max())


def identical_whole_node(m: int, hours: list[float]) -> dict:
    """P||Cmax: m identical nodes, every job takes a whole node (runs alone)."""
    return {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
            "nodes": [{"name": "m", "count": m, "cores": 4, "memory_gib": 8.0}],
            "jobs": [{"name": f"j{k}", "cores": 4, "memory_gib": 1.0, "hours": float(h)}
                     for k, h in enumerate(hours)]}


@pytest.mark.slow
@settings(max_examples=100, deadline=None)
@given(batches(max_jobs=14, p_follows=0.3, p_maintenance=0.5))
def test_every_ga_plan_passes_the_checker_and_is_no_worse_than_greedy(d):
    # under the default objective (makespan, weighted tardiness, weighted completion) no ga
    # plan is lexicographically worse than the greedy method's
    batch, inst = instance_of(d)
    bound = lower_bound(inst).value
    res = solve_ga(inst, settings=SMALL, lower_bound=bound, seed=0, budget=60.0)
    assert check_plan(batch, to_plan_doc(inst, res)) == []
    assert bound <= res.makespan <= greedy_makespan(inst)
    greedy = solve_greedy(inst, lower_bound=bound)
    assert objective(inst, res.end) <= objective(inst, greedy.end)
    assert res.method == "ga" and res.seed == 0 and res.history


OTHER = ga_settings(mu=6, lam=8, generations=10, local_evaluations=4, greedy_variants=1,
                crossover="kpoint", kpoints=3, mutation="asymmetric", mutation_flips=20.0,
                survival="comma", repair_fill="random", repair_keep="previous",
                local_search=False)


@pytest.mark.slow
@settings(max_examples=30, deadline=None)
@given(batches(max_jobs=14, p_follows=0.3, p_maintenance=0.5))
def test_the_optional_operators_also_give_checked_plans_no_worse_than_greedy(d):
    batch, inst = instance_of(d)
    res = solve_ga(inst, settings=OTHER, lower_bound=0, seed=5, budget=60.0)
    assert check_plan(batch, to_plan_doc(inst, res)) == []
    assert res.makespan <= greedy_makespan(inst)


@pytest.mark.parametrize("m", [2, 3, 4, 5])
def test_graham_lpt_family_reaches_the_optimum(m):
    # R. L. Graham, "Bounds on multiprocessing timing anomalies", SIAM J. Appl. Math. 17(2),
    # 1969: hours 2m-1, 2m-1, ..., m+1, m+1, m, m, m on m machines; LPT gives 4m-1, OPT 3m
    hours = [h for v in range(2 * m - 1, m, -1) for h in (v, v)] + [m, m, m]
    _, inst = instance_of(identical_whole_node(m, hours))
    assert greedy_makespan(inst) == (4 * m - 1) * 60
    res = solve_ga(inst, settings=ga_settings(generations=200), lower_bound=lower_bound(inst).value,
                   seed=1, budget=600.0)
    assert res.makespan == 3 * m * 60


@pytest.mark.slow
def test_same_batch_seed_and_config_give_the_same_plan():
    _, inst = instance_of(batch_doc(generate("small", 2)))
    cfg = ga_settings(generations=12, mutation="asymmetric")
    runs = [solve_ga(inst, settings=cfg, lower_bound=0, seed=7, budget=600.0)
            for _ in range(2)]
    assert np.array_equal(runs[0].assign, runs[1].assign)
    assert np.array_equal(runs[0].start, runs[1].start)
    docs = [json.dumps([a.model_dump(mode="json") for a in to_plan_doc(inst, r).assignments])
            for r in runs]
    assert docs[0] == docs[1]
    assert [h.model_dump() for h in runs[0].history] == [h.model_dump() for h in runs[1].history]
    other = solve_ga(inst, settings=cfg, lower_bound=0, seed=8, budget=600.0)
    assert [h.evaluations for h in other.history] != [h.evaluations for h in runs[0].history]


def test_history_hook_and_stopping_rules():
    _, inst = instance_of(batch_doc(generate("small", 1)))
    rows = []
    cfg = ga_settings(generations=12, stagnation=1000, completion_stagnation=1000)
    res = solve_ga(inst, settings=cfg, lower_bound=0, seed=3, budget=600.0,
                   on_generation=rows.append)
    # 12 makespan generations, then the final phase's share of them on top
    final = math.ceil(cfg.completion.completion_share * 12)
    assert rows == res.history and [r.generation for r in rows] == list(range(13 + final))
    best = [r.best_makespan_h for r in rows]
    assert best == sorted(best, reverse=True)  # elitism: the best never gets worse
    assert all(r.median_makespan_h >= r.best_makespan_h for r in rows)
    assert all(b.evaluations > a.evaluations for a, b in zip(rows, rows[1:], strict=False))
    assert res.makespan == round(best[-1] * 60)
    stalled = solve_ga(inst, settings=ga_settings(generations=10_000, stagnation=3,
                                                  completion_stagnation=3), lower_bound=0,
                       seed=3, budget=600.0)
    assert len(stalled.history) < 10_000
    _, inst = instance_of(batch_doc(generate("small", 1, True)))
    assert not np.any(inst.due != inst.due.max())  # no due times: tardiness is always 0
    alone = solve_ga(inst, settings=ga_settings(generations=10_000, completion_share=0.0),
                     seed=3, budget=600.0, lower_bound=greedy_makespan(inst))
    assert len(alone.history) == 1  # greedy already meets the given bound
    # with the final phase, the weighted completion time still improves; its stagnation
    # limit stops it
    at_bound = solve_ga(inst, settings=ga_settings(generations=10_000, completion_stagnation=3),
                        seed=3, budget=600.0, lower_bound=greedy_makespan(inst))
    assert 1 < len(at_bound.history) < 10_000
    assert objective(inst, at_bound.end) <= objective(inst, alone.end)


def test_custom_evaluate_is_the_only_scorer_of_the_population():
    _, inst = instance_of(batch_doc(generate("small", 4)))
    calls = []

    def counting(assign2d, order):
        calls.append(len(assign2d))
        return evaluate_population(inst, assign2d, order, tail=True)

    res = solve_ga(inst, settings=ga_settings(generations=5), lower_bound=0, seed=0,
                   budget=600.0, evaluate=counting)
    assert sum(calls) == res.history[-1].evaluations


def test_run_island_takes_migrants_and_returns_the_population_best_first():
    _, inst = instance_of(batch_doc(generate("small", 6)))
    assign, _ = greedy_assign(inst)
    migrants = np.stack([assign, assign])
    island = run_island(
        inst, ga_settings(mu=6, lam=6, generations=3), rng=np.random.default_rng(0),
        evaluate=lambda a, o: evaluate_population(inst, a, o, tail=True), lower_bound=0,
        deadline=float("inf"), migrants=migrants)
    pop, fit = island.assign, island.score[:, :3]
    assert pop.shape == (6, inst.n_jobs) and len(island.history) == 4
    assert np.array_equal(fit, evaluate_population(inst, pop, island.orders))
    assert np.all(np.diff(fit[:, 0]) >= 0)


def test_reported_plan_is_the_evaluated_one():
    # justified fitness, evolved orders: the plan solve_ga returns has exactly the objective
    # the run scored for its best individual (schedule_result rebuilds the same schedule);
    # `evaluate` here is solve_ga's default scorer, so both runs take the same path (no
    # reserved phase, no final phase: solve_ga is then one run_island)
    _, inst = instance_of(batch_doc(generate("small", 3)))
    cfg = ga_settings(generations=8, mu=8, lam=8, local_evaluations=8, reserve_share=0.0,
                      completion_share=0.0)
    assert cfg.improvement.justify and cfg.variation.evolve_order
    assert cfg.improvement.tiebreak == "tail"

    def evaluate(a, o):
        return evaluate_population(inst, a, o, justify=True, tail=True)

    island = run_island(inst, cfg, rng=np.random.default_rng(4), evaluate=evaluate,
                        lower_bound=0, deadline=float("inf"),
                        extra=completion_seeds(inst, 0, 0))  # solve_ga's one extra seed
    pop, fit, orders = island.assign, island.score[:, :3], island.orders
    assert orders.shape == pop.shape
    np.testing.assert_array_equal(fit, evaluate_population(inst, pop, orders, justify=True))
    res = solve_ga(inst, settings=cfg, lower_bound=0, seed=4, budget=600.0)
    np.testing.assert_array_equal(res.assign, pop[0])
    assert objective(inst, res.end) == tuple(fit[0])
    plain = solve_ga(inst, settings=ga_settings(generations=8, mu=8, lam=8, local_evaluations=8,
                                           justify=False, evolve_order=False, tiebreak="none"),
                     lower_bound=0, seed=4, budget=600.0)
    assert res.makespan <= greedy_makespan(inst) and plain.makespan <= greedy_makespan(inst)


def test_greedy_variant_orders_respect_follows():
    d = generate("small", 3)  # pipelines and sweep/gather groups
    _, inst = instance_of(d)
    assert len(inst.pred_idx) > 0
    orders = greedy_variant_orders(inst, 6, 0.5, rng=np.random.default_rng(0))
    succ = np.repeat(np.arange(inst.n_jobs), np.diff(inst.pred_ptr))
    for order in orders:
        pos = np.empty(inst.n_jobs, dtype=np.int64)
        pos[order] = np.arange(inst.n_jobs)
        assert np.all(pos[inst.pred_idx] < pos[succ])
    assert len({o.tobytes() for o in orders}) == 6


def test_config_is_validated_and_frozen():
    with pytest.raises(ValidationError):
        ga_settings(mu=1)
    with pytest.raises(ValidationError):
        ga_settings(crossover="one-point")
    with pytest.raises(ValueError, match="populaton"):
        ga_settings(populaton=10)  # a typo is an error, not ignored
    with pytest.raises(ValidationError):
        ga_settings(survival="comma", mu=10, lam=5)
    cfg = ga_settings()
    with pytest.raises(ValidationError):
        cfg.population.mu = 3


# ------------------------------------------------------------------ known-optimum batches


def _known_optimum(seed: int):
    d = generate("small", seed, known_optimum=True)
    batch, inst = instance_of(batch_doc(d))
    return batch, inst, round(d["_known_optimum_h"] * 60)


@functools.cache
def _known_optimum_run(seed: int):
    """(batch, inst, optimum, ga result) of a known-optimum small batch; shared by the tests
    below so each batch is solved once."""
    batch, inst, opt = _known_optimum(seed)
    res = solve_ga(inst, settings=ga_settings(generations=60), lower_bound=lower_bound(inst).value,
                   seed=0, budget=600.0)
    return batch, inst, opt, res


@pytest.mark.slow
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_known_optimum_small_batches(seed):
    # optimum known by construction (benchmarks/generate.py: each node's cores x [0, H)
    # rectangle cut into the jobs, so H is both attained and a work bound)
    batch, inst, opt, res = _known_optimum_run(seed)
    assert check_plan(batch, to_plan_doc(inst, res)) == []
    # measured (seed 0, 60 generations, default config): see the xfail below; greedy ends at
    # 3010 / 4205 / 4052 against optima 2802 / 3852 / 3777
    assert opt <= res.makespan <= greedy_makespan(inst)


@pytest.mark.slow
@pytest.mark.xfail(strict=True, reason="target missed: ga ends 7 % above the known optimum "
                   "(about 3000 vs 2802 min): every node would have to be tiled perfectly "
                   "(the batch's work is exactly 20 nodes x 2802 min); neither the ga, its "
                   "exact repacking of six nodes, nor CP-SAT on the whole batch (60 s: "
                   "3010 min; 120 s asked only for a plan within 1 %: none) finds such a "
                   "tiling; see RESULTS.md")
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_known_optimum_small_batch_within_one_percent(seed):
    _batch, _inst, opt, res = _known_optimum_run(seed)
    assert res.makespan <= 1.01 * opt, (res.makespan, opt)


def test_no_greedy_variants_still_seeds_with_greedy():
    """greedy_variants=0 is a valid setting: the population holds the greedy plan alone."""
    batch, inst = instance_of(random_batch_doc(np.random.default_rng(3), max_jobs=10))
    bound = lower_bound(inst).value
    result = solve_ga(inst, settings=ga_settings(greedy_variants=0, generations=5),
                      lower_bound=bound, seed=0, budget=60)
    assert result.makespan <= solve_greedy(inst, lower_bound=bound).makespan
    assert check_plan(batch, to_plan_doc(inst, result)) == []
