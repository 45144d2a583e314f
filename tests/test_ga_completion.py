"""The ga's completion-phase steps: every plan they return passes the checker and keeps the
makespan; re-sequencing and window repacking never worsen (tardiness, completion)."""

from __future__ import annotations

import numpy as np
import pytest

from assignplan.check import check_plan
from assignplan.methods.ga.improvers.redecode import GRID, node_by_node, redecoded_order
from assignplan.methods.ga.improvers.resequence import resequence
from assignplan.methods.ga.improvers.window import repack_window, window_jobs
from assignplan.methods.greedy import greedy_assign
from assignplan.plan import make_result, objective, to_plan_doc
from assignplan.schedule import build_schedule
from tests.strategies import instance_of, random_batch_doc
from tests.test_completion_bound import one_node_doc, smith_optimum


def _valid(batch, inst, assign, start) -> tuple:
    plan = make_result(inst, "ga", assign, start, 0)
    assert check_plan(batch, to_plan_doc(inst, plan)) == []
    return objective(inst, plan.end)


def _case(seed: int, follows: float = 0.3):
    batch, inst = instance_of(random_batch_doc(np.random.default_rng(seed), max_jobs=16,
                                               p_follows=follows, p_maintenance=0.5,
                                               p_ready=0.3, p_due=0.5))
    assign, start = greedy_assign(inst)
    return batch, inst, assign, start, _valid(batch, inst, assign, start)


@pytest.mark.parametrize("seed", range(20))
def test_resequencing_keeps_the_makespan_and_never_worsens_tardiness_or_completion(seed):
    batch, inst, assign, start, before = _case(seed)
    new_assign, new_start, _ = resequence(inst, assign, start, budget=2_000)
    after = _valid(batch, inst, new_assign, new_start)
    assert after[0] <= before[0]
    assert (after[1], after[2]) <= (before[1] + 1e-9, before[2] + 1e-9)


@pytest.mark.parametrize("seed", range(12))
def test_window_repacking_keeps_the_makespan_and_never_worsens_tardiness_or_completion(seed):
    batch, inst, assign, start, before = _case(seed)
    freed = window_jobs(start, inst.end_times(assign, start), 8,
                        rng=np.random.default_rng(seed))
    found = repack_window(inst, assign, start, freed, deterministic_time=0.5, seed=0)
    if found is None:
        return
    after = _valid(batch, inst, *found)
    assert after[0] <= before[0]
    assert (after[1], after[2]) <= (before[1] + 1e-9, before[2] + 1e-9)


@pytest.mark.parametrize("seed", range(12))
def test_node_by_node_redecoding_keeps_the_makespan_without_follows(seed):
    batch, inst, assign, start, before = _case(seed, follows=0.0)
    order = np.lexsort((np.arange(inst.n_jobs), start))
    horizon = int(before[0])
    orders = [redecoded_order(inst, assign, horizon, *point, order) for point in GRID[:10]]
    new_start = build_schedule(inst, assign, node_by_node(inst, assign, order, horizon, orders))
    after = _valid(batch, inst, assign, new_start)
    assert after[0] <= before[0] and (after[1], after[2]) <= (before[1] + 1e-9,
                                                              before[2] + 1e-9)


def test_resequencing_one_node_reaches_smiths_order():
    # W. E. Smith (1956): on one machine, p / w non-decreasing is optimal; moves by Smith's
    # key from the longest-first sequence must end there
    hours = [3.0, 0.5, 2.0, 1.0, 4.0, 0.25]
    weights = [1.0, 1.0, 3.0, 2.0, 1.0, 1.0]
    batch, inst = instance_of(one_node_doc(hours, weights))
    assign, start = greedy_assign(inst)
    _, new_start, moves = resequence(inst, assign, start, budget=10_000)
    assert moves > 0
    assert _valid(batch, inst, assign, new_start)[2] == pytest.approx(smith_optimum(inst))
