"""Genetic algorithm over the assignment matrix: operators, repair, improvers and the loop."""

from assignplan.methods.ga.loop import run_island, solve_ga
from assignplan.methods.ga.settings import GASettings, ga_settings, read_settings

__all__ = ["GASettings", "ga_settings", "read_settings", "run_island", "solve_ga"]
