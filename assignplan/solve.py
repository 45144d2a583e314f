"""Solve a batch with a method: the one way from an instance to a plan.

Every method has the same signature (instance, seed, budget, its settings, a progress hook,
the lower bounds) and returns the one result type; this module owns what they share:

- the registry of methods, each with the settings type it reads (a method given settings it
  does not read is an error, never silently ignored);
- the lower bounds, one per term of the objective, computed once per batch (unless the
  caller has them) and attached to the result in one place, the makespan's raised to a bound
  the method proved itself (exact's);
- the time budget: it counts from the call, so the bound's time comes off the method's share;
- the exact method's size guard;
- the robust objective (`risk.robust`), which only the ga reads;
- the priority (`assignplan.priority`: which term of the objective comes first), which every
  method reads and the result records.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from assignplan.bounds import LowerBound, lower_bound
from assignplan.documents import HistoryRow
from assignplan.errors import InputError
from assignplan.executor import Executor
from assignplan.instance import Instance
from assignplan.methods.ga.settings import GASettings
from assignplan.plan import PlanResult
from assignplan.priority import DEFAULT, Priority

if TYPE_CHECKING:
    from assignplan.risk.robust import Robust

EXACT_MAX_JOBS = 300  # above this, exact rarely proves anything within a budget of minutes

Progress = Callable[[HistoryRow], None]
Hint = tuple[np.ndarray, np.ndarray]  # a plan to start from: assign, start int64[J]


class ExactSettings(BaseModel):
    """Settings of the exact method."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)
    force: bool = Field(default=False, description=(
        f"Try batches above {EXACT_MAX_JOBS} jobs anyway (CP-SAT rarely proves optimality "
        "there; the best plan found in the budget is returned)."))
    workers: int = Field(default=0, ge=0, le=256,
                         description="CP-SAT search workers; 0: one per core.")


@dataclass(frozen=True)
class Method:
    """A registered method: how to run it, the settings type it reads (None: none), and
    whether it can plan for a robust objective."""

    name: str
    run: Callable[..., PlanResult]
    settings: type[BaseModel] | None
    summary: str
    robust: bool = False


def _greedy(inst: Instance, *, seed: int, budget: float, settings: None,
            progress: Progress | None, bound: LowerBound, priority: Priority,
            hint: Hint | None = None, executor: Executor | None = None) -> PlanResult:
    from assignplan.methods.greedy import solve_greedy

    return solve_greedy(inst, lower_bound=bound.value, priority=priority)


def _ga(inst: Instance, *, seed: int, budget: float, settings: GASettings,
        progress: Progress | None, bound: LowerBound, priority: Priority,
        robust: Robust | None = None, hint: Hint | None = None,
        executor: Executor | None = None) -> PlanResult:
    from assignplan.methods.ga import solve_ga

    if settings.islands.count > 1:
        if robust is not None:
            raise InputError("--islands: not with --robust (the island run plans for the"
                             " objective itself)")
        if priority.name != "makespan":
            raise InputError("--islands: only with --priority makespan (the islands compare"
                             " plans makespan first)")
        if hint is not None:
            raise InputError("--islands: not when replanning (the islands do not start from"
                             " the old plan)")
        from assignplan.methods.ga.islands import solve_islands

        return solve_islands(inst, settings=settings, lower_bound=bound.value, seed=seed,
                             budget=budget, executor=executor, on_generation=progress,
                             term_bounds=(bound.tardiness, bound.completion))
    if robust is None:
        return solve_ga(inst, settings=settings, lower_bound=bound.value, seed=seed,
                        budget=budget, on_generation=progress,
                        term_bounds=(bound.tardiness, bound.completion), priority=priority,
                        hint=hint)
    from assignplan.risk.robust import robust_evaluate

    # the robust score's completion column is not the objective's, so no completion phase
    settings = settings.replace(completion={"completion_share": 0.0})
    return solve_ga(inst, settings=settings, lower_bound=bound.value, seed=seed, budget=budget,
                    on_generation=progress, bound_stops=False, priority=priority,
                    evaluate=robust_evaluate(inst, robust,
                                             justify=settings.improvement.justify,
                                             priority=priority))


def _exact(inst: Instance, *, seed: int, budget: float, settings: ExactSettings,
           progress: Progress | None, bound: LowerBound, priority: Priority,
           hint: Hint | None = None, executor: Executor | None = None) -> PlanResult:
    from assignplan.methods.exact import solve_exact
    from assignplan.methods.greedy import solve_greedy

    if inst.n_jobs > EXACT_MAX_JOBS and not settings.force:
        raise InputError(exact_too_big(inst.n_jobs) + "; use --method ga, or --force to try"
                         " anyway")
    if hint is None:
        greedy = solve_greedy(inst, lower_bound=bound.value, priority=priority)
        hint = (greedy.assign, greedy.start)
    return solve_exact(inst, lower_bound=bound.value, budget=budget, hint=hint, seed=seed,
                       workers=settings.workers, priority=priority)


METHODS: dict[str, Method] = {m.name: m for m in (
    Method("ga", _ga, GASettings, "genetic algorithm over the assignment matrix (default)",
           robust=True),
    Method("greedy", _greedy, None, "list scheduling, longest job first, earliest finish"),
    Method("exact", _exact, ExactSettings, "CP-SAT; proves optimality on small batches"),
)}


def exact_too_big(n_jobs: int) -> str:
    """Why exact does not run on `n_jobs` jobs by default (one wording for solve and compare)."""
    return (f"exact: {n_jobs:,} jobs is above the exact method's limit of {EXACT_MAX_JOBS};"
            " it would not prove anything in time")


def method_named(name: str) -> Method:
    if name not in METHODS:
        raise InputError(f"--method {name}: unknown method; choose one of "
                         f"{', '.join(METHODS)}")
    return METHODS[name]


def solve(inst: Instance, method: str = "ga", *, seed: int = 0, budget: float = 30.0,
          settings: BaseModel | None = None, progress: Progress | None = None,
          bound: LowerBound | None = None, robust: Robust | None = None,
          priority: Priority = DEFAULT, hint: Hint | None = None,
          executor: Executor | None = None) -> PlanResult:
    """Plan `inst` with `method` within `budget` seconds from this call.

    `settings`: the method's settings object (default: its defaults); another type is an
    error. `bound`: `bounds.lower_bound(inst)` when the caller already has it (then its time
    is not charged here). `robust`: plan for a quantile of the makespan under sampled run
    times (`risk.robust`; the ga only, another method is an error). The result carries the
    lower bound of each term of the objective, the parts of the makespan's and the
    completion time's, the method's own seconds and the `priority` it planned for (which
    term of the objective comes first; default the makespan). `hint`: a feasible plan to
    start from (a replan's old plan kept as far as it can be): the ga seeds with it, exact
    takes it as its CP-SAT hint instead of greedy's plan, greedy has no use for it.
    `executor`: where the ga's islands run (`settings.islands.count` > 1; default in this
    process); the other methods run here.
    """
    t0 = time.perf_counter()
    chosen = method_named(method)
    if robust is not None and not chosen.robust:
        raise InputError(f"--robust: only the ga method plans for it; {method} keeps its own"
                         " objective")
    settings = _settings_for(chosen, settings)
    if bound is None:
        bound = lower_bound(inst, deadline=t0 + budget)
    started = time.perf_counter()
    extra = {"robust": robust} if robust is not None else {}
    if hint is not None:
        extra["hint"] = hint
    result = chosen.run(inst, seed=seed, budget=max(0.0, t0 + budget - started),
                        settings=settings, progress=progress, bound=bound, priority=priority,
                        executor=executor, **extra)
    proven = max(bound.value, result.solver_bound or 0)
    return replace(result, lower_bound=proven, bound_parts=dict(bound.parts),
                   tardiness_bound=bound.tardiness, completion_bound=bound.completion,
                   completion_parts=dict(bound.completion_parts),
                   seconds=time.perf_counter() - started, priority=priority)


def _settings_for(method: Method, settings: BaseModel | None) -> BaseModel | None:
    if settings is None:
        return None if method.settings is None else method.settings()
    if method.settings is None or not isinstance(settings, method.settings):
        raise InputError(f"{type(settings).__name__}: method {method.name} does not read "
                         "these settings")
    return settings
