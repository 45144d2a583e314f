"""The model contract: count expansion, the minute rule, eligibility and the priority order."""

from __future__ import annotations

import json
from datetime import datetime
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given, settings

from assignplan.documents import Batch, PlanDoc
from assignplan.errors import InputError
from assignplan.expand import can_hold, member_names
from assignplan.instance import NO_DUE
from assignplan.reading import plan_hours
from assignplan.units import ceil_minutes, duration_minutes, floor_minutes
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


# --------------------------------------------------------------------------- calendar times


def _one_job_doc(window_start: str, **job) -> dict:
    return {"window": {"start": window_start, "hours": 48},
            "nodes": [{"name": "n", "cores": 4, "memory_gib": 8,
                       "maintenance": [{"start": "2026-12-07T04:00", "end": "2026-12-07 06:00"}]}],
            "jobs": [{"name": "a", "cores": 1, "memory_gib": 1, "hours": 1, **job}]}


def test_calendar_times_are_hours_from_a_date_only_window_start():
    # "2026-12-07" is midnight; ready, due and maintenance as calendar times.
    batch, inst = instance_of(_one_job_doc("2026-12-07", ready="2026-12-07T06:20",
                                           due="2026-12-08"))
    assert batch.window_start == datetime(2026, 12, 7)
    (job,), (node,) = batch.jobs, batch.nodes
    assert (round(job.ready_h * 60), job.due_h, node.maintenance) == (380, 24.0, ((4.0, 6.0),))
    assert (inst.ready[0], inst.due[0]) == (380, 1440)  # minutes exactly, no float tail
    assert (inst.maint_start[0], inst.maint_end[0]) == (240, 360)
    # The same batch in hour offsets gives the same arrays.
    offsets = _one_job_doc("2026-12-07T00:00:00", ready_h=380 / 60, due_h=24.0)
    offsets["nodes"][0]["maintenance"] = [{"start_h": 4, "end_h": 6}]
    _, same = instance_of(offsets)
    for name in ("ready", "due", "maint_start", "maint_end"):
        assert np.array_equal(getattr(inst, name), getattr(same, name)), name


def test_time_zone_rule():
    # A calendar time without an offset is read in the window start's offset; one with an
    # offset is converted (10:00Z is 11:00 at +01:00, three hours after 08:00+01:00).
    doc = _one_job_doc("2026-12-07T08:00+01:00", ready="2026-12-07T10:00",
                       due="2026-12-07T10:00Z")
    doc["nodes"][0].pop("maintenance")
    naive, _ = instance_of(doc)
    assert (naive.jobs[0].ready_h, naive.jobs[0].due_h) == (2.0, 3.0)
    # Maintenance 04:00-06:00 (at +01:00) is before the window start: refused with its path.
    with pytest.raises(InputError) as err:
        instance_of(_one_job_doc("2026-12-07T05:00+01:00"))
    assert err.value.problems == [
        "<batch>: nodes[0].maintenance[0].start: 2026-12-07T04:00:00+01:00 is before the"
        " window starts (2026-12-07T05:00:00+01:00)"]


def test_calendar_times_of_a_node_file_wait_for_the_window():
    # A node file may come without a window (a trace supplies it): its calendar times are
    # checked once the batch has one, not refused for want of it.
    from assignplan.expand import expand_nodes

    inventory = Batch.model_validate_json(json.dumps(_one_job_doc("2026-12-07")))
    problems: list[str] = []
    nodes = expand_nodes(SimpleNamespace(window=None, nodes=inventory.nodes), problems)
    assert problems == [] and nodes[0].maintenance == ()


def test_plan_times_read_both_forms_and_refuse_disagreement():
    origin = datetime(2026, 12, 7, 8)
    plan = PlanDoc.model_validate_json(json.dumps({"assignments": [
        {"job": "a", "node": "n", "start": "2026-12-07T09:30"},
        {"job": "b", "node": "n", "start_h": 88.0167, "end": "2026-12-11T01:00"},
        {"job": "c", "node": "n", "start_h": 2.0, "start": "2026-12-07T10:00:00",
         "end_h": 3.0}]}))
    assert plan_hours(plan, origin) == [(1.5, None), (88.0167, 89.0), (2.0, 3.0)]
    bad = PlanDoc.model_validate_json(json.dumps({"assignments": [
        {"job": "a", "node": "n", "start_h": 2.5, "start": "2026-12-07T10:00"},
        {"job": "b", "node": "n", "end_h": 1.0},
        {"job": "c", "node": "n", "start": "2026-12-07T10:00+00:00"}]}))
    with pytest.raises(InputError) as err:
        plan_hours(bad, origin)
    assert err.value.problems == [
        "assignments[0].start: 2026-12-07T10:00:00 is +2.0 h from the window start but start_h"
        " says 2.5 h; give one of them, or make them agree",
        "assignments[1].start_h: required field is missing (or give start as an ISO 8601"
        " calendar time such as 2026-12-07T08:00 or 2026-12-07)",
        "assignments[2].start: 2026-12-07T10:00:00+00:00 has a UTC offset but the window start"
        " (2026-12-07T08:00:00) has none; give both an offset or neither",
    ]
