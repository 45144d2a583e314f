"""The compiled schedule builder against its pure-Python twin, the objective, and hand cases."""

from __future__ import annotations

import numpy as np
import pytest

from assignplan import kernels, schedule
from assignplan.check import check_plan
from assignplan.methods.greedy import greedy_assign
from assignplan.plan import objective, to_plan_doc
from assignplan.schedule import build_schedule, evaluate_population, schedule_result
from tests.strategies import instance_of, random_batch_doc
from tests.twin_builder import twin_build, twin_fitness, twin_greedy, twin_justify


def random_assign(inst, *, rng: np.random.Generator, size: int = 1) -> np.ndarray:
    """int64[size, J]: every job on a uniformly drawn eligible node."""
    out = np.empty((size, inst.n_jobs), dtype=np.int64)
    for j in range(inst.n_jobs):
        out[:, j] = rng.choice(np.flatnonzero(inst.eligible[j]), size=size)
    return out


def random_topological_order(inst, *, rng: np.random.Generator) -> np.ndarray:
    """A uniformly shuffled priority list repaired into a follows-respecting order (Kahn)."""
    key = rng.permutation(inst.n_jobs)
    indeg = np.diff(inst.pred_ptr).copy()
    ready = [j for j in range(inst.n_jobs) if indeg[j] == 0]
    out = []
    while ready:
        ready.sort(key=lambda j: key[j])
        j = ready.pop(0)
        out.append(j)
        for s in inst.successors(j):
            indeg[s] -= 1
            if indeg[s] == 0:
                ready.append(int(s))
    return np.array(out, dtype=np.int64)


def doc(nodes: list[dict], jobs: list[dict]) -> dict:
    return {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
            "nodes": nodes, "jobs": jobs}


def node(name="n", cores=4, memory_gib=16.0, **kw) -> dict:
    return {"name": name, "cores": cores, "memory_gib": memory_gib, **kw}


def job(name, cores=1, hours=1.0, memory_gib=1.0, **kw) -> dict:
    return {"name": name, "cores": cores, "memory_gib": memory_gib, "hours": hours, **kw}


# ----------------------------------------------------------------- kernels vs twin (random)


@pytest.mark.parametrize("block", range(4))
def test_builder_matches_twin_on_random_batches(block):
    """200 random heterogeneous batches (50 per block): random assignments and random orders."""
    for seed in range(50 * block, 50 * block + 50):
        rng = np.random.default_rng(seed)
        _, inst = instance_of(random_batch_doc(rng, max_jobs=14))
        orders = [inst.order, random_topological_order(inst, rng=rng)]
        for order in orders:
            for assign in random_assign(inst, rng=rng, size=2):
                got = build_schedule(inst, assign, order)
                want = twin_build(inst, assign, order)
                np.testing.assert_array_equal(got, want, err_msg=f"seed {seed}")


@pytest.mark.parametrize("block", range(4))
def test_greedy_matches_twin_on_random_batches(block):
    for seed in range(50 * block, 50 * block + 50):
        rng = np.random.default_rng(10_000 + seed)
        _, inst = instance_of(random_batch_doc(rng, max_jobs=14))
        for order in (None, random_topological_order(inst, rng=rng)):
            a, s = greedy_assign(inst, order)
            ta, ts = twin_greedy(inst, order)
            np.testing.assert_array_equal(a, ta, err_msg=f"seed {seed}")
            np.testing.assert_array_equal(s, ts, err_msg=f"seed {seed}")
            # greedy's own starts are exactly what the builder makes of its assignment:
            # both place the same jobs in the same order at their earliest feasible start
            np.testing.assert_array_equal(build_schedule(inst, a, order), s)


def test_population_equals_individual_builds_and_objective():
    for seed in range(40):
        rng = np.random.default_rng(20_000 + seed)
        _, inst = instance_of(random_batch_doc(rng, max_jobs=14, p_due=0.6))
        pop = random_assign(inst, rng=rng, size=7)
        order = random_topological_order(inst, rng=rng)
        fit = evaluate_population(inst, pop, order)
        assert fit.shape == (7, 3)
        for p in range(len(pop)):
            res = schedule_result(inst, pop[p], "test", 0, order)
            mk, tard, compl = objective(inst, res.end)
            assert fit[p, 0] == mk == res.makespan
            # same sums in a different order (np.dot vs a loop): equal up to float rounding
            np.testing.assert_allclose(fit[p, 1:], [tard, compl], rtol=1e-12, atol=0)


def test_fractional_weights_objective_close():
    rng = np.random.default_rng(7)
    d = random_batch_doc(rng, max_jobs=12, p_due=1.0)
    for g in d["jobs"]:
        g["weight"] = round(float(rng.uniform(0.1, 3.0)), 3)
    _, inst = instance_of(d)
    pop = random_assign(inst, rng=rng, size=3)
    fit = evaluate_population(inst, pop)
    for p in range(3):
        end = build_schedule(inst, pop[p]) + inst.duration[np.arange(inst.n_jobs), pop[p]]
        np.testing.assert_allclose(fit[p], objective(inst, end), rtol=1e-12)


def test_deterministic():
    rng = np.random.default_rng(3)
    _, inst = instance_of(random_batch_doc(rng, max_jobs=14))
    pop = random_assign(inst, rng=rng, size=5)
    np.testing.assert_array_equal(evaluate_population(inst, pop), evaluate_population(inst, pop))


# ----------------------------------------------------------------- forward-backward improvement


@pytest.mark.parametrize("block", range(4))
def test_justified_builder_matches_twin_and_never_raises_the_makespan(block):
    """50 random batches per block (maintenance, follows, ready and due times): the justified
    schedule equals the twin's, is lexicographically no worse than the plain one, and its
    fitness is the objective of its own starts."""
    lowered = 0
    for seed in range(50 * block, 50 * block + 50):
        rng = np.random.default_rng(30_000 + seed)
        _, inst = instance_of(random_batch_doc(rng, max_jobs=14, p_maintenance=0.6,
                                               p_follows=0.3, p_due=0.5))
        order = random_topological_order(inst, rng=rng)
        pop = random_assign(inst, rng=rng, size=3)
        plain = evaluate_population(inst, pop, order)
        just = evaluate_population(inst, pop, order, justify=True)
        for p in range(len(pop)):
            got = build_schedule(inst, pop[p], order, justify=True)
            np.testing.assert_array_equal(got, twin_justify(inst, pop[p], order),
                                          err_msg=f"seed {seed}")
            assert tuple(just[p]) == twin_fitness(inst, pop[p], got)
            assert tuple(just[p]) <= tuple(plain[p])
            lowered += just[p, 0] < plain[p, 0]
    assert lowered > 0  # random plans leave slack: justification must find some of it


def test_justified_plans_pass_the_checker():
    for seed in range(40):
        rng = np.random.default_rng(40_000 + seed)
        batch, inst = instance_of(random_batch_doc(rng, max_jobs=14, p_maintenance=0.6,
                                                   p_follows=0.3, p_ready=0.5, p_due=0.5))
        assign = random_assign(inst, rng=rng)[0]
        res = schedule_result(inst, assign, "test", 0, justify=True)
        assert check_plan(batch, to_plan_doc(inst, res)) == [], f"seed {seed}"
        fit = evaluate_population(inst, assign[None], justify=True)[0]
        assert tuple(fit) == objective(inst, res.end)


def test_justification_repacks_a_node():
    # one 4-core node, longest first (ties by index): a, b (1 core, 4 h) at 0, then d
    # (3 cores, 4 h) waits for them until 4 h, then c (3 cores, 1 h) until 8 h: 9 h.
    # Backwards from 9 h (latest end first: c, d, a, b) c ends at 9 h, d at 8 h, a at 9 h
    # beside c and d, b at 8 h beside d (starting at 1 h); forwards by backward start (b, d,
    # a, c): b and d at 0, a and c at 4 h: 8 h, the optimum (d and c cannot overlap, nor can
    # a and b both run beside d, so one of them ends at 4 + 4 h at the earliest)
    d = doc([node(cores=4)], [job("a", cores=1, hours=4.0), job("b", cores=1, hours=4.0),
                              job("c", cores=3, hours=1.0), job("d", cores=3, hours=4.0)])
    _, inst = instance_of(d)
    assign = np.zeros(inst.n_jobs, dtype=np.int64)
    dur = inst.duration[:, 0]
    plain = build_schedule(inst, assign)
    just = build_schedule(inst, assign, justify=True)
    np.testing.assert_array_equal(just, twin_justify(inst, assign))
    assert (plain + dur).max() == 9 * 60
    assert (just + dur).max() == 8 * 60


def test_one_order_per_individual():
    rng = np.random.default_rng(5)
    _, inst = instance_of(random_batch_doc(rng, max_jobs=14, p_follows=0.4))
    pop = random_assign(inst, rng=rng, size=4)
    orders = np.stack([random_topological_order(inst, rng=rng) for _ in range(4)])
    for justify in (False, True):
        fit = evaluate_population(inst, pop, orders, justify=justify)
        for p in range(4):
            np.testing.assert_array_equal(
                fit[p], evaluate_population(inst, pop[[p]], orders[p], justify=justify)[0])
    with pytest.raises(ValueError, match="rows"):
        evaluate_population(inst, pop, orders[:2])
    bad = orders.copy()
    bad[1] = bad[1][::-1]
    if len(inst.pred_idx):
        with pytest.raises(ValueError, match="before a job it follows"):
            evaluate_population(inst, pop, bad)


def test_spread_column_is_the_sum_of_squared_node_finishes():
    rng = np.random.default_rng(12)
    _, inst = instance_of(random_batch_doc(rng, max_jobs=14, p_maintenance=0.5))
    pop = random_assign(inst, rng=rng, size=4)
    for justify in (False, True):
        fit = evaluate_population(inst, pop, justify=justify, spread=True)
        np.testing.assert_array_equal(fit[:, :3], evaluate_population(inst, pop, justify=justify))
        for p in range(len(pop)):
            end = build_schedule(inst, pop[p], justify=justify) + inst.duration[
                np.arange(inst.n_jobs), pop[p]]
            finish = np.zeros(inst.n_nodes)
            np.maximum.at(finish, pop[p], end)
            assert fit[p, 3] == (finish**2).sum()


def test_tail_column_is_the_area_of_the_jobs_ending_at_the_makespan():
    rng = np.random.default_rng(13)
    _, inst = instance_of(random_batch_doc(rng, max_jobs=14, p_maintenance=0.5))
    pop = random_assign(inst, rng=rng, size=4)
    for justify in (False, True):
        fit = evaluate_population(inst, pop, justify=justify, tail=True)
        np.testing.assert_array_equal(fit[:, :4],
                                      evaluate_population(inst, pop, justify=justify,
                                                          spread=True))
        for p in range(len(pop)):
            jobs = np.arange(inst.n_jobs)
            dur = inst.duration[jobs, pop[p]]
            end = build_schedule(inst, pop[p], justify=justify) + dur
            d = inst.demand.astype(float)
            with np.errstate(divide="ignore", invalid="ignore"):
                share = np.where(d > 0, d / inst.capacity[pop[p]], 0.0).max(axis=1)
            last = end == end.max()
            assert fit[p, 4] == pytest.approx((dur[last] * share[last]).sum())


def test_threaded_and_serial_kernels_agree(monkeypatch):
    rng = np.random.default_rng(9)
    _, inst = instance_of(random_batch_doc(rng, max_jobs=14, p_maintenance=0.6))
    pop = random_assign(inst, rng=rng, size=6)
    for justify in (False, True):
        monkeypatch.setattr(schedule, "SERIAL_BELOW", 0)
        threaded = evaluate_population(inst, pop, justify=justify, spread=justify)
        monkeypatch.setattr(schedule, "SERIAL_BELOW", 10**12)
        serial = evaluate_population(inst, pop, justify=justify, spread=justify)
        np.testing.assert_array_equal(threaded, serial)


# ----------------------------------------------------------------- hand-made cases


def starts(d: dict, assign=None, order=None) -> np.ndarray:
    """Kernel starts, cross-checked against the twin on every hand case."""
    _, inst = instance_of(d)
    assign = np.zeros(inst.n_jobs, dtype=np.int64) if assign is None else np.asarray(assign)
    order = None if order is None else np.asarray(order)
    got = build_schedule(inst, assign, order)
    np.testing.assert_array_equal(got, twin_build(inst, assign, order))
    return got


def test_maintenance_blocks_a_job():
    # a 2 h job would overlap the window [1 h, 3 h): it waits until 3 h; a 1 h job fits before
    d = doc([node(maintenance=[{"start_h": 1.0, "end_h": 3.0}])],
            [job("long", hours=2.0), job("short", hours=1.0)])
    assert list(starts(d)) == [180, 0]


def test_maintenance_from_minute_zero_and_touching_windows():
    d = doc([node(maintenance=[{"start_h": 0.0, "end_h": 1.0}, {"start_h": 1.0, "end_h": 2.5}])],
            [job("a", hours=0.5)])
    assert list(starts(d)) == [150]


def test_one_minute_gap_between_windows_is_usable():
    d = doc([node(maintenance=[{"start_h": 0.0, "end_h": 1.0},
                               {"start_h": 61 / 60, "end_h": 2.0}])],
            [job("a", cores=4, hours=1 / 60), job("b", cores=4, hours=1 / 60)])
    # the one free minute [60, 61) takes one whole-node job; the other waits for 2 h
    assert list(starts(d)) == [60, 120]


def test_job_waits_for_cores():
    d = doc([node(cores=4)], [job("a", cores=3, hours=2.0), job("b", cores=2, hours=1.0)])
    assert list(starts(d)) == [0, 120]


def test_job_waits_for_memory_and_gpus():
    d = doc([node(cores=16, memory_gib=64.0, gpus=2)],
            [job("a", hours=2.0, memory_gib=40.0), job("b", hours=1.5, memory_gib=30.0),
             job("g1", hours=1.0, gpus=2), job("g2", hours=0.5, gpus=1)])
    # order: a (2 h), b (1.5 h), g1 (1 h), g2 (0.5 h); b waits for a's memory, g2 for g1's GPUs
    assert list(starts(d)) == [0, 120, 0, 60]


def test_jobs_share_a_node_when_they_fit():
    d = doc([node(cores=4)], [job("a", cores=2, hours=2.0), job("b", cores=2, hours=1.0)])
    assert list(starts(d)) == [0, 0]


def test_follows_respected_across_nodes():
    d = doc([node("x"), node("y")],
            [job("a", hours=1.5), job("b", hours=1.0, follows=["a"])])
    assert list(starts(d, assign=[0, 1])) == [0, 90]


def test_follows_a_group():
    d = doc([node("x", cores=8)],
            [job("sweep", count=3, hours=1.0), job("b", hours=3.0, follows=["sweep"])])
    # b is longest but follows every member: it starts when the last member ends
    s = starts(d)
    assert list(s[:3]) == [0, 0, 0] and s[3] == 60


def test_ready_time_respected():
    d = doc([node()], [job("a", hours=1.0, ready_h=1.5)])
    assert list(starts(d)) == [90]


def test_speed_changes_durations():
    # duration = ceil(hours * 60 / speed): 60 / 1.5 = 40; 60 / 0.7 = 85.71 -> 86
    d = doc([node("fast", speed=1.5), node("slow", speed=0.7)],
            [job("a", cores=4, hours=1.0), job("b", cores=4, hours=1.0), job("c", cores=4)])
    _, inst = instance_of(d)
    res = schedule_result(inst, np.array([0, 1, 0]), "test", 0)
    assert list(res.end - res.start) == [40, 86, 40]
    assert list(res.start) == [0, 0, 40]


def test_backfilling_into_an_earlier_hole():
    # a (whole node, ready at 1 h) is placed first at 60; c (2 h) cannot fit in [0, 60) and
    # goes after a; b (1 h), placed last, fits exactly into the hole before a
    d = doc([node(cores=4)],
            [job("a", cores=4, hours=2.0, ready_h=1.0), job("c", cores=2, hours=2.0),
             job("b", cores=2, hours=1.0)])
    _, inst = instance_of(d)
    assert list(inst.order) == [0, 1, 2]
    assert list(starts(d)) == [60, 180, 0]


def test_given_order_changes_the_schedule():
    d = doc([node(cores=4)], [job("a", cores=4, hours=2.0), job("b", cores=4, hours=1.0)])
    assert list(starts(d)) == [0, 120]
    assert list(starts(d, order=[1, 0])) == [60, 0]


def test_rejects_bad_assignment_and_order():
    d = doc([node("small", cores=2), node("big", cores=8)],
            [job("a", cores=4), job("b", follows=["a"])])
    _, inst = instance_of(d)
    with pytest.raises(ValueError, match="cannot hold"):
        build_schedule(inst, np.array([0, 0]))
    with pytest.raises(ValueError, match="out of range"):
        build_schedule(inst, np.array([1, 2]))
    with pytest.raises(ValueError, match="before a job it follows"):
        build_schedule(inst, np.array([1, 1]), order=np.array([1, 0]))
    with pytest.raises(ValueError, match="permutation"):
        evaluate_population(inst, np.array([[1, 1]]), order=np.array([0, 0]))


def test_many_jobs_one_node_matches_twin():
    # a long profile: 60 small jobs on one node exercises many breakpoints and inserts
    rng = np.random.default_rng(11)
    jobs = [job(f"j{k}", cores=int(rng.integers(1, 5)), hours=int(rng.integers(1, 240)) / 60,
                ready_h=int(rng.integers(0, 300)) / 60) for k in range(60)]
    d = doc([node(cores=4, maintenance=[{"start_h": 2.0, "end_h": 2.5},
                                        {"start_h": 4.0, "end_h": 9.0}])], jobs)
    _, inst = instance_of(d)
    for order in (inst.order, rng.permutation(inst.n_jobs)):
        s = starts(d, order=order)
        assert np.all(s >= inst.ready)


def test_the_serial_and_threaded_builders_keep_separate_compiler_cache_entries():
    # numba files a cached compilation under the function's name, line and signature, not
    # its parallel flag: with one shared entry the serial builder could load the threaded code
    # and pay a thread-pool wake-up on every small call
    paths = {k._cache._cache_file._index_path
             for k in (kernels.sgs_population, kernels.sgs_population_serial)}
    assert len(paths) == 2
    assert not kernels.sgs_population_serial.targetoptions.get("parallel")
    assert kernels.sgs_population.targetoptions.get("parallel")
