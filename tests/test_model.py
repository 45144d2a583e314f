"""The model contract: count expansion, the minute rule, eligibility and the priority order."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings

from assignplan.instance import NO_DUE
from assignplan.model import (
    can_hold,
    ceil_minutes,
    duration_minutes,
    floor_minutes,
    member_names,
)
from tests.strategies import batches, instance_of, random_batch_doc


def test_count_expansion_is_zero_padded_to_the_width_of_count():
    assert member_names("gpu", 1) == ["gpu"]
    assert member_names("gpu", 3) == ["gpu-1", "gpu-2", "gpu-3"]
    names = member_names("gpu", 12)
    assert names[0] == "gpu-01" and names[-1] == "gpu-12" and len(set(names)) == 12
    assert member_names("sweep", 100)[:2] == ["sweep-001", "sweep-002"]


@pytest.mark.parametrize(("hours", "speed", "minutes"), [
    (1.0, 1.0, 60), (0.1, 1.0, 6),  # 0.1 * 60 = 6.000000000000001 in floats: still 6
    (1.0, 1.5, 40), (1.0, 1.3, 47),  # 46.15... rounds up
    (2.5, 1.1, 137), (0.001, 1.0, 1),  # never below one minute
    (7.0 / 60, 1.0, 7),
])
def test_duration_rule(hours, speed, minutes):
    assert duration_minutes(hours, speed) == minutes


def test_rounding_helpers_scalar_and_vector_agree():
    values = np.array([0.1 * 60, 59.9999999999, 60.0000001, 1e-9, 123.5])
    assert list(ceil_minutes(values)) == [ceil_minutes(float(v)) for v in values]
    assert list(floor_minutes(values)) == [floor_minutes(float(v)) for v in values]


def test_follows_a_group_means_every_member():
    doc = random_batch_doc(np.random.default_rng(0))
    doc["jobs"] = [{"name": "prep", "count": 3, "cores": 1, "memory_gib": 1, "hours": 1},
                   {"name": "post", "cores": 1, "memory_gib": 1, "hours": 1,
                    "follows": ["prep", "prep-2"]}]
    batch, inst = instance_of(doc)
    post = batch.jobs[-1]
    assert post.follows == ("prep-1", "prep-2", "prep-3")
    assert sorted(inst.predecessors(3).tolist()) == [0, 1, 2]


@settings(max_examples=60, deadline=None)
@given(batches(max_jobs=15))
def test_instance_arrays_agree_with_the_model(doc):
    batch, inst = instance_of(doc)
    for j, job in enumerate(batch.jobs):
        for i, node in enumerate(batch.nodes):
            assert inst.eligible[j, i] == can_hold(node, job)
            assert inst.duration[j, i] == duration_minutes(job.hours, node.speed)
        assert inst.ready[j] == ceil_minutes(job.ready_h * 60)
        assert inst.due[j] == (NO_DUE if job.due_h is None else floor_minutes(job.due_h * 60))
    # the priority order is a permutation that puts every predecessor first
    position = np.empty(inst.n_jobs, dtype=np.int64)
    position[inst.order] = np.arange(inst.n_jobs)
    assert sorted(inst.order.tolist()) == list(range(inst.n_jobs))
    for j in range(inst.n_jobs):
        assert all(position[p] < position[j] for p in inst.predecessors(j))
    assert inst.eligible.any(axis=1).all()


def test_order_is_longest_first_without_follows():
    doc = {"window": {"start": "2026-12-07T00:00:00"},
           "nodes": [{"name": "n", "cores": 4, "memory_gib": 8}],
           "jobs": [{"name": f"j{k}", "cores": 1, "memory_gib": 1, "hours": h}
                    for k, h in enumerate([2.0, 5.0, 1.0, 5.0, 3.0])]}
    _, inst = instance_of(doc)
    assert inst.order.tolist() == [1, 3, 4, 0, 2]  # ties keep the document order


def test_maintenance_is_widened_to_whole_minutes():
    doc = {"window": {"start": "2026-12-07T00:00:00"},
           "nodes": [{"name": "n", "cores": 4, "memory_gib": 8,
                      "maintenance": [{"start_h": 1.01, "end_h": 2.005}]}],
           "jobs": [{"name": "j", "cores": 1, "memory_gib": 1, "hours": 1}]}
    _, inst = instance_of(doc)
    assert inst.maint_start.tolist() == [60] and inst.maint_end.tolist() == [121]
