"""How many nodes the batch needs to end by a deadline: counts ruled out by the lower bound,
counts confirmed by a plan.

A *probe* of a count vector (one count per node group) builds the batch with those counts and
says one of three things, in this order:

- "ruled out by the bound": `bounds.lower_bound` exceeds the deadline (or no node left can
  hold some job): no plan on these nodes ends in time, whatever the method;
- "confirmed by a plan": greedy's plan, or else a short ga run's, ends by the deadline;
- "not ruled out": neither; a longer search might still find a plan, or none exists.

With a priority other than the makespan first (`assignplan.priority`, `size --priority`), the
probes' plans are made for it and a count is confirmed only when its plan also meets every
due time; a count at which some job cannot meet its due time even alone on its fastest node
(`LowerBound.tardiness` above 0) is ruled out by the bound.

`size_batch` varies the named groups one at a time (most costly per node first, else the
largest first), the others held at the best counts found so far: for group g, the smallest
count the bound does not rule out (`bound_min`; each count below it is checked and ruled out,
or found by bisection on large groups, since taking nodes away never lowers a bound part),
then bisection between it and the smallest confirmed count for the smallest confirmed count.
When the current counts are not confirmed, the varied groups first grow (x1.25, x1.5, x2,
x3, x4) until a plan is found. The result is a count vector a plan confirms, not a proven
minimum: a count between `bound_min` and it may still allow a plan no probe found.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

from assignplan.documents import Batch
from assignplan.errors import InputError
from assignplan.expand import expand_batch
from assignplan.instance import NO_DUE, build_instance
from assignplan.priority import DEFAULT, Priority

RULED_OUT = "ruled out by the bound"
NO_NODE = "ruled out: no node can hold some job"
CONFIRMED = "confirmed by a plan"
OPEN = "not ruled out by the bound; no plan found"
GROWTH = (1.25, 1.5, 2.0, 3.0, 4.0)
LINEAR_SCAN = 48  # groups up to this many counts are checked count by count, not bisected


@dataclass(frozen=True)
class Probe:
    """What one count vector gave: `bound` (minutes, None when no node can hold a job),
    `greedy`/`ga` makespans (None when not run) and the verdict."""

    counts: tuple[int, ...]
    bound: int | None
    greedy: int | None
    ga: int | None
    verdict: str

    @property
    def confirmed(self) -> bool:
        return self.verdict == CONFIRMED

    @property
    def ruled_out(self) -> bool:
        return self.verdict in (RULED_OUT, NO_NODE)


@dataclass
class SizeResult:
    """`groups` (names, in batch order), `current` and `found` counts (found None when no
    probe confirmed any), per varied group the bound's minimum and whether it was bisected,
    the deadline (minutes), every probe in the order run, and `cost` per node (None: count)."""

    groups: tuple[str, ...]
    varied: tuple[str, ...]
    current: tuple[int, ...]
    found: tuple[int, ...] | None
    deadline: int
    bound_min: dict[str, int] = field(default_factory=dict)
    bisected: dict[str, bool] = field(default_factory=dict)
    probes: list[Probe] = field(default_factory=list)
    cost: tuple[float, ...] | None = None

    def total(self, counts: tuple[int, ...]) -> float:
        if self.cost is None:
            return float(sum(counts))
        return float(sum(c * k for c, k in zip(self.cost, counts, strict=True)))


class _Prober:
    def __init__(self, doc: Batch, deadline: int, *, seed: int, probe_seconds: float,
                 stop_at: float, priority: Priority = DEFAULT):
        self.doc, self.deadline, self.priority = doc, deadline, priority
        self.late_bounds: dict[tuple[int, ...], float] = {}
        self.seed, self.probe_seconds, self.stop_at = seed, probe_seconds, stop_at
        self.cache: dict[tuple[int, ...], Probe] = {}
        self.bounds: dict[tuple[int, ...], int | None] = {}
        self.order: list[Probe] = []

    def _instance(self, counts: tuple[int, ...]):
        groups = [g.model_copy(update={"count": c}) for g, c in zip(self.doc.nodes, counts,
                                                                   strict=True) if c > 0]
        if not groups:
            return None
        try:
            return build_instance(expand_batch(self.doc.model_copy(update={"nodes": groups})))
        except InputError:  # some job lost every node that could hold it
            return None

    def bound(self, counts: tuple[int, ...]) -> int | None:
        """The makespan bound at `counts` (None: no node can hold some job)."""
        if counts not in self.bounds:
            from assignplan.bounds import lower_bound

            inst = self._instance(counts)
            found = None if inst is None else lower_bound(
                inst, deadline=time.perf_counter() + 10.0)
            self.bounds[counts] = None if found is None else found.value
            self.late_bounds[counts] = 0.0 if found is None else found.tardiness
        return self.bounds[counts]

    def in_time(self, inst, plan) -> bool:
        """Whether `plan` ends by the deadline (and, unless the makespan comes first,
        meets every due time)."""
        if plan.makespan > self.deadline:
            return False
        return self.priority.name == "makespan" or not bool(
            ((inst.due != NO_DUE) & (plan.end > inst.due)).any())

    def out_of_time(self) -> bool:
        return time.perf_counter() >= self.stop_at

    def probe(self, counts: tuple[int, ...]) -> Probe:
        if counts in self.cache:
            return self.cache[counts]
        from assignplan.methods.ga import GASettings, solve_ga
        from assignplan.solve import solve

        bound = self.bound(counts)
        greedy = ga = None
        if bound is None:
            verdict = NO_NODE
        elif bound > self.deadline or (self.priority.name != "makespan"
                                       and self.late_bounds[counts] > 0):
            verdict = RULED_OUT
        else:
            inst = self._instance(counts)
            plan = solve(inst, "greedy", priority=self.priority)
            greedy = plan.makespan
            verdict = CONFIRMED if self.in_time(inst, plan) else OPEN
            if verdict == OPEN and not self.out_of_time():
                seconds = min(self.probe_seconds, max(0.1, self.stop_at - time.perf_counter()))
                # the deadline as the ga's stopping target (it stops at the bound it is
                # given), and no completion phase: a probe asks about the makespan alone
                settings = GASettings().replace(completion={"completion_share": 0.0})
                plan = solve_ga(inst, settings=settings, lower_bound=self.deadline,
                                seed=self.seed, budget=seconds, priority=self.priority,
                                term_bounds=(0.0, 0.0))
                ga = plan.makespan
                verdict = CONFIRMED if self.in_time(inst, plan) else OPEN
        out = Probe(counts, bound, greedy, ga, verdict)
        self.cache[counts] = out
        self.order.append(out)
        return out


def size_batch(doc: Batch, deadline: int, *, vary: tuple[str, ...] = (), seed: int = 0,
               budget: float = 60.0, probe_seconds: float = 3.0,
               priority: Priority = DEFAULT) -> SizeResult:
    """Size the node groups `vary` (all by default) of `doc` for a makespan of at most
    `deadline` minutes within about `budget` seconds (see the module docstring; with another
    `priority`, every due time met as well)."""
    names = tuple(g.name for g in doc.nodes)
    unknown = [v for v in vary if v not in names]
    if unknown:
        raise InputError([f"--vary {v}: no node group named '{v}'; the groups are"
                          f" {', '.join(names)}" for v in unknown])
    varied = vary or names
    costs = [g.cost for g in doc.nodes]
    cost = tuple(float(c or 0.0) for c in costs) if any(c is not None for c in costs) else None
    current = tuple(g.count for g in doc.nodes)
    prober = _Prober(doc, deadline, seed=seed, probe_seconds=probe_seconds,
                     stop_at=time.perf_counter() + budget, priority=priority)
    out = SizeResult(names, varied, current, None, deadline, cost=cost)
    index = {n: k for k, n in enumerate(names)}
    best = None
    for factor in (1.0, *GROWTH):
        counts = tuple(math.ceil(c * factor) if n in varied else c
                       for n, c in zip(names, current, strict=True))
        if prober.probe(counts).confirmed:
            best = counts
            break
        if prober.out_of_time():
            break
    if best is not None:
        def weight(name: str) -> tuple[float, int]:
            k = index[name]
            return (-(cost[k] if cost is not None else 0.0), -best[k])

        for name in sorted(varied, key=weight):
            best = _shrink(prober, out, best, index[name])
    else:
        for name in varied:
            _bound_min(prober, out, current, index[name])
    out.found = best
    out.probes = prober.order
    return out


def _with(counts: tuple[int, ...], k: int, n: int) -> tuple[int, ...]:
    return counts[:k] + (n,) + counts[k + 1:]


def _bound_min(prober: _Prober, out: SizeResult, counts: tuple[int, ...], k: int) -> int:
    """The smallest count of group k (others at `counts`) the bound does not rule out."""
    name, top = out.groups[k], counts[k]

    def ruled_out(n: int) -> bool:
        bound = prober.bound(_with(counts, k, n))
        if bound is None or bound > out.deadline:
            prober.probe(_with(counts, k, n))  # recorded for the table; plans nothing
            return True
        return False

    if top <= LINEAR_SCAN:
        n = 0
        while n < top and ruled_out(n):
            n += 1
        out.bisected[name] = False
    else:
        lo, hi = 0, top  # ruled_out(top) is False when called from _shrink
        while lo < hi:
            mid = (lo + hi) // 2
            if ruled_out(mid):
                lo = mid + 1
            else:
                hi = mid
        n = lo
        out.bisected[name] = True
    out.bound_min[name] = n
    return n


def _shrink(prober: _Prober, out: SizeResult, best: tuple[int, ...], k: int
            ) -> tuple[int, ...]:
    """Bisection for the smallest count of group k a plan confirms, the others at `best`."""
    lo = _bound_min(prober, out, best, k)
    hi = best[k]
    while lo < hi and not prober.out_of_time():
        mid = (lo + hi) // 2
        if prober.probe(_with(best, k, mid)).confirmed:
            hi = mid
        else:
            lo = mid + 1
    return _with(best, k, hi)


def size_record(result: SizeResult, window_start) -> dict:
    """The sizing as JSON-ready data (hours)."""
    from assignplan.units import hours_of, iso

    def counts_of(counts):
        return dict(zip(result.groups, counts, strict=True))

    return {
        "deadline_h": hours_of(result.deadline),
        "deadline": iso(window_start, result.deadline),
        "varied": list(result.varied),
        "current": counts_of(result.current),
        "found": None if result.found is None else counts_of(result.found),
        "found_verdict": CONFIRMED if result.found is not None else "no plan found",
        "total": None if result.found is None else result.total(result.found),
        "total_is": "cost" if result.cost is not None else "nodes",
        "bound_minimum": dict(result.bound_min),
        "bound_minimum_by_bisection": dict(result.bisected),
        "probes": [{"counts": counts_of(p.counts), "nodes": sum(p.counts),
                    "lower_bound_h": None if p.bound is None else hours_of(p.bound),
                    "greedy_h": None if p.greedy is None else hours_of(p.greedy),
                    "ga_h": None if p.ga is None else hours_of(p.ga),
                    "verdict": p.verdict}
                   for p in sorted(result.probes, key=lambda p: (sum(p.counts), p.counts))],
    }
