"""Bit-flip mutation of the assignment matrix, sampled sparsely (never touching every bit).

Per-bit rate r and the expected work: an individual has J*N bits, so it sees r*J*N flips on
average (`variation.mutation_flips` = r*J*N). Almost all of them are 0 -> 1 flips, which add a
node to a row; one on an eligible node moves the job with probability 1/2 under the default
repair (keep a random 1 of the row), one on an ineligible node is undone by repair. A 1 -> 0
flip (rate r per row) empties the row and repair refills it. So with e_j eligible nodes out
of N, the jobs moved per individual are about r * sum_j (e_j - 1) / 2 + r * J
(~ mutation_flips * ebar/N / 2). On the generated batches a job fits 55-70 % of the nodes,
so the default 6 flips move about 2 jobs per individual (12 flips about 4).
"""

from __future__ import annotations

import numpy as np

from assignplan.methods.ga.encoding import Rows


def _flip_positions(n_pop: int, n_jobs: int, n_nodes: int, rate: float, *,
                    rng: np.random.Generator) -> np.ndarray:
    """int64[k, 3] (individual, job, node) of the bits flipped by independent Bernoulli(rate)
    trials: k ~ Binomial(P*J*N, rate), then k distinct positions uniformly (same law)."""
    n_bits = n_pop * n_jobs * n_nodes
    k = int(rng.binomial(n_bits, min(rate, 1.0)))
    pos = np.sort(rng.choice(n_bits, size=k, replace=False))
    p, rest = np.divmod(pos, n_jobs * n_nodes)
    j, i = np.divmod(rest, n_nodes)
    return np.stack([p, j, i], axis=1).astype(np.int64)


def _apply(assign: np.ndarray, zero_flips: np.ndarray, one_flips: np.ndarray) -> Rows:
    """Rows after flipping the given 0-bits to 1 (k x 3) and the given rows' 1-bits to 0."""
    base = np.array(assign, dtype=np.int64)
    base[one_flips[:, 0], one_flips[:, 1]] = -1
    return Rows(base, zero_flips)


def bit_flip(assign: np.ndarray, n_nodes: int, rate: float, *,
             rng: np.random.Generator) -> Rows:
    """Symmetric bit-flip: every bit of X (P x J x N) flips with probability `rate`.

    assign: int64[P, J] (one-hot rows); returns the flipped matrices as sparse `Rows`.
    """
    n_pop, n_jobs = assign.shape
    flips = _flip_positions(n_pop, n_jobs, n_nodes, rate, rng=rng)
    hits_one = assign[flips[:, 0], flips[:, 1]] == flips[:, 2]
    return _apply(assign, flips[~hits_one], flips[hits_one])


def bit_flip_asymmetric(assign: np.ndarray, load: np.ndarray, rate: float, *,
                        rng: np.random.Generator) -> Rows:
    """Asymmetric bit-flip: 0-bits flip with probability r; the 1-bit of job j on node i with
    probability min(1, r * N * L_i / mean(L)), L = load: float64[P, N] (`encoding.node_load`).

    Under even loads a row's 1 flips as often as the row's N bits together would; jobs on the
    busiest nodes are flipped off (and refilled elsewhere by repair) proportionally more often.
    """
    n_pop, n_jobs = assign.shape
    n_nodes = load.shape[1]
    flips = _flip_positions(n_pop, n_jobs, n_nodes, rate, rng=rng)
    zero_flips = flips[assign[flips[:, 0], flips[:, 1]] != flips[:, 2]]
    mean = load.mean(axis=1, keepdims=True)
    rel = np.divide(load, mean, out=np.ones_like(load), where=mean > 0)
    p_one = np.minimum(1.0, rate * n_nodes * np.take_along_axis(rel, assign, axis=1))
    p, j = np.nonzero(rng.random(assign.shape) < p_one)
    return _apply(assign, zero_flips, np.stack([p, j], axis=1))
