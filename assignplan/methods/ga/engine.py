"""The genetic algorithm's loop: select, vary, repair, evaluate what changed, survive, record."""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable
from functools import partial

import numpy as np

from assignplan.instance import Instance, priority_order
from assignplan.methods.ga import crossover, mutation, survival
from assignplan.methods.ga.balance import balanced_eligibility, reserved_eligibility
from assignplan.methods.ga.config import GAConfig
from assignplan.methods.ga.descent import descent_step
from assignplan.methods.ga.encoding import EligibleIndex, node_load, random_population
from assignplan.methods.ga.local import improve, improve_order
from assignplan.methods.ga.order_keys import cross_keys, orders_from_keys, perturb_keys
from assignplan.methods.ga.repack import keys_for_order, repack_step
from assignplan.methods.ga.repair import repair
from assignplan.methods.ga.selection import lex_less, lex_rank, tournament
from assignplan.methods.greedy import greedy_assign
from assignplan.model import HistoryRow
from assignplan.plan import PlanResult, objective
from assignplan.schedule import check_order, evaluate_population, schedule_result

# (assign int64[P, J], order int64[J] or int64[P, J]) -> fitness float64[P, 3], lower is
# better; a fourth column, if given, is the "spread" tie-break (see `plateau_key`)
Evaluate = Callable[[np.ndarray, np.ndarray], np.ndarray]
OnGeneration = Callable[[HistoryRow], None]
ALPHAS = (0.5, 1.0, 0.0)  # scarcity exponents of the greedy variants (0.5 helps most often)


def greedy_variant_keys(inst: Instance, n: int, noise: float, *,
                        rng: np.random.Generator) -> list[np.ndarray]:
    """n pseudo-hour factors float64[J]: k_j = (N / e_j)^a_k * U(1 +- noise) (see below)."""
    scarcity = inst.n_nodes / inst.eligible.sum(axis=1)
    keys = []
    for k in range(n):
        eps = noise if k >= len(ALPHAS) - 1 else 0.0
        noise_k = rng.uniform(1.0 - eps, 1.0 + eps, size=inst.n_jobs)
        keys.append(scarcity ** ALPHAS[k % len(ALPHAS)] * noise_k)
    return keys


def greedy_variant_orders(inst: Instance, n: int, noise: float, *,
                          rng: np.random.Generator) -> list[np.ndarray]:
    """n priority orders: bottom levels of pseudo-hours h_j * (N / e_j)^a_k * U(1 +- noise).

    e_j is job j's number of eligible nodes; a_k cycles through ALPHAS, so some variants
    place the jobs few nodes can hold earlier (they then claim their special nodes before
    plain jobs crowd them). The first len(ALPHAS) - 1 variants carry no noise. Bottom levels
    of positive pseudo-hours still fall strictly along every `follows` edge, so each order
    respects follows (and is checked to).
    """
    return [check_order(inst, priority_order(inst.hours * k, inst.pred_ptr, inst.pred_idx,
                                             inst.succ_ptr, inst.succ_idx))
            for k in greedy_variant_keys(inst, n, noise, rng=rng)]


def initial_population(inst: Instance, config: GAConfig, index: EligibleIndex, *,
                       rng: np.random.Generator
                       ) -> tuple[np.ndarray, np.ndarray, int]:
    """(int64[mu, J] population, float64[mu, J] order keys, index of the best seed).

    Members: the greedy plan of inst.order (keys 1), greedy plans of the orders of
    `greedy_variant_keys` (each with its keys), greedy plans of the first of those orders
    restricted to the node groups `balance.balanced_eligibility` gives each job (with those
    orders' keys), then random eligible plans. The fixed decoding order (when orders do not
    evolve) is the best seed's; random members get its keys. The builder replays a greedy
    plan exactly under its own order, so with evolved orders every seed decodes to its greedy
    plan, and with one fixed order the run starts from the best greedy plan: either way the
    run never ends worse than greedy.
    """
    keys = [np.ones(inst.n_jobs)]
    keys += greedy_variant_keys(inst, min(config.greedy_variants, config.mu - 1),
                                config.order_noise, rng=rng)
    variants = orders_from_keys(inst, np.stack(keys[1:])) if len(keys) > 1 else []
    orders = [inst.order] + [check_order(inst, o) for o in variants]
    plans = [greedy_assign(inst, order) for order in orders]
    n_balanced = min(config.balanced_seeds, len(orders), config.mu - len(orders))
    allowed = balanced_eligibility(inst) if n_balanced > 0 else None
    if allowed is not None:
        plans += [greedy_assign(inst, order, allowed) for order in orders[:n_balanced]]
        keys += keys[:n_balanced]
    jobs = np.arange(inst.n_jobs)
    scores = np.array([objective(inst, start + inst.duration[jobs, assign])
                       for assign, start in plans], dtype=np.float64)
    best = int(np.argmin(lex_rank(scores)))
    seeds = np.stack([assign for assign, _ in plans])
    rest = random_population(inst, config.mu - len(seeds), index, rng=rng)
    all_keys = np.stack(keys + [keys[best]] * len(rest))
    return np.concatenate([seeds, rest]), all_keys, best


def vary(pop: np.ndarray, fit: np.ndarray, inst: Instance, config: GAConfig,
         index: EligibleIndex, horizon: int, *, rng: np.random.Generator,
         keys: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray | None]:
    """(int64[lam, J] offspring, float64[lam, J] their order keys or None): tournament,
    crossover, bit-flip mutation, then repair; keys (float64[P, J], if given) follow the
    crossover's choice per job, then get a small perturbation (`order_keys`)."""
    parents = tournament(fit, 2 * config.lam, config.tournament_size, rng=rng)
    pa, pb = parents[: config.lam], parents[config.lam :]
    a, b = pop[pa], pop[pb]
    if config.crossover == "uniform":
        children = crossover.uniform(a, b, config.crossover_bias, rng=rng)
    else:
        children = crossover.kpoint(a, b, config.kpoints, inst.order, rng=rng)
    child_keys = None
    if keys is not None:
        child_keys = perturb_keys(cross_keys(children, a, b, keys[pa], keys[pb]),
                                  config.key_rate, config.key_sigma, rng=rng)
    rate = config.mutation_flips / (inst.n_jobs * inst.n_nodes)
    if config.mutation == "symmetric":
        rows = mutation.bit_flip(children, inst.n_nodes, rate, rng=rng)
    else:
        rows = mutation.bit_flip_asymmetric(children, node_load(inst, children), rate, rng=rng)
    return repair(rows, inst, index, horizon, fill=config.repair_fill, keep=config.repair_keep,
                  rng=rng), child_keys


def plateau_key(inst: Instance, assign2d: np.ndarray, fit: np.ndarray) -> np.ndarray:
    """float64[P, 4] selection key: (makespan, weighted tardiness, B, weighted completion).

    B is fit[:, 3] when the scorer gave it (sum_i F_i^2 over built node finishes F, see
    `schedule.evaluate_population(spread=True)`), else the estimate
    sum_i L_i^2 / sum_i L_i over the node loads L (`encoding.node_load`).
    The makespan sits on plateaus: many plans share it because several nodes end together,
    and moving one job off one of them (or packing one of them tighter) changes nothing
    visible. A lower sum of squares means the latest nodes end earlier: a step towards the
    next makespan drop. Used for tournaments, survival and local search only; the reported
    objective stays (makespan, tardiness, completion).
    With five scorer columns (`evaluate_population(tail=True)`) the key is float64[P, 5]:
    (makespan, tardiness, T, B, completion), T = fit[:, 4] the area of the jobs ending at the
    makespan: on packing-like batches a tighter first layer shows in T before anywhere else
    (the work Falkenauer's fill-based fitness pushes out of the critical bins, J.
    Heuristics 2, 1996, from memory).
    """
    if fit.shape[1] == 5:  # the tail area first, then the spread
        return np.column_stack([fit[:, 0], fit[:, 1], fit[:, 4], fit[:, 3], fit[:, 2]])
    if fit.shape[1] == 4:
        spread = fit[:, 3]
    else:
        load = node_load(inst, assign2d)
        spread = (load**2).sum(axis=1) / np.maximum(load.sum(axis=1), 1.0)
    return np.column_stack([fit[:, 0], fit[:, 1], spread, fit[:, 2]])


class CachedEvaluate:
    """Scores a population of genomes, reusing the fitness of genomes seen in the last
    generation (a genome: int64[J] assignment, followed by its order keys' bits when orders
    evolve; see `Genomes`).

    Offspring identical to a parent (or to each other) are not rebuilt; the cache holds only
    the current parents and offspring, so memory stays O((mu + lam) * J).
    """

    def __init__(self, evaluate: Callable[[np.ndarray], np.ndarray]):
        self.evaluate = evaluate
        self.cache: dict[bytes, np.ndarray] = {}
        self.evaluations = 0

    def __call__(self, pop: np.ndarray) -> np.ndarray:
        keys = [row.tobytes() for row in pop]
        todo = {k: r for r, k in enumerate(keys) if k not in self.cache}
        if todo:
            scores = self.evaluate(pop[list(todo.values())])
            self.evaluations += len(todo)
            self.cache.update(zip(todo, scores, strict=True))
        return np.stack([self.cache[k] for k in keys])

    def keep_only(self, pop: np.ndarray) -> None:
        """Forget every genome not in pop."""
        keys = {row.tobytes() for row in pop}
        self.cache = {k: v for k, v in self.cache.items() if k in keys}


class Genomes:
    """Packing of (assignment int64[P, J], keys float64[P, J] or None) into one int64 array
    [P, J] or [P, 2J] (the keys' bits), so caching, deduplication and survival handle a plan
    and its decoding order as one row."""

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
               migrant_keys: np.ndarray | None = None,
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[HistoryRow]]:
    """One GA run: (population int64[mu, J], fitness float64[mu, 3], decoding order, history),
    population best first. The decoding order is int64[mu, J] (one per member, in the same
    order) when `config.evolve_order`, else the one fixed int64[J].

    `migrants_in` (int64[m, J], valid plans) join the initial population, replacing its last
    members, decoded by `migrant_keys` (float64[m, J] order keys) if given, else in the best
    greedy order: the seam for an island model and for `solve_ga`'s reserved phase.
    `deadline` is a time.perf_counter() reading.
    """
    index = EligibleIndex.of(inst)
    pop, keys, best = initial_population(inst, config, index, rng=rng)
    order = orders_from_keys(inst, keys[[best]])[0]  # keys 1 give exactly inst.order
    if migrants_in is not None and len(migrants_in):
        keep = max(1, config.mu - len(migrants_in))
        pop = np.concatenate([pop[:keep], migrants_in])
        keys = np.concatenate([keys[:keep], np.repeat(keys[[best]], len(migrants_in), axis=0)
                               if migrant_keys is None else migrant_keys])
    genomes = Genomes(inst.n_jobs, config.evolve_order)

    def decode_orders(k: np.ndarray | None) -> np.ndarray:
        return order if k is None else orders_from_keys(inst, k)

    def score_genomes(g: np.ndarray) -> np.ndarray:
        assign, k = genomes.split(g)
        full = evaluate(assign, decode_orders(k))
        return full if config.tiebreak in ("spread", "tail") else full[:, :3]

    score = CachedEvaluate(score_genomes)
    keys = keys if config.evolve_order else None
    full = score(genomes.join(pop, keys))  # fitness, with a fourth tie-break column or not
    fit = full[:, :3]
    history = [_row(0, score.evaluations, fit)]
    if on_generation is not None:
        on_generation(history[-1])
    best_fit, since_better = fit[np.argmin(lex_rank(fit))], 0
    if config.tiebreak != "none":
        def key(a: np.ndarray, f: np.ndarray) -> np.ndarray:
            return plateau_key(inst, a, f if config.tiebreak in ("spread", "tail") else f[:, :3])
    else:
        def key(a: np.ndarray, f: np.ndarray) -> np.ndarray:
            return f
    # columns of the key that give back the scorer's rows (`full`)
    back = ([0, 1, 3] if config.tiebreak != "none" else [0, 1, 2])
    if full.shape[1] == 4:  # "spread" with a scorer that gave it
        back = back + [2]
    if full.shape[1] == 5:  # "tail": key (ms, tardiness, tail, spread, completion)
        back = [0, 1, 4, 3, 2]
    pop_key = key(pop, full)
    tried: set[bytes] = set()  # repacking sub-problems that gave nothing (`repack_nodes`)
    plateau = 3 if full.shape[1] == 5 else 2  # key columns stagnation watches
    best_key = pop_key[int(np.argmin(lex_rank(pop_key)))]
    for gen in range(1, config.generations + 1):
        if _done(best_fit, lower_bound, since_better, config, deadline):
            break
        off, off_keys = vary(pop, pop_key, inst, config, index, int(best_fit[0]), rng=rng,
                             keys=keys)
        off_full = score(genomes.join(off, off_keys))
        off_key = key(off, off_full)
        if config.local_search:
            k = int(np.argmin(lex_rank(off_key)))
            order_k = order if off_keys is None else decode_orders(off_keys[[k]])[0]
            off[k], off_full[k], spent = improve(
                off[k], off_full[k], inst, index, order_k, evaluate, config.local_evaluations,
                justify=config.justify, key=key if config.tiebreak != "none" else None,
                target=lower_bound)
            if off_keys is not None and config.order_evaluations:
                score.evaluations += spent
                off_keys[k], off_full[k], spent = improve_order(
                    off[k], off_keys[k], off_full[k], inst, evaluate, config.order_evaluations,
                    justify=config.justify, key=key if config.tiebreak != "none" else None)
            off_key[k] = key(off[[k]], off_full[[k]])[0]
            score.evaluations += spent
            score.cache[genomes.join(off[[k]], None if off_keys is None
                                     else off_keys[[k]])[0].tobytes()] = off_full[k]
        select = survival.plus if config.survival == "plus" else survival.comma
        kept, pop_key = select(genomes.join(pop, keys), pop_key,
                               genomes.join(off, off_keys), off_key, config.mu)
        pop, keys = genomes.split(kept)
        if config.descent_trials:
            _improve_best(pop, keys, pop_key, back, inst, config, order, decode_orders,
                          evaluate, key, score, genomes, partial(
                              descent_step, budget=config.descent_trials,
                              justify=config.justify))
            kept = genomes.join(pop, keys)
        if config.repack_nodes >= 2:
            _improve_best(pop, keys, pop_key, back, inst, config, order, decode_orders,
                          evaluate, key, score, genomes, partial(
                              repack_step, nodes=config.repack_nodes, target=lower_bound,
                              deterministic_time=config.repack_effort,
                              justify=config.justify, rng=rng, tried=tried))
            kept = genomes.join(pop, keys)
        full = pop_key[:, back]
        fit = full[:, :3]
        score.keep_only(np.concatenate([kept, genomes.join(off, off_keys)]))
        # stagnation counts (makespan, tardiness) only, and the tail area of the "tail"
        # tie-break (a packing getting tighter is progress): the weighted completion time
        # keeps improving by crumbs long after the plan has stopped getting better
        best = int(np.argmin(lex_rank(pop_key)))
        since_better = (0 if lex_less(pop_key[best, :plateau], best_key[:plateau])[0]
                        else since_better + 1)
        best_key = pop_key[best]
        best_fit = fit[best]
        history.append(_row(gen, score.evaluations, fit))
        if on_generation is not None:
            on_generation(history[-1])
    rank = np.argsort(lex_rank(fit), kind="stable")
    orders = order if keys is None else decode_orders(keys[rank])
    return pop[rank], fit[rank], orders, history


def _improve_best(pop, keys, pop_key, back, inst, config, order, decode_orders, evaluate,
                  key, score, genomes, step) -> None:
    """Apply `step` (`descent.descent_step` or `repack.repack_step`, their remaining
    arguments bound) to the best member, in place: its genome, key row and cache entry change
    together, and the trial counts as an evaluation."""
    b = int(np.argmin(lex_rank(pop_key)))
    order_b = order if keys is None else decode_orders(keys[[b]])[0]
    full_b = pop_key[b, back]
    if config.tiebreak not in ("spread", "tail"):
        full_b = full_b[:3]

    def scorer(a: np.ndarray, o: np.ndarray) -> np.ndarray:
        score.evaluations += len(a)
        return evaluate(a, o)[:, : len(full_b)]

    found = step(pop[b], None if keys is None else keys[b], full_b, inst, order_b, scorer,
                 key)
    if found is None:
        return
    pop[b], new_keys, new_full = found
    if keys is not None:
        keys[b] = new_keys
    pop_key[b] = key(pop[[b]], new_full[None])[0]
    score.cache[genomes.join(pop[[b]], None if keys is None else keys[[b]])[0].tobytes()] = \
        new_full


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
    `evaluate` scores a population (default `schedule.evaluate_population`, forward-backward
    improved when `config.justify`, with the node-spread column for the "spread" tie-break;
    a scorer may return 3 columns, the tie-break then falls back to "balance"); swapping it
    (e.g. for a distributed scorer) leaves the operators untouched. The returned plan is
    rebuilt exactly as the default scorer built it. Never worse than greedy: every greedy seed
    decodes to its greedy plan (it carries its own order keys), and the best individual by
    (makespan, tardiness) always survives.
    """
    t0 = time.perf_counter()
    rng = np.random.default_rng(seed)
    if evaluate is None:
        def evaluate(assign2d: np.ndarray, order: np.ndarray) -> np.ndarray:
            return evaluate_population(inst, assign2d, order, justify=config.justify,
                                       spread=config.tiebreak == "spread",
                                       tail=config.tiebreak == "tail")
    history: list[HistoryRow] = []
    migrants = migrant_keys = None
    reserved = reserved_eligibility(inst) if config.reserve_share > 0 else None
    if reserved is not None:
        # phase 1: the same batch with scarce node groups kept for the jobs that need them
        # (`balance.reserved_eligibility`); its plans are plans of `inst` too, and carry
        # their decoding orders into phase 2 as order keys
        narrow = dataclasses.replace(inst, eligible=reserved)
        first = config.model_copy(update={
            "generations": math.ceil(config.reserve_share * config.generations)})
        pop, _fit, order, history = run_island(
            narrow, first, rng=rng, evaluate=evaluate, lower_bound=lower_bound,
            deadline=t0 + config.reserve_share * time_limit, on_generation=on_generation)
        n = max(1, config.mu // 2)
        migrants = pop[:n]
        if config.evolve_order:
            migrant_keys = np.stack([keys_for_order(inst, o) for o in order[:n]])
        config = config.model_copy(update={
            "generations": max(config.generations - (len(history) - 1), 0)})
    # phase 2 (the only one without reservations): the whole eligibility, greedy seeds and
    # phase 1's best half, so the run is never worse than either
    # its rows continue phase 1's history; its generation 0 (phase 1's end plus fresh
    # seeds) is not a generation of the run and is left out
    gen0, evals0 = (history[-1].generation, history[-1].evaluations) if history else (0, 0)

    def shifted(row: HistoryRow) -> HistoryRow:
        return row.model_copy(update={"generation": row.generation + gen0,
                                      "evaluations": row.evaluations + evals0})

    def forward(row: HistoryRow) -> None:
        if on_generation is not None and (row.generation > 0 or not history):
            on_generation(shifted(row))

    pop, _fit, order, rows = run_island(inst, config, rng=rng, evaluate=evaluate,
                                        lower_bound=lower_bound, deadline=t0 + time_limit,
                                        on_generation=forward, migrants_in=migrants,
                                        migrant_keys=migrant_keys)
    history = history + [shifted(r) for r in rows[(1 if history else 0):]]
    return schedule_result(inst, pop[0], "ga", lower_bound, order if order.ndim == 1 else order[0],
                           justify=config.justify,
                           status="feasible", seed=seed, seconds=time.perf_counter() - t0,
                           history=history)
