"""The configuration linear program: a lower bound on the node time a set of jobs needs.

At every moment a node runs a *configuration*: a set of jobs whose demands fit its capacity
together. Let x_S be the node time (summed over nodes) spent running configuration S. Any plan
gives a solution of

    z = min sum_S x_S   subject to   sum_{S contains j} x_S >= p_j  for every job j,  x >= 0,

so z is at most the node time the plan uses. This is the Gilmore-Gomory LP of bin and vector
packing (Gilmore & Gomory, Oper. Res. 9, 1961, from memory), here the preemptive relaxation
of the jobs on the nodes: it sees at once what the per-resource work bounds, the dual
feasible functions (each a dual solution of a one-resource relaxation) and the cliques (a
dual solution with y = 1 on jobs no two of which fit together) see one at a time, and also
sets of jobs that fit in pairs but not all together across two resources.

There are exponentially many configurations, so the LP is solved by column generation: GLOP
solves it over the columns found so far, and the duals y price new ones (a multi-dimensional
0/1 knapsack: max sum_{j in S} y_j over the sets S that fit). Greedy packings by dual value find
most columns cheaply; CP-SAT prices exactly when they find none. Whenever CP-SAT has priced,
Farley's bound (Oper. Res. 38, 1990, from memory) makes the duals valid at any iteration:

    z >= (sum_j p_j y_j) / max(1, v*),   v* >= max_S sum_{j in S} y_j,

so the result is a valid bound even when the search stops before the LP optimum. Every limit is
deterministic (iterations, CP-SAT's deterministic time, one worker), so the same input gives
the same bound.
"""

from __future__ import annotations

import numpy as np
from numba import njit
from ortools.linear_solver import pywraplp
from ortools.sat.python import cp_model

MAX_ROUNDS = 150  # LP solves per call
GREEDY_ORDERS = 6  # greedy packings tried per round before pricing exactly
PRICING_DETERMINISTIC_TIME = 2.0  # CP-SAT deterministic seconds per exact pricing
_WEIGHT_SCALE = 10**7  # duals (in [0, 1]) to CP-SAT integer weights
_TOL = 1e-7


def configuration_bound(p: np.ndarray, demand: np.ndarray, capacity: np.ndarray, *,
                        give_up_below: float = 0.0) -> float:
    """A lower bound on z above for jobs of sizes `p` (float64[n], node time each needs)
    and demands `demand` (int64[n, R]) on nodes of capacity `capacity` (int64[R]).

    `give_up_below`: the search stops early, returning what it has proven (possibly 0), once
    the LP over the columns found so far, an upper bound on z, is no more than this (a caller
    that only needs a bound above some value saves the rest of the search).
    """
    p = np.asarray(p, dtype=np.float64)
    n = len(p)
    if n == 0:
        return 0.0
    demand = np.asarray(demand, dtype=np.int64)
    capacity = np.asarray(capacity, dtype=np.int64)
    lp = _Master(p)
    for col in _first_fit_columns(p, demand, capacity):
        if lp.is_new(col):
            lp.add(col)
    sizes = _job_sizes(demand, capacity)
    proven = 0.0
    for round_ in range(MAX_ROUNDS):
        z, y = lp.solve()
        if z <= give_up_below:
            break
        new = [c for c in _greedy_columns(y, demand, capacity, sizes) if lp.is_new(c)]
        if new and round_ < MAX_ROUNDS - 1:
            for col in new:
                lp.add(col)
            continue
        # exact pricing: when the greedy orders find nothing, and once at the last round so
        # that a search cut short still proves what its duals are worth
        col, v_star = _price_exactly(y, demand, capacity)
        proven = max(proven, float(p @ y) / max(1.0, v_star))
        if col is None or not lp.is_new(col) or float(y[col].sum()) <= 1.0 + _TOL:
            break  # no column prices out: the LP is solved and `proven` is its value
        lp.add(col)
    return proven


class _Master:
    """The restricted master LP (GLOP), one covering row per job, columns added as found."""

    def __init__(self, p: np.ndarray) -> None:
        self.solver = pywraplp.Solver.CreateSolver("GLOP")
        self.rows = [self.solver.Constraint(float(pj), self.solver.infinity()) for pj in p]
        self.objective = self.solver.Objective()
        self.objective.SetMinimization()
        self.seen: set[tuple[int, ...]] = set()
        for j in range(len(p)):  # singletons keep the LP feasible from the start
            self.add(np.array([j]))

    def is_new(self, col: np.ndarray) -> bool:
        return tuple(col.tolist()) not in self.seen

    def add(self, col: np.ndarray) -> None:
        self.seen.add(tuple(col.tolist()))
        x = self.solver.NumVar(0.0, self.solver.infinity(), "")
        self.objective.SetCoefficient(x, 1.0)
        for j in col.tolist():
            self.rows[j].SetCoefficient(x, 1.0)

    def solve(self) -> tuple[float, np.ndarray]:
        """z over the current columns and the duals y (clipped to [0, 1]: any y >= 0 with
        y(S) <= v* for every S is usable in Farley's bound, and a singleton column caps each
        y_j at 1 anyway)."""
        self.solver.Solve()
        y = np.array([row.dual_value() for row in self.rows])
        return self.objective.Value(), np.clip(y, 0.0, 1.0)


@njit(cache=True)
def _pack(order: np.ndarray, demand: np.ndarray, capacity: np.ndarray) -> np.ndarray:
    """The jobs of `order` (int64[k]) that fit one node together, first fit in that order,
    sorted (int64[m])."""
    load = np.zeros(capacity.shape[0], dtype=np.int64)
    chosen = np.empty(order.shape[0], dtype=np.int64)
    m = 0
    for j in order:
        fits = True
        for r in range(capacity.shape[0]):
            if load[r] + demand[j, r] > capacity[r]:
                fits = False
                break
        if fits:
            for r in range(capacity.shape[0]):
                load[r] += demand[j, r]
            chosen[m] = j
            m += 1
    return np.sort(chosen[:m])


def _first_fit_columns(p: np.ndarray, demand: np.ndarray, capacity: np.ndarray) -> list:
    """Configurations of a first-fit packing, longest jobs first: a good primal start."""
    cols, left = [], np.argsort(-p, kind="stable")
    while len(left):
        col = _pack(left, demand, capacity)
        cols.append(col)
        left = left[~np.isin(left, col)]
    return cols


def _job_sizes(demand: np.ndarray, capacity: np.ndarray) -> list[np.ndarray]:
    """Sizes to divide dual values by: largest share of a node, sum of shares, one."""
    share = demand / np.maximum(capacity, 1)
    return [share.max(axis=1), share.sum(axis=1), np.ones(len(demand))]


def _greedy_columns(y: np.ndarray, demand: np.ndarray, capacity: np.ndarray,
                    sizes: list[np.ndarray]) -> list:
    """Configurations with y(S) > 1 found by first fit in orders of dual value per size
    (`sizes` from `_job_sizes`)."""
    useful = y > _TOL
    out = []
    for k in range(GREEDY_ORDERS):
        # a deterministic tie-break that differs between orders keeps them from coinciding
        key = y / (sizes[k % 3] + 1e-9) * (1.0 + 1e-6 * ((np.arange(len(y)) * (k + 1)) % 97))
        order = np.flatnonzero(useful)[np.argsort(-key[useful], kind="stable")].astype(np.int64)
        col = _pack(order, demand, capacity)
        if len(col) and y[col].sum() > 1.0 + _TOL:
            out.append(col)
    return out


def _price_exactly(y: np.ndarray, demand: np.ndarray,
                   capacity: np.ndarray) -> tuple[np.ndarray | None, float]:
    """The best configuration CP-SAT finds for duals y and v* >= max_S y(S) (its proof).

    Weights are floor(y * scale), so y(S) < (weight(S) + |S|) / scale <= (bound + n) / scale.
    """
    jobs = np.flatnonzero(y > _TOL)
    if len(jobs) == 0:
        return None, 0.0
    weight = np.floor(y[jobs] * _WEIGHT_SCALE).astype(np.int64)
    model = cp_model.CpModel()
    take = [model.new_bool_var(f"take{j}") for j in jobs.tolist()]
    for r in range(demand.shape[1]):
        d = demand[jobs, r]
        if d.sum() > capacity[r]:
            model.add(cp_model.LinearExpr.weighted_sum(take, d.tolist()) <= int(capacity[r]))
    model.maximize(cp_model.LinearExpr.weighted_sum(take, weight.tolist()))
    solver = cp_model.CpSolver()
    solver.parameters.num_workers = 1
    solver.parameters.random_seed = 0
    solver.parameters.max_deterministic_time = PRICING_DETERMINISTIC_TIME
    status = solver.solve(model)
    # both are upper bounds on every y(S); the first is CP-SAT's proof, the second is trivial
    v_star = min((solver.best_objective_bound + len(jobs)) / _WEIGHT_SCALE, float(y.sum()))
    if status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return None, v_star
    col = jobs[[solver.value(t) == 1 for t in take]]
    return (col if len(col) else None), v_star
