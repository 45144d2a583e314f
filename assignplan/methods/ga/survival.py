"""Survival: (mu+lambda) or (mu,lambda) on the lexicographic key, always keeping the best.

Both work on a pool of parents followed by offspring (genomes int64[P, G], keys float64[P, C],
`born` bool[P] marking the offspring) and return the indices of the survivors, best first.
"""

from __future__ import annotations

import numpy as np

from assignplan.methods.ga.selection import lex_less, lex_rank


def _best_distinct(genomes: np.ndarray, key: np.ndarray, mu: int) -> np.ndarray:
    """int64[mu] indices of the mu best rows, distinct genomes first (duplicates only to fill).

    Copies of one plan would crowd out the rest of the population; they are taken last.
    """
    order = np.argsort(lex_rank(key), kind="stable")
    seen: set[bytes] = set()
    is_first = np.zeros(len(order), dtype=bool)
    for k, row in enumerate(genomes[order]):
        code = row.tobytes()
        is_first[k] = code not in seen
        seen.add(code)
    ranked = np.concatenate([order[is_first], order[~is_first]])
    return ranked[:mu]


def plus(genomes: np.ndarray, key: np.ndarray, born: np.ndarray, mu: int) -> np.ndarray:
    """(mu+lambda): the mu best of parents and offspring together (ties: parents first)."""
    return _best_distinct(genomes, key, mu)


def comma(genomes: np.ndarray, key: np.ndarray, born: np.ndarray, mu: int) -> np.ndarray:
    """(mu,lambda) with elitism: the mu best offspring, but the best parent replaces the worst
    of them when no offspring is at least as good (so the best never gets worse)."""
    off = np.flatnonzero(born)
    keep = off[_best_distinct(genomes[off], key[off], mu)]
    parents = np.flatnonzero(~born)
    if len(parents):
        elite = parents[int(np.argmin(lex_rank(key[parents])))]
        if lex_less(key[elite], key[keep[0]])[0]:
            keep = np.concatenate([[elite], keep[:-1]])
    return keep


def first(key: np.ndarray, born: np.ndarray, scheme: str) -> int:
    """The member survival ranks first: the best of the pool (ties to the earlier row), or
    under "comma" the best offspring unless a parent is strictly better."""
    if scheme == "plus" or born.all() or not born.any():
        return int(np.argmin(lex_rank(key)))
    off, parents = np.flatnonzero(born), np.flatnonzero(~born)
    b_off = off[int(np.argmin(lex_rank(key[off])))]
    b_par = parents[int(np.argmin(lex_rank(key[parents])))]
    return int(b_par if lex_less(key[b_par], key[b_off])[0] else b_off)


SCHEMES = {"plus": plus, "comma": comma}
