"""The island model: K populations side by side, in synchronous epochs, best plans along a ring.

Island k draws its random numbers from ``SeedSequence(seed).spawn(K)[k]``: in epoch e from that
sequence's e-th child (``SeedSequence(seed, spawn_key=(k, e))``, built directly). An epoch is
one task per island (`EpochTask`, run by whatever `executor.Executor` the caller hands in): the
island's population runs `islands.epoch` generations (`loop.run_island`); then every island
sends its `islands.migrants` best plans to the next one along the ring, where they replace the
worst members, and the next epoch starts from there. A task's outcome depends only on what it
is given, and the migration waits for every island, so the plan depends on the seed, K and the
epoch length, never on how many workers ran the tasks or in what order they finished (as long
as no run stops on the time budget, which depends on the machine, as in the one-population run).

The run stops after `stopping.generations` generations per island, `stopping.stagnation`
generations without a better best over all islands, at the lower bound with no tardiness
left, or at the budget; the completion phase of `loop.solve_ga` then finishes the best island
in this process (its random numbers from ``SeedSequence(seed, spawn_key=(K,))``, the child
after the islands'). There is no reserved phase: island diversity takes its place.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from assignplan.documents import HistoryRow
from assignplan.executor import Executor, InProcess
from assignplan.instance import Instance
from assignplan.methods.ga.improvers.repack import keys_for_order
from assignplan.methods.ga.loop import (
    Island,
    OnGeneration,
    Phases,
    completion_phase,
    default_evaluate,
    run_island,
)
from assignplan.methods.ga.population import MAKESPAN, TARDINESS
from assignplan.methods.ga.selection import lex_less, lex_rank
from assignplan.methods.ga.settings import GASettings, sized
from assignplan.plan import PlanResult
from assignplan.schedule import schedule_result


def island_stream(seed: int, island: int, epoch: int) -> np.random.Generator:
    """Island `island`'s generator in epoch `epoch`: the epoch-th child of
    ``SeedSequence(seed).spawn(K)[island]`` (for any K > island)."""
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(island, epoch)))


@dataclass(frozen=True, eq=False)
class EpochTask:
    """One island's epoch: its population from the last epoch (plans int64[P, J], order keys
    float64[P, J], best first; None in the first epoch: seeded afresh) with the migrants
    already in, and the seconds left of the budget."""

    island: int
    epoch: int
    assign: np.ndarray | None
    keys: np.ndarray | None
    seconds: float

    def __str__(self) -> str:
        return f"island {self.island + 1}, epoch {self.epoch + 1}"


@dataclass(frozen=True, eq=False)
class IslandEpoch:
    """Runs an `EpochTask` (plain data, sent to a worker once per run): `settings` hold the
    epoch's generations; the population comes back best first."""

    inst: Instance
    settings: GASettings
    lower_bound: int
    seed: int

    def __call__(self, task: EpochTask) -> Island:
        initial = None if task.assign is None else (task.assign, task.keys)
        return run_island(self.inst, self.settings, rng=island_stream(self.seed, task.island,
                                                                     task.epoch),
                          evaluate=default_evaluate(self.inst, self.settings),
                          lower_bound=self.lower_bound,
                          deadline=time.perf_counter() + task.seconds, initial=initial)


def member_keys(inst: Instance, island: Island) -> np.ndarray:
    """float64[P, J]: order keys decoding to each member's order (the one fixed order for
    all members when orders do not evolve)."""
    orders = island.orders if island.orders.ndim == 2 else island.orders[None, :]
    keys = np.stack([keys_for_order(inst, o) for o in orders])
    return np.repeat(keys, len(island.assign), axis=0) if len(keys) == 1 else keys


def migrate(inst: Instance, islands: Sequence[Island], migrants: int
            ) -> list[tuple[np.ndarray, np.ndarray]]:
    """Each island's next population (plans, keys), best first: its own best members, then the
    `migrants` best of the island before it on the ring in place of its worst."""
    keys = [member_keys(inst, island) for island in islands]
    out = []
    for k, island in enumerate(islands):
        src = (k - 1) % len(islands)
        m = min(migrants, len(islands[src].assign), max(0, len(island.assign) - 1))
        keep = len(island.assign) - m
        out.append((np.concatenate([island.assign[:keep], islands[src].assign[:m]]),
                    np.concatenate([keys[k][:keep], keys[src][:m]])))
    return out


def best_of(islands: Sequence[Island]) -> int:
    """The island whose best plan is lexicographically best (ties: the lower island)."""
    return int(np.argmin(lex_rank(np.stack([island.score[0, :3] for island in islands]))))


@dataclass(frozen=True, eq=False)
class IslandRun:
    """The islands as the last epoch left them, and the run's history (a row per epoch)."""

    islands: list[Island]
    history: list[HistoryRow]


def evolve_islands(inst: Instance, settings: GASettings, *, lower_bound: int, seed: int,
                   seconds: float, executor: Executor | None = None,
                   on_epoch: OnGeneration | None = None) -> IslandRun:
    """The island epochs of a run (settings already `sized`; `settings.islands.count`
    islands) within `seconds`."""
    isl, stopping = settings.islands, settings.stopping
    epochs = max(1, math.ceil(stopping.generations / isl.epoch))
    task_settings = settings.replace(stopping={"generations": isl.epoch})
    job = IslandEpoch(inst, task_settings, lower_bound, seed)
    executor = executor or InProcess()
    end = time.perf_counter() + seconds
    populations: list[tuple[np.ndarray, np.ndarray] | tuple[None, None]] = \
        [(None, None)] * isl.count
    history: list[HistoryRow] = []
    best_score, since_better, generations, evaluations = None, 0, 0, 0
    islands: list[Island] = []
    for epoch in range(epochs):
        left = end - time.perf_counter()
        if epoch and left <= 0:
            break
        tasks = [EpochTask(k, epoch, a, keys, max(left, 0.0))
                 for k, (a, keys) in enumerate(populations)]
        found: list[Island | None] = [None] * isl.count
        for k, island in executor.run(job, tasks):
            found[k] = island
        islands = [island for island in found if island is not None]
        ran = max(island.history[-1].generation for island in islands)
        generations += ran
        evaluations += sum(island.history[-1].evaluations for island in islands)
        top = islands[best_of(islands)].score[0]
        better = best_score is None or bool(lex_less(top[:3], best_score[:3])[0])
        since_better = 0 if better else since_better + ran
        best_score = top if better else best_score
        history.append(HistoryRow(
            generation=generations, evaluations=evaluations,
            best_makespan_h=float(best_score[MAKESPAN]) / 60,
            median_makespan_h=float(np.median(np.concatenate(
                [island.score[:, MAKESPAN] for island in islands]))) / 60,
            best_tardiness_h=float(best_score[TARDINESS]) / 60))
        if on_epoch is not None:
            on_epoch(history[-1])
        at_bound = best_score[MAKESPAN] <= lower_bound and best_score[TARDINESS] == 0
        if at_bound or since_better >= stopping.stagnation or ran == 0:
            break
        populations = migrate(inst, islands, isl.migrants)
    return IslandRun(islands, history)


def solve_islands(inst: Instance, *, settings: GASettings, lower_bound: int, seed: int,
                  budget: float, executor: Executor | None = None,
                  on_generation: OnGeneration | None = None,
                  term_bounds: tuple[float, float] | None = None) -> PlanResult:
    """The ga plan of an island run (method "ga"), finished by the completion phase as in
    `loop.solve_ga`; the same PlanResult fields."""
    t0 = time.perf_counter()
    settings = sized(settings, inst.n_jobs)
    comp = settings.completion
    history = Phases(on_generation)
    run = evolve_islands(inst, settings, lower_bound=lower_bound, seed=seed,
                         seconds=(1.0 - comp.completion_share) * budget, executor=executor,
                         on_epoch=history.add)
    island = run.islands[best_of(run.islands)]
    if comp.completion_share > 0:
        final = math.ceil(comp.completion_share * settings.stopping.generations)
        rng = np.random.default_rng(np.random.SeedSequence(
            seed, spawn_key=(settings.islands.count,)))
        island = completion_phase(
            inst, settings.replace(stopping={"generations": final}), island, rng=rng,
            evaluate=default_evaluate(inst, settings), lower_bound=lower_bound,
            end=t0 + budget, seed_end=time.perf_counter() + comp.completion_seed_time * budget,
            history=history, term_bounds=term_bounds)
    order = island.orders if island.orders.ndim == 1 else island.orders[0]
    return schedule_result(inst, island.assign[0], "ga", lower_bound, order,
                           justify=settings.improvement.justify, status="feasible", seed=seed,
                           seconds=time.perf_counter() - t0, history=history.rows)
