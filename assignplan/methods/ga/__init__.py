"""Genetic algorithm over the assignment matrix: operators, repair, local step and the loop."""

from assignplan.methods.ga.config import GAConfig
from assignplan.methods.ga.engine import run_island, solve_ga

__all__ = ["GAConfig", "run_island", "solve_ga"]
