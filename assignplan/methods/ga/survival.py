"""Survival: (mu+lambda) or (mu,lambda) on the lexicographic fitness, always keeping the best."""

from __future__ import annotations

import numpy as np

from assignplan.methods.ga.selection import lex_less, lex_rank


def _best_distinct(pop: np.ndarray, fit: np.ndarray, mu: int) -> np.ndarray:
    """int64[mu] indices of the mu best rows, distinct genomes first (duplicates only to fill).

    Copies of one plan would crowd out the rest of the population; they are taken last.
    """
    order = np.argsort(lex_rank(fit), kind="stable")
    seen: set[bytes] = set()
    is_first = np.zeros(len(order), dtype=bool)
    for k, row in enumerate(pop[order]):
        key = row.tobytes()
        is_first[k] = key not in seen
        seen.add(key)
    ranked = np.concatenate([order[is_first], order[~is_first]])
    return ranked[:mu]


def plus(pop: np.ndarray, fit: np.ndarray, off: np.ndarray, off_fit: np.ndarray,
         mu: int) -> tuple[np.ndarray, np.ndarray]:
    """(mu+lambda): the mu best of parents and offspring together (pop: int64[P, J],
    fit: float64[P, 3], off/off_fit likewise); returns new arrays (pop int64[mu, J], fit)."""
    all_pop = np.concatenate([pop, off])
    all_fit = np.concatenate([fit, off_fit])
    keep = _best_distinct(all_pop, all_fit, mu)
    return all_pop[keep], all_fit[keep]


def comma(pop: np.ndarray, fit: np.ndarray, off: np.ndarray, off_fit: np.ndarray,
          mu: int) -> tuple[np.ndarray, np.ndarray]:
    """(mu,lambda) with elitism: the mu best offspring, but the best parent replaces the worst
    of them when no offspring is at least as good (so the best never gets worse)."""
    keep = _best_distinct(off, off_fit, mu)
    new_pop, new_fit = off[keep], off_fit[keep]
    elite = int(np.argmin(lex_rank(fit)))
    if lex_less(fit[elite], new_fit[0])[0]:
        new_pop = np.concatenate([pop[elite][None], new_pop[:-1]])
        new_fit = np.concatenate([fit[elite][None], new_fit[:-1]])
    return new_pop, new_fit
