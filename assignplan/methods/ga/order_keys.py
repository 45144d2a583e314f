"""Evolved decoding orders: a random key per job, the order is sorted by perturbed bottom level.

Random-key encoding after J. C. Bean, "Genetics and random keys for sequencing and
optimization", ORSA J. Computing 6(2), 1994 (from memory); the keys here scale each job's
hours (pseudo-hours h_j * k_j, k_j > 0), and the decoding order is the jobs by largest bottom
level of pseudo-hours, exactly `instance.priority_order`. A job's bottom level with positive
pseudo-hours strictly exceeds each successor's, so every order is a topological order of
`follows` whatever the keys. Keys of 1 give inst.order.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from assignplan.instance import Instance


def bottom_levels(inst: Instance, h: np.ndarray) -> np.ndarray:
    """float64[P, J] bottom levels of pseudo-hours h float64[P, J]: h_j plus the largest
    bottom level among j's successors (h_j for a job without any)."""
    h = np.ascontiguousarray(h, dtype=np.float64)
    return _bottom_levels(h, inst.order[::-1].copy(), inst.succ_ptr, inst.succ_idx)


@njit(cache=True)
def _bottom_levels(h, successors_first, succ_ptr, succ_idx):
    # h_j + max_k b_k equals max_k (h_j + b_k) in floating point too (rounding is monotone),
    # so this gives the same bits as the vectorised form it replaced (a Python loop over
    # jobs that was a tenth of a ga generation on 2,000 jobs)
    bottom = h.copy()
    for q in range(successors_first.shape[0]):
        j = successors_first[q]
        lo, hi = succ_ptr[j], succ_ptr[j + 1]
        if hi == lo:
            continue
        for p in range(h.shape[0]):
            best = bottom[p, succ_idx[lo]]
            for k in range(lo + 1, hi):
                best = max(best, bottom[p, succ_idx[k]])
            bottom[p, j] = h[p, j] + best
    return bottom


def orders_from_keys(inst: Instance, keys: np.ndarray) -> np.ndarray:
    """int64[P, J] decoding orders of keys float64[P, J] (> 0): row p equals
    `priority_order(inst.hours * keys[p], ...)`, computed for the whole population at once."""
    h = inst.hours[None, :] * keys
    bottom = bottom_levels(inst, h)
    index = np.broadcast_to(np.arange(inst.n_jobs), keys.shape)
    return np.lexsort((index, -h, -bottom), axis=-1).astype(np.int64)


def cross_keys(children: np.ndarray, a: np.ndarray, b: np.ndarray, key_a: np.ndarray,
               key_b: np.ndarray) -> np.ndarray:
    """float64[n, J] keys of children int64[n, J] of parents a, b: a job's key comes from the
    parent its row came from (the crossover's own mask, recovered; where a and b agree, from a).
    Call it on the crossover's output, before mutation and repair."""
    return np.where(children == a, key_a, key_b)


def perturb_keys(keys: np.ndarray, rate: float, sigma: float, *,
                 rng: np.random.Generator) -> np.ndarray:
    """New keys float64[n, J]: each key, with probability `rate`, times exp(N(0, sigma^2))
    (a small move in the order, keys stay > 0)."""
    hit = rng.random(keys.shape) < rate
    return np.where(hit, keys * np.exp(rng.normal(0.0, sigma, size=keys.shape)), keys)
