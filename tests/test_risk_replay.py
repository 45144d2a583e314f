"""Replays of a plan under sampled run times: the kernel against its Python twin, the plan
given back by a future without spread, the independent checker on every replayed schedule,
common random numbers and exact merges of chunks."""

from __future__ import annotations

import json
from functools import cache
from pathlib import Path

import numpy as np
import pytest

from assignplan.check import check_plan
from assignplan.documents import Batch
from assignplan.errors import InputError
from assignplan.expand import expand_batch, load_batch
from assignplan.instance import build_instance
from assignplan.methods.greedy import greedy_assign
from assignplan.plan import PlanResult, make_result
from assignplan.risk.models import parse_model
from assignplan.risk.replay import (
    Chunk,
    ReplayJob,
    Tally,
    chunks,
    nearest_rank,
    replay,
    replay_plan,
    replay_schedules,
    sample_documents,
)
from assignplan.risk.sampling import bind, sample_seed
from tests.strategies import instance_of, random_batch_doc
from tests.twin_replay import twin_replay

ROOT = Path(__file__).resolve().parents[1]
GOLDEN = ROOT / "tests" / "data" / "golden"


def _with_limits(doc: dict, rng: np.random.Generator) -> dict:
    """Some jobs get a hard limit a little above their estimate."""
    for job in doc["jobs"]:
        if rng.random() < 0.4:
            job["limit_h"] = round(job["hours"] * float(rng.uniform(1.0, 1.5)), 2)
    return doc


def _greedy_plan(inst) -> PlanResult:
    assign, start = greedy_assign(inst)
    return make_result(inst, "greedy", assign, start, 0)


@pytest.mark.parametrize("seed", range(8))
def test_kernel_replay_matches_the_python_twin(seed):
    rng = np.random.default_rng(seed)
    batch, inst = instance_of(_with_limits(random_batch_doc(rng, max_jobs=14, p_follows=0.25),
                                           rng))
    plan = replay_plan(inst, _greedy_plan(inst))
    sampler = bind(parse_model("lognormal:0.6"), inst)
    factors = sampler.factors(seed, 0, 3)
    for policy in ("keep", "dispatch"):
        start, end, where = replay_schedules(inst, plan, sampler, policy=policy, seed=seed,
                                             first=0, count=3)
        for k in range(3):
            t_start, t_end, t_where = twin_replay(inst, plan.assign, plan.order, factors[k],
                                                  policy)
            np.testing.assert_array_equal(start[k], t_start, err_msg=f"{policy} sample {k}")
            np.testing.assert_array_equal(end[k], t_end)
            np.testing.assert_array_equal(where[k], t_where)
            assert np.all(end[k] - start[k] <= inst.limit)


@cache
def _golden(name: str):
    batch = load_batch(GOLDEN / "generated-200.json" if name == "generated-200"
                       else ROOT / "examples" / "small.json")
    inst = build_instance(batch)
    record = json.loads((GOLDEN / "expected.json").read_text())[name]
    return batch, inst, record


@pytest.mark.parametrize("name", ["generated-200", "small"])
@pytest.mark.parametrize("method", ["greedy", "ga"])
def test_zero_spread_replay_gives_back_the_plans_starts(name, method):
    # The recorded plans are serial-SGS schedules (ga's forward-backward improved): keeping
    # the plan with every factor 1 must give back every start (kernels_replay docstring).
    batch, inst, record = _golden(name)
    plan = make_result(inst, method, np.array(record[method]["assign"]),
                       np.array(record[method]["start"]), 0)
    sampler = bind(parse_model("scale:1"), inst)
    start, end, where = replay_schedules(inst, replay_plan(inst, plan), sampler, policy="keep",
                                         seed=0, first=0, count=2)
    for k in range(2):
        np.testing.assert_array_equal(start[k], plan.start)
        np.testing.assert_array_equal(where[k], plan.assign)
        np.testing.assert_array_equal(end[k], plan.end)


@pytest.mark.parametrize("model", ["lognormal:0.4", "uniform:0.5,1.8", "scale:1.3"])
def test_every_replayed_schedule_passes_the_independent_checker(model):
    _, _, record = _golden("generated-200")
    # limits on a third of the job groups, so some sampled runs are stopped at them
    doc = json.loads((GOLDEN / "generated-200.json").read_text())
    for k, group in enumerate(doc["jobs"]):
        if k % 3 == 0:
            group["limit_h"] = group["hours"] * 1.1
    batch = expand_batch(Batch.model_validate_json(json.dumps(doc)))
    inst = build_instance(batch)
    plan = replay_plan(inst, make_result(inst, "ga", np.array(record["ga"]["assign"]),
                                         np.array(record["ga"]["start"]), 0))
    sampler = bind(parse_model(model), inst)
    for policy in ("keep", "dispatch"):
        start, end, where = replay_schedules(inst, plan, sampler, policy=policy, seed=3,
                                             first=10, count=4)
        for k in range(4):
            sampled_batch, doc = sample_documents(batch, inst, start[k], end[k], where[k])
            assert check_plan(sampled_batch, doc) == [], (policy, k)
        if policy == "keep":
            assert np.array_equal(where, np.broadcast_to(plan.assign, where.shape))
    assert np.any(end - start == inst.limit)  # some runs were stopped at their limit


def test_samples_are_common_to_every_plan_and_independent_of_chunking():
    # Common random numbers: sample k's factors depend on (seed, k) only; a chunk of samples
    # draws exactly the rows the whole run draws, so chunks can run anywhere.
    _, inst = instance_of(random_batch_doc(np.random.default_rng(1), max_jobs=12))
    sampler = bind(parse_model("lognormal:0.3"), inst)
    whole = sampler.factors(5, 0, 12)
    np.testing.assert_array_equal(whole[7:12], sampler.factors(5, 7, 12))
    assert not np.array_equal(whole, sampler.factors(6, 0, 12))
    # the k-th child of SeedSequence.spawn, built directly
    spawned = np.random.SeedSequence(5, spawn_key=(0,)).spawn(12)
    assert [s.spawn_key for s in spawned] == [sample_seed(5, "risk", k).spawn_key
                                              for k in range(12)]
    assert not np.array_equal(whole[:3], sampler.factors(5, 0, 3, purpose="robust"))


def _tallies_equal(a: Tally, b: Tally) -> None:
    for name in ("covered", "makespan", "tardiness", "end_sum", "late", "past", "last",
                 "work"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    np.testing.assert_array_equal(np.sort(a.top, axis=1)[:, -a.top.shape[1]:],
                                  np.sort(b.top, axis=1)[:, -a.top.shape[1]:])


def test_chunk_tallies_merge_exactly_in_any_order():
    batch, inst, record = _golden("generated-200")
    plan = replay_plan(inst, make_result(inst, "ga", np.array(record["ga"]["assign"]),
                                         np.array(record["ga"]["start"]), 0))
    sampler = bind(parse_model("lognormal:0.3"), inst)
    n = 60
    whole = replay(inst, plan, sampler, samples=n, seed=2)["dispatch"]
    job = ReplayJob(inst, plan, sampler, ("dispatch",), 2, n)
    parts = [job(c)["dispatch"] for c in chunks(n, size=7)]
    merged = Tally.empty(inst.n_jobs, inst.n_nodes, n, 0)
    for part in reversed(parts):
        merged = merged.merge(part)
    _tallies_equal(whole, merged)
    np.testing.assert_array_equal(whole.job_quantile_end(), merged.job_quantile_end())
    # the P90 end is the nearest-rank quantile of the job's ends over all samples
    _, end, _ = replay_schedules(inst, plan, sampler, policy="dispatch", seed=2, first=0,
                                 count=n)
    np.testing.assert_array_equal(whole.job_quantile_end(),
                                  np.sort(end, axis=0)[nearest_rank(0.9, n) - 1])
    np.testing.assert_array_equal(whole.makespan, end.max(axis=1))
    with pytest.raises(ValueError):
        parts[0].merge(job(Chunk(3, 5))["dispatch"])


def test_a_plan_with_a_job_on_a_node_that_cannot_hold_it_is_refused():
    batch, inst, record = _golden("small")
    assign = np.array(record["greedy"]["assign"])
    j = int(np.flatnonzero(~inst.eligible.all(axis=1))[0])
    assign[j] = int(np.flatnonzero(~inst.eligible[j])[0])
    with pytest.raises(InputError, match="which cannot hold it"):
        replay_plan(inst, make_result(inst, "hand", assign, np.array(
            record["greedy"]["start"]), 0))
