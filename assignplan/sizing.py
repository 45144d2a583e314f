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
from assignplan.executor import Executor, InProcess
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


@dataclass(frozen=True)
class ProbeWork:
    """One probe's work as an executor task (`executor.Executor`): an item (counts, ga
    seconds) gives (bound, greedy, ga, verdict); ga seconds None: the bound
    only (greedy, ga and verdict None unless the bound rules the counts out). Picklable, so
    probes can run on other processes or machines; each builds its own instance."""

    doc: Batch
    deadline: int
    seed: int
    priority: Priority = DEFAULT

    def instance(self, counts: tuple[int, ...]):
        groups = [g.model_copy(update={"count": c}) for g, c in zip(self.doc.nodes, counts,
                                                                   strict=True) if c > 0]
        if not groups:
            return None
        try:
            return build_instance(expand_batch(self.doc.model_copy(update={"nodes": groups})))
        except InputError:  # some job lost every node that could hold it
            return None

    def in_time(self, inst, plan) -> bool:
        """Whether `plan` ends by the deadline (and, unless the makespan comes first,
        meets every due time)."""
        if plan.makespan > self.deadline:
            return False
        return self.priority.name == "makespan" or not bool(
            ((inst.due != NO_DUE) & (plan.end > inst.due)).any())

    def __call__(self, item: tuple[tuple[int, ...], float | None]):
        from assignplan.bounds import lower_bound
        from assignplan.methods.ga import GASettings, solve_ga
        from assignplan.solve import solve

        counts, ga_seconds = item
        inst = self.instance(counts)
        if inst is None:
            return None, None, None, NO_NODE
        found = lower_bound(inst, deadline=time.perf_counter() + 10.0)
        if found.value > self.deadline or (self.priority.name != "makespan"
                                           and found.tardiness > 0):
            return found.value, None, None, RULED_OUT
        if ga_seconds is None:
            return found.value, None, None, None
        plan = solve(inst, "greedy", priority=self.priority, bound=found)
        greedy, ga = plan.makespan, None
        verdict = CONFIRMED if self.in_time(inst, plan) else OPEN
        if verdict == OPEN and ga_seconds > 0:
            # the deadline as the ga's stopping target (it stops at the bound it is given),
            # and no completion phase: a probe asks about the makespan alone
            settings = GASettings().replace(completion={"completion_share": 0.0})
            plan = solve_ga(inst, settings=settings, lower_bound=self.deadline, seed=self.seed,
                            budget=ga_seconds, priority=self.priority, term_bounds=(0.0, 0.0))
            ga = plan.makespan
            verdict = CONFIRMED if self.in_time(inst, plan) else OPEN
        return found.value, greedy, ga, verdict


class _Prober:
    """Probes run in rounds of up to `width` at once on the executor (one after the other
    in this process by default), each count vector at most once, recorded in the order asked."""

    def __init__(self, doc: Batch, deadline: int, *, seed: int, probe_seconds: float,
                 stop_at: float, priority: Priority = DEFAULT, executor: Executor | None = None):
        self.work = ProbeWork(doc, deadline, seed, priority)
        self.probe_seconds, self.stop_at = probe_seconds, stop_at
        self.executor = executor or InProcess()
        self.width = max(1, self.executor.workers)
        self.cache: dict[tuple[int, ...], Probe] = {}
        self.bounds: dict[tuple[int, ...], int | None] = {}
        self.order: list[Probe] = []

    def _run(self, many: list[tuple[int, ...]], ga_seconds: float | None) -> dict:
        todo = list(dict.fromkeys(c for c in many if c not in self.cache and (
            ga_seconds is not None or c not in self.bounds)))
        got = dict(self.executor.run(self.work, [(c, ga_seconds) for c in todo]))
        for k, counts in enumerate(todo):
            self.bounds[counts] = got[k][0]
        return {counts: got[k] for k, counts in enumerate(todo)}

    def bounds_of(self, many: list[tuple[int, ...]]) -> list[int | None]:
        """The makespan bound of each count vector (None: no node can hold some job); those
        the bound rules out are recorded as probes (they plan nothing)."""
        for counts, (bound, _g, _ga, verdict) in self._run(many, None).items():
            if verdict is not None:
                self._record(Probe(counts, bound, None, None, verdict))
        return [self.bounds[c] for c in many]

    def bound(self, counts: tuple[int, ...]) -> int | None:
        return self.bounds_of([counts])[0]

    def probes_of(self, many: list[tuple[int, ...]]) -> list[Probe]:
        """Each count vector's probe: the bound, then greedy, then (time left) a short ga."""
        left = self.stop_at - time.perf_counter()
        ga_seconds = 0.0 if left <= 0 else min(self.probe_seconds, max(0.1, left))
        for counts, (bound, greedy, ga, verdict) in self._run(many, ga_seconds).items():
            self._record(Probe(counts, bound, greedy, ga, verdict))
        return [self.cache[c] for c in many]

    def probe(self, counts: tuple[int, ...]) -> Probe:
        return self.probes_of([counts])[0]

    def _record(self, probe: Probe) -> None:
        if probe.counts not in self.cache:
            self.cache[probe.counts] = probe
            self.order.append(probe)

    def out_of_time(self) -> bool:
        return time.perf_counter() >= self.stop_at


def size_batch(doc: Batch, deadline: int, *, vary: tuple[str, ...] = (), seed: int = 0,
               budget: float = 60.0, probe_seconds: float = 3.0,
               priority: Priority = DEFAULT, executor: Executor | None = None) -> SizeResult:
    """Size the node groups `vary` (all by default) of `doc` for a makespan of at most
    `deadline` minutes within about `budget` seconds (see the module docstring; with another
    `priority`, every due time met as well). With an `executor` of W workers each round of
    the search probes W count vectors at once (a W+1-ary search instead of bisection)."""
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
                     stop_at=time.perf_counter() + budget, priority=priority, executor=executor)
    out = SizeResult(names, varied, current, None, deadline, cost=cost)
    index = {n: k for k, n in enumerate(names)}
    best = None
    grown = [tuple(math.ceil(c * factor) if n in varied else c
                   for n, c in zip(names, current, strict=True)) for factor in (1.0, *GROWTH)]
    for at in range(0, len(grown), prober.width):
        confirmed = [p.counts for p in prober.probes_of(grown[at:at + prober.width])
                     if p.confirmed]
        if confirmed:
            best = confirmed[0]
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


def _first_passing(lo: int, hi: int, passing, width: int, *, stop=lambda: False) -> int:
    """The smallest n in [lo, hi] with passing(n), taking passing(hi) as true and passing as
    monotone (false, then true): each round asks `passing` (a list in, a list of bools out)
    about `width` points spread over [lo, hi) at once; width 1 is bisection."""
    while lo < hi and not stop():
        points = sorted({lo + (hi - lo) * (m + 1) // (width + 1) for m in range(width)})
        answers = passing(points)
        first = next((m for m, ok in enumerate(answers) if ok), None)
        if first is None:
            lo = points[-1] + 1
        else:
            lo, hi = (lo if first == 0 else points[first - 1] + 1), points[first]
    return hi


def _bound_min(prober: _Prober, out: SizeResult, counts: tuple[int, ...], k: int) -> int:
    """The smallest count of group k (others at `counts`) the bound does not rule out."""
    name, top = out.groups[k], counts[k]

    def allowed(ns: list[int]) -> list[bool]:
        bounds = prober.bounds_of([_with(counts, k, n) for n in ns])
        return [b is not None and b <= out.deadline for b in bounds]

    if top <= LINEAR_SCAN:
        n = 0
        while n < top:
            batch = list(range(n, min(n + prober.width, top)))
            answers = allowed(batch)
            if any(answers):
                n = batch[answers.index(True)]
                break
            n = batch[-1] + 1
        out.bisected[name] = False
    else:
        n = _first_passing(0, top, allowed, prober.width)  # allowed(top) when from _shrink
        out.bisected[name] = True
    out.bound_min[name] = n
    return n


def _shrink(prober: _Prober, out: SizeResult, best: tuple[int, ...], k: int
            ) -> tuple[int, ...]:
    """Search for the smallest count of group k a plan confirms, the others at `best`."""
    lo = _bound_min(prober, out, best, k)

    def confirmed(ns: list[int]) -> list[bool]:
        return [p.confirmed for p in prober.probes_of([_with(best, k, n) for n in ns])]

    return _with(best, k, _first_passing(lo, best[k], confirmed, prober.width,
                                         stop=prober.out_of_time))


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
