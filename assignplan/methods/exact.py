"""Exact method: a CP-SAT model of the batch, its objectives staged in the priority's order
(by default makespan, then weighted tardiness, then weighted completion)."""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace

import numpy as np
from ortools.sat.python import cp_model

from assignplan.errors import SolveError
from assignplan.instance import NO_DUE, Instance
from assignplan.methods.cpsat import NodeSlots, add_job, add_node_capacity
from assignplan.plan import PlanResult, make_result, objective
from assignplan.priority import DEFAULT, MAKESPAN, TARDINESS, Priority
from assignplan.schedule import schedule_result

# CP-SAT objectives are integers: float job weights are scaled by this and rounded, so weights
# are honoured to 1/1000 (the plan's reported objective is recomputed from the float weights).
WEIGHT_SCALE = 1000

# Share of the time limit stage 1 (the primary objective) may use; what it leaves goes to the
# next stages, and to the stage-3 tie-break only when the stages before it proved optimal.
STAGE1_SHARE = 0.7
STAGE2_SHARE_BEFORE_TIEBREAK = 2 / 3
# The stage-3 tie-break (weighted completion) is capped: its bound is weak, so proving it can
# take the whole limit for little gain.
TIEBREAK_SHARE = 0.25

_FOUND = (cp_model.OPTIMAL, cp_model.FEASIBLE)


@dataclass
class _Model:
    """The CP-SAT model and the handles the stages read back."""

    model: cp_model.CpModel
    start: list[cp_model.IntVar]
    end: list[cp_model.IntVar]
    presence: list[dict[int, cp_model.IntVar]]  # job -> {node: literal}: the matrix X
    makespan: cp_model.IntVar
    tardiness: cp_model.LinearExpr | None  # scaled weighted tardiness, None if no job can be late
    completion: cp_model.LinearExpr


def horizon(inst: Instance) -> int:
    """A makespan every batch can meet: H = max(max_j r_j, last maintenance or reservation end)
    + sum_j max_i d_ji.

    Why it is safe: from that minute on no node is ever in maintenance and every job is ready,
    so running the jobs one after another in a `follows` order, each on any eligible node,
    is a feasible plan ending by H. (A hint is not trusted for the horizon: a wrong hint would
    make the model infeasible, whereas CP-SAT merely ignores a wrong hint.)
    """
    offered = inst.class_speeds()[inst.elig.job_class]
    longest = np.where(offered, inst.dur, 0).max(axis=1).astype(np.int64)
    free_from = max(int(inst.ready.max(initial=0)), int(inst.maint_end.max(initial=0)),
                    int(inst.res_end.max(initial=0)))
    return free_from + int(longest.sum())


def _build_model(inst: Instance, hint: tuple[np.ndarray, np.ndarray] | None) -> _Model:
    """Data -> variables -> constraints of the model in DESIGN.md (no objective yet).

    x_ji in {0,1} for eligible (j, i), sum_i x_ji = 1; an optional interval
    [s_j, s_j + d_ji) present iff x_ji; per node and resource r:
    cumulative(intervals on i, demand_jr, capacity_ir) with each maintenance window as a fixed
    interval demanding the full capacity and each reservation as one demanding its share
    (plus an energy cut, see `add_node_capacity`);
    e_j = s_j + sum_i d_ji x_ji; s_j >= ready_j; e_p <= s_j for p in follows(j); C_max >= e_j.
    """
    # data
    n_jobs, n_nodes = inst.n_jobs, inst.n_nodes
    big = horizon(inst)
    m = cp_model.CpModel()

    # variables and each job's own constraints
    slots = NodeSlots(n_nodes)
    start, end, presence = [], [], []
    for j in range(n_jobs):
        s, e, x = add_job(m, inst, j, inst.elig.nodes_of(j), int(inst.ready[j]),
                          big, slots)
        start.append(s)
        end.append(e)
        presence.append(x)
    makespan = m.new_int_var(0, big, "makespan")

    # constraints between jobs, and per node
    for j in range(n_jobs):
        for p in inst.predecessors(j):
            m.add(end[int(p)] <= start[j])
        m.add(makespan >= end[j])
    for i in range(n_nodes):
        add_node_capacity(m, inst, i, slots.jobs[i], slots.intervals[i], slots.presence[i],
                          makespan)

    _add_hint(m, inst, hint, start, end, presence, makespan)
    return _Model(m, start, end, presence, makespan, *_secondary_objectives(m, inst, end, big))


def _secondary_objectives(m: cp_model.CpModel, inst: Instance, end: list, big: int
                          ) -> tuple[cp_model.LinearExpr | None, cp_model.LinearExpr]:
    """Scaled objectives 2 and 3.

    T_w = sum_j w'_j * t_j with t_j >= e_j - due_j, t_j >= 0 (tight under minimisation);
    C_w = sum_j w'_j * e_j; w'_j = round(WEIGHT_SCALE * w_j). Jobs due at or after the horizon,
    or of weight 0, can never add tardiness and get no variable.
    """
    w = np.rint(inst.weight * WEIGHT_SCALE).astype(np.int64)
    late, coef = [], []
    for j in range(inst.n_jobs):
        due = int(inst.due[j])
        if due == NO_DUE or due >= big or w[j] == 0:
            continue
        t = m.new_int_var(0, big - due, f"t{j}")
        m.add(t >= end[j] - due)
        late.append(t)
        coef.append(int(w[j]))
    tardiness = cp_model.LinearExpr.weighted_sum(late, coef) if late else None
    completion = cp_model.LinearExpr.weighted_sum(end, [int(x) for x in w])
    return tardiness, completion


def _add_hint(m: cp_model.CpModel, inst: Instance, hint, start, end, presence, makespan) -> None:
    """Hint presences and starts from a known plan (CP-SAT repairs or ignores a bad hint)."""
    if hint is None:
        return
    assign, hstart = (np.asarray(a, dtype=np.int64) for a in hint)
    hend = inst.end_times(assign, hstart)
    for j in range(inst.n_jobs):
        for i, x in presence[j].items():
            m.add_hint(x, bool(assign[j] == i))
        m.add_hint(start[j], int(hstart[j]))
        m.add_hint(end[j], int(hend[j]))
    m.add_hint(makespan, int(hend.max(initial=0)))


def _hint_from_solution(mdl: _Model, solver: cp_model.CpSolver) -> None:
    """Replace the hints with the last stage's solution (feasible for the next stage)."""
    m = mdl.model
    m.clear_hints()
    for j, xs in enumerate(mdl.presence):
        for x in xs.values():
            m.add_hint(x, solver.boolean_value(x))
        m.add_hint(mdl.start[j], solver.value(mdl.start[j]))
        m.add_hint(mdl.end[j], solver.value(mdl.end[j]))
    m.add_hint(mdl.makespan, solver.value(mdl.makespan))


def _run(mdl: _Model, seconds: float, workers: int, seed: int
         ) -> tuple[cp_model.CpSolver, cp_model.CpSolverStatus]:
    solver = cp_model.CpSolver()
    solver.parameters.max_time_in_seconds = max(seconds, 0.001)
    solver.parameters.num_workers = workers  # 0: CP-SAT picks one worker per core
    solver.parameters.random_seed = seed
    status = solver.solve(mdl.model)
    if status == cp_model.MODEL_INVALID:
        raise SolveError(f"exact: internal error, invalid model: {mdl.model.validate()}")
    return solver, status


def _read_plan(mdl: _Model, solver: cp_model.CpSolver) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    assign = np.array([next(i for i, x in xs.items() if solver.boolean_value(x))
                       for xs in mdl.presence], dtype=np.int64)
    start = np.array([solver.value(s) for s in mdl.start], dtype=np.int64)
    end = np.array([solver.value(e) for e in mdl.end], dtype=np.int64)
    return assign, start, end


def _next_stage(mdl: _Model, solver: cp_model.CpSolver, done, proven: bool, objective,
                seconds: float, workers: int, seed: int):
    """Keep the finished stage's objective (== if proven optimal, else <= the best found), start
    from its solution, and minimise the next objective."""
    value = int(solver.value(done))
    mdl.model.add(done == value if proven else done <= value)
    _hint_from_solution(mdl, solver)
    mdl.model.minimize(objective)
    return _run(mdl, seconds, workers, seed)


def solve_exact(
    inst: Instance,
    *,
    lower_bound: int,
    budget: float = 60.0,
    hint: tuple[np.ndarray, np.ndarray] | None = None,
    workers: int = 0,
    seed: int = 0,
    priority: Priority = DEFAULT,
) -> PlanResult:
    """Plan `inst` with CP-SAT, lexicographically, in the order of `priority` (`_stages`).

    By default stage 1 minimises C_max; stage 2 minimises T_w = sum_j w_j max(0, e_j - due_j)
    with C_max fixed (== if stage 1 was proven, else <= the best found); when both stages
    proved optimal, a stage 3 (at most TIEBREAK_SHARE of the limit) minimises
    C_w = sum_j w_j e_j with T_w fixed, which also starts jobs as early as the first two
    objectives allow. With the weighted tardiness first, stages 1 and 2 swap; with a weighted
    sum, stage 1 minimises it and the terms follow as tie-breaks in the default order.
    Status is "optimal" when every stage before the last tie-break is proven optimal, else
    "feasible" (no plan at all raises SolveError). With the makespan first, the result's lower
    bound is max(lower_bound, ceil(stage-1 best_objective_bound)) and `solver_bound` is the
    latter; otherwise stage 1 bounds another term and `solver_bound` is None.
    """
    t0 = time.perf_counter()
    mdl = _build_model(inst, hint)
    # Our bound is provable for every plan, so it is a valid cut; it lets the solver stop as
    # soon as it meets the bound instead of proving it again.
    mdl.model.add(mdl.makespan >= int(lower_bound))

    stages = _stages(mdl, inst, priority)
    mdl.model.minimize(stages[0])
    solver, status = _run(mdl, STAGE1_SHARE * budget, workers, seed)
    if status == cp_model.INFEASIBLE:
        raise SolveError("exact: internal error, the model is infeasible despite a safe horizon")
    fallback = _hint_result(inst, hint, lower_bound, seed, priority)
    solver_bound = (math.ceil(solver.best_objective_bound - 1e-6)
                    if stages[0] is mdl.makespan else None)
    proven_bound = max(int(lower_bound), solver_bound or 0)
    if status not in _FOUND and fallback is not None:
        # CP-SAT may not complete even a good hint in a short limit; the hint's plan stands,
        # with what the search proved of the makespan (valid whether or not it found a plan)
        return replace(fallback, seconds=time.perf_counter() - t0, solver_bound=solver_bound,
                       lower_bound=proven_bound)
    if status not in _FOUND:
        raise SolveError(
            f"exact: no plan found within {budget:g} s (status {solver.status_name(status)});"
            " try a longer --budget or --method ga"
        )
    proven = status == cp_model.OPTIMAL
    plan = _read_plan(mdl, solver)

    done = stages[0]
    for objective_k in stages[1:-1]:
        left = budget - (time.perf_counter() - t0)
        share = STAGE2_SHARE_BEFORE_TIEBREAK if proven else 1.0
        solver2, status = _next_stage(mdl, solver, done, proven, objective_k, share * left,
                                      workers, seed)
        proven = proven and status == cp_model.OPTIMAL
        if status not in _FOUND:
            break
        solver, done, plan = solver2, objective_k, _read_plan(mdl, solver2)
    if proven:
        left = min(budget - (time.perf_counter() - t0), TIEBREAK_SHARE * budget)
        solver3, status = _next_stage(mdl, solver, done, True, stages[-1], left,
                                      workers, seed)
        if status in _FOUND:
            plan = _read_plan(mdl, solver3)

    assign, start, end = plan
    result = make_result(
        inst, "exact", assign, start, proven_bound,
        status="optimal" if proven else "feasible", seed=seed,
        seconds=time.perf_counter() - t0, solver_bound=solver_bound, priority=priority,
    )
    if not np.array_equal(result.end, end):
        raise SolveError("exact: internal error, solver end times disagree with the durations")
    if fallback is not None and (priority.key(objective(inst, fallback.end))[:2]
                                 < priority.key(objective(inst, result.end))[:2]):
        return replace(fallback, lower_bound=result.lower_bound, seconds=result.seconds,
                       solver_bound=solver_bound)
    return result


# Weights per hour of a weighted sum are honoured to 1/WEIGHTED_SCALE in the CP-SAT objective.
WEIGHTED_SCALE = 1000


def _stages(mdl: _Model, inst: Instance, priority: Priority) -> list:
    """The stage objectives in `priority`'s order, the weighted completion last (the capped
    tie-break); the weighted tardiness left out when no job can be late.

    A weighted sum a C_max + b T_w + c C_w (hours) is one integer objective in scaled
    minutes: round(a K) W C_max + round(b K) T'_w + round(c K) C'_w, K = WEIGHTED_SCALE,
    W = WEIGHT_SCALE (T'_w and C'_w already carry W); the terms follow it as tie-breaks.
    """
    terms = {MAKESPAN: mdl.makespan, TARDINESS: mdl.tardiness}
    stages = [terms[k] for k in priority.order[:2] if terms[k] is not None]
    if priority.weights is not None:
        a, b, c = (round(w * WEIGHTED_SCALE) for w in priority.weights)
        weighted = a * WEIGHT_SCALE * mdl.makespan + c * mdl.completion
        if mdl.tardiness is not None:
            weighted += b * mdl.tardiness
        stages.insert(0, weighted)
    return stages + [mdl.completion]


def _hint_result(inst: Instance, hint: tuple[np.ndarray, np.ndarray] | None, lower_bound: int,
                 seed: int, priority: Priority = DEFAULT) -> PlanResult | None:
    """The hint's assignment decoded by the schedule builder (a feasible plan by construction),
    or None when there is no usable hint. Exact falls back to it when the solver returns
    nothing, or something worse, within its limit: never worse than the plan it was given."""
    if hint is None:
        return None
    try:
        return schedule_result(inst, hint[0], "exact", int(lower_bound), status="feasible",
                               seed=seed, priority=priority)
    except ValueError:  # a job on a node that cannot hold it: not a plan, only a hint
        return None
