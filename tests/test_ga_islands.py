"""The ga's island model in this process: the seeds, the ring migration, and every plan an island
run holds passing the independent checker (the same run on Dask workers: test_distributed)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from assignplan.bounds import lower_bound
from assignplan.expand import load_batch
from assignplan.instance import build_instance
from assignplan.methods.ga import ga_settings
from assignplan.methods.ga.islands import evolve_islands, island_stream, migrate
from assignplan.methods.ga.loop import Island
from assignplan.methods.greedy import solve_greedy
from assignplan.plan import objective, to_plan_doc
from assignplan.schedule import schedule_result
from assignplan.solve import solve

from assignplan.check import check_plan  # isort: skip  (after the model: it reads its types)

ROOT = Path(__file__).resolve().parents[1]
SMALL = ROOT / "examples" / "small.json"
SETTINGS = {"generations": 6, "count": 3, "epoch": 2, "migrants": 2, "mu": 8, "lam": 12}


@pytest.fixture(scope="module")
def batch():
    expanded = load_batch(SMALL)
    return expanded, build_instance(expanded)


def test_an_islands_stream_is_its_child_of_the_spawned_seeds():
    spawned = np.random.SeedSequence(42).spawn(3)
    for k in range(3):
        epochs = spawned[k].spawn(4)
        for e in range(4):
            expected = np.random.default_rng(epochs[e]).random(5)
            np.testing.assert_array_equal(island_stream(42, k, e).random(5), expected)


def test_migration_sends_each_islands_best_to_the_next_along_the_ring(batch):
    _, inst = batch
    order = inst.order.astype(np.int64)
    islands = [Island(np.full((4, inst.n_jobs), 10 * k) + np.arange(4)[:, None],
                      np.zeros((4, 5)), order, []) for k in range(3)]
    nxt = migrate(inst, islands, 2)
    for k, (assign, keys) in enumerate(nxt):
        src = (k - 1) % 3
        np.testing.assert_array_equal(assign[:2, 0], [10 * k, 10 * k + 1])  # its own best two
        np.testing.assert_array_equal(assign[2:, 0], [10 * src, 10 * src + 1])  # the migrants
        assert keys.shape == (4, inst.n_jobs)


def test_every_plan_of_an_island_run_passes_the_checker_and_none_loses_to_greedy(batch):
    expanded, inst = batch
    settings = ga_settings(**SETTINGS)
    bound = lower_bound(inst)
    run = evolve_islands(inst, settings, lower_bound=bound.value, seed=5, seconds=300)
    assert len(run.islands) == 3 and run.history[-1].generation == 6
    for island in run.islands:
        orders = island.orders if island.orders.ndim == 2 else [island.orders] * len(
            island.assign)
        for assign, order in zip(island.assign, orders, strict=True):
            plan = schedule_result(inst, assign, "ga", bound.value, order, justify=True)
            assert check_plan(expanded, to_plan_doc(inst, plan)) == []
    result = solve(inst, "ga", seed=5, budget=300, settings=settings, bound=bound)
    assert check_plan(expanded, to_plan_doc(inst, result)) == []
    greedy = solve_greedy(inst, lower_bound=bound.value)
    assert objective(inst, result.end) <= objective(inst, greedy.end)
