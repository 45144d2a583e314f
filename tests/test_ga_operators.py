"""GA operators, each checked by what it does to the assignment matrix X (jobs x nodes)."""

from __future__ import annotations

import numpy as np
import pytest

from assignplan.instance import priority_order
from assignplan.methods.ga import crossover, mutation, survival
from assignplan.methods.ga.encoding import (
    EligibleIndex,
    Rows,
    from_matrix,
    node_load,
    random_population,
    to_matrix,
)
from assignplan.methods.ga.order_keys import cross_keys, orders_from_keys, perturb_keys
from assignplan.methods.ga.population import selection_key
from assignplan.methods.ga.repair import repair, resource_work, shed_overload
from assignplan.methods.ga.selection import lex_less, lex_rank, tournament
from tests.strategies import instance_of, random_batch_doc


def hetero_instance(seed: int = 0, max_jobs: int = 30):
    return instance_of(random_batch_doc(np.random.default_rng(seed), max_jobs=max_jobs,
                                        max_node_groups=4))[1]


def one_hot_on_eligible(inst, X: np.ndarray) -> bool:
    """Every row of every matrix in X (bool[P, J, N]) holds exactly one 1, on an eligible node."""
    return bool(np.all(X.sum(axis=2) == 1) and not np.any(X & ~inst.eligible[None]))


# ----------------------------------------------------------------------------- encoding


def test_matrix_round_trip_and_one_hot():
    rng = np.random.default_rng(1)
    assign = rng.integers(0, 5, size=(4, 7))
    X = to_matrix(assign, 5)
    assert X.shape == (4, 7, 5) and X.dtype == bool
    assert np.all(X.sum(axis=2) == 1)
    assert np.array_equal(from_matrix(X), assign)


def test_from_matrix_rejects_rows_without_exactly_one():
    X = np.zeros((3, 4), dtype=bool)
    X[0, 1] = X[1, 2] = X[2, 0] = True
    assert list(from_matrix(X)) == [1, 2, 0]
    X[1, 3] = True
    with pytest.raises(ValueError):
        from_matrix(X)
    with pytest.raises(ValueError):
        from_matrix(np.zeros((2, 3), dtype=bool))


def test_random_population_is_valid_and_covers_the_eligible_nodes():
    inst = hetero_instance(3)
    index = EligibleIndex.of(inst)
    pop = random_population(inst, 400, index, rng=np.random.default_rng(0))
    assert one_hot_on_eligible(inst, to_matrix(pop, inst.n_nodes))
    seen = to_matrix(pop, inst.n_nodes).any(axis=0)
    assert np.array_equal(seen, inst.eligible)  # 400 draws reach every eligible cell here


def test_node_load_is_the_packed_work_per_node():
    inst = hetero_instance(5)
    index = EligibleIndex.of(inst)
    pop = random_population(inst, 3, index, rng=np.random.default_rng(0))
    load = node_load(inst, pop)
    for p in range(3):
        for i in range(inst.n_nodes):
            jobs = np.flatnonzero(pop[p] == i)
            share = (inst.demand[jobs] / inst.capacity[i].clip(1)).max(axis=1, initial=0.0)
            assert load[p, i] == pytest.approx((inst.duration[jobs, i] * share).sum())


# ----------------------------------------------------------------------------- crossover


def test_uniform_crossover_rows_come_from_a_parent_with_bias_p():
    rng = np.random.default_rng(2)
    a = rng.integers(0, 6, size=(200, 50))
    b = (a + 1 + rng.integers(0, 5, size=a.shape)) % 6  # every row differs between parents
    a0, b0 = a.copy(), b.copy()
    child = crossover.uniform(a, b, 0.3, rng=rng)
    Xa, Xb, Xc = (to_matrix(x, 6) for x in (a, b, child))
    from_a = np.all(Xc == Xa, axis=2)
    from_b = np.all(Xc == Xb, axis=2)
    assert np.all(from_a | from_b)  # each child row equals the same row of one parent
    share = from_a.mean()  # 10,000 Bernoulli(0.3): sd 0.0046
    assert abs(share - 0.3) < 0.02
    assert np.array_equal(a, a0) and np.array_equal(b, b0)  # inputs untouched


@pytest.mark.parametrize("k", [1, 2, 5])
def test_kpoint_crossover_switches_parent_k_times_along_the_order(k):
    rng = np.random.default_rng(k)
    n_jobs = 40
    order = rng.permutation(n_jobs)
    a = np.zeros((30, n_jobs), dtype=np.int64)
    b = np.ones((30, n_jobs), dtype=np.int64)
    child = crossover.kpoint(a, b, k, order, rng=rng)
    Xc = to_matrix(child, 2)
    assert np.all((Xc == to_matrix(a, 2)).all(axis=2) | (Xc == to_matrix(b, 2)).all(axis=2))
    along = child[:, order]
    assert np.all(along[:, 0] == 0)  # the first segment comes from a
    assert np.all((np.diff(along, axis=1) != 0).sum(axis=1) == k)


# ----------------------------------------------------------------------------- mutation


def test_bit_flip_flips_each_bit_with_probability_rate():
    rng = np.random.default_rng(4)
    n_pop, n_jobs, n_nodes, rate = 40, 50, 10, 0.02
    assign = rng.integers(0, n_nodes, size=(n_pop, n_jobs))
    before = assign.copy()
    flipped = np.zeros((n_pop, n_jobs, n_nodes), dtype=np.int64)
    trials = 50
    for _ in range(trials):
        rows = mutation.bit_flip(assign, n_nodes, rate, rng=rng)
        flipped += to_matrix(assign, n_nodes) ^ rows.to_matrix(n_nodes)
    assert np.array_equal(assign, before)
    n_bits = n_pop * n_jobs * n_nodes * trials
    total = flipped.sum()
    sd = np.sqrt(n_bits * rate * (1 - rate))
    assert abs(total - n_bits * rate) < 5 * sd
    # 1-bits and 0-bits alike: the share of flips that hit a 1 is 1/N
    ones = (flipped * to_matrix(assign, n_nodes)).sum()
    p1 = 1 / n_nodes
    assert abs(ones - total * p1) < 5 * np.sqrt(total * p1 * (1 - p1))
    # every node column is hit alike (chi-square, 9 dof: 99.99 % quantile is about 35)
    per_node = flipped.sum(axis=(0, 1))
    expected = total / n_nodes
    assert ((per_node - expected) ** 2 / expected).sum() < 35


def test_bit_flip_sampling_scales_to_ten_million_bits_per_individual():
    # 10,000 jobs x 1,000 nodes: the flips are drawn by count and position, not bit by bit
    rng = np.random.default_rng(5)
    assign = rng.integers(0, 1000, size=(64, 10_000))
    rows = mutation.bit_flip(assign, 1000, 2.0 / 10**7, rng=rng)
    changed = (rows.base != assign).sum() + len(rows.extra)
    assert 0 < changed < 64 * 2 * 3  # mean 128 flips in all, sd ~11


def test_asymmetric_flips_jobs_off_busy_nodes_more_often():
    rng = np.random.default_rng(6)
    n_pop, n_jobs, n_nodes = 20, 200, 4
    assign = np.tile(np.repeat(np.arange(n_nodes), n_jobs // n_nodes), (n_pop, 1))
    load = np.tile(np.array([4.0, 1.0, 1.0, 1.0]), (n_pop, 1))  # node 0 four times busier
    off = np.zeros(n_nodes)
    for _ in range(30):
        rows = mutation.bit_flip_asymmetric(assign, load, 0.002, rng=rng)
        np.add.at(off, assign[rows.base < 0], 1)
    # p1 = r * N * L_i / mean(L), mean(L) = 1.75: 0.0183 on node 0, 0.0046 elsewhere (4x)
    assert off[0] > 2.5 * off[1:].mean()
    expected = 30 * n_pop * 50 * 0.002 * 4 * (4 / 1.75)
    assert abs(off[0] - expected) < 5 * np.sqrt(expected)


# ----------------------------------------------------------------------------- repair


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("fill", ["earliest", "random"])
@pytest.mark.parametrize("keep", ["random", "previous"])
def test_repair_leaves_one_eligible_1_per_row_and_is_idempotent(seed, fill, keep):
    inst = hetero_instance(seed)
    index = EligibleIndex.of(inst)
    rng = np.random.default_rng(seed)
    a = random_population(inst, 30, index, rng=rng)
    b = random_population(inst, 30, index, rng=rng)
    child = crossover.uniform(a, b, 0.5, rng=rng)
    rate = 8.0 / (inst.n_jobs * inst.n_nodes)  # heavy: many empty and multi-1 rows
    for rows in (mutation.bit_flip(child, inst.n_nodes, rate, rng=rng),
                 mutation.bit_flip_asymmetric(child, node_load(inst, child), rate, rng=rng)):
        X = rows.to_matrix(inst.n_nodes)
        fixed = repair(rows, inst, index, 600, fill=fill, keep=keep, rng=rng)
        assert one_hot_on_eligible(inst, to_matrix(fixed, inst.n_nodes))
        # a row that was already one-hot on an eligible node keeps its 1 unless shed
        ok_rows = (X.sum(axis=2) == 1) & ~(X & ~inst.eligible[None]).any(axis=2)
        again = repair(Rows.of(fixed), inst, index, 600, fill=fill, keep=keep, rng=rng)
        assert np.array_equal(again, fixed)  # idempotent
        unshed = repair(rows, inst, index, None, fill=fill, keep=keep, rng=rng)
        assert np.array_equal(unshed[ok_rows], from_matrix(X[ok_rows]))
        if keep == "previous":  # a surviving original 1 wins its row
            kept = (rows.base >= 0) & inst.eligible[np.arange(inst.n_jobs), rows.base.clip(0)]
            assert np.array_equal(unshed[kept], rows.base[kept])


def test_repair_fill_earliest_picks_the_least_loaded_eligible_node():
    d = {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
         "nodes": [{"name": "n", "count": 3, "cores": 4, "memory_gib": 8.0}],
         "jobs": [{"name": "big", "cores": 4, "memory_gib": 1.0, "hours": 5.0},
                  {"name": "mid", "cores": 4, "memory_gib": 1.0, "hours": 3.0},
                  {"name": "x", "cores": 2, "memory_gib": 1.0, "hours": 1.0}]}
    _, inst = instance_of(d)
    index = EligibleIndex.of(inst)
    rows = Rows(np.array([[0, 2, -1]]), np.empty((0, 3), dtype=np.int64))
    out = repair(rows, inst, index, None, fill="earliest", keep="random",
                 rng=np.random.default_rng(0))
    assert list(out[0]) == [0, 2, 1]  # node 1 is empty


def test_shed_overload_moves_work_off_a_node_that_cannot_finish_by_the_horizon():
    d = {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
         "nodes": [{"name": "n", "count": 3, "cores": 4, "memory_gib": 8.0,
                    "maintenance": [{"start_h": 1.0, "end_h": 2.0}]}],
         "jobs": [{"name": "j", "count": 6, "cores": 4, "memory_gib": 1.0, "hours": 1.0}]}
    _, inst = instance_of(d)
    index = EligibleIndex.of(inst)
    assert list(inst.available_minutes(180)) == [120, 120, 120]
    crowded = np.zeros((1, 6), dtype=np.int64)  # 6 whole-node hours on node 0
    out = shed_overload(crowded, inst, index, 180, rng=np.random.default_rng(0))
    limit = inst.capacity * inst.available_minutes(180)[:, None]
    assert np.all(resource_work(inst, out)[0] <= limit)
    assert sorted(np.bincount(out[0], minlength=3)) == [2, 2, 2]
    assert np.all(crowded == 0)  # input untouched
    # nowhere to go: 7 hours of work for 6 hours of room; node 0 keeps the excess
    d["jobs"][0]["count"] = 7
    _, inst = instance_of(d)
    out = shed_overload(np.zeros((1, 7), dtype=np.int64), inst, EligibleIndex.of(inst), 180,
                        rng=np.random.default_rng(0))
    assert sorted(np.bincount(out[0], minlength=3)) == [2, 2, 3]


# ----------------------------------------------------------------------------- selection


def test_lex_rank_and_lex_less_are_lexicographic():
    fit = np.array([[5, 0, 9], [4, 7, 1], [4, 2, 8], [4, 2, 3], [4, 2, 3]], dtype=float)
    assert list(lex_rank(fit)) == [4, 3, 2, 0, 1]
    assert list(lex_less(fit, np.array([4.0, 2.0, 3.0]))) == [False] * 5
    assert list(lex_less(fit, np.array([4.0, 2.0, 4.0]))) == [False, False, False, True, True]


def test_tournament_pressure_grows_with_size():
    rng = np.random.default_rng(7)
    fit = np.stack([np.arange(10.0), np.zeros(10), np.zeros(10)], axis=1)
    uniform = tournament(fit, 20_000, 1, rng=rng)
    assert abs(np.bincount(uniform, minlength=10) / 20_000 - 0.1).max() < 0.015
    strong = tournament(fit, 20_000, 3, rng=rng)
    # P(best of 3 draws is individual 0) = 1 - 0.9^3 = 0.271
    assert abs((strong == 0).mean() - 0.271) < 0.015
    assert np.all(tournament(fit, 50, 200, rng=rng) == 0)  # 200 draws: 0 is in (p = 1 - 1e-9)


# ----------------------------------------------------------------------------- survival


def test_plus_survival_keeps_the_best_of_both_and_prefers_distinct_plans():
    pop = np.array([[0, 0], [1, 1], [2, 2]])
    fit = np.array([[5, 0, 0], [7, 0, 0], [9, 0, 0]], dtype=float)
    off = np.array([[0, 0], [3, 3], [4, 4]])
    off_fit = np.array([[5, 0, 0], [6, 0, 0], [10, 0, 0]], dtype=float)
    genomes, key = np.concatenate([pop, off]), np.concatenate([fit, off_fit])
    keep = survival.plus(genomes, key, np.repeat([False, True], 3), 3)
    assert key[keep, 0].tolist() == [5, 6, 7]
    assert genomes[keep].tolist() == [[0, 0], [3, 3], [1, 1]]  # the copy of [0, 0] is not kept


def test_comma_survival_replaces_parents_but_keeps_the_elite():
    pop = np.array([[0], [1]])
    fit = np.array([[5, 0, 0], [8, 0, 0]], dtype=float)
    off = np.array([[2], [3], [4]])
    off_fit = np.array([[6, 0, 0], [7, 0, 0], [9, 0, 0]], dtype=float)
    genomes, born = np.concatenate([pop, off]), np.array([False, False, True, True, True])
    keep = survival.comma(genomes, np.concatenate([fit, off_fit]), born, 2)
    assert genomes[keep].tolist() == [[0], [2]]
    assert survival.first(np.concatenate([fit, off_fit]), born, "comma") == 0
    better = off_fit.copy()
    better[2, 0] = 4
    keep = survival.comma(genomes, np.concatenate([fit, better]), born, 2)
    assert genomes[keep].tolist() == [[4], [2]]  # no parent survives when an offspring is better
    assert survival.first(np.concatenate([fit, better]), born, "comma") == 4


def test_lex_rank_takes_any_number_of_columns():
    fit = np.array([[1.0, 5.0, 2.0, 0.0], [1.0, 5.0, 1.0, 9.0], [0.0, 9.0, 9.0, 9.0]])
    assert list(lex_rank(fit)) == [2, 1, 0]
    assert list(lex_less(fit, np.array([1.0, 5.0, 2.0, 0.0]))) == [False, True, True]


# ----------------------------------------------------------------------------- order keys


def test_orders_from_keys_are_priority_orders_respecting_follows():
    rng = np.random.default_rng(4)
    _, inst = instance_of(random_batch_doc(rng, max_jobs=20, p_follows=0.5))
    keys = rng.lognormal(0.0, 1.0, size=(6, inst.n_jobs))
    keys[0] = 1.0
    orders = orders_from_keys(inst, keys)
    np.testing.assert_array_equal(orders[0], inst.order)
    succ = np.repeat(np.arange(inst.n_jobs), np.diff(inst.pred_ptr))
    for k, order in zip(keys, orders, strict=True):
        np.testing.assert_array_equal(order, priority_order(
            inst.hours * k, inst.pred_ptr, inst.pred_idx, inst.succ_ptr, inst.succ_idx))
        pos = np.empty(inst.n_jobs, dtype=np.int64)
        pos[order] = np.arange(inst.n_jobs)
        assert np.all(pos[inst.pred_idx] < pos[succ])


def test_keys_follow_the_crossover_and_perturbation_is_small_and_positive():
    rng = np.random.default_rng(2)
    a, b = rng.integers(0, 4, size=(2, 50, 30))
    ka, kb = rng.uniform(0.5, 2.0, size=(2, 50, 30))
    child = crossover.uniform(a, b, 0.5, rng=rng)
    ck = cross_keys(child, a, b, ka, kb)
    assert np.all(ck[child == a] == ka[child == a])
    assert np.all(ck[child != a] == kb[child != a])
    before = ck.copy()
    pk = perturb_keys(ck, 0.1, 0.3, rng=rng)
    np.testing.assert_array_equal(ck, before)  # input untouched
    changed = (pk != ck).mean()
    assert 0.05 < changed < 0.15 and np.all(pk > 0)


def test_plateau_key_prefers_balanced_nodes_and_keeps_the_objective():
    inst = hetero_instance(3)
    pop = random_population(inst, 5, EligibleIndex.of(inst), rng=np.random.default_rng(0))
    fit = np.arange(25, dtype=np.float64).reshape(5, 5)
    key = selection_key("balance", inst)(pop, fit)
    np.testing.assert_array_equal(key[:, [0, 1, 3]], fit[:, :3])
    load = node_load(inst, pop)
    np.testing.assert_allclose(key[:, 2], (load**2).sum(axis=1) / load.sum(axis=1))
    # two equal whole-node jobs on two equal nodes: the even split scores lower than piling
    # both on one node, at the same (makespan, tardiness)
    _, two = instance_of({"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
                          "nodes": [{"name": "m", "count": 2, "cores": 4, "memory_gib": 8.0}],
                          "jobs": [{"name": "j", "count": 2, "cores": 4, "memory_gib": 1.0,
                                    "hours": 1.0}]})
    key = selection_key("balance", two)(np.array([[0, 0], [0, 1]]), np.zeros((2, 5)))
    assert key[1, 2] < key[0, 2]
    tail = selection_key("tail", two)(np.zeros((1, 2), dtype=np.int64), fit[:1])
    np.testing.assert_array_equal(tail[0], fit[0, [0, 1, 4, 3, 2]])


def test_packing_exchange_fills_a_node_the_plain_moves_cannot():
    # bins of 10 cores: {6, 5 | 4, 5} overflows node 0 and no single move fits; exchanging
    # the late 5 for the 4 gives {6, 4 | 5, 5}, the 1-hour packing (Falkenauer-style exchange)
    from assignplan.methods.ga.improvers.moves import improve
    from assignplan.published import BinPacking, bin_packing_batch
    from assignplan.schedule import evaluate_population

    _, inst = instance_of(bin_packing_batch(BinPacking("t", 10, (6, 5, 4, 5)), 2))
    assign = np.array([0, 0, 1, 1])

    def evaluate(a, o):
        return evaluate_population(inst, a, o, justify=True, tail=True)

    fit = evaluate(assign[None], inst.order)[0]
    assert fit[0] == 120
    index = EligibleIndex.of(inst)
    new, new_fit, spent = improve(assign, fit, inst, index, inst.order, evaluate, 8,
                                  justify=True, target=60)
    assert new_fit[0] == 60 and spent <= 8
    np.testing.assert_array_equal(assign, [0, 0, 1, 1])  # input untouched


def test_promotion_moves_every_waiting_sweep_ahead_at_once():
    # Three one-core nodes. a: L1 (5 h) then S1 (2 h); b: L2 (5 h) then S2 (2 h); c: G (4 h,
    # follows S1 and S2) and X (3 h). With the sweeps decoded after L1 and L2, G waits for
    # both until 7 h and ends at 11 h. Decoding both sweeps first (S 0-2, L 2-7; G 2-6, X 6-9
    # on c) ends at 9 h. Moving one sweep alone gains nothing (G still waits for the other),
    # so the single trial has to promote both.
    from assignplan.methods.ga.improvers.order import improve_order
    from assignplan.schedule import evaluate_population

    week = {"start": "2026-12-07T00:00:00", "hours": 168.0}
    one = {"cores": 1, "memory_gib": 1.0}
    _, inst = instance_of({"window": week,
                           "nodes": [{"name": n, **one} for n in "abc"],
                           "jobs": [{"name": "L1", **one, "hours": 5.0},
                                    {"name": "S1", **one, "hours": 2.0},
                                    {"name": "L2", **one, "hours": 5.0},
                                    {"name": "S2", **one, "hours": 2.0},
                                    {"name": "G", **one, "hours": 4.0, "follows": ["S1", "S2"]},
                                    {"name": "X", **one, "hours": 3.0}]})
    names = list(inst.job_names)
    node = {"L1": 0, "S1": 0, "L2": 1, "S2": 1, "G": 2, "X": 2}
    assign = np.array([node[n] for n in names])
    keys = np.ones(inst.n_jobs)
    for n in ("S1", "S2"):
        keys[names.index(n)] = 0.01  # the sweeps (and so G) decoded last

    def evaluate(a, o):
        return evaluate_population(inst, a, o, justify=False)

    fit = evaluate(assign[None], orders_from_keys(inst, keys[None]))[0]
    assert fit[0] == 11 * 60
    new_keys, new_fit, spent = improve_order(assign, keys, fit, inst, evaluate, 1,
                                             justify=False)
    assert new_fit[0] == 9 * 60 and spent == 1
    order = orders_from_keys(inst, new_keys[None])[0].tolist()
    for s, long in (("S1", "L1"), ("S2", "L2")):
        assert order.index(names.index(s)) < order.index(names.index(long))
