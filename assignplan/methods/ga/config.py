"""Validated, frozen configuration of the genetic algorithm (defaults: see bench_ga.py)."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator


class GAConfig(BaseModel):
    """Every knob of `solve_ga`; the defaults are the ones benchmarks/bench_ga.py settled on.

    Mutation is set as ``mutation_flips``, the expected number of bit flips per individual
    over its J x N assignment matrix: the per-bit rate is ``mutation_flips / (J * N)``
    (see `mutation.bit_flip` for how many jobs that moves).
    """

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)

    mu: int = Field(default=24, ge=2, le=10_000, description="Parents kept per generation.")
    lam: int = Field(default=48, ge=2, le=10_000, description="Offspring per generation.")
    crossover: Literal["uniform", "kpoint"] = "uniform"
    crossover_bias: float = Field(default=0.5, gt=0.0, lt=1.0,
                                  description="Uniform crossover: P(gene from first parent).")
    kpoints: int = Field(default=2, ge=1, le=1_000, description="Cut points of k-point crossover.")
    mutation: Literal["symmetric", "asymmetric"] = "symmetric"
    mutation_flips: float = Field(default=6.0, gt=0.0, le=10_000.0,
                                  description="Expected bit flips per individual.")
    tournament_size: int = Field(default=3, ge=1, le=100)
    survival: Literal["plus", "comma"] = "plus"
    local_search: bool = True
    local_evaluations: int = Field(
        default=64, ge=1, le=10_000,
        description="Trial plans the local step may score per generation.")
    repair_fill: Literal["earliest", "random"] = "earliest"
    repair_keep: Literal["random", "previous"] = "random"
    generations: int = Field(default=2_000, ge=0, le=10_000_000)
    stagnation: int = Field(default=300, ge=1, le=10_000_000,
                            description="Stop after this many generations without a better best.")
    greedy_variants: int = Field(default=8, ge=0, le=10_000,
                                 description="Greedy plans from perturbed priority orders.")
    balanced_seeds: int = Field(
        default=4, ge=0, le=10_000,
        description="Greedy seeds restricted to the node groups the class-split relaxation "
                    "gives each job's class (`balance`), from the first greedy orders.")
    order_noise: float = Field(default=0.3, ge=0.0, lt=1.0,
                               description="Relative noise on hours for the greedy variants.")
    tiebreak: Literal["none", "balance", "spread", "tail"] = Field(
        default="tail",
        description="Selection and local search only: among equal (makespan, tardiness) "
                    "prefer the lower sum of squared node finishes: built ('spread', needs "
                    "a scorer giving a fourth column) or estimated from loads ('balance'); "
                    "'tail' first prefers the smaller area of the jobs ending at the "
                    "makespan (a fifth column), then the spread, and counts a smaller tail "
                    "as progress against stagnation.")
    evolve_order: bool = Field(
        default=True,
        description="Evolve a random key per job that sets each plan's decoding order.")
    key_rate: float = Field(default=0.02, ge=0.0, le=1.0,
                            description="Share of a child's keys perturbed.")
    key_sigma: float = Field(default=0.3, gt=0.0, le=10.0,
                             description="Log-normal spread of a key perturbation.")
    order_evaluations: int = Field(
        default=32, ge=0, le=10_000,
        description="Trial decoding orders the local step may score per generation "
                    "(evolved orders only; 0: none).")
    descent_trials: int = Field(
        default=20_000, ge=0, le=10_000_000,
        description="Node rebuilds the node-local descent (moves and swaps off the node "
                    "that ends last, see `descent`) may spend on the best plan each "
                    "generation; 0: off.")
    repack_nodes: int = Field(
        default=6, ge=0, le=64,
        description="Nodes the exact repacking step frees each generation (the one setting "
                    "the makespan and partners, see `repack`); 0 or 1: off.")
    repack_effort: float = Field(
        default=0.05, gt=0.0, le=60.0,
        description="CP-SAT deterministic time limit of one repacking, in CP-SAT's own "
                    "work units (measured: 3-5x that in wall seconds on 200- to "
                    "2,000-job batches, presolve not counted); keeps runs reproducible.")
    reserve_share: float = Field(
        default=0.5, ge=0.0, le=1.0,
        description="Share of the time limit (and of the generations) spent first on the "
                    "batch with scarce node groups kept for the jobs that need them, when "
                    "that costs the load relaxation nothing (`balance.reserved_eligibility`); "
                    "the rest runs on the whole eligibility from that phase's best half. "
                    "0: no reserved phase.")
    justify: bool = Field(
        default=True,
        description="Score and report the forward-backward improved schedule of each plan.")

    @model_validator(mode="after")
    def _comma_needs_enough_offspring(self) -> GAConfig:
        if self.survival == "comma" and self.lam < self.mu:
            raise ValueError(f"comma survival needs lam >= mu (lam={self.lam}, mu={self.mu})")
        return self
