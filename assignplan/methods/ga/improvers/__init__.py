"""Improvement steps the ga applies each generation, all behind one interface.

Each step is an object with one method, ``improve(pool, *, rng) -> pool``, walked once per
generation at one place in the loop, between variation and survival. It picks its own member
of the pool (parents and this generation's offspring), builds better plans around it, and
returns the pool with that member replaced when it found one no worse under the selection
key. The loop knows none of their settings.

- `LocalMoves`: moves, swaps and packing exchanges off the critical node (best offspring);
- `OrderPromotion`: the same node's decoding order (best offspring; evolved orders only);
- `Descent`: node-local moves, swaps and ejection chains off the last-ending node, each
  trial rebuilding only the nodes it touches (best member);
- `Repack`: CP-SAT re-assigns the jobs of the makespan node and a few partners (best member);
- `Redecode` (the final phase's): the best member's nodes kept, its jobs re-timed in
  completion orders, node by node (`redecode`);
- `Resequence` (the final phase's): jobs moved forward in their node's sequence by Smith's
  rule, or to other nodes, while every node ends by the makespan (`resequence`);
- `WindowRepack` (the final phase's): CP-SAT re-assigns and re-times the jobs of a time
  window of the plan for the weighted completion time (`window`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import numpy as np

from assignplan.instance import Instance
from assignplan.methods.ga import survival
from assignplan.methods.ga.encoding import EligibleIndex
from assignplan.methods.ga.improvers.descent import descent_step
from assignplan.methods.ga.improvers.moves import improve
from assignplan.methods.ga.improvers.order import improve_order
from assignplan.methods.ga.improvers.redecode import redecode_trial
from assignplan.methods.ga.improvers.repack import repack_step
from assignplan.methods.ga.improvers.resequence import resequence_step
from assignplan.methods.ga.improvers.window import window_step
from assignplan.methods.ga.order_keys import orders_from_keys
from assignplan.methods.ga.population import MAKESPAN, Population, Scorer
from assignplan.methods.ga.selection import lex_less
from assignplan.methods.ga.settings import GASettings
from assignplan.priority import DEFAULT, Priority


class Improver(Protocol):
    def improve(self, pool: Population, *, rng: np.random.Generator) -> Population: ...


@dataclass(frozen=True, eq=False)
class Context:
    """What every improver reads: the batch, where each job may go, the scorer (decoding
    orders, trial builds, the cache), the lower bound (a target no plan needs to beat), and
    whether schedules are forward-backward improved."""

    inst: Instance
    index: EligibleIndex
    scorer: Scorer
    lower_bound: int
    justify: bool
    scheme: str  # the survival scheme: which member survival will rank first
    priority: Priority = DEFAULT  # how justification keeps a schedule (`kernels._justify`)

    def best(self, pool: Population) -> int:
        return survival.first(pool.key, pool.born, self.scheme)

    def best_offspring(self, pool: Population) -> int:
        born = np.flatnonzero(pool.born)
        return int(born[survival.first(pool.key[born], pool.born[born], "plus")])

    def order_of(self, pool: Population, k: int) -> np.ndarray:
        return self.scorer.orders(None if pool.keys is None else pool.keys[[k]]).reshape(
            -1, self.inst.n_jobs)[0]

    def replaced(self, pool: Population, k: int, assign: np.ndarray, keys: np.ndarray | None,
                 score: np.ndarray) -> Population:
        """The pool with member k's plan replaced; its score cached."""
        self.scorer.remember(assign, keys, score)
        key = self.scorer.key_of(assign[None], score[None])[0]
        return pool.with_member(k, assign, keys, score, key)


@dataclass(frozen=True, eq=False)
class LocalMoves:
    ctx: Context
    budget: int

    def improve(self, pool: Population, *, rng: np.random.Generator) -> Population:
        c, k = self.ctx, self.ctx.best_offspring(pool)
        assign, score, spent = improve(
            pool.assign[k], pool.score[k], c.inst, c.index, c.order_of(pool, k),
            c.scorer.evaluate, self.budget, justify=c.justify, key=c.scorer.key_of,
            target=c.lower_bound, priority=c.priority)
        c.scorer.evaluations += spent
        return c.replaced(pool, k, assign, None if pool.keys is None else pool.keys[k], score)


@dataclass(frozen=True, eq=False)
class OrderPromotion:
    ctx: Context
    budget: int

    def improve(self, pool: Population, *, rng: np.random.Generator) -> Population:
        c, k = self.ctx, self.ctx.best_offspring(pool)
        keys, score, spent = improve_order(
            pool.assign[k], pool.keys[k], pool.score[k], c.inst, c.scorer.evaluate,
            self.budget, justify=c.justify, key=c.scorer.key_of, priority=c.priority)
        c.scorer.evaluations += spent
        return c.replaced(pool, k, pool.assign[k], keys, score)


@dataclass(frozen=True, eq=False)
class Descent:
    ctx: Context
    budget: int

    def improve(self, pool: Population, *, rng: np.random.Generator) -> Population:
        c, b = self.ctx, self.ctx.best(pool)
        found = descent_step(pool.assign[b], None if pool.keys is None else pool.keys[b],
                             pool.score[b], c.inst, c.order_of(pool, b), c.scorer.build,
                             c.scorer.key_of, budget=self.budget, justify=c.justify,
                             priority=c.priority)
        return pool if found is None else c.replaced(pool, b, *found)


@dataclass(frozen=True, eq=False)
class Repack:
    ctx: Context
    nodes: int
    effort: float
    tried: set[bytes]  # sub-problems that gave nothing (see `repack.repack_nodes`)

    def improve(self, pool: Population, *, rng: np.random.Generator) -> Population:
        c, b = self.ctx, self.ctx.best(pool)
        found = repack_step(pool.assign[b], None if pool.keys is None else pool.keys[b],
                            pool.score[b], c.inst, c.order_of(pool, b), c.scorer.build,
                            c.scorer.key_of, nodes=self.nodes, target=c.lower_bound,
                            deterministic_time=self.effort, justify=c.justify, rng=rng,
                            tried=self.tried, priority=c.priority)
        return pool if found is None else c.replaced(pool, b, *found)


@dataclass(frozen=True, eq=False)
class Redecode:
    ctx: Context
    trials: int
    rounds: int  # re-decodings of the best member while each one helps

    def improve(self, pool: Population, *, rng: np.random.Generator) -> Population:
        c, b = self.ctx, self.ctx.best(pool)
        if pool.keys is None:  # one fixed decoding order: nothing to re-decode into
            return pool
        assign = pool.assign[b]
        for _ in range(self.rounds):
            keys = redecode_trial(c.inst, assign, int(pool.score[b, MAKESPAN]),
                                  c.order_of(pool, b), self.trials, rng=rng)[None]
            scores = c.scorer.build(assign[None], orders_from_keys(c.inst, keys))
            if not lex_less(c.scorer.key_of(assign[None], scores), pool.key[b])[0]:
                break
            pool = c.replaced(pool, b, assign, keys[0], scores[0])
        return pool


@dataclass(frozen=True, eq=False)
class Resequence:
    ctx: Context
    budget: int

    def improve(self, pool: Population, *, rng: np.random.Generator) -> Population:
        c, b = self.ctx, self.ctx.best(pool)
        found = resequence_step(pool.assign[b], None if pool.keys is None else pool.keys[b],
                                pool.score[b], c.inst, c.order_of(pool, b), c.scorer.build,
                                c.scorer.key_of, budget=self.budget, justify=c.justify,
                                priority=c.priority)
        return pool if found is None else c.replaced(pool, b, *found)


@dataclass(frozen=True, eq=False)
class WindowRepack:
    ctx: Context
    size: int
    effort: float

    def improve(self, pool: Population, *, rng: np.random.Generator) -> Population:
        c, b = self.ctx, self.ctx.best(pool)
        found = window_step(pool.assign[b], None if pool.keys is None else pool.keys[b],
                            pool.score[b], c.inst, c.order_of(pool, b), c.scorer.build,
                            c.scorer.key_of, size=self.size, deterministic_time=self.effort,
                            justify=c.justify, rng=rng, priority=c.priority)
        return pool if found is None else c.replaced(pool, b, *found)


def improvers(settings: GASettings, ctx: Context, *, final: bool = False) -> list[Improver]:
    """The steps `settings.improvement` turns on, in the order they run; in the final phase
    (`final`), the completion phase's steps (`settings.completion`) instead."""
    if final:
        comp, steps = settings.completion, []
        if comp.redecode_trials and settings.variation.evolve_order:
            steps.append(Redecode(ctx, comp.redecode_trials, comp.redecode_rounds))
        if comp.resequence_trials:
            steps.append(Resequence(ctx, comp.resequence_trials))
        if comp.window_jobs >= 2:
            steps.append(WindowRepack(ctx, comp.window_jobs, comp.window_effort))
        return steps
    imp = settings.improvement
    steps: list[Improver] = []
    if imp.local_search:
        steps.append(LocalMoves(ctx, imp.local_evaluations))
        if settings.variation.evolve_order and imp.order_evaluations:
            steps.append(OrderPromotion(ctx, imp.order_evaluations))
    if imp.descent_trials:
        steps.append(Descent(ctx, imp.descent_trials))
    if imp.repack_nodes >= 2:
        steps.append(Repack(ctx, imp.repack_nodes, imp.repack_effort, set()))
    return steps
