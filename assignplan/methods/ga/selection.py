"""Parent selection: tournaments on the lexicographic fitness rank."""

from __future__ import annotations

import numpy as np


def lex_rank(fitness: np.ndarray) -> np.ndarray:
    """int64[P]: 0 for the best row of fitness float64[P, C], lexicographic (column 0 first;
    C = 3 for the objective, 4 for the engine's keys with a plateau tie-break).

    Ties keep the lower index first, so ranks are a permutation of 0..P-1.
    """
    order = np.lexsort((np.arange(len(fitness)), *fitness.T[::-1]))
    rank = np.empty(len(fitness), dtype=np.int64)
    rank[order] = np.arange(len(fitness))
    return rank


def tournament(fitness: np.ndarray, n_select: int, size: int, *,
               rng: np.random.Generator) -> np.ndarray:
    """int64[n_select] indices: each the best of `size` individuals drawn with replacement."""
    rank = lex_rank(fitness)
    entrants = rng.integers(0, len(fitness), size=(n_select, size))
    winner = np.argmin(rank[entrants], axis=1)
    return entrants[np.arange(n_select), winner]


def lex_less(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """bool[n]: row k of a (float64[n, C]) is lexicographically strictly below b (float64[C])."""
    a = np.atleast_2d(a)
    less = np.zeros(len(a), dtype=bool)
    tied = np.ones(len(a), dtype=bool)
    for c in range(a.shape[1]):
        less |= tied & (a[:, c] < b[c])
        tied &= a[:, c] == b[c]
    return less
