"""Crossover over matrix rows: uniform (bias p) and k-point along the job order."""

from __future__ import annotations

import numpy as np


def uniform(a: np.ndarray, b: np.ndarray, bias: float, *, rng: np.random.Generator) -> np.ndarray:
    """int64[n, J] children of pairs a, b: int64[n, J]; row j of child X comes from a with
    probability `bias`, else from b, independently per row (job)."""
    take_a = rng.random(a.shape) < bias
    return np.where(take_a, a, b)


def kpoint(a: np.ndarray, b: np.ndarray, k: int, order: np.ndarray, *,
           rng: np.random.Generator) -> np.ndarray:
    """int64[n, J] children: k distinct cut points along `order` (int64[J]) per pair; rows
    between cuts alternate between a (first segment) and b.

    With J - 1 < k possible cut points every gap is cut (rows alternate).
    """
    n, n_jobs = a.shape
    k = min(k, max(n_jobs - 1, 0))
    # k distinct cuts in 1..J-1 per pair: the k smallest of J-1 random keys
    keys = rng.random((n, max(n_jobs - 1, 0)))
    cuts = np.argpartition(keys, k - 1, axis=1)[:, :k] + 1 if k > 0 else np.empty((n, 0), int)
    marks = np.zeros((n, n_jobs), dtype=np.int64)
    np.add.at(marks, (np.repeat(np.arange(n), k), cuts.ravel()), 1)
    from_b = (np.cumsum(marks, axis=1) % 2).astype(bool)  # segment parity at each position
    child = np.empty_like(a)
    child[:, order] = np.where(from_b, b[:, order], a[:, order])
    return child
