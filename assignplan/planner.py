"""One entry point from a validated batch to a plan, whatever the method."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import replace

from assignplan.bounds import LowerBound, lower_bound
from assignplan.errors import InputError
from assignplan.instance import Instance
from assignplan.methods.ga.config import GAConfig
from assignplan.model import HistoryRow
from assignplan.plan import PlanResult

METHODS = ("greedy", "ga", "exact")


def solve(inst: Instance, method: str, *, seed: int = 0, time_limit: float = 60.0,
          force: bool = False, ga_config: GAConfig | None = None,
          on_generation: Callable[[HistoryRow], None] | None = None,
          bound: LowerBound | None = None) -> PlanResult:
    """Plan `inst` with `method`; the result carries the provable lower bound, its parts and
    the seconds taken.

    `bound` is `bounds.lower_bound(inst)` when the caller already has it.
    """
    t0 = time.perf_counter()
    bound_full = bound or lower_bound(inst)
    parts, bound = bound_full.parts, bound_full.value
    if method == "ga":
        from assignplan.methods.ga.engine import solve_ga

        result = solve_ga(inst, config=ga_config or GAConfig(), lower_bound=bound, seed=seed,
                          time_limit=max(0.0, time_limit - (time.perf_counter() - t0)),
                          on_generation=on_generation)
    elif method == "greedy":
        from assignplan.methods.greedy import solve_greedy

        result = solve_greedy(inst, lower_bound=bound)
    elif method == "exact":
        from assignplan.methods.exact import solve_exact
        from assignplan.methods.greedy import greedy_assign

        result = solve_exact(inst, lower_bound=bound, time_limit=time_limit,
                             hint=greedy_assign(inst), seed=seed, force=force)
    else:
        raise InputError(f"--method {method}: unknown method; choose one of {', '.join(METHODS)}")
    return replace(result, seconds=time.perf_counter() - t0, bound_parts=dict(parts))
