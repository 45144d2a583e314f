"""The assignment matrix X (jobs x nodes) and its compact form, a node index per job."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from assignplan.instance import Instance


def to_matrix(assign: np.ndarray, n_nodes: int) -> np.ndarray:
    """bool[..., J, N] with X[..., j, i] = (assign[..., j] == i); assign: int64[..., J]."""
    assign = np.asarray(assign)
    return assign[..., None] == np.arange(n_nodes)


def from_matrix(X: np.ndarray) -> np.ndarray:
    """int64[..., J]: the node of each row of X (bool[..., J, N]), which must be one-hot."""
    X = np.asarray(X, dtype=bool)
    if not np.all(X.sum(axis=-1) == 1):
        raise ValueError("every row of the assignment matrix must hold exactly one 1")
    return X.argmax(axis=-1).astype(np.int64)


@dataclass(frozen=True, eq=False)
class Rows:
    """A population's matrices while rows may hold zero or several 1s (between mutation and
    repair), kept sparse.

    ``base``: int64[P, J], the row's original 1 or -1 where it was flipped off;
    ``extra``: int64[k, 3] rows (individual, job, node) of further 1s, none equal to a base 1.
    X[p, j, i] = (base[p, j] == i) or (p, j, i) in extra.
    """

    base: np.ndarray
    extra: np.ndarray

    @staticmethod
    def of(assign: np.ndarray) -> Rows:
        """The one-hot rows of a valid population int64[P, J]."""
        return Rows(np.array(assign, dtype=np.int64), np.empty((0, 3), dtype=np.int64))

    def to_matrix(self, n_nodes: int) -> np.ndarray:
        """bool[P, J, N] (for tests and small batches only: P*J*N bytes)."""
        X = to_matrix(self.base, n_nodes) & (self.base[..., None] >= 0)
        X[self.extra[:, 0], self.extra[:, 1], self.extra[:, 2]] = True
        return X


@dataclass(frozen=True, eq=False)
class EligibleIndex:
    """Each job's eligible nodes, kept per job class (`instance.Eligibility`): the nodes of
    job j are ``idx[ptr[c]:ptr[c + 1]]`` with c = ``job_class[j]``, ascending."""

    job_class: np.ndarray  # int32[J]
    ptr: np.ndarray  # int64[E + 1]
    idx: np.ndarray  # int32[nnz], ascending within a class

    @staticmethod
    def of(inst: Instance) -> EligibleIndex:
        e = inst.elig
        return EligibleIndex(e.job_class, e.ptr, e.nodes)

    def nodes(self, j: int) -> np.ndarray:
        c = self.job_class[j]
        return self.idx[self.ptr[c] : self.ptr[c + 1]]

    def first(self) -> np.ndarray:
        """int64[J]: each job's lowest eligible node."""
        return self.idx[self.ptr[:-1]][self.job_class].astype(np.int64)

    def sample(self, jobs: np.ndarray, *, rng: np.random.Generator) -> np.ndarray:
        """int64[len(jobs)]: a uniformly drawn eligible node for each entry of `jobs`."""
        cls = self.job_class[np.asarray(jobs, dtype=np.int64)]
        counts = self.ptr[cls + 1] - self.ptr[cls]
        pick = np.minimum((rng.random(cls.shape) * counts).astype(np.int64), counts - 1)
        return self.idx[self.ptr[cls] + pick].astype(np.int64)


def random_population(inst: Instance, pop_size: int, index: EligibleIndex, *,
                      rng: np.random.Generator) -> np.ndarray:
    """int64[pop_size, J]: every job on a uniformly drawn eligible node."""
    jobs = np.broadcast_to(np.arange(inst.n_jobs), (pop_size, inst.n_jobs))
    return index.sample(jobs, rng=rng)


def job_share(inst: Instance, jobs: np.ndarray, nodes: np.ndarray) -> np.ndarray:
    """float64[...]: max_r d_jr / cap_ir, the fraction of node i a job j occupies while it runs.

    Nodes without a resource (cap 0) are counted only when the job needs none of it (share 0).
    """
    d = inst.demand[jobs].astype(np.float64)
    c = inst.capacity[nodes].astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(d > 0, d / c, 0.0)
    return frac.max(axis=-1)


def node_load(inst: Instance, assign: np.ndarray) -> np.ndarray:
    """float64[P, N]: estimated finish of each node, L_pi = sum_{j: a_pj = i} p_ji * share_ji.

    p_ji is the duration (minutes) and share_ji = max_r d_jr / cap_ir: the node's time if its
    jobs were packed with no gap on their tightest resource (maintenance and ready times
    ignored: a cheap estimate for choosing nodes, never a bound).
    """
    assign = np.atleast_2d(assign)
    n_pop, n_jobs = assign.shape
    jobs = np.broadcast_to(np.arange(n_jobs), assign.shape)
    work = inst.duration_on(jobs, assign) * job_share(inst, jobs, assign)
    flat = (np.arange(n_pop)[:, None] * inst.n_nodes + assign).ravel()
    return np.bincount(flat, weights=work.ravel(),
                       minlength=n_pop * inst.n_nodes).reshape(n_pop, inst.n_nodes)
