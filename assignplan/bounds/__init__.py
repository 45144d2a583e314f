"""Provable lower bounds of a batch: on the makespan (`makespan`), with the configuration LP
of jobs that fit a node together (`configurations`) as one of its parts."""

from assignplan.bounds.makespan import (
    PART_NAMES,
    LowerBound,
    binding_parts,
    conflict_bound,
    dff_work,
    lower_bound,
    time_grid,
)

__all__ = ["PART_NAMES", "LowerBound", "binding_parts", "conflict_bound", "dff_work",
           "lower_bound", "time_grid"]
