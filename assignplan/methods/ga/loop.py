"""The genetic algorithm's loop, and the run made of its phases."""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable

import numpy as np

from assignplan.documents import HistoryRow
from assignplan.instance import Instance
from assignplan.methods.ga import survival
from assignplan.methods.ga.balance import reserved_eligibility
from assignplan.methods.ga.encoding import EligibleIndex
from assignplan.methods.ga.improvers import Context, improvers
from assignplan.methods.ga.improvers.repack import keys_for_order
from assignplan.methods.ga.order_keys import orders_from_keys
from assignplan.methods.ga.population import (
    MAKESPAN,
    TARDINESS,
    Evaluate,
    Genomes,
    Population,
    Scorer,
    progress_columns,
    selection_key,
)
from assignplan.methods.ga.seeding import initial_population
from assignplan.methods.ga.selection import lex_less, lex_rank
from assignplan.methods.ga.settings import GASettings, sized
from assignplan.methods.ga.variation import vary
from assignplan.plan import PlanResult
from assignplan.schedule import evaluate_population, schedule_result

OnGeneration = Callable[[HistoryRow], None]


@dataclasses.dataclass(frozen=True, eq=False)
class Island:
    """What one run hands back: the population best first (by the objective), the decoding
    order of each member (int64[mu, J]) or the one fixed order (int64[J]), the history."""

    assign: np.ndarray
    score: np.ndarray
    orders: np.ndarray
    history: list[HistoryRow]


def run_island(inst: Instance, settings: GASettings, *, rng: np.random.Generator,
               evaluate: Evaluate, lower_bound: int, deadline: float,
               on_generation: OnGeneration | None = None,
               migrants: np.ndarray | None = None,
               migrant_keys: np.ndarray | None = None, bound_stops: bool = True) -> Island:
    """One ga run: seed, then per generation select, vary, repair, evaluate, improve,
    survive, record; until the generations, the stagnation limit, the deadline (a
    `time.perf_counter()` reading) or, with `bound_stops`, the lower bound (with no tardiness
    left) stop it.

    `migrants` (int64[m, J], valid plans) replace the last members of the initial population,
    decoded by `migrant_keys` (float64[m, J]) if given, else in the best greedy order: the
    seam for the reserved phase and for island models.
    """
    index = EligibleIndex.of(inst)
    scorer, pop = _seed(inst, settings, index, evaluate, migrants, migrant_keys, rng=rng)
    ctx = Context(inst, index, scorer, lower_bound, settings.improvement.justify,
                  settings.population.survival)
    steps = improvers(settings, ctx)
    survive = survival.SCHEMES[settings.population.survival]
    stop = _Stopping(settings, lower_bound if bound_stops else -1, deadline, pop)
    history = _History(on_generation)
    history.add(0, scorer.evaluations, pop)
    for generation in range(1, settings.stopping.generations + 1):
        if stop.done():
            break
        offspring = scorer.population(*vary(pop.assign, pop.keys, pop.key, inst, settings,
                                            index, stop.best_makespan, rng=rng), born=True)
        pool = Population.pool(pop, offspring, parents_first=True)
        for step in steps:
            pool = step.improve(pool, rng=rng)
        genomes = scorer.genomes.join(pool.assign, pool.keys)
        survivors = pool.take(survive(genomes, pool.key, pool.born, settings.population.mu))
        pop = dataclasses.replace(survivors, born=np.zeros(len(survivors), dtype=bool))
        scorer.keep_only(pop, pool.take(np.flatnonzero(pool.born)))
        stop.update(pop)
        history.add(generation, scorer.evaluations, pop)
    rank = np.argsort(lex_rank(pop.score[:, :3]), kind="stable")
    return Island(pop.assign[rank], pop.score[rank],
                  scorer.orders(None if pop.keys is None else pop.keys[rank]), history.rows)


def _seed(inst: Instance, settings: GASettings, index: EligibleIndex, evaluate: Evaluate,
          migrants: np.ndarray | None, migrant_keys: np.ndarray | None, *,
          rng: np.random.Generator) -> tuple[Scorer, Population]:
    """The scorer (with the fixed decoding order of the best greedy seed) and the scored
    initial population, migrants included."""
    assign, keys, best = initial_population(inst, settings, index, rng=rng)
    order = orders_from_keys(inst, keys[[best]])[0]  # keys 1 give exactly inst.order
    if migrants is not None and len(migrants):
        keep = max(1, settings.population.mu - len(migrants))
        assign = np.concatenate([assign[:keep], migrants])
        keys = np.concatenate([keys[:keep], np.repeat(keys[[best]], len(migrants), axis=0)
                               if migrant_keys is None else migrant_keys])
    evolve = settings.variation.evolve_order
    scorer = Scorer(inst, evaluate, Genomes(inst.n_jobs, evolve), order,
                    selection_key(settings.improvement.tiebreak, inst))
    return scorer, scorer.population(assign, keys if evolve else None, born=False)


class _Stopping:
    """Stagnation (generations without progress on the key's leading columns), the deadline,
    and a makespan at the bound with no tardiness left (the weighted completion time might
    still improve: we accept that)."""

    def __init__(self, settings: GASettings, lower_bound: int, deadline: float,
                 pop: Population):
        self.limit, self.lower_bound, self.deadline = (settings.stopping.stagnation,
                                                       lower_bound, deadline)
        self.columns = progress_columns(settings.improvement.tiebreak)
        self.since_better = 0
        self.best_key = pop.key[int(np.argmin(lex_rank(pop.key)))]
        self.best_score = pop.score[int(np.argmin(lex_rank(pop.score[:, :3])))]

    @property
    def best_makespan(self) -> int:
        return int(self.best_score[MAKESPAN])

    def update(self, pop: Population) -> None:
        best = int(np.argmin(lex_rank(pop.key)))
        better = lex_less(pop.key[best, : self.columns], self.best_key[: self.columns])[0]
        self.since_better = 0 if better else self.since_better + 1
        self.best_key, self.best_score = pop.key[best], pop.score[best]

    def done(self) -> bool:
        at_bound = (self.best_score[MAKESPAN] <= self.lower_bound
                    and self.best_score[TARDINESS] == 0)
        return (at_bound or self.since_better >= self.limit
                or time.perf_counter() >= self.deadline)


class _History:
    """A row per generation (best and median makespan, best tardiness), passed on as it comes."""

    def __init__(self, on_generation: OnGeneration | None):
        self.rows: list[HistoryRow] = []
        self.on_generation = on_generation

    def add(self, generation: int, evaluations: int, pop: Population) -> None:
        fit = pop.score[:, :3]
        best = fit[int(np.argmin(lex_rank(fit)))]
        self.rows.append(HistoryRow(generation=generation, evaluations=evaluations,
                                    best_makespan_h=float(best[0]) / 60,
                                    median_makespan_h=float(np.median(fit[:, 0])) / 60,
                                    best_tardiness_h=float(best[1]) / 60))
        if self.on_generation is not None:
            self.on_generation(self.rows[-1])


def default_evaluate(inst: Instance, settings: GASettings) -> Evaluate:
    """The compiled builder, scoring the forward-backward improved schedule when
    `improvement.justify`, with every column of the score layout."""
    def evaluate(assign2d: np.ndarray, order: np.ndarray) -> np.ndarray:
        return evaluate_population(inst, assign2d, order, justify=settings.improvement.justify,
                                   tail=True)
    return evaluate


def solve_ga(inst: Instance, *, settings: GASettings, lower_bound: int, seed: int,
             budget: float, on_generation: OnGeneration | None = None,
             evaluate: Evaluate | None = None, bound_stops: bool = True) -> PlanResult:
    """The ga plan as a PlanResult (method "ga", status "feasible", seed and history kept).

    One generator, `numpy.random.default_rng(seed)`, drives every random choice, so the same
    instance, seed and settings give the same plan whenever the run stops on generations,
    stagnation or the bound; a stop on `budget` (seconds) depends on machine speed.
    `evaluate` scores a population (default `default_evaluate`; it must return the
    `population.SCORE_COLUMNS` columns); the returned plan is rebuilt exactly as the default scorer
    built it. Never worse than greedy: every greedy seed decodes to its greedy plan and the
    best member by (makespan, tardiness) always survives. `bound_stops=False` keeps the run
    going at the lower bound: for a scorer whose makespan column the bound does not bound
    (the robust one's quantile of replayed makespans can fall below it).

    Phases: when scarce node groups are worth keeping for the jobs that need them
    (`balance.reserved_eligibility`), the first `seeding.reserve_share` of the budget and of
    the generations plans with them reserved; its best half then joins the seeds of the
    second phase on the whole eligibility, whose history continues the first's.
    """
    t0 = time.perf_counter()
    rng = np.random.default_rng(seed)
    settings = sized(settings, inst.n_jobs)
    evaluate = evaluate or default_evaluate(inst, settings)
    share = settings.seeding.reserve_share
    reserved = reserved_eligibility(inst) if share > 0 else None
    history: list[HistoryRow] = []
    migrants = migrant_keys = None
    if reserved is not None:
        first = settings.replace(stopping={
            "generations": math.ceil(share * settings.stopping.generations)})
        island = run_island(dataclasses.replace(inst, elig=reserved), first, rng=rng,
                            evaluate=evaluate, lower_bound=lower_bound,
                            deadline=t0 + share * budget, on_generation=on_generation,
                            bound_stops=bound_stops)
        history = island.history
        n = max(1, settings.population.mu // 2)
        migrants = island.assign[:n]
        if settings.variation.evolve_order:
            migrant_keys = np.stack([keys_for_order(inst, o) for o in island.orders[:n]])
        settings = settings.replace(stopping={"generations": max(
            settings.stopping.generations - (len(history) - 1), 0)})
    gen0, evals0 = (history[-1].generation, history[-1].evaluations) if history else (0, 0)

    def shifted(row: HistoryRow) -> HistoryRow:
        return row.model_copy(update={"generation": row.generation + gen0,
                                      "evaluations": row.evaluations + evals0})

    def forward(row: HistoryRow) -> None:
        # the second phase's generation 0 (the first's end plus fresh seeds) is not a
        # generation of the run
        if on_generation is not None and (row.generation > 0 or not history):
            on_generation(shifted(row))

    island = run_island(inst, settings, rng=rng, evaluate=evaluate, lower_bound=lower_bound,
                        deadline=t0 + budget, on_generation=forward, migrants=migrants,
                        migrant_keys=migrant_keys, bound_stops=bound_stops)
    history = history + [shifted(r) for r in island.history[(1 if history else 0):]]
    order = island.orders if island.orders.ndim == 1 else island.orders[0]
    return schedule_result(inst, island.assign[0], "ga", lower_bound, order,
                           justify=settings.improvement.justify, status="feasible", seed=seed,
                           seconds=time.perf_counter() - t0, history=history)

