"""A runtime model bound to a batch: one factor per job and sample, from common random numbers.

Sample k of a run with seed S draws from its own stream, the k-th child of
``SeedSequence(S, spawn_key=(purpose,))`` (`sample_seed`): the factor of job j in sample k
depends on (S, purpose, k, j) and the model only, never on the plan replayed, on how the
samples are cut into chunks or on who runs them. Two plans of one batch are therefore compared
on identical futures (common random numbers), and a chunk of samples can run anywhere.
`purpose` keeps the futures a robust ga plans against apart from the ones `risk` reports on.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from assignplan.errors import InputError
from assignplan.instance import Instance
from assignplan.risk.models import Lognormal, RuntimeModel, Scale, Trace, Uniform, describe

PURPOSES = {"risk": 0, "robust": 1}


def sample_seed(seed: int, purpose: str, k: int) -> np.random.SeedSequence:
    """Sample k's seed: ``SeedSequence(seed, spawn_key=(p,)).spawn(n)[k]`` for any n > k,
    built directly (p: `PURPOSES[purpose]`)."""
    return np.random.SeedSequence(seed, spawn_key=(PURPOSES[purpose], k))


@dataclass(frozen=True, eq=False)
class TraceFit:
    """Actual / requested run time of the usable jobs of a trace, sorted, per size class.

    ``values``: float64[V], class c's factors at ``values[ptr[c]:ptr[c + 1]]`` (sorted), the
    whole trace's as the last block; ``floor``: int64[C], the fewest cores of each class
    (classes 1, 2-3, 4-7, ...: ``floor(log2(cores))``).
    """

    source: str
    values: np.ndarray
    ptr: np.ndarray
    floor: np.ndarray

    @property
    def pooled(self) -> np.ndarray:
        return self.values[self.ptr[-2]:self.ptr[-1]]

    def whole(self) -> tuple[int, int]:
        """(offset, count) of the whole trace's factors."""
        return int(self.ptr[-2]), int(self.ptr[-1] - self.ptr[-2])

    def block(self, cores: int, min_jobs: int) -> tuple[int, int]:
        """(offset, count) of the factors a job of `cores` draws from: its class's when the
        class holds at least `min_jobs` jobs, else the whole trace's."""
        floor = 2 ** int(np.log2(max(cores, 1)))
        k = int(np.searchsorted(self.floor, floor))
        if k < len(self.floor) and self.floor[k] == floor:
            n = int(self.ptr[k + 1] - self.ptr[k])
            if n >= min_jobs:
                return int(self.ptr[k]), n
        return self.whole()


def fit_trace(path: str) -> TraceFit:
    """The actual / requested run-time factors of an SWF trace: every job with a requested
    time and a run time above 0; its size is its requested processors (else allocated)."""
    p = Path(path)
    try:
        stat = p.stat()
    except OSError:
        raise InputError(f"{path}: no such file (the trace of the runtime model)") from None
    return _fit_trace(str(p.resolve()), stat.st_mtime_ns, stat.st_size, path)


@functools.lru_cache(maxsize=4)
def _fit_trace(resolved: str, mtime_ns: int, size: int, shown: str) -> TraceFit:
    from assignplan.importers.swf import ALLOC, REQ_PROCS, REQ_TIME, RUN, read_swf

    jobs = read_swf(resolved).jobs
    req, run = jobs[:, REQ_TIME], jobs[:, RUN]
    usable = (req > 0) & (run > 0)
    if not usable.any():
        raise InputError(f"{shown}: no job has both a requested time and a run time above 0:"
                         " no actual/requested ratio to draw run times from")
    factor = run[usable] / req[usable]
    cores = np.where(jobs[:, REQ_PROCS] > 0, jobs[:, REQ_PROCS], jobs[:, ALLOC])[usable]
    size = np.where(cores >= 1, np.floor(np.log2(np.maximum(cores, 1))), -1).astype(np.int64)
    classes = np.unique(size[size >= 0])
    blocks = [np.sort(factor[size == c]) for c in classes] + [np.sort(factor)]
    ptr = np.zeros(len(blocks) + 1, dtype=np.int64)
    ptr[1:] = np.cumsum([len(b) for b in blocks])
    return TraceFit(shown, np.concatenate(blocks), ptr, (2**classes).astype(np.int64))


@dataclass(frozen=True, eq=False)
class Sampler:
    """A runtime model bound to a batch's jobs (all per-job arrays float64/int64[J]).

    lognormal: ``sigma`` per job; uniform: ``low``/``high``; scale: ``factor``; trace: each
    job draws uniformly from ``values[offset_j : offset_j + count_j]``.
    """

    model: RuntimeModel
    n_jobs: int
    sigma: np.ndarray | None = None
    low: float = 1.0
    high: float = 1.0
    values: np.ndarray | None = None
    offset: np.ndarray | None = None
    count: np.ndarray | None = None

    @property
    def text(self) -> str:
        return describe(self.model)

    @property
    def spread(self) -> bool:
        """False when every sample is the same future (scale)."""
        return not isinstance(self.model, Scale)

    def factors(self, seed: int, lo: int, hi: int, purpose: str = "risk") -> np.ndarray:
        """float64[hi - lo, J]: the factors of samples lo .. hi - 1 (see the module docstring)."""
        out = np.empty((hi - lo, self.n_jobs), dtype=np.float64)
        for row, k in enumerate(range(lo, hi)):
            out[row] = self._draw(np.random.default_rng(sample_seed(seed, purpose, k)))
        return out

    def _draw(self, rng: np.random.Generator) -> np.ndarray:
        if self.sigma is not None:
            return np.exp(self.sigma * rng.standard_normal(self.n_jobs))
        if self.values is not None:
            pick = np.minimum((rng.random(self.n_jobs) * self.count).astype(np.int64),
                              self.count - 1)
            return self.values[self.offset + pick]
        if self.low == self.high:
            return np.full(self.n_jobs, self.low)
        return self.low + (self.high - self.low) * rng.random(self.n_jobs)


def lognormal_sigma(cv: float | np.ndarray) -> np.ndarray:
    """sigma of a lognormal of coefficient of variation cv: sigma^2 = ln(1 + cv^2)."""
    return np.sqrt(np.log1p(np.square(cv)))


def bind(model: RuntimeModel, inst: Instance, source: str = "--model") -> Sampler:
    """The sampler of `model` on the jobs of `inst`; a job group the model names but the batch
    lacks, or a trace without usable jobs, is an InputError."""
    if isinstance(model, Lognormal):
        unknown = sorted(set(model.groups) - set(inst.job_groups))
        if unknown:
            raise InputError([f"{source}: groups.{g}: no job group named '{g}' in the batch"
                              for g in unknown])
        cv = np.array([model.groups.get(g, model.cv) for g in inst.job_groups])
        return Sampler(model, inst.n_jobs, sigma=lognormal_sigma(cv))
    if isinstance(model, Uniform):
        return Sampler(model, inst.n_jobs, low=model.low, high=model.high)
    if isinstance(model, Scale):
        return Sampler(model, inst.n_jobs, low=model.factor, high=model.factor)
    assert isinstance(model, Trace)
    fit = fit_trace(model.path)
    offset = np.empty(inst.n_jobs, dtype=np.int64)
    count = np.empty(inst.n_jobs, dtype=np.int64)
    by_cores: dict[int, tuple[int, int]] = {}
    for j, cores in enumerate(inst.demand[:, 0].tolist()):
        if cores not in by_cores:
            by_cores[cores] = fit.block(cores, model.min_jobs) if model.by_cores \
                else fit.whole()
        offset[j], count[j] = by_cores[cores]
    return Sampler(model, inst.n_jobs, values=fit.values, offset=offset, count=count)
