"""Which node groups each class of jobs should use: a linear relaxation that spreads every
eligibility class's work over the node groups so that the most loaded group ends earliest.

Plain jobs can run anywhere, so earliest-finish list scheduling puts them on the fast and the
special nodes as well (they finish earliest there), and the jobs only those nodes can hold
queue behind them while plain nodes sit idle. The relaxation is the fractional assignment
LP of Lenstra, Shmoys and Tardos (Math. Programming 46, 1990, from memory) over classes of
jobs instead of single jobs: it says how much of each class each group should take. Greedy
restricted to the groups the relaxation uses gives seeds that leave the special nodes to the
jobs that need them. It is guidance only, not a bound: a job's use of a node is estimated by
its largest resource share, and ready times, follows and maintenance are left out.
"""

from __future__ import annotations

import numpy as np
from ortools.linear_solver import pywraplp

from assignplan.instance import Eligibility, Instance

USED = 1e-6  # share of a class's work above which a group counts as used by the relaxation
RESERVE_SLACK = 1e-6  # relative rise of the relaxation's load a reservation may cause
RESERVE_FILL = 0.9  # share of that load a group's own jobs must fill for it to be reserved


def _row_ids(rows: np.ndarray) -> np.ndarray:
    """int64[n]: equal uint8 rows share an id; ids follow the rows' lexicographic order."""
    return np.unique(rows, axis=0, return_inverse=True)[1].reshape(-1).astype(np.int64)


def _in_first_seen_order(labels: np.ndarray) -> np.ndarray:
    """The distinct values of `labels` in the order they first appear."""
    values, first = np.unique(labels, return_index=True)
    return values[np.argsort(first, kind="stable")]


def _node_bits(elig: Eligibility) -> np.ndarray:
    """uint8[N, .]: each node's column of the job x node eligibility, packed, as it compares.

    Two nodes' full columns (one bit per job, in job order) first differ at the first job
    whose class tells them apart, which is that class's first job: so comparing the columns
    over the classes in order of first appearance orders the nodes exactly as the full
    columns would, with E bits a node instead of J."""
    classes = _in_first_seen_order(elig.job_class)
    return np.packbits(elig.ok[classes][:, elig.node_type].T, axis=1)


def _class_ids(elig: Eligibility) -> np.ndarray:
    """int64[J]: jobs with the same eligible nodes share an id, in the order of their rows of
    the job x node eligibility (packed bits, node order), computed per class and node type
    the same way as `_node_bits`."""
    types = _in_first_seen_order(elig.node_type)
    return _row_ids(np.packbits(elig.ok[:, types], axis=1))[elig.job_class]


def node_groups(inst: Instance) -> np.ndarray:
    """int64[N]: nodes with the same capacity, speed and eligible jobs share a group.

    Compared as bytes (eligibility packed 8 to a byte, numbers big-endian, so the order is
    the numeric one)."""
    speed = np.round(inst.speed * 1e6).astype(">i8")[:, None]
    key = np.concatenate([_node_bits(inst.elig), inst.capacity.astype(">i8").view(np.uint8),
                          speed.view(np.uint8)], axis=1)
    return _row_ids(key)


def class_split(inst: Instance, eligible: Eligibility | None = None
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """(class int64[J], group int64[N], share float64[C, G], T): the relaxation's optimum.

    `eligible` (inside inst.elig, default inst.elig) narrows where jobs may go; node groups
    stay those of `node_groups(inst)`.

    share[c, g] is the part of class c's work that group g takes; T the load (minutes per
    node) of the most loaded group. Minimise T subject to sum_g share[c, g] = 1 and, per
    group, sum_c share[c, g] * a[c, g] <= n_g * T, where a[c, g] is the node-minutes all of
    class c would take on g: sum over its jobs of duration on g x largest resource share.
    """
    eligible = inst.elig if eligible is None else eligible
    group = node_groups(inst)
    cls = _class_ids(eligible)
    n_cls, n_grp = int(cls.max()) + 1, int(group.max()) + 1
    rep = np.array([np.flatnonzero(group == g)[0] for g in range(n_grp)])
    area = np.zeros((n_cls, n_grp))
    np.add.at(area, cls, _node_minutes(inst, rep))
    can = np.zeros((n_cls, n_grp), dtype=bool)
    first = np.unique(cls, return_index=True)[1]
    can[cls[first]] = eligible.of(first[:, None], rep[None, :])
    size = np.bincount(group, minlength=n_grp)
    lp = pywraplp.Solver.CreateSolver("GLOP")
    t = lp.NumVar(0.0, lp.infinity(), "T")
    var = {(c, g): lp.NumVar(0.0, 1.0, f"s{c}_{g}")
           for c, g in zip(*np.nonzero(can), strict=True)}
    for c in range(n_cls):
        lp.Add(sum(var[c, g] for g in np.flatnonzero(can[c])) == 1)
    for g in range(n_grp):
        lp.Add(sum(float(area[c, g]) * var[c, g] for c in np.flatnonzero(can[:, g]))
               <= float(size[g]) * t)
    lp.Minimize(t)
    share = np.zeros((n_cls, n_grp))
    if lp.Solve() != pywraplp.Solver.OPTIMAL:
        share[can] = 1.0  # no guidance: every eligible group stays open
        return cls, group, share, float("nan")
    for (c, g), v in var.items():
        share[c, g] = v.solution_value()
    return cls, group, share, t.solution_value()


def _allowed(inst: Instance, cls: np.ndarray, group: np.ndarray) -> np.ndarray:
    """bool[C, G]: may class c (ids of `_class_ids`) use node group g under inst.elig."""
    first = np.unique(cls, return_index=True)[1]
    rep = np.array([np.flatnonzero(group == g)[0] for g in range(int(group.max()) + 1)])
    allowed = np.zeros((len(first), len(rep)), dtype=bool)
    allowed[cls[first]] = inst.elig.of(first[:, None], rep[None, :])
    return allowed


def balanced_eligibility(inst: Instance) -> Eligibility | None:
    """Each job's eligible nodes in the groups the relaxation gives its class work in
    (`class_split`), or None when that changes nothing (one class, or every class spread
    over all its groups)."""
    cls, group, share, _ = class_split(inst)
    allowed = _allowed(inst, cls, group)
    used = allowed & (share > USED)
    return None if np.array_equal(used, allowed) else Eligibility.build(cls, group, used)


def reserved_eligibility(inst: Instance, slack: float = RESERVE_SLACK,
                         fill: float = RESERVE_FILL) -> Eligibility | None:
    """inst.elig with scarce node groups kept for the jobs that need them, or None when no
    group is worth keeping.

    Groups are taken smallest first. A group is *reserved* (every job that could also run on
    a group outside it, under the reservations made so far, loses it) when three things hold:
    some job can run nowhere else; the relaxation's load T (`class_split`) stays within
    `slack` of the unreserved T, so the other groups can absorb the jobs sent away; and the
    group's own jobs alone load it to at least `fill` x T (estimated as in `class_split`),
    so guests there could only push it past T. A group its own jobs fill less is left open:
    idle fast nodes help plain jobs more than they would help anyone by staying free.

    Why: on medium-2 (benchmarks) plain jobs filled the GPU and high-memory nodes, whose own
    jobs then set the makespan while 100 plain nodes ended 13 % earlier on average; the
    descent and the repacking move one node's jobs at a time and do not get out of that
    basin (5.6 / 8.0 % above the bound over seeds 0-1); a run on this eligibility ends
    2.5 / 2.4 %. Reserving the tagged fast group too (own jobs 60-70 % of T) made medium-3
    worse.
    """
    group = node_groups(inst)
    _, _, _, base = class_split(inst)
    if not np.isfinite(base):
        return None
    cls = _class_ids(inst.elig)
    start = _allowed(inst, cls, group)
    allowed = start.copy()
    sizes = np.bincount(group)
    for g in np.argsort(sizes, kind="stable").tolist():
        here = allowed[cls, g]
        elsewhere = np.delete(allowed, g, axis=1)[cls].any(axis=1)
        if not (here & ~elsewhere).any() or not (here & elsewhere).any():
            continue  # nobody needs g, or nobody else could leave it
        first = np.flatnonzero(group == g)[:1]
        own = _node_minutes(inst, first)[here & ~elsewhere].sum() / sizes[g]
        if own < fill * base:
            continue
        trial = allowed.copy()
        trial[np.unique(cls[here & elsewhere]), g] = False
        if class_split(inst, Eligibility.build(cls, group, trial))[3] <= base * (1.0 + slack):
            allowed = trial
    return None if np.array_equal(allowed, start) else Eligibility.build(cls, group, allowed)


def _node_minutes(inst: Instance, nodes: np.ndarray) -> np.ndarray:
    """float64[J, len(nodes)]: what each job takes of each node, in node-minutes: its
    duration there x its largest share of the node's resources (the relaxation's estimate).
    One column per node asked for (a node group's first node), never one per node."""
    share = inst.demand[:, None, :] / np.maximum(inst.capacity[nodes][None, :, :], 1)
    jobs = np.arange(inst.n_jobs)[:, None]
    return share.max(axis=2) * inst.duration_on(jobs, np.asarray(nodes)[None, :])
