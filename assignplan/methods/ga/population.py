"""The ga's population state: genomes, their order keys, their scores, and the scorer.

A genome is a plan's assignment (int64[J], a node per job) followed, when decoding orders
evolve, by its order keys' bits (`Genomes`), so caching, deduplication and survival handle a
plan and its decoding order as one row. Every score row has the fixed layout of `SCORE`:
the objective (makespan, weighted tardiness, weighted completion, minutes) and two plateau
measures used only to compare plans of equal objective head (`selection_key`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from assignplan.instance import Instance
from assignplan.methods.ga.encoding import node_load
from assignplan.methods.ga.order_keys import orders_from_keys
from assignplan.priority import DEFAULT, Priority

# Columns of a score row: the objective first, then the plateau measures.
MAKESPAN, TARDINESS, COMPLETION, SPREAD, TAIL = range(5)
SCORE_COLUMNS = 5

# (assign int64[P, J], order int64[J] or int64[P, J]) -> scores float64[P, SCORE_COLUMNS]
Evaluate = Callable[[np.ndarray, np.ndarray], np.ndarray]
# (assign int64[P, J], scores float64[P, SCORE_COLUMNS]) -> selection keys float64[P, C]
Key = Callable[[np.ndarray, np.ndarray], np.ndarray]


def selection_key(tiebreak: str, inst: Instance, priority: Priority = DEFAULT) -> Key:
    """The lexicographic key tournaments, survival and the improvers compare plans by.

    With the makespan first (the default `priority`):
    - "tail": (makespan, tardiness, T, B, completion), T the area of the jobs ending at the
      makespan, B the sum of squared node finishes: on packing-like batches a tighter first
      layer shows in T before anywhere else (the work Falkenauer's fill-based fitness pushes
      out of the critical bins, J. Heuristics 2, 1996, from memory);
    - "spread": (makespan, tardiness, B, completion);
    - "balance": B estimated as sum_i L_i^2 / sum_i L_i over the node loads L
      (`encoding.node_load`) instead of built;
    - "none": the objective itself.
    The makespan sits on plateaus: many plans share it because several nodes end together,
    and moving one job off one of them changes nothing visible; a lower B means the latest
    nodes end earlier, a step towards the next makespan drop. The reported objective stays
    (makespan, tardiness, completion).

    Another `priority` reads the same score columns in its own order (`Priority.read`), the
    plateau measures still just before the weighted completion: "due" with "tail" is
    (tardiness, makespan, T, B, completion); "weighted" is (sum, makespan, tardiness, T, B,
    completion).
    """
    if priority.name != "makespan":
        return _read_key(tiebreak, inst, priority)
    if tiebreak == "tail":
        return lambda assign, s: s[:, [MAKESPAN, TARDINESS, TAIL, SPREAD, COMPLETION]]
    if tiebreak == "spread":
        return lambda assign, s: s[:, [MAKESPAN, TARDINESS, SPREAD, COMPLETION]]
    if tiebreak == "balance":
        def balance(assign: np.ndarray, s: np.ndarray) -> np.ndarray:
            load = node_load(inst, assign)
            spread = (load**2).sum(axis=1) / np.maximum(load.sum(axis=1), 1.0)
            return np.column_stack([s[:, MAKESPAN], s[:, TARDINESS], spread, s[:, COMPLETION]])
        return balance
    return lambda assign, s: s[:, [MAKESPAN, TARDINESS, COMPLETION]]


def _read_key(tiebreak: str, inst: Instance, priority: Priority) -> Key:
    """`selection_key` for a priority other than the makespan first."""
    def key(assign: np.ndarray, s: np.ndarray) -> np.ndarray:
        read = priority.read(s[:, [MAKESPAN, TARDINESS, COMPLETION]])
        if tiebreak == "tail":
            plateau = s[:, [TAIL, SPREAD]]
        elif tiebreak == "spread":
            plateau = s[:, [SPREAD]]
        elif tiebreak == "balance":
            load = node_load(inst, assign)
            plateau = ((load**2).sum(axis=1) / np.maximum(load.sum(axis=1), 1.0))[:, None]
        else:
            return read
        return np.column_stack([read[:, :-1], plateau, read[:, -1:]])
    return key


def progress_columns(tiebreak: str, priority: Priority = DEFAULT) -> int:
    """Leading key columns whose improvement counts as progress against stagnation: the
    makespan and tardiness (in the priority's order; the weighted sum alone for "weighted"),
    and with "tail" the tail area too (a packing getting tighter is progress; the weighted
    completion keeps improving by crumbs long after the plan has stopped getting better)."""
    if not priority.lexicographic:
        return 1
    return 3 if tiebreak == "tail" else 2


class Genomes:
    """Packing of (assignment int64[P, J], keys float64[P, J] or None) into one int64 array
    [P, J] or [P, 2J] (the keys' bits)."""

    def __init__(self, n_jobs: int, evolve: bool):
        self.n_jobs, self.evolve = n_jobs, evolve

    def join(self, assign: np.ndarray, keys: np.ndarray | None) -> np.ndarray:
        if not self.evolve:
            return assign
        return np.concatenate([assign, np.ascontiguousarray(keys).view(np.int64)], axis=1)

    def split(self, genomes: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        assign = np.ascontiguousarray(genomes[:, : self.n_jobs])
        if not self.evolve:
            return assign, None
        return assign, np.ascontiguousarray(genomes[:, self.n_jobs :]).view(np.float64)


@dataclass(frozen=True, eq=False)
class Population:
    """Members of one generation: assign int64[P, J], keys float64[P, J] (None with one fixed
    decoding order), score float64[P, SCORE_COLUMNS], key float64[P, C] (`selection_key`),
    born bool[P] (offspring of this generation, as opposed to its parents)."""

    assign: np.ndarray
    keys: np.ndarray | None
    score: np.ndarray
    key: np.ndarray
    born: np.ndarray

    def __len__(self) -> int:
        return len(self.assign)

    def take(self, rows: np.ndarray) -> Population:
        return Population(self.assign[rows], None if self.keys is None else self.keys[rows],
                          self.score[rows], self.key[rows], self.born[rows])

    def with_member(self, k: int, assign: np.ndarray, keys: np.ndarray | None,
                    score: np.ndarray, key: np.ndarray) -> Population:
        """A copy with member k replaced (arrays are never changed in place)."""
        new = [self.assign.copy(), None if self.keys is None else self.keys.copy(),
               self.score.copy(), self.key.copy()]
        new[0][k] = assign
        if new[1] is not None:
            new[1][k] = keys
        new[2][k], new[3][k] = score, key
        return replace(self, assign=new[0], keys=new[1], score=new[2], key=new[3])

    @staticmethod
    def pool(parents: Population, offspring: Population, *, parents_first: bool) -> Population:
        """Parents and offspring together, in the order survival breaks ties by (see
        `best`)."""
        a, b = (parents, offspring) if parents_first else (offspring, parents)
        return Population(np.concatenate([a.assign, b.assign]),
                          None if a.keys is None else np.concatenate([a.keys, b.keys]),
                          np.concatenate([a.score, b.score]), np.concatenate([a.key, b.key]),
                          np.concatenate([a.born, b.born]))


@dataclass
class Scorer:
    """Scores genomes through `evaluate`, reusing the scores of the genomes kept from the last
    generation (offspring identical to a parent, or to each other, are not rebuilt), and
    counts the plans built (`evaluations`, the history's column)."""

    inst: Instance
    evaluate: Evaluate
    genomes: Genomes
    order: np.ndarray  # the one fixed decoding order int64[J] (used when keys are None)
    key_of: Key
    evaluations: int = 0

    def __post_init__(self) -> None:
        self.cache: dict[bytes, np.ndarray] = {}

    def orders(self, keys: np.ndarray | None) -> np.ndarray:
        """Decoding orders: int64[P, J] from keys float64[P, J], or the fixed int64[J]."""
        return self.order if keys is None else orders_from_keys(self.inst, keys)

    def build(self, assign: np.ndarray, order: np.ndarray) -> np.ndarray:
        """Scores of trial plans (not cached), counted as evaluations."""
        self.evaluations += len(assign)
        return self.evaluate(assign, order)

    def population(self, assign: np.ndarray, keys: np.ndarray | None, *,
                   born: bool) -> Population:
        """Members scored, from the cache where it holds them."""
        rows = [g.tobytes() for g in self.genomes.join(assign, keys)]
        todo = {k: r for r, k in enumerate(rows) if k not in self.cache}
        if todo:
            picked = list(todo.values())
            found = self.evaluate(assign[picked],
                                  self.order if keys is None else self.orders(keys[picked]))
            self.evaluations += len(todo)
            self.cache.update(zip(todo, found, strict=True))
        score = np.stack([self.cache[k] for k in rows])
        return Population(assign, keys, score, self.key_of(assign, score),
                          np.full(len(assign), born))

    def remember(self, assign: np.ndarray, keys: np.ndarray | None, score: np.ndarray) -> None:
        """Cache the score of a plan an improver built."""
        genome = self.genomes.join(assign[None], None if keys is None else keys[None])[0]
        self.cache[genome.tobytes()] = score

    def keep_only(self, *populations: Population) -> None:
        """Forget every genome not in `populations` (memory stays O((mu + lam) * J))."""
        keep = {g.tobytes() for p in populations for g in self.genomes.join(p.assign, p.keys)}
        self.cache = {k: v for k, v in self.cache.items() if k in keep}
