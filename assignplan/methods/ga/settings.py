"""The genetic algorithm's settings: seven validated, frozen groups, readable from a file.

A user changes `stopping.generations` now and then (the CLI's `--generations`); the rest is
tuning, read from a settings file (`--ga-settings FILE`, TOML or JSON) with the same groups:

    [variation]
    mutation_flips = 12
    [improvement]
    repack_nodes = 0

Defaults are the ones the benchmarks settled on (benchmarks/RESULTS.md); the plan document
records the settings it was made with.
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from assignplan.errors import InputError

_FROZEN = ConfigDict(extra="forbid", frozen=True, strict=True)


class PopulationSettings(BaseModel):
    """Who lives and who breeds: (mu + lambda) or (mu, lambda) with tournaments."""

    model_config = _FROZEN
    mu: int = Field(default=24, ge=2, le=10_000, description="Parents kept per generation.")
    lam: int = Field(default=48, ge=2, le=10_000, description="Offspring per generation.")
    tournament_size: int = Field(default=3, ge=1, le=100,
                                 description="Members drawn per tournament; the best breeds.")
    survival: Literal["plus", "comma"] = Field(
        default="plus", description="plus: (mu + lambda); comma: (mu, lambda) with elitism.")
    scale_with_size: bool = Field(
        default=True,
        description=f"Above {10_000:,} jobs, shrink the population, the seeds and the local "
                    "steps' trial budgets in proportion (see `sized`), so a generation costs "
                    "about what it costs on 10,000 jobs.")

    @model_validator(mode="after")
    def _comma_needs_enough_offspring(self) -> PopulationSettings:
        if self.survival == "comma" and self.lam < self.mu:
            raise ValueError(f"comma survival needs lam >= mu (lam={self.lam}, mu={self.mu})")
        return self


class VariationSettings(BaseModel):
    """Crossover, bit-flip mutation, repair and the evolved decoding order.

    Mutation is set as ``mutation_flips``, the expected number of bit flips per individual
    over its J x N assignment matrix: the per-bit rate is ``mutation_flips / (J * N)``
    (see `mutation.bit_flip` for how many jobs that moves).
    """

    model_config = _FROZEN
    crossover: Literal["uniform", "kpoint"] = Field(
        default="uniform", description="uniform: each job's row from either parent; kpoint: "
        "segments of the priority order alternate between the parents.")
    crossover_bias: float = Field(default=0.5, gt=0.0, lt=1.0,
                                  description="Uniform crossover: P(gene from first parent).")
    kpoints: int = Field(default=2, ge=1, le=1_000, description="Cut points of k-point crossover.")
    mutation: Literal["symmetric", "asymmetric"] = Field(
        default="symmetric", description="symmetric: every bit flips alike; asymmetric: jobs "
        "on the busiest nodes flip off more often.")
    mutation_flips: float = Field(default=6.0, gt=0.0, le=10_000.0,
                                  description="Expected bit flips per individual.")
    repair_fill: Literal["earliest", "random"] = Field(
        default="earliest", description="An emptied row gets the node with the earliest "
        "estimated finish, or a random eligible node.")
    repair_keep: Literal["random", "previous"] = Field(
        default="random", description="A row with several 1s keeps a random one, or its "
        "original one.")
    evolve_order: bool = Field(
        default=True,
        description="Evolve a random key per job that sets each plan's decoding order.")
    key_rate: float = Field(default=0.02, ge=0.0, le=1.0,
                            description="Share of a child's keys perturbed.")
    key_sigma: float = Field(default=0.3, gt=0.0, le=10.0,
                             description="Log-normal spread of a key perturbation.")


class ImprovementSettings(BaseModel):
    """The improvement steps applied each generation, and how plans on a plateau compare."""

    model_config = _FROZEN
    tiebreak: Literal["none", "balance", "spread", "tail"] = Field(
        default="tail",
        description="Selection and improvement only: among equal (makespan, tardiness) "
                    "prefer the lower sum of squared node finishes: built ('spread') or "
                    "estimated from loads ('balance'); 'tail' first prefers the smaller area "
                    "of the jobs ending at the makespan, then the spread, and counts a "
                    "smaller tail as progress against stagnation.")
    justify: bool = Field(
        default=True,
        description="Score and report the forward-backward improved schedule of each plan.")
    local_search: bool = Field(
        default=True, description="Moves, swaps and order changes off the critical node.")
    local_evaluations: int = Field(
        default=64, ge=1, le=10_000,
        description="Trial plans the local step may score per generation.")
    order_evaluations: int = Field(
        default=32, ge=0, le=10_000,
        description="Trial decoding orders the local step may score per generation "
                    "(evolved orders only; 0: none).")
    descent_trials: int = Field(
        default=20_000, ge=0, le=10_000_000,
        description="Node rebuilds the node-local descent may spend on the best plan each "
                    "generation; 0: off.")
    repack_nodes: int = Field(
        default=6, ge=0, le=64,
        description="Nodes the exact repacking step frees each generation (the one setting "
                    "the makespan and partners); 0 or 1: off.")
    repack_effort: float = Field(
        default=0.05, gt=0.0, le=60.0,
        description="CP-SAT deterministic time limit of one repacking, in CP-SAT's own "
                    "work units (about 3-5x that in wall seconds on 200- to 2,000-job "
                    "batches); keeps runs reproducible.")


class SeedingSettings(BaseModel):
    """The initial population, and the reserved first phase."""

    model_config = _FROZEN
    greedy_variants: int = Field(default=8, ge=0, le=10_000,
                                 description="Greedy plans from perturbed priority orders.")
    balanced_seeds: int = Field(
        default=4, ge=0, le=10_000,
        description="Greedy seeds restricted to the node groups the class-split relaxation "
                    "gives each job's class.")
    order_noise: float = Field(default=0.3, ge=0.0, lt=1.0,
                               description="Relative noise on hours for the greedy variants.")
    reserve_share: float = Field(
        default=0.5, ge=0.0, le=1.0,
        description="Share of the budget (and of the generations) spent first with scarce "
                    "node groups kept for the jobs that need them, when that costs the load "
                    "relaxation nothing; 0: no reserved phase.")


class CompletionSettings(BaseModel):
    """The final phase: the best makespan and tardiness held (lexicographic selection), the
    weighted completion time minimised."""

    model_config = _FROZEN
    completion_share: float = Field(
        default=0.3, ge=0.0, le=1.0,
        description="Share of the budget kept for the final phase (a makespan phase that "
                    "stops early, at the bound or out of patience, leaves it the rest); it "
                    "runs at most this share of `stopping.generations` on top of them. "
                    "0: no final phase.")
    completion_stagnation: int = Field(
        default=20, ge=1, le=10_000_000,
        description="The final phase stops after this many generations without a better "
                    "weighted completion time.")
    patience: float = Field(
        default=0.2, gt=0.0, le=1.0,
        description="Share of the budget the makespan phase may go without a better "
                    "(makespan, tardiness) before the final phase takes over (with a final "
                    "phase only).")
    completion_seeds: int = Field(
        default=6, ge=0, le=10_000,
        description="List-scheduling plans of completion orders (`greedy.completion_variants`)"
                    " seeded into the final phase, the lexicographically best first.")
    completion_seed_time: float = Field(
        default=0.1, ge=0.0, le=1.0,
        description="Share of the budget the completion variants may take to build.")
    redecode_trials: int = Field(
        default=12, ge=0, le=10_000,
        description="Completion orders each node of the best plan may take per generation "
                    "of the final phase, its nodes kept (`improvers.redecode`); 0: off.")
    redecode_rounds: int = Field(
        default=8, ge=1, le=10_000,
        description="Re-decodings of the best plan per generation while each one helps.")
    resequence_trials: int = Field(
        default=10_000, ge=0, le=10_000_000,
        description="Node rebuilds the node-local re-sequencing by Smith's rule may spend on "
                    "the best plan per generation of the final phase "
                    "(`improvers.resequence`); 0: off.")
    window_jobs: int = Field(
        default=25, ge=0, le=10_000,
        description="Jobs of a time window of the best plan CP-SAT re-assigns and re-times per "
                    "generation of the final phase (`improvers.window`); 0 or 1: off.")
    window_effort: float = Field(
        default=0.05, gt=0.0, le=60.0,
        description="CP-SAT deterministic time limit of one window repacking.")


class StoppingSettings(BaseModel):
    """When a run ends (besides the time budget and reaching the lower bound)."""

    model_config = _FROZEN
    generations: int = Field(default=2_000, ge=0, le=10_000_000, description=(
        "Generations of the makespan phases (the budget usually ends the run first; the "
        "final phase adds at most completion.completion_share of this many); "
        "`--generations` sets it."))
    stagnation: int = Field(default=300, ge=1, le=10_000_000,
                            description="Stop after this many generations without a better best.")


class IslandSettings(BaseModel):
    """Several populations side by side (an island model), each epoch one task per island
    (`islands.solve_islands`); one island is the ordinary run."""

    model_config = _FROZEN
    count: int = Field(
        default=1, ge=1, le=1_024,
        description="Populations evolved side by side, seeded from SeedSequence(seed).spawn("
                    "count); `--islands` sets it. 1: one population, the ordinary run.")
    epoch: int = Field(
        default=20, ge=1, le=1_000_000,
        description="Generations each island runs as one task before the best plans migrate.")
    migrants: int = Field(
        default=2, ge=0, le=10_000,
        description="Best plans each island sends to the next one along the ring after each "
                    "epoch; they replace its worst members.")


class GASettings(BaseModel):
    """Every setting of the genetic algorithm, in seven groups."""

    model_config = _FROZEN
    population: PopulationSettings = PopulationSettings()
    variation: VariationSettings = VariationSettings()
    improvement: ImprovementSettings = ImprovementSettings()
    seeding: SeedingSettings = SeedingSettings()
    completion: CompletionSettings = CompletionSettings()
    stopping: StoppingSettings = StoppingSettings()
    islands: IslandSettings = IslandSettings()

    @property
    def most_generations(self) -> int:
        """The most generations a run can record: the makespan phases' and the final
        phase's share on top of them."""
        gens = self.stopping.generations
        return gens + math.ceil(self.completion.completion_share * gens)

    def replace(self, **groups: dict) -> GASettings:
        """A copy with some fields of some groups changed:
        ``settings.replace(stopping={"generations": 10})``."""
        update = {name: getattr(self, name).model_copy(update=fields)
                  for name, fields in groups.items()}
        return GASettings.model_validate({**self.model_dump(), **{
            k: v.model_dump() for k, v in update.items()}})


SIZE_REFERENCE = 10_000  # jobs: above this many, `sized` scales the per-generation work down


def sized(settings: GASettings, n_jobs: int) -> GASettings:
    """The settings for a batch of `n_jobs` jobs: unchanged up to SIZE_REFERENCE jobs (or
    with `population.scale_with_size` off); above it, with f = SIZE_REFERENCE / n_jobs,
    mu, lambda, the greedy variants, the balanced seeds and the local steps' trial budgets
    are multiplied by f and rounded, never below mu 6, lambda 8, one variant, one balanced
    seed (when there were any), 8 local and 4 order trials. A generation's work is about
    (lambda + trials) plans of n_jobs jobs, so it stays near its cost at SIZE_REFERENCE
    jobs: on 50,000 x 5,000 a generation takes seconds, not tens of seconds."""
    if not settings.population.scale_with_size or n_jobs <= SIZE_REFERENCE:
        return settings
    f = SIZE_REFERENCE / n_jobs
    pop, seeding, imp = settings.population, settings.seeding, settings.improvement

    def shrink(value: int, floor: int) -> int:
        return min(value, max(floor, round(value * f)))

    mu = shrink(pop.mu, 6)
    return settings.replace(
        population={"mu": mu, "lam": max(shrink(pop.lam, 8), mu if pop.survival == "comma"
                                          else 0)},
        seeding={"greedy_variants": shrink(seeding.greedy_variants, 1),
                 "balanced_seeds": shrink(seeding.balanced_seeds, 1)},
        improvement={"local_evaluations": shrink(imp.local_evaluations, 8),
                     "order_evaluations": shrink(imp.order_evaluations, 4)})


def read_settings(path: Path | str) -> GASettings:
    """A settings file (TOML, or JSON by its `.json` ending), validated; every problem is one
    line naming the file and the key, e.g. `ga.toml: variation.mutation_flips: ...`."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror or exc})") from None
    except UnicodeDecodeError:
        raise InputError(f"{path}: not UTF-8 text; save the file as UTF-8") from None
    try:
        data = json.loads(text) if path.suffix.lower() == ".json" else tomllib.loads(text)
    except (json.JSONDecodeError, tomllib.TOMLDecodeError) as exc:
        kind = "JSON" if path.suffix.lower() == ".json" else "TOML"
        raise InputError(f"{path}: not valid {kind}: {exc}") from None
    try:
        return GASettings.model_validate(data, strict=False)
    except ValidationError as err:
        raise InputError([f"{path}: {_where(e['loc'])}: {_plain(e)}" for e in err.errors()]
                         ) from None


def _where(loc: tuple) -> str:
    return ".".join(str(part) for part in loc) or "(file)"


def _plain(error: dict) -> str:
    if error["type"] == "extra_forbidden":
        return "unknown setting"
    message = str(error["msg"])
    return message.replace("Input should be", "must be").replace("Value error, ", "")


_GROUP_OF = {name: group for group, model in (  # every field name is unique across groups
    ("population", PopulationSettings), ("variation", VariationSettings),
    ("improvement", ImprovementSettings), ("seeding", SeedingSettings),
    ("completion", CompletionSettings), ("stopping", StoppingSettings),
    ("islands", IslandSettings))
    for name in model.model_fields}


def ga_settings(**fields) -> GASettings:
    """Settings from flat field names (each name belongs to one group):
    ``ga_settings(mu=8, generations=15)``; an unknown name is an error."""
    unknown = sorted(set(fields) - set(_GROUP_OF))
    if unknown:
        raise ValueError(f"unknown ga settings: {', '.join(unknown)}")
    groups: dict[str, dict] = {}
    for name, value in fields.items():
        groups.setdefault(_GROUP_OF[name], {})[name] = value
    return GASettings.model_validate(groups)
