"""Replaying a plan under many sampled futures, streamed: chunks of samples in, accumulators out.

A chunk (`Chunk`: samples lo .. hi - 1) is replayed by the compiled kernel
(`kernels_replay.replay_chunk`) and folded into a `Tally`: per job the sum of its ends, how
often it ended after its due time and after the window, and its largest ends (enough for the
P90); per node how often it ended last and its core-minutes of work; per sample the makespan
and the weighted tardiness. Tallies merge exactly (integer sums, the union of the largest
ends, per-sample values by sample index), in any order, so the figures do not depend on how
the chunks were cut or who ran them (`executor.Executor`). Memory: O(J * S / 10 + S) for the
whole run, O(chunk * J) per chunk, never one schedule per sample.
"""

from __future__ import annotations

import heapq
import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from assignplan.documents import Assignment, PlanDoc
from assignplan.errors import InputError, SolveError
from assignplan.executor import Executor, InProcess
from assignplan.expand import ExpandedBatch
from assignplan.instance import Instance
from assignplan.kernels_replay import POLICY_CODES, fold_jobs, replay_chunk
from assignplan.plan import PlanResult
from assignplan.risk.sampling import Sampler

POLICIES = ("keep", "dispatch")
CHUNK_SAMPLES = 250  # samples per chunk: small enough to stream, large enough for threads
DEFAULT_SAMPLES = 1_000
MAX_SAMPLES = 100_000  # the per-job P90 keeps S / 10 ends per job: 80 MB per 1,000 jobs here
JOB_QUANTILE = 0.9  # the per-job end quantile reported (P90)


def nearest_rank(p: float, n: int) -> int:
    """1-based rank of the p-quantile of n sorted values: ceil(p * n), at least 1 (the
    inverse of the empirical distribution function; Hyndman & Fan 1996, definition 1)."""
    return max(1, math.ceil(round(p * n, 9)))


def quantile(values: np.ndarray, p: float) -> float:
    """The p-quantile of `values` by `nearest_rank`: always one of the values."""
    return float(np.sort(values, axis=None)[nearest_rank(p, np.size(values)) - 1])


def top_width(samples: int) -> int:
    """How many of a job's largest ends over `samples` samples hold its P90 end (the
    smallest of them)."""
    return samples - nearest_rank(JOB_QUANTILE, samples) + 1


@dataclass(frozen=True, eq=False)
class ReplayPlan:
    """What a replay keeps of a plan: the node (int64[J]) and start (int64[J], minutes) of
    every job, and the order jobs are placed in (by planned start; never before a job they
    follow)."""

    assign: np.ndarray
    start: np.ndarray
    order: np.ndarray
    makespan: int


def replay_plan(inst: Instance, result: PlanResult) -> ReplayPlan:
    """The replay's view of a plan; InputError when a job sits on a node that cannot hold it
    (`assignplan check` tells the whole story of such a plan)."""
    assign = np.asarray(result.assign, dtype=np.int64)
    bad = np.flatnonzero(~inst.elig.of(np.arange(inst.n_jobs), assign))
    if len(bad):
        j = int(bad[0])
        raise InputError(f"plan: job {inst.job_names[j]} is on node "
                         f"{inst.node_names[int(assign[j])]}, which cannot hold it"
                         f"{f' (and {len(bad) - 1:,} more such jobs)' if len(bad) > 1 else ''};"
                         " `assignplan check` lists every problem of the plan")
    start = np.asarray(result.start, dtype=np.int64)
    return ReplayPlan(assign, start, start_order(inst, start), int(result.makespan))


def start_order(inst: Instance, start: np.ndarray) -> np.ndarray:
    """Jobs by planned start (ties: lower index); in a plan where a job starts before a job it
    follows has started, the first such job waits for its predecessors instead (a
    topological order that keeps start order wherever follows allows it)."""
    order = np.lexsort((np.arange(inst.n_jobs), start)).astype(np.int64)
    pos = np.empty_like(order)
    pos[order] = np.arange(inst.n_jobs)
    succ = np.repeat(np.arange(inst.n_jobs), np.diff(inst.pred_ptr))
    if not np.any(pos[inst.pred_idx] > pos[succ]):
        return order
    waiting = np.diff(inst.pred_ptr).copy()
    heap = [(int(start[j]), j) for j in np.flatnonzero(waiting == 0).tolist()]
    heapq.heapify(heap)
    out = []
    while heap:
        _, j = heapq.heappop(heap)
        out.append(j)
        for k in inst.successors(j).tolist():
            waiting[k] -= 1
            if waiting[k] == 0:
                heapq.heappush(heap, (int(start[k]), k))
    return np.array(out, dtype=np.int64)


@dataclass(frozen=True)
class Chunk:
    """Samples lo .. hi - 1 of a run."""

    lo: int
    hi: int

    def __str__(self) -> str:
        return f"samples {self.lo}-{self.hi - 1}"


def chunks(samples: int, size: int = CHUNK_SAMPLES) -> list[Chunk]:
    return [Chunk(lo, min(samples, lo + size)) for lo in range(0, samples, size)]


@dataclass(eq=False)
class Tally:
    """Accumulators of some of a run's S samples (int64 unless said otherwise).

    Per sample (length S; ``covered`` bool[S] says which are in): ``makespan`` minutes,
    ``tardiness`` float64 weighted tardiness minutes. Per job [J]: ``end_sum``, ``late``
    (samples ending after due), ``past`` (after the window), ``top`` [J, w] the w largest
    ends seen (in no order). Per node [N]: ``last`` (samples in which it ends at the makespan;
    ties count for every node), ``work`` core-minutes.
    """

    covered: np.ndarray
    makespan: np.ndarray
    tardiness: np.ndarray
    end_sum: np.ndarray
    late: np.ndarray
    past: np.ndarray
    top: np.ndarray
    last: np.ndarray
    work: np.ndarray

    @classmethod
    def empty(cls, n_jobs: int, n_nodes: int, samples: int, width: int) -> Tally:
        return cls(np.zeros(samples, bool), np.full(samples, -1, np.int64),
                   np.zeros(samples), np.zeros(n_jobs, np.int64), np.zeros(n_jobs, np.int64),
                   np.zeros(n_jobs, np.int64), np.full((n_jobs, width), -1, np.int64),
                   np.zeros(n_nodes, np.int64), np.zeros(n_nodes, np.int64))

    @property
    def samples(self) -> int:
        return int(self.covered.sum())

    def merge(self, other: Tally) -> Tally:
        """Both tallies' samples together (they must be disjoint): exact and order-free."""
        if np.any(self.covered & other.covered):
            raise ValueError("tallies of overlapping samples cannot be merged")
        top = _largest(np.concatenate([self.top, other.top], axis=1),
                       top_width(len(self.covered)))
        return Tally(self.covered | other.covered,
                     np.where(other.covered, other.makespan, self.makespan),
                     np.where(other.covered, other.tardiness, self.tardiness),
                     self.end_sum + other.end_sum, self.late + other.late,
                     self.past + other.past, top, self.last + other.last,
                     self.work + other.work)

    def job_quantile_end(self) -> np.ndarray:
        """int64[J]: each job's P90 end (nearest rank) once every sample is in."""
        if self.samples != len(self.covered):
            raise ValueError("the P90 ends need every sample of the run")
        return self.top[:, : top_width(len(self.covered))].min(axis=1) if self.top.size \
            else np.zeros(len(self.top), np.int64)


def _largest(values: np.ndarray, width: int) -> np.ndarray:
    """The `width` largest values of each row (all of a shorter row), in no order."""
    if values.shape[1] <= width:
        return values
    return -np.partition(-values, width - 1, axis=1)[:, :width]


@dataclass(frozen=True, eq=False)
class ReplayJob:
    """Everything a chunk of one run needs (plain data: it can be shipped to a worker);
    calling it on a `Chunk` replays that chunk's samples under each policy (the same
    factors for all) into one `Tally` per policy."""

    inst: Instance
    plan: ReplayPlan
    sampler: Sampler
    policies: tuple[str, ...]
    seed: int
    samples: int

    def __call__(self, chunk: Chunk) -> dict[str, Tally]:
        factors = self.sampler.factors(self.seed, chunk.lo, chunk.hi)
        return {policy: self._tally(chunk, factors, policy) for policy in self.policies}

    def _tally(self, chunk: Chunk, factors: np.ndarray, policy: str) -> Tally:
        inst = self.inst
        end, finish, work, makespan, tardiness, _, _ = _replay(inst, self.plan, factors,
                                                               policy)
        ends = np.ascontiguousarray(end.T)
        tally = Tally.empty(inst.n_jobs, inst.n_nodes, self.samples, 0)
        fold_jobs(ends, inst.due, inst.window_minutes, tally.end_sum, tally.late, tally.past)
        tally.top = _largest(ends, top_width(self.samples))
        tally.covered[chunk.lo:chunk.hi] = True
        tally.makespan[chunk.lo:chunk.hi] = makespan
        tally.tardiness[chunk.lo:chunk.hi] = tardiness
        tally.last[:] = (finish == makespan[:, None]).sum(axis=0)
        tally.work[:] = work.sum(axis=0)
        return tally


def _replay(inst: Instance, plan: ReplayPlan, factors: np.ndarray, policy: str,
            keep: bool = False) -> tuple[np.ndarray, ...]:
    """Run the kernel on factors float64[n, J]: (end, node finish, node work, makespan,
    tardiness, start, where); start and where are [n, 0] unless `keep`."""
    n, n_jobs, n_nodes = len(factors), inst.n_jobs, inst.n_nodes
    end = np.empty((n, n_jobs), np.int64)
    start = np.empty((n, n_jobs if keep else 0), np.int64)
    where = np.empty_like(start)
    finish = np.empty((n, n_nodes), np.int64)
    work = np.empty((n, n_nodes), np.int64)
    makespan = np.empty(n, np.int64)
    tardiness = np.empty(n, np.float64)
    replay_chunk(inst.arrays, plan.assign, plan.order, np.ascontiguousarray(factors),
                 inst.limit, POLICY_CODES[policy], end, start, where, finish, work, makespan,
                 tardiness)
    if np.any(makespan < 0):
        raise SolveError("replay: a sampled future of the plan could not be replayed"
                         " (a job that follows another is planned before it)")
    return end, finish, work, makespan, tardiness, start, where


def replay(inst: Instance, plan: ReplayPlan, sampler: Sampler, *,
           policies: tuple[str, ...] = POLICIES, samples: int, seed: int,
           executor: Executor | None = None,
           on_chunk: Callable[[int], None] | None = None) -> dict[str, Tally]:
    """The merged tally of each policy (keep, dispatch) over `samples` sampled futures of the
    plan, the same futures for every policy; `on_chunk(samples done)` after each chunk."""
    check_samples(samples)
    job = ReplayJob(inst, plan, sampler, tuple(policies), seed, samples)
    totals = {p: Tally.empty(inst.n_jobs, inst.n_nodes, samples, 0) for p in policies}
    done = 0
    for k, tallies in (executor or InProcess()).run(job, work := chunks(samples)):
        totals = {p: totals[p].merge(tallies[p]) for p in policies}
        done += work[k].hi - work[k].lo
        if on_chunk is not None:
            on_chunk(done)
    return totals


def replay_schedules(inst: Instance, plan: ReplayPlan, sampler: Sampler, *, policy: str,
                     seed: int, first: int, count: int,
                     purpose: str = "risk") -> tuple[np.ndarray, ...]:
    """Every schedule of samples first .. first + count - 1 (for audits and tests): start,
    end and node, int64[count, J] each."""
    factors = sampler.factors(seed, first, first + count, purpose)
    end, *_, start, where = _replay(inst, plan, factors, policy, keep=True)
    return start, end, where


def check_samples(samples: int, flag: str = "--samples") -> None:
    if not 1 <= samples <= MAX_SAMPLES:
        raise InputError(f"{flag} {samples}: must be between 1 and {MAX_SAMPLES:,}")


def sample_documents(batch: ExpandedBatch, inst: Instance, start: np.ndarray, end: np.ndarray,
                     where: np.ndarray) -> tuple[ExpandedBatch, PlanDoc]:
    """One replayed schedule (start, end, node int64[J]) as documents the independent checker
    reads: the batch with each job's hours set so that the model's rounding rule gives the
    sampled run time on the node it ran on (``(end - start) * speed / 60``), and the plan."""
    hours = (end - start) * inst.speed[where] / 60
    jobs = tuple(replace(job, hours=float(h)) for job, h in zip(batch.jobs, hours, strict=True))
    doc = PlanDoc(method="replay", makespan_h=int(end.max()) / 60, lower_bound_h=0.0,
                  gap_pct=0.0, assignments=[
                      Assignment(job=inst.job_names[j], node=inst.node_names[int(where[j])],
                                 start_h=int(start[j]) / 60, end_h=int(end[j]) / 60)
                      for j in range(inst.n_jobs)])
    return replace(batch, members=jobs), doc
