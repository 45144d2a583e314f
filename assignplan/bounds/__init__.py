"""Provable lower bounds of a batch: on the makespan (`makespan`), with the configuration LP
of jobs that fit a node together (`configurations`) as one of its parts, and on weighted
tardiness and weighted completion time (`completion`)."""

from assignplan.bounds.completion import COMPLETION_PART_NAMES
from assignplan.bounds.makespan import (
    PART_NAMES,
    LowerBound,
    binding_parts,
    conflict_bound,
    dff_work,
    lower_bound,
    time_grid,
)

__all__ = ["COMPLETION_PART_NAMES", "PART_NAMES", "LowerBound", "binding_parts",
           "conflict_bound", "dff_work", "lower_bound", "time_grid"]
