"""Plans that hold up: the ga's robust scorer and `solve(..., robust=...)`."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from assignplan.check import check_plan
from assignplan.errors import InputError
from assignplan.expand import load_batch
from assignplan.instance import build_instance
from assignplan.methods.ga import ga_settings
from assignplan.methods.ga.population import COMPLETION, MAKESPAN, TARDINESS
from assignplan.methods.greedy import greedy_assign
from assignplan.plan import make_result, to_plan_doc
from assignplan.risk.models import parse_model
from assignplan.risk.replay import nearest_rank, replay_plan, replay_schedules
from assignplan.risk.robust import Robust, robust_evaluate
from assignplan.risk.sampling import bind
from assignplan.schedule import build_schedule
from assignplan.solve import solve

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def small():
    batch = load_batch(ROOT / "examples" / "small.json")
    return batch, build_instance(batch)


def test_robust_scorer_is_the_quantile_of_the_kept_plans_replays(small):
    _, inst = small
    robust = Robust(0.75, 12, bind(parse_model("lognormal:0.5"), inst), seed=4)
    evaluate = robust_evaluate(inst, robust, justify=True)
    greedy, _ = greedy_assign(inst)
    rng = np.random.default_rng(0)
    pop = np.stack([greedy] + [np.where(rng.random(inst.n_jobs) < 0.3,
                                        [int(rng.choice(np.flatnonzero(inst.eligible[j])))
                                         for j in range(inst.n_jobs)], greedy)
                               for _ in range(3)])
    score = evaluate(pop, inst.order)
    for p, assign in enumerate(pop):
        start = build_schedule(inst, assign, inst.order, justify=True)
        plan = replay_plan(inst, make_result(inst, "ga", assign, start, 0))
        _, end, _ = replay_schedules(inst, plan, robust.sampler, policy="keep", seed=4,
                                     first=0, count=12, purpose="robust")
        makespans = np.sort(end.max(axis=1))
        assert score[p, MAKESPAN] == makespans[nearest_rank(0.75, 12) - 1]
        late = np.where(inst.due < end, end - inst.due, 0) @ inst.weight
        np.testing.assert_allclose(score[p, TARDINESS], late.mean())
        np.testing.assert_allclose(score[p, COMPLETION], (end @ inst.weight).mean())


def test_robust_ga_plan_is_valid_and_no_worse_than_greedy_on_its_futures(small):
    batch, inst = small
    robust = Robust(0.9, 16, bind(parse_model("uniform:0.6,1.8"), inst), seed=1)
    result = solve(inst, "ga", seed=1, budget=120.0, robust=robust,
                   settings=ga_settings(generations=4, repack_nodes=0))
    assert check_plan(batch, to_plan_doc(inst, result)) == []
    evaluate = robust_evaluate(inst, robust, justify=True)
    greedy, _ = greedy_assign(inst)
    scores = evaluate(np.stack([result.assign, greedy]), inst.order)
    # elitism over the robust score: the greedy seed is in the first population
    assert tuple(scores[0, :2]) <= tuple(scores[1, :2])


def test_robust_objective_is_for_the_ga_only(small):
    _, inst = small
    robust = Robust(0.9, 4, bind(parse_model("scale:1.2"), inst))
    for method in ("greedy", "exact"):
        with pytest.raises(InputError, match=f"only the ga method plans for it; {method}"):
            solve(inst, method, robust=robust, budget=5.0)
    with pytest.raises(InputError, match="--robust 1.5"):
        Robust(1.5, 4, robust.sampler)
    with pytest.raises(InputError, match="--samples 0"):
        Robust(0.9, 0, robust.sampler)
