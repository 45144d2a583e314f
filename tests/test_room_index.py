"""The room index of list scheduling (`kernels_list`): the same plans as probing every node.

The index only decides which nodes a job's probe may pass over, so list scheduling with it
must give exactly the plan of the plain loop (same nodes, same starts, same tie-breaks), and
each bound it keeps must be the first minute the profile has that room for that span.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from assignplan import kernels_list as K
from assignplan.generate import batch_doc, generate_sized
from assignplan.kernels import earliest_start, init_node, node_slots, place
from assignplan.methods.greedy import mirrored
from assignplan.methods.orders import completion_order
from tests.strategies import instance_of, random_batch_doc

ALWAYS, NEVER = 0.0, 1e18  # `index_from` values: the index for any batch, or for none


def both_ways(inst, order=None):
    """(assign, start) of list scheduling in `order` with the room index and without."""
    e = inst.elig
    order = inst.order if order is None else order
    out = []
    for index_from in (ALWAYS, NEVER):
        assign = np.empty(inst.n_jobs, np.int64)
        start = np.empty(inst.n_jobs, np.int64)
        assert K.greedy_list(inst.arrays, order, e.job_class, e.ptr, e.nodes, assign, start,
                             index_from)
        out.append((assign, start))
    return out


def crowded(seed: int) -> dict:
    """A random batch (`random_batch_doc`) on many copies of each node group, with many jobs:
    classes span several blocks of ROOM_BLOCK nodes, and identical nodes make ties."""
    rng = np.random.default_rng(seed)
    doc = random_batch_doc(rng, max_jobs=60, p_follows=0.2, p_maintenance=0.5)
    for node in doc["nodes"]:
        node["count"] = int(rng.integers(1, 3 * K.ROOM_BLOCK))
    return doc


@settings(max_examples=60, deadline=None)
@given(st.integers(0, 2**32 - 1))
def test_the_index_gives_the_plain_loops_plan(seed):
    _, inst = instance_of(crowded(seed))
    rng = np.random.default_rng(seed)
    keyed = completion_order(inst, np.zeros(inst.n_jobs, dtype=bool),
                             rng.random(inst.n_jobs))  # another order within `follows`
    horizon = int(inst.dur.max()) * inst.n_jobs
    back = mirrored(inst, horizon)
    for case, order in ((inst, None), (inst, keyed), (back, None)):
        (a1, s1), (a2, s2) = both_ways(case, order)
        np.testing.assert_array_equal(a1, a2)
        np.testing.assert_array_equal(s1, s2)


def test_ties_between_identical_whole_nodes_go_to_the_lowest_node_either_way():
    # 50 identical nodes, 200 jobs that each take a whole node, four lengths: every job ends
    # equally early on many nodes, so only the tie rule decides
    doc = {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
           "nodes": [{"name": "n", "count": 50, "cores": 8, "memory_gib": 32.0}],
           "jobs": [{"name": f"j{k}", "cores": 8, "memory_gib": 4.0, "hours": 1.0 + k % 4}
                    for k in range(200)]}
    _, inst = instance_of(doc)
    (a1, s1), (a2, s2) = both_ways(inst)
    np.testing.assert_array_equal(a1, a2)
    np.testing.assert_array_equal(s1, s2)
    assert list(a1[inst.order[:50]]) == list(range(50))  # the first 50 fill the nodes in order


def test_a_batch_with_many_candidates_uses_the_index_by_default_and_gets_the_same_plan():
    _, inst = instance_of(batch_doc(generate_sized(3000, 400, 7)))
    e = inst.elig
    assert K._mean_candidates(inst.order, e.job_class, e.ptr) >= K.INDEX_MIN_CANDIDATES
    (a1, s1), (a2, s2) = both_ways(inst)
    assign = np.empty(inst.n_jobs, np.int64)
    start = np.empty(inst.n_jobs, np.int64)
    K.greedy_list(inst.arrays, inst.order, e.job_class, e.ptr, e.nodes, assign, start)
    np.testing.assert_array_equal(assign, a1)
    np.testing.assert_array_equal(start, s1)
    np.testing.assert_array_equal(a1, a2)
    np.testing.assert_array_equal(s1, s2)


def brute_force_room(profile_t, free, level, span):
    """The first minute t (a breakpoint) from which `free` stays >= level for `span` minutes,
    the last segment running forever; None if there is none."""
    for a in range(len(profile_t)):
        if free[a] < level:
            continue
        b = a
        while b + 1 < len(profile_t) and free[b + 1] >= level:
            b += 1
        run_end = np.inf if b + 1 == len(profile_t) else profile_t[b + 1]
        if run_end - profile_t[a] >= span and (a == 0 or free[a - 1] < level):
            return int(profile_t[a])
    return None


@settings(max_examples=80, deadline=None)
@given(st.integers(0, 2**32 - 1))
def test_each_room_bound_is_the_first_minute_with_that_room_for_that_span(seed):
    rng = np.random.default_rng(seed)
    capacity = np.array([[64, 4096, 0]], np.int64)
    empty = np.zeros(1, np.int64)
    maint_start = np.array([int(rng.integers(0, 500))], np.int64)
    maint_end = maint_start + int(rng.integers(1, 300))
    seg_lo = np.zeros(1, np.int64)
    seg_n = np.zeros(1, np.int64)
    size = node_slots(np.array([0, 1]), np.array([0, 0]), 0) + 2 * 40
    seg_t = np.empty(size, np.int64)
    seg_f = np.empty((size, 3), np.int64)
    init_node(0, seg_t, seg_f, seg_lo, seg_n, capacity, np.array([0, 1]), maint_start,
              maint_end, np.array([0, 0]), empty, empty, np.zeros((0, 3), np.int64))
    for _ in range(int(rng.integers(0, 30))):  # jobs at random starts where they fit
        d = np.array([rng.integers(1, 33), rng.integers(1, 1025), 0])
        dur = int(rng.integers(1, 400))
        t0 = int(rng.integers(0, 1500))
        s, k = earliest_start(seg_t, seg_f, 0, seg_n[0], t0, dur, *d)
        seg_n[0] = place(seg_t, seg_f, 0, seg_n[0], k, s, dur, *d)
    n = int(seg_n[0])
    levels = np.array([1, 2, 4, 8, 16, 32, 64], np.int64)
    out = np.empty(len(levels) * K.ROOM_SPANS, np.int64)
    K._node_room(seg_t, seg_f, 0, n, levels, 0, out, 0)
    for k, level in enumerate(levels):
        for d in range(K.ROOM_SPANS):
            want = brute_force_room(seg_t[:n], seg_f[:n, 0], level, 2**d)
            got = int(out[k * K.ROOM_SPANS + d])
            assert got == (K.FAR if want is None else want), (level, 2**d)
