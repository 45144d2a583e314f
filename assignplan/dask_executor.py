"""The executor seam (`executor.Executor`) on Dask distributed: each item a task on its workers.

Dask is an optional extra (``pip install 'assignplan[distributed]'``); nothing here imports it
before `open_executor` is asked for workers. `--workers N` starts a `LocalCluster` of N worker
processes for one command and closes it afterwards; `--cluster ADDRESS` connects to a
scheduler someone else runs (a site's, started inside a batch allocation with Dask's own
launchers); neither: `InProcess`.

The function is sent once, as a task of its own that every item's task depends on, rather than
scattered: the scheduler keeps its pickled form, so when the workers holding it die it is
rebuilt elsewhere instead of being lost with them; it is copied to every worker before the
items are submitted, so that every worker gets items. A task whose worker dies is run again
on another one (the scheduler's own rule, `distributed.scheduler.allowed-failures`, 3 by
default); a task that keeps losing its workers, or raises, ends the run with an error naming
the item, before the caller has written anything.
"""

from __future__ import annotations

import logging
import os
import uuid
import warnings
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from typing import Any

from assignplan import __version__
from assignplan.errors import AssignplanError, InputError, SolveError
from assignplan.executor import Executor, InProcess

INSTALL = "pip install 'assignplan[distributed]'"
CONNECT_SECONDS = 20  # how long --cluster waits for the scheduler to answer
MAX_LOCAL_WORKERS = 256


def _import_distributed(flag: str):
    try:
        import distributed
    except ImportError:
        raise InputError(f"{flag}: needs Dask distributed, an optional extra: {INSTALL}"
                         ) from None
    return distributed


def _hold(fn: Callable) -> Callable:
    return fn


def _apply(fn: Callable[[Any], Any], item: Any) -> Any:
    return fn(item)


def _named(item: Any) -> str:
    """How an item is named in an error: its own words when short."""
    text = str(item)
    return f" ({text})" if len(text) <= 80 else ""


class DaskExecutor:
    """Items as tasks on a Dask client's workers, results as they complete."""

    def __init__(self, client):
        self.client = client
        self._held: tuple[Callable, Any] | None = None  # the last function sent, its future

    def _hold(self, fn: Callable) -> Any:
        """The future of `fn` on the cluster: sent once and reused while the same function
        comes back (the ga's islands run one per epoch), the one before released."""
        if self._held is not None and self._held[0] is fn:
            return self._held[1]
        if self._held is not None:
            self.client.cancel([self._held[1]])
        with warnings.catch_warnings():
            # a large batch makes the function's pickled form large; sent once, that is fine
            warnings.filterwarnings("ignore", message=".*large graph.*")
            held = self.client.submit(_hold, fn, key=f"assignplan-{type(fn).__name__.lower()}"
                                      f"-{uuid.uuid4().hex[:12]}", pure=False)
        self._held = (fn, held)
        return held

    @property
    def workers(self) -> int:
        return len(self.client.nthreads())

    def run(self, fn: Callable[[Any], Any], items: Sequence[Any]) -> Iterator[tuple[int, Any]]:
        from distributed import as_completed, wait

        held = self._hold(fn)
        # On every worker before the items are submitted: the scheduler sends a task only to
        # workers that hold its inputs, so a function on one worker would get every item
        # (measured: 8 chunks on one of 2 workers); copies on all workers also keep the
        # memory manager from dropping them while items still wait for them. A worker that
        # joins later (a restarted one) gets its copy at the next run.
        wait([held])
        if held.status != "finished":  # the workers could not even unpack the function
            err = held.exception()
            self._held = None
            said = " ".join(str(err).split())  # one line
            raise SolveError(f"the Dask cluster could not take the work ({type(err).__name__}:"
                             f" {said}); its scheduler and workers need assignplan "
                             f"{__version__} and its dependencies installed; nothing was "
                             "written")
        self.client.replicate([held])
        futures = [self.client.submit(_apply, held, item, key=f"{held.key}-{uuid.uuid4().hex[:8]}"
                                      f"-{k}", pure=False) for k, item in enumerate(items)]
        index = {f.key: k for k, f in enumerate(futures)}
        try:
            for future in as_completed(futures):
                k = index[future.key]
                if future.status != "finished":
                    raise _failure(k, items, future.exception())
                result = future.result()
                # the last reference to a gathered result goes, so its worker can drop it
                # now instead of holding every piece's result until the run ends
                futures[k] = None
                del future
                yield k, result
        finally:
            self.client.cancel([f for f in futures if f is not None])


def _failure(k: int, items: Sequence[Any], err: BaseException) -> AssignplanError:
    """The error a failed task ends the run with: the library's own errors as they are (the
    same as in-process), anything else naming the item that failed."""
    if isinstance(err, AssignplanError):
        return err
    return SolveError(f"task {k + 1} of {len(items)}{_named(items[k])} failed on the Dask "
                      f"workers: {type(err).__name__}: {err}; nothing was written")


def threads_per_process(workers: int) -> int:
    """Compiled-kernel threads for each of `workers` local worker processes: the cores shared
    out, at least one (each process would otherwise start one thread per core)."""
    return max(1, (os.cpu_count() or 1) // workers)


def check_options(workers: int | None, cluster: str | None) -> None:
    """Refuse a wrong `--workers` / `--cluster` before any work: both given, a count out of
    range, or Dask not installed (one line saying what to install)."""
    if workers is not None and cluster is not None:
        raise InputError("--workers and --cluster: give one of them (--workers starts a local"
                         " cluster, --cluster connects to a running one)")
    if workers is not None and not 1 <= workers <= MAX_LOCAL_WORKERS:
        raise InputError(f"--workers {workers}: must be between 1 and {MAX_LOCAL_WORKERS}")
    if workers is not None or cluster is not None:
        _import_distributed("--workers" if workers is not None else "--cluster")


@contextmanager
def open_executor(workers: int | None = None, cluster: str | None = None
                  ) -> Iterator[Executor]:
    """The executor for `--workers N` / `--cluster ADDRESS` (neither: in this process); a
    local cluster is closed on leaving."""
    check_options(workers, cluster)
    if workers is None and cluster is None:
        yield InProcess()
        return
    distributed = _import_distributed("--workers" if workers is not None else "--cluster")
    if workers is not None:
        threads = threads_per_process(workers)
        with distributed.LocalCluster(
                n_workers=workers, threads_per_worker=1, processes=True,
                # no dashboard; the scheduler's own HTTP routes on a free local port (its
                # default, 8787, is often taken by another user's cluster on a login node)
                dashboard_address=None, scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                silence_logs=logging.CRITICAL,  # our own message names a failed task
                env={"NUMBA_NUM_THREADS": str(threads), "OMP_NUM_THREADS": str(threads)},
        ) as local, distributed.Client(local) as client:
            yield DaskExecutor(client)
        return
    try:
        client = distributed.Client(cluster, timeout=CONNECT_SECONDS)
    except (OSError, TimeoutError, ValueError) as err:
        raise InputError(f"--cluster {cluster}: no Dask scheduler answered there ({err})"
                         ) from None
    with client:
        yield DaskExecutor(client)
