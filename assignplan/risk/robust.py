"""Plans that hold up: the ga scores each candidate by replaying it under K common samples.

`robust_evaluate` is a drop-in `evaluate` for the ga (the fixed score layout of
`methods.ga.population`): each candidate assignment is decoded into its single-estimate
schedule as usual, then replayed under the same K sampled futures with the KEEP policy
(`kernels_replay.replay_population`); its score is

    MAKESPAN    the Q-quantile (nearest rank) of the K replayed makespans
    TARDINESS   the mean over the K futures of the weighted tardiness
    COMPLETION  the mean over the K futures of the weighted completion time
    SPREAD, TAIL of the single-estimate schedule (plateau tie-breaks only)

The K futures are fixed for the whole run and drawn apart from the ones `risk` reports on
(`sampling.PURPOSES`), so a robust plan is judged on futures it was not chosen on.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from assignplan.errors import InputError
from assignplan.instance import Instance
from assignplan.kernels_replay import replay_population
from assignplan.methods.ga.population import COMPLETION, MAKESPAN, TARDINESS, Evaluate
from assignplan.priority import DEFAULT, Priority
from assignplan.risk.replay import nearest_rank
from assignplan.risk.sampling import Sampler
from assignplan.schedule import build_population

DEFAULT_ROBUST_SAMPLES = 32
MAX_ROBUST_SAMPLES = 1_000  # every candidate is replayed this many times


@dataclass(frozen=True, eq=False)
class Robust:
    """The robust objective: the `quantile` of the makespan over `samples` futures of
    `sampler`, drawn from `seed`."""

    quantile: float
    samples: int
    sampler: Sampler
    seed: int = 0

    def __post_init__(self) -> None:
        check_robust(self.quantile, self.samples)


def check_robust(quantile: float, samples: int) -> None:
    """InputError unless 0 < quantile <= 1 and 1 <= samples <= MAX_ROBUST_SAMPLES."""
    problems = []
    if not 0 < quantile <= 1:
        problems.append(f"--robust {quantile:g}: the makespan quantile to plan for must be"
                        " above 0 and at most 1 (e.g. 0.9)")
    if not 1 <= samples <= MAX_ROBUST_SAMPLES:
        problems.append(f"--samples {samples}: must be between 1 and {MAX_ROBUST_SAMPLES:,}"
                        " for --robust")
    if problems:
        raise InputError(problems)


def robust_evaluate(inst: Instance, robust: Robust, *, justify: bool,
                    priority: Priority = DEFAULT) -> Evaluate:
    """The ga scorer of the module docstring; `justify` as the ga's `improvement.justify`
    (keeping the planned schedule that is best under `priority`)."""
    factors = np.ascontiguousarray(robust.sampler.factors(robust.seed, 0, robust.samples,
                                                          purpose="robust"))
    rank = nearest_rank(robust.quantile, robust.samples) - 1

    def evaluate(assign2d: np.ndarray, order: np.ndarray) -> np.ndarray:
        start, score = build_population(inst, assign2d, order, justify=justify,
                                        priority=priority)
        failed = ~np.isfinite(score[:, MAKESPAN])
        futures = np.empty((len(assign2d), robust.samples, 3), dtype=np.float64)
        replay_population(inst.arrays, np.ascontiguousarray(assign2d, dtype=np.int64), start,
                          factors, inst.limit, futures)
        score[:, MAKESPAN] = np.sort(futures[:, :, 0], axis=1)[:, rank]
        score[:, TARDINESS] = futures[:, :, 1].mean(axis=1)
        score[:, COMPLETION] = futures[:, :, 2].mean(axis=1)
        score[failed] = np.inf
        return score

    return evaluate
