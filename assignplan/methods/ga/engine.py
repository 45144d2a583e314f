"""The genetic algorithm's loop: select, vary, repair, evaluate what changed, survive, record."""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

from assignplan.instance import Instance, priority_order
from assignplan.methods.ga import crossover, mutation, survival
from assignplan.methods.ga.config import GAConfig
from assignplan.methods.ga.encoding import EligibleIndex, node_load, random_population
from assignplan.methods.ga.local import improve
from assignplan.methods.ga.repair import repair
from assignplan.methods.ga.selection import lex_less, lex_rank, tournament
from assignplan.methods.greedy import greedy_assign
from assignplan.model import HistoryRow
from assignplan.plan import PlanResult, objective
from assignplan.schedule import check_order, evaluate_population, schedule_result

# (assign int64[P, J], order int64[J]) -> fitness float64[P, 3], lower is better
Evaluate = Callable[[np.ndarray, np.ndarray], np.ndarray]
OnGeneration = Callable[[HistoryRow], None]
ALPHAS = (0.5, 1.0, 0.0)  # scarcity exponents of the greedy variants (0.5 helps most often)


def greedy_variant_orders(inst: Instance, n: int, noise: float, *,
                          rng: np.random.Generator) -> list[np.ndarray]:
    """n priority orders: bottom levels of pseudo-hours h_j * (N / e_j)^a_k * U(1 +- noise).

    e_j is job j's number of eligible nodes; a_k cycles through ALPHAS, so some variants
    place the jobs few nodes can hold earlier (they then claim their special nodes before
    plain jobs crowd them). The first len(ALPHAS) - 1 variants carry no noise. Bottom levels
    of positive pseudo-hours still fall strictly along every `follows` edge, so each order
    respects follows (and is checked to).
    """
    scarcity = inst.n_nodes / inst.eligible.sum(axis=1)
    orders = []
    for k in range(n):
        eps = noise if k >= len(ALPHAS) - 1 else 0.0
        noise_k = rng.uniform(1.0 - eps, 1.0 + eps, size=inst.n_jobs)
        hours = inst.hours * scarcity ** ALPHAS[k % len(ALPHAS)] * noise_k
        orders.append(check_order(inst, priority_order(hours, inst.pred_ptr, inst.pred_idx,
                                                       inst.succ_ptr, inst.succ_idx)))
    return orders


def initial_population(inst: Instance, config: GAConfig, index: EligibleIndex, *,
                       rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """(int64[mu, J] population, int64[J] decoding order).

    Members: the greedy plan of inst.order, greedy plans of `greedy_variant_orders`, then
    random eligible plans. The decoding order (the fixed priority order of the schedule
    builder for the whole run) is the order whose greedy plan is best: the builder replays a
    greedy plan exactly under its own order, so the run starts from the best greedy plan and
    never ends worse than greedy.
    """
    orders = [inst.order]
    orders += greedy_variant_orders(inst, min(config.greedy_variants, config.mu - 1),
                                    config.order_noise, rng=rng)
    plans = [greedy_assign(inst, order) for order in orders]
    jobs = np.arange(inst.n_jobs)
    scores = np.array([objective(inst, start + inst.duration[jobs, assign])
                       for assign, start in plans], dtype=np.float64)
    best = int(np.argmin(lex_rank(scores)))
    seeds = np.stack([assign for assign, _ in plans])
    rest = random_population(inst, config.mu - len(seeds), index, rng=rng)
    return np.concatenate([seeds, rest]), orders[best]


def vary(pop: np.ndarray, fit: np.ndarray, inst: Instance, config: GAConfig,
         index: EligibleIndex, horizon: int, *, rng: np.random.Generator) -> np.ndarray:
    """int64[lam, J] offspring: tournament, crossover, bit-flip mutation, then repair."""
    parents = tournament(fit, 2 * config.lam, config.tournament_size, rng=rng)
    a, b = pop[parents[: config.lam]], pop[parents[config.lam :]]
    if config.crossover == "uniform":
        children = crossover.uniform(a, b, config.crossover_bias, rng=rng)
    else:
        children = crossover.kpoint(a, b, config.kpoints, inst.order, rng=rng)
    rate = config.mutation_flips / (inst.n_jobs * inst.n_nodes)
    if config.mutation == "symmetric":
        rows = mutation.bit_flip(children, inst.n_nodes, rate, rng=rng)
    else:
        rows = mutation.bit_flip_asymmetric(children, node_load(inst, children), rate, rng=rng)
    return repair(rows, inst, index, horizon, fill=config.repair_fill, keep=config.repair_keep,
                  rng=rng)


class CachedEvaluate:
    """Scores a population, reusing the fitness of genomes seen in the last generation.

    Offspring identical to a parent (or to each other) are not rebuilt; the cache holds only
    the current parents and offspring, so memory stays O((mu + lam) * J).
    """

    def __init__(self, evaluate: Evaluate, order: np.ndarray):
        self.evaluate = evaluate
        self.order = order
        self.cache: dict[bytes, np.ndarray] = {}
        self.evaluations = 0

    def __call__(self, pop: np.ndarray) -> np.ndarray:
        keys = [row.tobytes() for row in pop]
        todo = {k: r for r, k in enumerate(keys) if k not in self.cache}
        if todo:
            scores = self.evaluate(pop[list(todo.values())], self.order)
            self.evaluations += len(todo)
            self.cache.update(zip(todo, scores, strict=True))
        return np.stack([self.cache[k] for k in keys])

    def keep_only(self, pop: np.ndarray) -> None:
        """Forget every genome not in pop."""
        keys = {row.tobytes() for row in pop}
        self.cache = {k: v for k, v in self.cache.items() if k in keys}


def _row(generation: int, evaluations: int, fit: np.ndarray) -> HistoryRow:
    best = fit[int(np.argmin(lex_rank(fit)))]
    return HistoryRow(generation=generation, evaluations=evaluations,
                      best_makespan_h=float(best[0]) / 60,
                      median_makespan_h=float(np.median(fit[:, 0])) / 60,
                      best_tardiness_h=float(best[1]) / 60)


def run_island(inst: Instance, config: GAConfig, *, rng: np.random.Generator,
               evaluate: Evaluate, lower_bound: int, deadline: float,
               on_generation: OnGeneration | None = None,
               migrants_in: np.ndarray | None = None,
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[HistoryRow]]:
    """One GA run: (population int64[mu, J], fitness float64[mu, 3], decoding order
    int64[J], history), population best first.

    `migrants_in` (int64[m, J], valid plans) join the initial population, replacing its last
    members: the seam for an island model. `deadline` is a time.perf_counter() reading.
    """
    index = EligibleIndex.of(inst)
    pop, order = initial_population(inst, config, index, rng=rng)
    score = CachedEvaluate(evaluate, order)
    if migrants_in is not None and len(migrants_in):
        pop = np.concatenate([pop[: max(1, config.mu - len(migrants_in))], migrants_in])
    fit = score(pop)
    history = [_row(0, score.evaluations, fit)]
    if on_generation is not None:
        on_generation(history[-1])
    best_fit, since_better = fit[np.argmin(lex_rank(fit))], 0
    for gen in range(1, config.generations + 1):
        if _done(best_fit, lower_bound, since_better, config, deadline):
            break
        off = vary(pop, fit, inst, config, index, int(best_fit[0]), rng=rng)
        off_fit = score(off)
        if config.local_search:
            k = int(np.argmin(lex_rank(off_fit)))
            off[k], off_fit[k], spent = improve(off[k], off_fit[k], inst, index, order,
                                                evaluate, config.local_evaluations)
            score.evaluations += spent
            score.cache[off[k].tobytes()] = off_fit[k]
        select = survival.plus if config.survival == "plus" else survival.comma
        pop, fit = select(pop, fit, off, off_fit, config.mu)
        score.keep_only(np.concatenate([pop, off]))
        # stagnation counts (makespan, tardiness) only: the weighted completion time keeps
        # improving by crumbs long after the plan has stopped getting better where it matters
        since_better = 0 if lex_less(fit[0, :2], best_fit[:2])[0] else since_better + 1
        best_fit = fit[0]
        history.append(_row(gen, score.evaluations, fit))
        if on_generation is not None:
            on_generation(history[-1])
    rank = np.argsort(lex_rank(fit), kind="stable")
    return pop[rank], fit[rank], order, history


def _done(best_fit: np.ndarray, lower_bound: int, since_better: int, config: GAConfig,
          deadline: float) -> bool:
    """Stop on stagnation, time, or a makespan at the bound with no tardiness left to remove
    (the weighted completion time might still improve: we accept that)."""
    at_bound = best_fit[0] <= lower_bound and best_fit[1] == 0
    return at_bound or since_better >= config.stagnation or time.perf_counter() >= deadline


def solve_ga(inst: Instance, *, config: GAConfig, lower_bound: int, seed: int,
             time_limit: float, on_generation: OnGeneration | None = None,
             evaluate: Evaluate | None = None) -> PlanResult:
    """The ga plan as a PlanResult (method "ga", status "feasible", seed and history kept).

    One generator, `numpy.random.default_rng(seed)`, drives every random choice, so the same
    instance, seed and config give the same plan whenever the run stops on generations,
    stagnation or the bound; a stop on `time_limit` (seconds) depends on machine speed.
    `evaluate` scores a population (default `schedule.evaluate_population`); swapping it (e.g.
    for a distributed scorer) leaves the operators untouched. Never worse than greedy: the
    greedy plan is in the initial population and the best individual always survives.
    """
    t0 = time.perf_counter()
    rng = np.random.default_rng(seed)
    if evaluate is None:
        def evaluate(assign2d: np.ndarray, order: np.ndarray) -> np.ndarray:
            return evaluate_population(inst, assign2d, order)
    pop, _fit, order, history = run_island(inst, config, rng=rng, evaluate=evaluate,
                                    lower_bound=lower_bound, deadline=t0 + time_limit,
                                    on_generation=on_generation)
    return schedule_result(inst, pop[0], "ga", lower_bound, order, status="feasible", seed=seed,
                           seconds=time.perf_counter() - t0, history=history)
