"""The replays against results from outside the project: probability theory on batches where
it gives the makespan's distribution exactly, and the KTH-SP2 trace's published ratios."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from assignplan.errors import InputError
from assignplan.methods.greedy import greedy_assign
from assignplan.plan import make_result
from assignplan.risk.models import parse_model, validate_model
from assignplan.risk.replay import replay, replay_plan
from assignplan.risk.sampling import bind, fit_trace, lognormal_sigma
from tests.strategies import instance_of

ROOT = Path(__file__).resolve().parents[1]
KTH = ROOT / "tests" / "data" / "published" / "swf" / "KTH-SP2-1996-2.1-cln.swf"
SAMPLES = 2_000


def _batch(jobs: list[dict], nodes: int) -> dict:
    return {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
            "nodes": [{"name": "n", "count": nodes, "cores": 16, "memory_gib": 64.0}],
            "jobs": jobs}


def _makespans(doc: dict, model: str, seed: int = 0, samples: int = SAMPLES):
    _, inst = instance_of(doc)
    assign, start = greedy_assign(inst)
    plan = make_result(inst, "greedy", assign, start, 0)
    tally = replay(inst, replay_plan(inst, plan), bind(parse_model(model), inst),
                   policies=("keep",), samples=samples, seed=seed)["keep"]
    return tally.makespan.astype(np.float64), plan, inst


def _normal_cdf(z: np.ndarray) -> np.ndarray:
    return 0.5 * (1 + np.vectorize(math.erf)(np.asarray(z, float) / math.sqrt(2)))


def _factor_cdf(model: str, x: np.ndarray) -> np.ndarray:
    """P(factor <= x) of the model, from its published formula (no project code)."""
    m = parse_model(model)
    x = np.asarray(x, float)
    if m.model == "lognormal":
        # lognormal of median 1 and coefficient of variation cv: sigma^2 = ln(1 + cv^2)
        # (Johnson, Kotz & Balakrishnan, Continuous Univariate Distributions 1, ch. 14)
        sigma = math.sqrt(math.log(1 + m.cv**2))
        return np.where(x > 0, _normal_cdf(np.log(np.maximum(x, 1e-300)) / sigma), 0.0)
    return np.clip((x - m.low) / (m.high - m.low), 0.0, 1.0)


def _mean_run(model: str, minutes: int) -> float:
    """E[ceil(factor * minutes)] = sum_{m >= 0} P(factor * minutes > m) (a non-negative
    integer variable's mean is the sum of its tail probabilities)."""
    m = np.arange(0, 60 * minutes)
    return float(np.sum(1 - _factor_cdf(model, m / minutes)))


@pytest.mark.parametrize("model", ["lognormal:0.8", "uniform:0.4,2.0"])
def test_a_chain_on_one_node_has_the_sum_of_the_mean_run_times(model):
    # Linearity of expectation (e.g. Grinstead & Snell, Introduction to Probability, 1997,
    # theorem 6.2): a chain of follows, each job ready when the previous one ends, has
    # makespan = the sum of its run times, so its mean is the sum of their means.
    minutes = [120, 300, 45, 600, 90, 240]
    jobs = [{"name": f"step{k}", "cores": 4, "memory_gib": 8.0, "hours": d / 60}
            | ({"follows": [f"step{k - 1}"]} if k else {}) for k, d in enumerate(minutes)]
    mk, _, _ = _makespans(_batch(jobs, 1), model)
    expected = sum(_mean_run(model, d) for d in minutes)
    standard_error = mk.std(ddof=1) / math.sqrt(len(mk))
    assert abs(mk.mean() - expected) <= 4 * standard_error, (mk.mean(), expected)


def test_independent_nodes_end_by_t_with_the_product_of_their_probabilities():
    # The maximum of independent variables: P(max_i T_i <= t) = prod_i P(T_i <= t) (any
    # probability textbook, e.g. Feller, An Introduction to Probability Theory I, IX.3).
    # Checked at every observed t with the Kolmogorov-Smirnov bound: at the 1 % level
    # sup_t |F_n(t) - F(t)| <= sqrt(-ln(0.005) / 2) / sqrt(n) (Kolmogorov 1933; the
    # asymptotic critical value, conservative for a discrete F).
    model = "lognormal:1.0"
    minutes = [600, 660, 540, 720, 480]
    jobs = [{"name": f"solo{k}", "cores": 16, "memory_gib": 8.0, "hours": d / 60}
            for k, d in enumerate(minutes)]
    mk, plan, _ = _makespans(_batch(jobs, len(minutes)), model, seed=1)
    assert len(set(plan.assign.tolist())) == len(minutes)  # one whole-node job per node
    t = np.unique(mk)
    # ceil(f * d) <= t  <=>  f * d <= t for whole minutes t
    exact = np.prod([_factor_cdf(model, t / d) for d in minutes], axis=0)
    empirical = np.searchsorted(np.sort(mk), t, side="right") / len(mk)
    below = np.r_[0.0, empirical[:-1]]  # the ECDF just left of each jump
    gap = max(np.abs(empirical - exact).max(), np.abs(below - np.r_[0.0, exact[:-1]]).max())
    assert gap <= math.sqrt(-math.log(0.005) / 2) / math.sqrt(len(mk)), gap


def test_mean_one_factors_lengthen_the_expected_makespan():
    # Jensen's inequality: a makespan that is a maximum of sums of run times is convex in
    # them, so with factors of mean 1, E[makespan] >= the single-estimate makespan (the
    # optimism of single-estimate project plans: D. R. Fulkerson, "Expected critical path
    # lengths in PERT networks", Operations Research 10(6), 1962). Four whole-node chains of
    # three jobs and a job following them all: the replay keeps each node's order.
    jobs = [{"name": f"c{n}-{k}", "cores": 16, "memory_gib": 8.0, "hours": 2.0 + n + k}
            for n in range(4) for k in range(3)]
    jobs.append({"name": "gather", "cores": 1, "memory_gib": 1.0, "hours": 1.0,
                 "follows": [j["name"] for j in jobs]})
    mk, plan, _ = _makespans(_batch(jobs, 4), "uniform:0.5,1.5")
    standard_error = mk.std(ddof=1) / math.sqrt(len(mk))
    assert mk.mean() - 4 * standard_error > plan.makespan, (mk.mean(), plan.makespan)
    exact, _, _ = _makespans(_batch(jobs, 4), "scale:1", samples=3)
    assert np.all(exact == plan.makespan)


def test_lognormal_sigma_gives_the_coefficient_of_variation():
    # cv of a lognormal = sqrt(exp(sigma^2) - 1) (Johnson, Kotz & Balakrishnan, ch. 14)
    cv = np.array([0.1, 0.3, 1.0, 4.0])
    np.testing.assert_allclose(np.sqrt(np.exp(lognormal_sigma(cv) ** 2) - 1), cv)


@pytest.fixture(scope="module")
def kth():
    return fit_trace(str(KTH))


def test_trace_model_reproduces_the_ratios_the_kth_benchmark_reports(kth):
    # benchmarks/RESULTS.md ("Requested time / actual run time, whole trace"), measured on
    # the Parallel Workloads Archive's KTH-SP2-1996-2.1-cln: 27,992 jobs with both values,
    # requested/actual median 2.52 and 90th percentile 63.60 (np.quantile, linear).
    ratio = 1 / kth.pooled
    assert len(ratio) == 27_992
    assert np.round(np.quantile(ratio, [0.5, 0.9]), 2).tolist() == [2.52, 63.60]
    # draws of the bound model: each sampled quantile inside the distribution-free band of
    # +-3 standard deviations of the empirical quantile, p +- 3 sqrt(p (1 - p) / n) in rank
    # (order statistics, e.g. Conover, Practical Nonparametric Statistics, 3rd ed., 3.2)
    doc = _batch([{"name": "sweep", "count": 8, "cores": 4, "memory_gib": 8.0, "hours": 10.0}],
                 2)
    _, inst = instance_of(doc)
    sampler = bind(validate_model({"model": "trace", "path": str(KTH)}, "test"), inst)
    drawn = 1 / sampler.factors(0, 0, 2_500).ravel()
    n = len(drawn)
    for p in (0.5, 0.9):
        band = 3 * math.sqrt(p * (1 - p) / n)
        lo, hi = np.quantile(ratio, [p - band, p + band])
        assert lo <= np.quantile(drawn, p) <= hi


def test_trace_model_by_size_class_draws_from_the_jobs_class(kth):
    doc = _batch([{"name": "serial", "cores": 1, "memory_gib": 1.0, "hours": 1.0},
                  {"name": "wide", "cores": 6, "memory_gib": 1.0, "hours": 1.0},
                  {"name": "widest", "cores": 16, "memory_gib": 1.0, "hours": 1.0}], 1)
    _, inst = instance_of(doc)
    model = validate_model({"model": "trace", "path": str(KTH), "by_cores": True,
                            "min_jobs": 2_500}, "test")
    factors = bind(model, inst).factors(0, 0, 300)
    classes = dict(zip(kth.floor.tolist(), np.split(kth.values, kth.ptr[1:-1]), strict=False))
    assert np.isin(factors[:, 0], classes[1]).all()  # 9,119 one-core trace jobs
    assert np.isin(factors[:, 1], classes[4]).all()  # 6 cores: the 4-7 class (4,992 jobs)
    # the 16-31 class has 2,159 jobs, below min_jobs: the whole trace instead
    assert not np.isin(factors[:, 2], classes[16]).all()
    assert np.isin(factors[:, 2], kth.pooled).all()


def test_a_trace_without_usable_jobs_is_refused(tmp_path):
    swf = tmp_path / "empty.swf"
    # job lines of 18 fields whose requested time (field 9) is unknown
    swf.write_text("; UnixStartTime: 0\n"
                   + "".join(f"{k} 0 0 100 4 -1 -1 4 -1 -1 1 1 1 -1 1 -1 -1 -1\n"
                             for k in range(1, 4)))
    _, inst = instance_of(_batch([{"name": "a", "cores": 1, "memory_gib": 1.0,
                                   "hours": 1.0}], 1))
    with pytest.raises(InputError, match="no job has both a requested time and a run time"):
        bind(validate_model({"model": "trace", "path": str(swf)}, "test"), inst)
