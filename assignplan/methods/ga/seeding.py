"""The initial population: greedy plans from several priority orders, balanced greedy plans,
then random plans, each with the order keys that decode it."""

from __future__ import annotations

import numpy as np

from assignplan.instance import Instance, priority_order
from assignplan.methods.ga.balance import balanced_eligibility
from assignplan.methods.ga.encoding import EligibleIndex, random_population
from assignplan.methods.ga.order_keys import orders_from_keys
from assignplan.methods.ga.selection import lex_rank
from assignplan.methods.ga.settings import GASettings
from assignplan.methods.greedy import (
    best_plan,
    candidate_plans,
    completion_variants,
    greedy_assign,
)
from assignplan.plan import objective
from assignplan.priority import DEFAULT, Priority
from assignplan.schedule import check_order

ALPHAS = (0.5, 1.0, 0.0)  # scarcity exponents of the greedy variants (0.5 helps most often)


def greedy_variant_keys(inst: Instance, n: int, noise: float, *,
                        rng: np.random.Generator) -> list[np.ndarray]:
    """n pseudo-hour factors float64[J]: k_j = (N / e_j)^a_k * U(1 +- noise) (see below)."""
    scarcity = inst.n_nodes / inst.elig.counts()
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


def initial_population(inst: Instance, settings: GASettings, index: EligibleIndex, *,
                       rng: np.random.Generator, priority: Priority = DEFAULT
                       ) -> tuple[np.ndarray, np.ndarray, int]:
    """(int64[mu, J] population, float64[mu, J] order keys, index of the best seed).

    Members: the greedy plan of inst.order (keys 1), greedy plans of the orders of
    `greedy_variant_keys` (each with its keys), greedy plans of the first of those orders
    restricted to the node groups `balance.balanced_eligibility` gives each job (with those
    orders' keys), then random eligible plans. The fixed decoding order (when orders do not
    evolve) is the best seed's; random members get its keys. The builder replays a greedy
    plan exactly under its own order, so with evolved orders every seed decodes to its greedy
    plan, and with one fixed order the run starts from the best greedy plan: either way the
    run never ends worse than greedy. The best seed is the best as `priority` reads the
    objective.
    """
    mu, seeding = settings.population.mu, settings.seeding
    keys = [np.ones(inst.n_jobs)]
    keys += greedy_variant_keys(inst, min(seeding.greedy_variants, mu - 1),
                                seeding.order_noise, rng=rng)
    variants = orders_from_keys(inst, np.stack(keys[1:])) if len(keys) > 1 else []
    orders = [inst.order] + [check_order(inst, o) for o in variants]
    plans = [greedy_assign(inst, order) for order in orders]
    n_balanced = min(seeding.balanced_seeds, len(orders), mu - len(orders))
    allowed = balanced_eligibility(inst) if n_balanced > 0 else None
    if allowed is not None:
        plans += [greedy_assign(inst, order, allowed) for order in orders[:n_balanced]]
        keys += keys[:n_balanced]
    scores = np.array([objective(inst, inst.end_times(assign, start))
                       for assign, start in plans], dtype=np.float64)
    best = int(np.argmin(lex_rank(priority.read(scores))))
    seeds = np.stack([assign for assign, _ in plans])
    rest = random_population(inst, mu - len(seeds), index, rng=rng)
    all_keys = np.stack(keys + [keys[best]] * len(rest))
    return np.concatenate([seeds, rest]), all_keys, best


def plan_keys(inst: Instance, start: np.ndarray) -> np.ndarray:
    """float64[J] order keys that decode a plan in its start order (ties by inst.order), so
    the builder starts no job later than the plan does (`repack.start_order`)."""
    from assignplan.methods.ga.improvers.repack import keys_for_order, start_order

    return keys_for_order(inst, start_order(start, inst.order))


def completion_seeds(inst: Instance, makespan_bound: int, n: int, *,
                     horizon: int | None = None, deadline: float | None = None,
                     priority: Priority = DEFAULT) -> tuple[np.ndarray, np.ndarray]:
    """(int64[k, J] plans, float64[k, J] their order keys), best first: the greedy method's
    plan (`greedy.candidate_plans`, best of them), then the n lexicographically best distinct
    plans of `greedy.completion_variants` read backwards from `horizon` (default: the greedy
    plans' best makespan) that differ from it. The greedy plan always comes first, so a phase
    seeded with these ends no worse than greedy in the objective's own order. Plans are
    ranked as `priority` reads the objective, and greedy's plans are those it makes for it."""
    plans = candidate_plans(inst, makespan_bound, priority)
    first = plans[best_plan(inst, plans, priority)]
    if horizon is None:
        horizon = min(int(inst.end_times(*p).max()) for p in plans.values())
    pool = [first] + list(plans.values())
    if n > 0:
        pool += completion_variants(inst, horizon, deadline=deadline)
    scores = np.array([objective(inst, inst.end_times(*p)) for p in pool])
    rank = [0] + [k for k in np.argsort(lex_rank(priority.read(scores)), kind="stable").tolist()
                  if k]
    chosen, seen = [], set()
    for k in rank:
        code = pool[k][0].tobytes() + pool[k][1].tobytes()
        if code not in seen:
            seen.add(code)
            chosen.append(k)
        if len(chosen) == n + 1:
            break
    return (np.stack([pool[k][0] for k in chosen]),
            np.stack([plan_keys(inst, pool[k][1]) for k in chosen]))
