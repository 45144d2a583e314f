"""Variation: tournaments pick parents, crossover and bit-flip mutation make the offspring's
matrices, repair makes them valid plans again; the order keys follow the rows."""

from __future__ import annotations

import numpy as np

from assignplan.instance import Instance
from assignplan.methods.ga import crossover, mutation
from assignplan.methods.ga.encoding import EligibleIndex, node_load
from assignplan.methods.ga.order_keys import cross_keys, perturb_keys
from assignplan.methods.ga.repair import repair
from assignplan.methods.ga.selection import tournament
from assignplan.methods.ga.settings import GASettings


def vary(assign: np.ndarray, keys: np.ndarray | None, key: np.ndarray, inst: Instance,
         settings: GASettings, index: EligibleIndex, horizon: int, *,
         rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray | None]:
    """(int64[lam, J] offspring, float64[lam, J] their order keys or None) of the population
    (assign int64[P, J], keys or None, selection keys `key` float64[P, C]): tournament,
    crossover, bit-flip mutation, then repair against `horizon` (minutes); a child's order
    key per job comes from the parent its row came from, then gets a small perturbation."""
    lam, var = settings.population.lam, settings.variation
    parents = tournament(key, 2 * lam, settings.population.tournament_size, rng=rng)
    pa, pb = parents[:lam], parents[lam:]
    a, b = assign[pa], assign[pb]
    if var.crossover == "uniform":
        children = crossover.uniform(a, b, var.crossover_bias, rng=rng)
    else:
        children = crossover.kpoint(a, b, var.kpoints, inst.order, rng=rng)
    child_keys = None
    if keys is not None:
        child_keys = perturb_keys(cross_keys(children, a, b, keys[pa], keys[pb]),
                                  var.key_rate, var.key_sigma, rng=rng)
    rate = var.mutation_flips / (inst.n_jobs * inst.n_nodes)
    if var.mutation == "symmetric":
        rows = mutation.bit_flip(children, inst.n_nodes, rate, rng=rng)
    else:
        rows = mutation.bit_flip_asymmetric(children, node_load(inst, children), rate, rng=rng)
    return repair(rows, inst, index, horizon, fill=var.repair_fill, keep=var.repair_keep,
                  rng=rng), child_keys
