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
    COMPLETION,
    MAKESPAN,
    TARDINESS,
    Evaluate,
    Genomes,
    Population,
    Scorer,
    progress_columns,
    selection_key,
)
from assignplan.methods.ga.seeding import completion_seeds, initial_population, plan_keys
from assignplan.methods.ga.selection import lex_less, lex_rank
from assignplan.methods.ga.settings import GASettings, sized
from assignplan.methods.ga.variation import vary
from assignplan.plan import PlanResult
from assignplan.priority import DEFAULT, Priority
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
               migrant_keys: np.ndarray | None = None,
               initial: tuple[np.ndarray, np.ndarray] | None = None,
               extra: tuple[np.ndarray, np.ndarray] | None = None,
               final: bool = False, patience: float | None = None,
               term_bounds: tuple[float, float] | None = None,
               bound_stops: bool = True, priority: Priority = DEFAULT) -> Island:
    """One ga run: seed, then per generation select, vary, repair, evaluate, improve,
    survive, record; until the generations, the stagnation limit, the deadline (a
    `time.perf_counter()` reading) or, with `bound_stops`, the lower bound (with no tardiness
    left) stop it.

    `migrants` (int64[m, J], valid plans) replace the last members of the initial population,
    decoded by `migrant_keys` (float64[m, J]) if given, else in the best greedy order: the
    seam for the reserved phase and for island models. `initial` (plans int64[P, J], their
    order keys float64[P, J]) is the whole initial population instead of `seeding`'s;
    `extra` (the same) joins it on top of mu (survival trims the pool back to mu).

    `final`: the completion phase. Plans are compared by the objective itself (makespan,
    weighted tardiness, weighted completion), so no plan that loses a makespan minute or a
    tardiness unit ever ranks above one that does not; a better completion time counts as
    progress against stagnation, the makespan bound does not stop the run, and the
    improvement steps are the completion phase's (`improvers(..., final=True)`).
    `patience`: seconds without a better (makespan, tardiness) after which the run stops;
    `term_bounds` (final phase): (weighted tardiness, weighted completion) bounds whose meeting
    stops it.

    `priority`: the order the objective's fixed score columns are read in (selection keys,
    survival, the best member, the bound stop, which needs the first term at its bound:
    `_Stopping.done`); the default reads makespan, tardiness, completion.
    """
    index = EligibleIndex.of(inst)
    if final:
        settings = settings.replace(improvement={"tiebreak": "none"})
    scorer, pop = _seed(inst, settings, index, evaluate, migrants, migrant_keys, initial,
                        extra, rng=rng, priority=priority)
    ctx = Context(inst, index, scorer, lower_bound, settings.improvement.justify,
                  settings.population.survival, priority)
    steps = improvers(settings, ctx, final=final)
    survive = survival.SCHEMES[settings.population.survival]
    stop = _Stopping(settings, None if final or not bound_stops else lower_bound, deadline,
                     pop, columns=3 if final else None, patience=patience,
                     targets=term_bounds if final else None, priority=priority,
                     term_bounds=term_bounds if bound_stops else None,
                     final_bound=lower_bound if final and bound_stops else None)
    history = _History(on_generation, priority)
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
    rank = np.argsort(lex_rank(priority.read(pop.score)), kind="stable")
    return Island(pop.assign[rank], pop.score[rank],
                  scorer.orders(None if pop.keys is None else pop.keys[rank]), history.rows)


def _seed(inst: Instance, settings: GASettings, index: EligibleIndex, evaluate: Evaluate,
          migrants: np.ndarray | None, migrant_keys: np.ndarray | None,
          initial: tuple[np.ndarray, np.ndarray] | None,
          extra: tuple[np.ndarray, np.ndarray] | None, *, rng: np.random.Generator,
          priority: Priority = DEFAULT) -> tuple[Scorer, Population]:
    """The scorer (with the fixed decoding order of the best greedy seed, or of the first
    member of `initial`) and the scored initial population, migrants included."""
    if initial is None:
        assign, keys, best = initial_population(inst, settings, index, rng=rng,
                                                priority=priority)
    else:
        (assign, keys), best = initial, 0
    order = orders_from_keys(inst, keys[[best]])[0]  # keys 1 give exactly inst.order
    if migrants is not None and len(migrants):
        keep = max(1, settings.population.mu - len(migrants))
        assign = np.concatenate([assign[:keep], migrants])
        keys = np.concatenate([keys[:keep], np.repeat(keys[[best]], len(migrants), axis=0)
                               if migrant_keys is None else migrant_keys])
    if extra is not None:
        assign, keys = np.concatenate([assign, extra[0]]), np.concatenate([keys, extra[1]])
    evolve = settings.variation.evolve_order
    scorer = Scorer(inst, evaluate, Genomes(inst.n_jobs, evolve), order,
                    selection_key(settings.improvement.tiebreak, inst, priority))
    return scorer, scorer.population(assign, keys if evolve else None, born=False)


class _Stopping:
    """Stagnation (generations without progress on the key's leading columns), the deadline
    (also when a generation of the usual length would not end before it: on 1,200 jobs one
    takes seconds, and a phase overrunning its share starves the next one), `patience`
    seconds without a better head of the objective (makespan and tardiness in the priority's
    order; the makespan phase, when a final phase follows), and the bounds (`done`)."""

    def __init__(self, settings: GASettings, lower_bound: int | None, deadline: float,
                 pop: Population, columns: int | None = None, patience: float | None = None,
                 targets: tuple[float, float] | None = None, priority: Priority = DEFAULT,
                 term_bounds: tuple[float, float] | None = None,
                 final_bound: int | None = None):
        self.limit, self.lower_bound, self.deadline = (settings.stopping.stagnation,
                                                       lower_bound, deadline)
        self.patience, self.targets, self.priority = patience, targets, priority
        self.term_bounds, self.final_bound = term_bounds, final_bound
        self.columns = columns or progress_columns(settings.improvement.tiebreak, priority)
        self.since_better = 0
        self.best_key = pop.key[int(np.argmin(lex_rank(pop.key)))]
        self.best_score = pop.score[int(np.argmin(lex_rank(priority.read(pop.score))))]
        self.last = self.gained = time.perf_counter()
        self.lengths: list[float] = []

    @property
    def best_makespan(self) -> int:
        return int(self.best_score[MAKESPAN])

    def update(self, pop: Population) -> None:
        now = time.perf_counter()
        self.lengths.append(now - self.last)
        self.last = now
        best = int(np.argmin(lex_rank(pop.key)))
        better = lex_less(pop.key[best, : self.columns], self.best_key[: self.columns])[0]
        self.since_better = 0 if better else self.since_better + 1
        head = self.priority.read(np.stack([pop.score[best], self.best_score]))[:, :2]
        if lex_less(head[0], head[1])[0]:
            self.gained = now
        self.best_key, self.best_score = pop.key[best], pop.score[best]

    def done(self) -> bool:
        usual = float(np.median(self.lengths)) if self.lengths else 0.0
        now = time.perf_counter()
        waited = self.patience is not None and now - self.gained >= self.patience
        return (self.at_bound() or waited or self.since_better >= self.limit
                or now + usual >= self.deadline)

    def at_bound(self) -> bool:
        """Whether no plan can be better, as far as the bounds tell.

        Makespan first: a makespan at the bound with no tardiness left (the weighted
        completion time is the final phase's to improve: it stops instead when tardiness and
        completion meet `targets`, their bounds). Another priority: only when its first term
        is at its bound and so are the terms it reads before the weighted completion (in the
        final phase, or for a weighted sum, that one too)."""
        if self.priority.name == "makespan":
            at_bound = (self.lower_bound is not None
                        and self.best_score[MAKESPAN] <= self.lower_bound
                        and self.best_score[TARDINESS] == 0)
            if self.targets is not None:  # float bounds, a hair below their value: meet within
                tard, compl = self.targets  # a millionth
                at_bound = (_meets(self.best_score[TARDINESS], tard)
                            and _meets(self.best_score[COMPLETION], compl))
            return at_bound
        makespan = self.final_bound if self.lower_bound is None else self.lower_bound
        if makespan is None:
            return False
        tard, compl = self.term_bounds if self.term_bounds is not None else (0.0, None)
        at_bound = (self.best_score[MAKESPAN] <= makespan
                    and _meets(self.best_score[TARDINESS], tard))
        if self.targets is not None or not self.priority.lexicographic:
            at_bound = at_bound and compl is not None and _meets(self.best_score[COMPLETION],
                                                                 compl)
        return bool(at_bound)


def _meets(value: float, bound: float) -> bool:
    """A value at a float bound, within a millionth (a bound is a hair below its value)."""
    return value <= bound * (1 + 1e-6) + 1e-6


class _History:
    """A row per generation (best and median makespan, best tardiness; the best as `priority`
    reads the objective), passed on as it comes."""

    def __init__(self, on_generation: OnGeneration | None, priority: Priority = DEFAULT):
        self.rows: list[HistoryRow] = []
        self.on_generation = on_generation
        self.priority = priority

    def add(self, generation: int, evaluations: int, pop: Population) -> None:
        fit = pop.score[:, :3]
        best = fit[int(np.argmin(lex_rank(self.priority.read(fit))))]
        self.rows.append(HistoryRow(generation=generation, evaluations=evaluations,
                                    best_makespan_h=float(best[0]) / 60,
                                    median_makespan_h=float(np.median(fit[:, 0])) / 60,
                                    best_tardiness_h=float(best[1]) / 60))
        if self.on_generation is not None:
            self.on_generation(self.rows[-1])


def default_evaluate(inst: Instance, settings: GASettings,
                     priority: Priority = DEFAULT) -> Evaluate:
    """The compiled builder, scoring the forward-backward improved schedule (the best under
    `priority`) when `improvement.justify`, with every column of the score layout."""
    def evaluate(assign2d: np.ndarray, order: np.ndarray) -> np.ndarray:
        return evaluate_population(inst, assign2d, order, justify=settings.improvement.justify,
                                   tail=True, priority=priority)
    return evaluate


def solve_ga(inst: Instance, *, settings: GASettings, lower_bound: int, seed: int,
             budget: float, on_generation: OnGeneration | None = None,
             evaluate: Evaluate | None = None, bound_stops: bool = True,
             term_bounds: tuple[float, float] | None = None,
             priority: Priority = DEFAULT,
             hint: tuple[np.ndarray, np.ndarray] | None = None) -> PlanResult:
    """The ga plan as a PlanResult (method "ga", status "feasible", seed and history kept).

    One generator, `numpy.random.default_rng(seed)`, drives every random choice, so the same
    instance, seed and settings give the same plan whenever the run stops on generations,
    stagnation or the bound; a stop on `budget` (seconds) depends on machine speed.
    `evaluate` scores a population (default `default_evaluate`; it must return the
    `population.SCORE_COLUMNS` columns); the returned plan is rebuilt exactly as the default scorer
    built it. Never lexicographically worse than greedy: the final phase starts from the
    greedy method's plan (`seeding.completion_seeds`), every seed decodes to its plan or a
    better one, and that phase keeps the best member by the objective itself.
    `bound_stops=False` keeps the run going at the lower bound: for a scorer whose makespan
    column the bound does not bound (the robust one's quantile of replayed makespans can fall
    below it). `hint`: a plan (assign, start int64[J]) that joins the seeds of the makespan
    phase (a replan's old plan, its jobs kept where they were), decoded in its own start
    order; None leaves every seed as it is.

    Phases, each continuing the history of the one before:
    1. reserved (optional): when scarce node groups are worth keeping for the jobs that need
       them (`balance.reserved_eligibility`), `seeding.reserve_share` of the first two
       phases' budget and generations plans with them reserved; its best half joins the
       seeds of the next phase, on the whole eligibility;
    2. makespan: the plateau tie-breaks of `improvement.tiebreak` steer the search to a
       shorter makespan; seeded also with the greedy method's plan (more plans of completion
       orders here cost the makespan search: on Falkenauer's u120 bin packing 13 of 20
       optima with six of them, 16 without);
    3. completion (`completion.completion_share` of the budget and what phase 2 leaves of
       it; at most that share of `stopping.generations` more generations, so a run limited
       by generations keeps all of them for the makespan): plans compared by the objective
       itself, seeded with phase 2's population, the greedy plan and completion orders read
       back from the best makespan, improved by re-decoding, node-local re-sequencing and
       time-window repacking (`improvers.redecode`, `.resequence`, `.window`); it stops
       after `completion.completion_stagnation` generations without a better completion
       time, or once the weighted tardiness and completion meet `term_bounds` (weighted
       minutes).

    `priority` (`assignplan.priority`): the order every phase reads the fixed score columns in
    (with the weighted tardiness first, phase 2 is the phase of the tardiness and then the
    makespan, and its greedy seed the best of greedy's plans under that order, its
    earliest-due-date plan among them); forward-backward justification keeps the schedule
    best under it too, so the run is never worse than greedy under the same priority.
    """
    t0 = time.perf_counter()
    rng = np.random.default_rng(seed)
    settings = sized(settings, inst.n_jobs)
    evaluate = evaluate or default_evaluate(inst, settings, priority)
    comp = settings.completion
    early_end = t0 + (1.0 - comp.completion_share) * budget
    seed_end = t0 + comp.completion_seed_time * budget
    history = Phases(on_generation)
    island = _makespan_phases(
        inst, settings, rng=rng, evaluate=evaluate, lower_bound=lower_bound, t0=t0,
        end=early_end, seed_end=seed_end,
        patience=comp.patience * budget if comp.completion_share > 0 else None,
        history=history, bound_stops=bound_stops, priority=priority, term_bounds=term_bounds,
        hint=hint)
    if comp.completion_share > 0:
        final = math.ceil(comp.completion_share * settings.stopping.generations)
        island = completion_phase(inst, settings.replace(stopping={"generations": final}),
                                   island, rng=rng, evaluate=evaluate,
                                   lower_bound=lower_bound, end=t0 + budget,
                                   seed_end=time.perf_counter() + comp.completion_seed_time
                                   * budget, history=history, term_bounds=term_bounds,
                                   priority=priority)
    order = island.orders if island.orders.ndim == 1 else island.orders[0]
    return schedule_result(inst, island.assign[0], "ga", lower_bound, order,
                           justify=settings.improvement.justify, priority=priority,
                           status="feasible", seed=seed,
                           seconds=time.perf_counter() - t0, history=history.rows)


class Phases:
    """The history of a run made of phases: each phase's rows continue the last one's
    generation and evaluation counts; a later phase's generation 0 (its seeds, the end of the
    phase before plus fresh ones) is not a generation of the run and is left out."""

    def __init__(self, on_generation: OnGeneration | None):
        self.rows: list[HistoryRow] = []
        self.on_generation = on_generation
        self.offset = (0, 0)

    @property
    def generation(self) -> int:
        return self.rows[-1].generation if self.rows else 0

    def start(self) -> None:
        """A new phase begins: its counts add to where the last one ended."""
        if self.rows:
            self.offset = (self.rows[-1].generation, self.rows[-1].evaluations)

    def add(self, row: HistoryRow) -> None:
        if row.generation == 0 and self.rows:
            return
        row = row.model_copy(update={"generation": row.generation + self.offset[0],
                                     "evaluations": row.evaluations + self.offset[1]})
        self.rows.append(row)
        if self.on_generation is not None:
            self.on_generation(row)


def _makespan_phases(inst: Instance, settings: GASettings, *, rng: np.random.Generator,
                     evaluate: Evaluate, lower_bound: int, t0: float, end: float,
                     seed_end: float, patience: float | None, history: Phases,
                     bound_stops: bool = True, priority: Priority = DEFAULT,
                     term_bounds: tuple[float, float] | None = None,
                     hint: tuple[np.ndarray, np.ndarray] | None = None) -> Island:
    """Phases 1 and 2 of `solve_ga` (within `end`, a `time.perf_counter()` reading; phase 2
    also stops after `patience` seconds without a better makespan or tardiness)."""
    share = settings.seeding.reserve_share
    reserved = reserved_eligibility(inst) if share > 0 else None
    migrants = migrant_keys = None
    if reserved is not None:
        first = settings.replace(stopping={
            "generations": math.ceil(share * settings.stopping.generations)})
        island = run_island(dataclasses.replace(inst, elig=reserved), first, rng=rng,
                            evaluate=evaluate, lower_bound=lower_bound,
                            deadline=t0 + share * (end - t0), on_generation=history.add,
                            bound_stops=bound_stops, priority=priority,
                            term_bounds=term_bounds)
        n = max(1, settings.population.mu // 2)
        migrants = island.assign[:n]
        if settings.variation.evolve_order:
            migrant_keys = np.stack([keys_for_order(inst, o) for o in island.orders[:n]])
        settings = settings.replace(stopping={"generations": max(
            settings.stopping.generations - history.generation, 0)})
    extra = completion_seeds(inst, lower_bound, 0, deadline=seed_end, priority=priority)
    if hint is not None:
        extra = (np.concatenate([extra[0], hint[0][None, :]]),
                 np.concatenate([extra[1], plan_keys(inst, hint[1])[None, :]]))
    history.start()
    return run_island(inst, settings, rng=rng, evaluate=evaluate, lower_bound=lower_bound,
                      deadline=end, on_generation=history.add, migrants=migrants,
                      migrant_keys=migrant_keys, extra=extra, patience=patience,
                      bound_stops=bound_stops, priority=priority, term_bounds=term_bounds)


def completion_phase(inst: Instance, settings: GASettings, island: Island, *,
                      rng: np.random.Generator, evaluate: Evaluate, lower_bound: int,
                      end: float, seed_end: float, history: Phases,
                      term_bounds: tuple[float, float] | None,
                      priority: Priority = DEFAULT) -> Island:
    """Phase 3 of `solve_ga`: seeded with the best of `island`, the greedy plan, the best
    completion orders read back from its makespan (`seeding.completion_seeds`), at most half
    of the other places, and the rest of `island`."""
    mu = settings.population.mu
    horizon = int(island.score[0, MAKESPAN])
    seeds, seed_keys = completion_seeds(inst, lower_bound, settings.completion.completion_seeds,
                                        horizon=horizon, deadline=seed_end, priority=priority)
    n_var = min(len(seeds) - 1, max(0, mu - 2) // 2 if len(island.assign) > 1 else mu)
    n_own = max(1, mu - 1 - n_var)
    orders = island.orders if island.orders.ndim == 2 else np.broadcast_to(
        island.orders, (len(island.assign), inst.n_jobs))
    own_keys = np.stack([keys_for_order(inst, o) for o in orders[:n_own]])
    own = island.assign[:n_own]
    assign = np.concatenate([own[:1], seeds[: 1 + n_var], own[1:]])
    keys = np.concatenate([own_keys[:1], seed_keys[: 1 + n_var], own_keys[1:]])
    history.start()
    return run_island(inst, settings.replace(stopping={
        "stagnation": settings.completion.completion_stagnation}), rng=rng, evaluate=evaluate,
        lower_bound=lower_bound, deadline=end, on_generation=history.add,
        initial=(assign, keys), final=True, term_bounds=term_bounds, priority=priority)
