"""The one seam between the work cut into independent pieces and whoever runs the pieces.

A caller hands `run` a function and a list of items; it gets back (index, result) pairs, in
whatever order they finish, and merges them itself with an exact (order-free) merge. So a run
gives the same figures in this process or spread over workers. `InProcess` (the default) runs
the items one after the other here; an engine that runs them elsewhere implements the same
method.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from typing import Protocol, TypeVar

Item = TypeVar("Item")
Result = TypeVar("Result")


class Executor(Protocol):
    @property
    def workers(self) -> int:
        """How many items can run at once (a caller may cut its work in that many)."""
        ...

    def run(self, fn: Callable[[Item], Result],
            items: Sequence[Item]) -> Iterator[tuple[int, Result]]:
        """(index into items, fn(item)) for every item, as each finishes."""
        ...


class InProcess:
    """Every item in this process, in order (a compiled kernel may still use threads)."""

    workers = 1

    def run(self, fn: Callable[[Item], Result],
            items: Sequence[Item]) -> Iterator[tuple[int, Result]]:
        for k, item in enumerate(items):
            yield k, fn(item)
