"""What the admin wants first: the order in which the objective's three terms are read, or a
weighted sum of them.

The objective's terms are fixed (makespan, weighted tardiness, weighted completion, all in
minutes or weighted minutes, `plan.objective`); a priority only says how two plans compare:

- "makespan": lexicographic (makespan, weighted tardiness, weighted completion), the default;
- "due": lexicographic (weighted tardiness, makespan, weighted completion);
- "weighted": a * C_max + b * T_w + c * C_w with every term in hours and the weights
  (a, b, c) per hour of each term, ties then read as "makespan" does.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from assignplan.errors import InputError

MAKESPAN, TARDINESS, COMPLETION = range(3)  # the objective's terms, as `plan.objective` orders
TERM_NAMES = ("makespan", "weighted tardiness", "weighted completion")
PRIORITIES = ("makespan", "due", "weighted")
_ORDERS = {"makespan": (MAKESPAN, TARDINESS, COMPLETION),
           "due": (TARDINESS, MAKESPAN, COMPLETION),
           "weighted": (MAKESPAN, TARDINESS, COMPLETION)}


@dataclass(frozen=True)
class Priority:
    """How plans compare. `weights`: per hour of (makespan, weighted tardiness, weighted
    completion), "weighted" only."""

    name: str = "makespan"
    weights: tuple[float, float, float] | None = None

    @property
    def order(self) -> tuple[int, int, int]:
        """The terms in the order they are read (after the weighted sum, for "weighted")."""
        return _ORDERS[self.name]

    @property
    def lexicographic(self) -> bool:
        return self.weights is None

    def read(self, terms: np.ndarray) -> np.ndarray:
        """float64[P, K] comparison keys (smaller first, lexicographic) of the objective terms
        float64[P, >=3] (minutes; extra columns ignored): the terms in `order`, after their
        weighted sum in hours for "weighted"."""
        terms = np.asarray(terms, dtype=np.float64)
        ordered = terms[:, list(self.order)]
        if self.weights is None:
            return ordered
        return np.column_stack([self.weighted_sum(terms), ordered])

    def weighted_sum(self, terms: np.ndarray) -> np.ndarray:
        """float64[P]: sum_k weight_k * term_k / 60, the weighted sum in hours."""
        w = np.asarray(self.weights, dtype=np.float64)
        return np.asarray(terms, dtype=np.float64)[:, :3] @ w / 60.0

    def kernel_arrays(self) -> tuple[np.ndarray, np.ndarray]:
        """(int64[3] column order, float64[3] weights per minute, zeros when lexicographic):
        the priority as the compiled builder compares schedules (`kernels._lex_better`)."""
        weights = np.zeros(3) if self.weights is None else np.asarray(self.weights) / 60.0
        return np.asarray(self.order, dtype=np.int64), weights.astype(np.float64)

    def key(self, terms: tuple[float, float, float]) -> tuple[float, ...]:
        """The comparison key of one plan's objective terms (for `min`)."""
        return tuple(self.read(np.asarray([terms[:3]], dtype=np.float64))[0].tolist())

    def describe(self) -> str:
        """One line for people: what the plan was made to minimise first."""
        if self.weights is None:
            return ", then ".join(TERM_NAMES[k] for k in self.order) + " (lexicographic)"
        a, b, c = (f"{w:g}" for w in self.weights)
        return (f"{a} x makespan + {b} x weighted tardiness + {c} x weighted completion"
                " (hours)")


DEFAULT = Priority()


def parse_priority(name: str, weights: str | None) -> Priority:
    """The priority of `--priority NAME` and `--weights A,B,C`; InputError naming the option
    otherwise (an unknown name, weights for a name that does not read them, weights missing,
    not three finite numbers >= 0, or all zero)."""
    if name not in PRIORITIES:
        raise InputError(f"--priority {name}: unknown priority; choose one of "
                         f"{', '.join(PRIORITIES)}")
    if name != "weighted":
        if weights is not None:
            raise InputError(f"--weights: only --priority weighted reads it, not {name}")
        return Priority(name)
    if weights is None:
        raise InputError("--priority weighted: needs --weights A,B,C (per hour of makespan, "
                         "weighted tardiness and weighted completion), e.g. --weights 1,10,0.01")
    return Priority(name, _weights(weights))


def _weights(text: str) -> tuple[float, float, float]:
    parts = text.split(",")
    try:
        values = tuple(float(p) for p in parts)
    except ValueError:
        values = ()
    if len(values) != 3 or not all(math.isfinite(v) and v >= 0 for v in values):
        raise InputError(f"--weights {text}: must be three numbers >= 0 separated by commas "
                         "(per hour of makespan, weighted tardiness, weighted completion)")
    if not any(values):
        raise InputError(f"--weights {text}: at least one weight must be above 0")
    return values  # type: ignore[return-value]
