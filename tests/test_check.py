"""The independent checker: a valid plan passes, every injected violation is found and named."""

from __future__ import annotations

import re
from collections import defaultdict
from datetime import datetime, timedelta

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings

from assignplan.check import KINDS, Violation, check_plan, summary_line
from assignplan.documents import Assignment, PlanDoc
from assignplan.expand import ExpandedBatch, can_hold
from assignplan.units import ceil_minutes, duration_minutes, floor_minutes, hours_of
from tests.strategies import batches, expanded, random_batch_doc

WEEK = {"start": "2026-12-07T00:00:00", "hours": 168.0}  # minute 0 is Mon 2026-12-07 00:00
WEEK_START = datetime(2026, 12, 7)

DOC = {
    "window": WEEK,
    "nodes": [
        {"name": "cpu", "count": 2, "cores": 16, "memory_gib": 64.0},
        {"name": "gpu", "cores": 8, "memory_gib": 128.0, "gpus": 4, "speed": 1.25,
         "tags": ["cuda"], "maintenance": [{"start_h": 10.0, "end_h": 12.0}]},
    ],
    "jobs": [
        {"name": "prep", "cores": 8, "memory_gib": 32.0, "hours": 1.5},
        {"name": "train", "count": 2, "cores": 8, "memory_gib": 64.0, "gpus": 2, "hours": 5.0,
         "needs": ["cuda"], "follows": ["prep"]},
        {"name": "sweep", "count": 3, "cores": 10, "memory_gib": 40.0, "hours": 2.0,
         "ready_h": 1.0},
        {"name": "post", "cores": 4, "memory_gib": 8.0, "hours": 0.5, "follows": ["train"]},
    ],
}


# --------------------------------------------------------------------------- reference plans


def _topological(batch: ExpandedBatch) -> list:
    done: set[str] = set()
    order, pending = [], list(batch.jobs)
    while pending:
        ready = [j for j in pending if set(j.follows) <= done]
        order += ready
        done |= {j.name for j in ready}
        pending = [j for j in pending if j.name not in done]
    return order


def serial_plan(batch: ExpandedBatch) -> PlanDoc:
    """An obviously feasible plan: each job alone on its node, one after another.

    Jobs go in a topological order of follows to the eligible node that is free first, start
    at the earliest minute after the node is free, the job is ready and its predecessors ended,
    pushed past any maintenance window the run would touch.
    """
    free = {n.name: 0 for n in batch.nodes}
    end: dict[str, int] = {}
    rows = []
    for job in _topological(batch):
        node = min((n for n in batch.nodes if can_hold(n, job)), key=lambda n: free[n.name])
        dur = duration_minutes(job.hours, node.speed)
        t = max([free[node.name], ceil_minutes(job.ready_h * 60)] + [end[p] for p in job.follows])
        moved = True
        while moved:
            moved = False
            for a, b in node.maintenance:
                if t < ceil_minutes(b * 60) and floor_minutes(a * 60) < t + dur:
                    t, moved = ceil_minutes(b * 60), True
        end[job.name] = free[node.name] = t + dur
        rows.append(Assignment(job=job.name, node=node.name, start_h=t / 60, end_h=(t + dur) / 60))
    return plan_of(batch, rows)


def plan_of(batch: ExpandedBatch, rows: list[Assignment]) -> PlanDoc:
    makespan = max((a.end_h for a in rows), default=0.0)
    return PlanDoc(method="test", window_start=batch.window_start, makespan_h=makespan,
                   lower_bound_h=0.0, gap_pct=0.0, assignments=rows)


def edit(batch: ExpandedBatch, plan: PlanDoc, job: str, **changes) -> PlanDoc:
    """The plan with one row changed; moving a row keeps its model duration unless told."""
    nodes = {n.name: n for n in batch.nodes}
    hours = {j.name: j.hours for j in batch.jobs}
    rows = []
    for a in plan.assignments:
        if a.job == job:
            new = a.model_copy(update=changes)
            if "end_h" not in changes and new.node in nodes:
                dur = duration_minutes(hours[job], nodes[new.node].speed)
                new = new.model_copy(update={"end_h": new.start_h + dur / 60})
            a = new
        rows.append(a)
    return plan_of(batch, rows)  # restates the makespan, so only the injected fault shows


def kinds(violations: list[Violation]) -> list[str]:
    return sorted(v.kind for v in violations)


@pytest.fixture(scope="module")
def batch() -> ExpandedBatch:
    return expanded(DOC)


@pytest.fixture(scope="module")
def plan(batch) -> PlanDoc:
    return serial_plan(batch)


def row_of(plan: PlanDoc, job: str) -> Assignment:
    return next(a for a in plan.assignments if a.job == job)


# --------------------------------------------------------------------------- valid plans


def test_reference_plan_is_as_designed(plan):
    # Pins the layout the injections below rely on (times in minutes).
    got = {a.job: (a.node, round(a.start_h * 60), round(a.end_h * 60)) for a in plan.assignments}
    assert got == {
        "prep": ("cpu-1", 0, 90), "train-1": ("gpu", 90, 330), "train-2": ("gpu", 330, 570),
        "sweep-1": ("cpu-2", 60, 180), "sweep-2": ("cpu-1", 90, 210),
        "sweep-3": ("cpu-2", 180, 300), "post": ("cpu-1", 570, 600),
    }


def test_valid_plan_has_no_violation(batch, plan):
    assert check_plan(batch, plan) == []
    assert summary_line([], plan) == "plan OK: 7 jobs on 3 nodes, makespan 10 h, no violations"


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(batches(max_jobs=15))
def test_serial_plans_of_random_batches_pass(doc):
    b = expanded(doc)
    assert check_plan(b, serial_plan(b)) == []


def test_touching_runs_and_maintenance_edges_are_allowed():
    # Half-open intervals: a run ending at minute t and another starting at t do not overlap;
    # a run may end exactly when maintenance starts and start exactly when it ends.
    doc = {"window": WEEK,
           "nodes": [{"name": "n", "cores": 4, "memory_gib": 8.0,
                      "maintenance": [{"start_h": 2.0, "end_h": 3.0}]}],
           "jobs": [{"name": "a", "count": 3, "cores": 4, "memory_gib": 8.0, "hours": 1.0}]}
    b = expanded(doc)
    rows = [Assignment(job=f"a-{k}", node="n", start_h=s, end_h=s + 1.0)
            for k, s in ((1, 0.0), (2, 1.0), (3, 3.0))]
    assert check_plan(b, plan_of(b, rows)) == []


# --------------------------------------------------------------------------- one violation each


def test_missing_job(batch, plan):
    rows = [a for a in plan.assignments if a.job != "sweep-2"]
    got = check_plan(batch, plan.model_copy(update={"assignments": rows}))
    assert kinds(got) == ["missing_job"] and got[0].job == "sweep-2"


def test_duplicate_job(batch, plan):
    rows = plan.assignments + [row_of(plan, "sweep-3")]
    got = check_plan(batch, plan.model_copy(update={"assignments": rows}))
    assert kinds(got) == ["duplicate_job"] and got[0].job == "sweep-3"
    assert "first at assignment" in got[0].message


def test_unknown_job(batch, plan):
    ghost = Assignment(job="ghost", node="cpu-2", start_h=0.0, end_h=1.0)
    got = check_plan(batch, plan.model_copy(update={"assignments": plan.assignments + [ghost]}))
    assert kinds(got) == ["unknown_job"] and got[0].job == "ghost"


def test_unknown_node(batch, plan):
    got = check_plan(batch, edit(batch, plan, "sweep-1", node="cpu-9", end_h=3.0))
    assert kinds(got) == ["unknown_node"]
    assert (got[0].job, got[0].node) == ("sweep-1", "cpu-9")


def test_cannot_hold_gpu_job_on_cpu_node(batch, plan):
    got = check_plan(batch, edit(batch, plan, "train-1", node="cpu-2"))
    assert kinds(got) == ["cannot_hold"]
    assert (got[0].job, got[0].node) == ("train-1", "cpu-2")
    assert "2 GPUs" in got[0].message and "tags cuda" in got[0].message


def test_wrong_tags_still_count_for_capacity():
    # t lacks its tag on node n but its cores are used there all the same: both are reported.
    # (A job too big for the node by itself is reported as cannot_hold only.)
    doc = {"window": WEEK,
           "nodes": [{"name": "n", "cores": 8, "memory_gib": 8.0},
                     {"name": "x", "cores": 8, "memory_gib": 8.0, "tags": ["x"]}],
           "jobs": [{"name": "a", "cores": 6, "memory_gib": 1.0, "hours": 1.0},
                    {"name": "t", "cores": 6, "memory_gib": 1.0, "hours": 1.0,
                     "needs": ["x"]}]}
    b = expanded(doc)
    rows = [Assignment(job=j, node="n", start_h=0.0, end_h=1.0) for j in ("a", "t")]
    got = check_plan(b, plan_of(b, rows))
    assert kinds(got) == ["cannot_hold", "capacity"]
    assert "tags x" in got[0].message and "by 4 cores" in got[1].message


def test_capacity_cores_memory_both_reported(batch, plan):
    # sweep-2 on cpu-2 at minute 60 runs beside sweep-1: 20 of 16 cores, 80 of 64 GiB.
    got = check_plan(batch, edit(batch, plan, "sweep-2", node="cpu-2", start_h=1.0))
    assert kinds(got) == ["capacity", "capacity"]
    assert {v.node for v in got} == {"cpu-2"} and {v.minute for v in got} == {60}
    text = " | ".join(v.message for v in got)
    assert "for cores by 4 cores" in text and "for memory by 16 GiB" in text
    # Calendar times from the window start (Mon 2026-12-07 00:00), not minute counts.
    assert "from Mon 07 Dec 01:00 until Mon 07 Dec 03:00" in text and "minute" not in text
    assert {v.until for v in got} == {180}
    assert "sweep-1" in text and "sweep-2" in text


CAP_DOC = {
    "window": WEEK,
    "nodes": [{"name": "box", "cores": 16, "memory_gib": 64.0, "gpus": 4}],
    "jobs": [
        {"name": "c", "count": 2, "cores": 10, "memory_gib": 1.0, "hours": 1.0},
        {"name": "m", "count": 2, "cores": 1, "memory_gib": 40.0, "hours": 1.0},
        {"name": "g", "count": 2, "cores": 1, "memory_gib": 1.0, "gpus": 3, "hours": 1.0},
    ],
}


@pytest.mark.parametrize(("group", "resource", "amount"),
                         [("c", "cores", "4 cores"), ("m", "memory", "16 GiB"),
                          ("g", "GPUs", "2 GPUs")])
def test_capacity_each_resource(group, resource, amount):
    b = expanded(CAP_DOC)
    # Pairs run back to back, one hour apart, except the pair under test, which overlaps by 30
    # minutes: exactly one stretch [start of second, end of first) on one resource.
    starts = {"c-1": 0, "c-2": 60, "m-1": 120, "m-2": 180, "g-1": 240, "g-2": 300}
    starts[f"{group}-2"] -= 30
    rows = [Assignment(job=j, node="box", start_h=s / 60, end_h=(s + 60) / 60)
            for j, s in starts.items()]
    got = check_plan(b, plan_of(b, rows))
    assert kinds(got) == ["capacity"]
    first = starts[f"{group}-1"]
    assert got[0].minute == first + 30 and got[0].node == "box"
    assert got[0].until == first + 60 and f"for {resource} by {amount} from" in got[0].message


def test_capacity_stretch_reported_once_not_per_minute():
    # Three 10-core jobs staggered so that the overload spans two different job pairs without
    # a gap: [0,60) + [30,90) + [60,120) on 16 cores is overloaded on [30, 90) as one stretch.
    doc = {**CAP_DOC, "jobs": [{"name": "c", "count": 3, "cores": 10, "memory_gib": 1.0,
                                "hours": 1.0}]}
    b = expanded(doc)
    rows = [Assignment(job=f"c-{k}", node="box", start_h=s / 60, end_h=(s + 60) / 60)
            for k, s in ((1, 0), (2, 30), (3, 60))]
    got = check_plan(b, plan_of(b, rows))
    assert kinds(got) == ["capacity"]
    assert (got[0].minute, got[0].until) == (30, 90)
    assert "from Mon 07 Dec 00:30 until Mon 07 Dec 01:30" in got[0].message


def test_dependency(batch, plan):
    got = check_plan(batch, edit(batch, plan, "post", start_h=500 / 60))
    assert kinds(got) == ["dependency"]
    assert got[0].job == "post" and got[0].minute == 500
    # Reads as the clock time it is, not as '8:20 h' (issue 18).
    assert got[0].message == (
        "job post starts at Mon 07 Dec 08:20 before its predecessor train-2 ends at"
        " Mon 07 Dec 09:30")
    assert summary_line(got, plan).startswith("1 violation (dependency 1): 7 jobs on 3 nodes")


def test_maintenance(batch, plan):
    # post on the GPU node runs ceil(30 / 1.25) = 24 minutes: [590, 614) meets [600, 720).
    got = check_plan(batch, edit(batch, plan, "post", node="gpu", start_h=590 / 60))
    assert kinds(got) == ["maintenance"]
    assert (got[0].job, got[0].node) == ("post", "gpu")
    assert got[0].message == ("job post [Mon 07 Dec 09:50, Mon 07 Dec 10:14) overlaps"
                              " maintenance [Mon 07 Dec 10:00, Mon 07 Dec 12:00) on node gpu")


def test_before_ready(batch, plan):
    got = check_plan(batch, edit(batch, plan, "sweep-1", start_h=0.5))
    assert kinds(got) == ["before_ready"] and got[0].job == "sweep-1"
    assert got[0].message == ("job sweep-1 starts at Mon 07 Dec 00:30 before its ready time"
                              " Mon 07 Dec 01:00")


def test_wrong_end(batch, plan):
    got = check_plan(batch, edit(batch, plan, "sweep-1", end_h=2.5))
    assert kinds(got) == ["duration"] and got[0].job == "sweep-1"
    assert got[0].message == ("job sweep-1 is stated to end at Mon 07 Dec 02:30 but runs"
                              " 120 min on node cpu-2 (speed 1), so it ends at Mon 07 Dec 03:00")


def test_end_must_use_speed_rounding(batch, plan):
    # train-1 on the GPU node (speed 1.25): 300 / 1.25 = 240 minutes, not 300.
    got = check_plan(batch, edit(batch, plan, "train-1", end_h=row_of(plan, "train-1").start_h + 5))
    assert kinds(got) == ["duration"] and got[0].job == "train-1"


def test_negative_start(batch, plan):
    got = check_plan(batch, edit(batch, plan, "prep", start_h=-1.0))
    assert kinds(got) == ["negative_start"] and got[0].job == "prep"
    assert got[0].message == ("job prep starts at Sun 06 Dec 23:00 (-1.0 h), before the window"
                              " opens at Mon 07 Dec 00:00")


def test_off_minute(batch, plan):
    got = check_plan(batch, edit(batch, plan, "sweep-1", start_h=1.0 + 0.25 / 60, end_h=3.0))
    assert kinds(got) == ["off_minute"] and got[0].job == "sweep-1"


def test_float_noise_is_not_off_minute(batch, plan):
    # 0.1 h * 60 = 6.000000000000001: float noise, still minute 6.
    doc = {"window": WEEK, "nodes": [{"name": "n", "cores": 1, "memory_gib": 1.0}],
           "jobs": [{"name": "a", "cores": 1, "memory_gib": 1.0, "hours": 0.1}]}
    b = expanded(doc)
    rows = [Assignment(job="a", node="n", start_h=0.1, end_h=0.1 + 0.1)]
    assert check_plan(b, plan_of(b, rows)) == []


def test_understated_makespan(batch, plan):
    got = check_plan(batch, plan.model_copy(update={"makespan_h": 9.0}))
    assert kinds(got) == ["makespan"]
    assert got[0].message == ("plan states makespan 9 h but its last job ends at Mon 07 Dec"
                              " 10:00 (+10.0 h)")


def test_offsets_rounded_to_four_decimals_are_whole_minutes():
    # `solve --out` writes hours_of(minute): 47 min is 0.7833 h, 0.002 min short of minute 47.
    doc = {"window": WEEK, "nodes": [{"name": "n", "cores": 1, "memory_gib": 1.0, "speed": 1.3}],
           "jobs": [{"name": "a", "count": 2, "cores": 1, "memory_gib": 1.0, "hours": 1.0}]}
    b = expanded(doc)
    rows = [Assignment(job="a-1", node="n", start_h=0.0, end_h=hours_of(47)),
            Assignment(job="a-2", node="n", start_h=hours_of(47), end_h=hours_of(94))]
    assert hours_of(47) == 0.7833
    assert check_plan(b, plan_of(b, rows)) == []


def test_plan_of_job_node_and_start_alone(batch, plan):
    # No method, makespan, bound or end: the ends come from the model, nothing is missing.
    bare = PlanDoc(assignments=[Assignment(job=a.job, node=a.node, start_h=a.start_h)
                                for a in plan.assignments])
    assert check_plan(batch, bare) == []
    assert summary_line([], bare) == "plan OK: 7 jobs on 3 nodes, no violations"
    assert summary_line([], bare, batch) == (
        "plan OK: 7 jobs on 3 nodes, makespan 10 h, no violations")
    late = bare.model_copy(update={"assignments": [
        a.model_copy(update={"start_h": 9.0}) if a.job == "post" else a
        for a in bare.assignments]})
    assert kinds(check_plan(batch, late)) == ["dependency"]


def test_calendar_start_off_the_minute_is_named_as_written(batch, plan):
    rows = [Assignment(job=a.job, node=a.node, start=WEEK_START + timedelta(hours=a.start_h))
            for a in plan.assignments]
    rows[0] = rows[0].model_copy(update={"start": rows[0].start + timedelta(seconds=20)})
    got = check_plan(batch, PlanDoc(assignments=rows))
    assert kinds(got) == ["off_minute"]
    assert got[0].message == "job prep starts at 2026-12-07T00:00:20, not on a whole minute"


def test_every_kind_has_a_test():
    tested = {"missing_job", "duplicate_job", "unknown_job", "unknown_node", "cannot_hold",
              "capacity", "dependency", "maintenance", "before_ready", "duration",
              "negative_start", "off_minute", "makespan",
              "pinned", "before_now"}  # these two: test_replan (a plan checked with its pins)
    assert set(KINDS) == tested


# --------------------------------------------------------------------------- several at once


def test_several_problems_are_all_listed(batch, plan):
    bad = edit(batch, plan, "post", start_h=500 / 60)  # dependency
    bad = edit(batch, bad, "sweep-1", start_h=0.5)  # before ready
    bad = edit(batch, bad, "prep", end_h=2.0)  # duration
    rows = [a for a in bad.assignments if a.job != "sweep-3"]  # missing
    rows.append(Assignment(job="ghost", node="cpu-1", start_h=0.0, end_h=1.0))  # unknown job
    bad = bad.model_copy(update={"assignments": rows})
    got = check_plan(batch, bad)
    assert kinds(got) == ["before_ready", "dependency", "duration", "missing_job", "unknown_job"]
    assert {v.job for v in got} == {"post", "sweep-1", "prep", "sweep-3", "ghost"}
    assert all("\n" not in v.message for v in got)
    line = summary_line(got, bad)
    assert line.startswith("5 violations (")
    assert "dependency 1" in line and "missing_job 1" in line and "\n" not in line


# --------------------------------------------------------------------------- sweep vs per minute


def _overloaded_minutes(batch: ExpandedBatch, plan: PlanDoc) -> set[tuple[str, str, int]]:
    """Reference: the load of every node and resource minute by minute (slow, obvious)."""
    nodes = {n.name: n for n in batch.nodes}
    jobs = {j.name: j for j in batch.jobs}
    load: dict[tuple[str, int], np.ndarray] = defaultdict(lambda: np.zeros(3, dtype=np.int64))
    for a in plan.assignments:
        job, node = jobs[a.job], nodes[a.node]
        s = round(a.start_h * 60)
        for m in range(s, s + duration_minutes(job.hours, node.speed)):
            load[(a.node, m)] += (job.cores, job.memory_mib, job.gpus)
    out = set()
    for (name, m), used in load.items():
        cap = (nodes[name].cores, nodes[name].memory_mib, nodes[name].gpus)
        for resource, u, c in zip(("cores", "memory", "GPUs"), used, cap, strict=True):
            if u > c:
                out.add((name, resource, m))
    return out


@pytest.mark.parametrize("seed", range(40))
def test_capacity_sweep_matches_minute_by_minute_load(seed):
    rng = np.random.default_rng(seed)
    b = expanded(random_batch_doc(rng, max_jobs=10, p_follows=0.0, p_maintenance=0.0,
                                  p_ready=0.0))
    rows = []
    for job in b.jobs:  # random start on a random node that can hold the job: many overlaps
        node = rng.choice([n for n in b.nodes if can_hold(n, job)])
        s = int(rng.integers(0, 600))
        rows.append(Assignment(job=job.name, node=node.name, start_h=s / 60,
                               end_h=(s + duration_minutes(job.hours, node.speed)) / 60))
    got = check_plan(b, plan_of(b, rows))
    assert {v.kind for v in got} <= {"capacity"}
    covered: set[tuple[str, str, int]] = set()
    for v in got:
        resource = re.search(r"for (\w+) by ", v.message).group(1)
        stretch = {(v.node, resource, m) for m in range(v.minute, v.until)}
        assert not stretch & covered  # each stretch reported once
        covered |= stretch
    assert covered == _overloaded_minutes(b, plan_of(b, rows))
    # Maximal: no two reported stretches of one node and resource touch.
    ends = {(v.node, re.search(r"for (\w+)", v.message).group(1), v.until) for v in got}
    assert not {(v.node, re.search(r"for (\w+)", v.message).group(1), v.minute)
                for v in got} & ends


# --------------------------------------------------------------------------- scale


@pytest.mark.slow
def test_ten_thousand_jobs_on_a_thousand_nodes():
    doc = {"window": WEEK,
           "nodes": [{"name": "n", "count": 1000, "cores": 32, "memory_gib": 128.0}],
           "jobs": [{"name": "j", "count": 10_000, "cores": 16, "memory_gib": 64.0,
                     "hours": 1.0}]}
    b = expanded(doc)
    # Two jobs side by side on every node (exactly full), five rounds of an hour each.
    rows = [Assignment(job=j.name, node=b.nodes[k % 1000].name, start_h=float(k // 2000),
                       end_h=float(k // 2000 + 1)) for k, j in enumerate(b.jobs)]
    plan = plan_of(b, rows)
    assert check_plan(b, plan) == []
    rows[-1] = rows[-1].model_copy(update={"start_h": 3.5, "end_h": 4.5})
    got = check_plan(b, plan.model_copy(update={"assignments": rows}))
    # The last job now overlaps round 3 of its node for [210, 240): three jobs at once.
    assert kinds(got) == ["capacity", "capacity"]
    assert {v.minute for v in got} == {210}
